"""gunicorn settings for the Phasewright site: `gunicorn -c deploy/gunicorn.conf.py webapp.wsgi`.

Threads, not processes, carry the concurrency: a page or status call waits on the database, not on the
CPU, and the CPU belongs to the check workers. The proxy in front buffers uploads and slow clients.
"""

import os

bind = os.environ.get("PHASEWRIGHT_BIND", "127.0.0.1:8000")
workers = int(os.environ.get("WEB_CONCURRENCY", "2"))
worker_class = "gthread"
threads = int(os.environ.get("PHASEWRIGHT_WEB_THREADS", "8"))
# An upload of 200 MiB arrives from the proxy's buffer at local speed; 60 s is generous.
timeout = 60
graceful_timeout = 30
keepalive = 5
# No periodic restarts (max_requests): under load a retiring process keeps its clients' keep-alive
# connections open unread until graceful_timeout, and those requests hang (seen in bench_load.py).
max_requests = 0
# Only the local proxy may say the request came over https (X-Forwarded-Proto).
forwarded_allow_ips = os.environ.get("PHASEWRIGHT_PROXY_IPS", "127.0.0.1")
worker_tmp_dir = "/dev/shm" if os.path.isdir("/dev/shm") else None
accesslog = os.environ.get("PHASEWRIGHT_ACCESS_LOG", "-")
errorlog = "-"
loglevel = os.environ.get("PHASEWRIGHT_LOG_LEVEL", "info").lower()
proc_name = "phasewright-web"
control_socket_disable = True  # systemd and signals manage the processes
