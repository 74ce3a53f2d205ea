"""Start the site, one real Celery worker process and the sweeper; Ctrl-C (or SIGTERM, or a closed terminal's
SIGHUP) stops them all, and a worker whose serve was killed outright stops by itself (webapp.checks.parent_watch).

The worker runs PHASEWRIGHT_SERVE_CHECKS_AT_ONCE checks at once (one pool process each, default one per
core up to two), so a large part does not hold up the small ones behind it; each pool process has its own
memory bound (PHASEWRIGHT_CHECK_MEMORY_MIB). The worker is restarted when it dies, and the sweeper requeues
the checks it held, so a check whose worker died still finishes under `make run`.
"""

import os
import signal
import subprocess
import sys
import threading
import time

from django.conf import settings
from django.core.management import call_command
from django.core.management.base import BaseCommand

from webapp.checks.parent_watch import PARENT_ENV
from webapp.checks.sweeper import sweep_every

WORKER_POLL_S = 1.0
WORKER_MIN_UPTIME_S = 5.0
WORKER_RETRY_S = 10.0


class Command(BaseCommand):
    help = "Run the development site, a worker process and the sweeper together."

    def add_arguments(self, parser):
        parser.add_argument("--port", default=os.environ.get("PORT", "8000"))

    def handle(self, *args, port, **options):
        stop = threading.Event()
        # SIGTERM and SIGHUP would end this process without its clean-up: the worker, in a session of its own,
        # would live on and take the next serve's checks with the old code. As SystemExit they unwind to it.
        if threading.current_thread() is threading.main_thread():  # (handlers can only be set there)
            for sig in (signal.SIGTERM, signal.SIGHUP):
                signal.signal(sig, _exit_on)
        self.worker = self._start_worker()
        broker = settings.CELERY_BROKER_URL.split("://")[0]
        self.stdout.write(f"worker started (pid {self.worker.pid}, broker: {broker}, "
                          f"{settings.PHASEWRIGHT_SERVE_CHECKS_AT_ONCE} checks at once); site on http://127.0.0.1:{port}/")
        threads = [threading.Thread(target=self._keep_worker, args=(stop,), daemon=True),
                   threading.Thread(target=sweep_every, args=(settings.PHASEWRIGHT_SWEEP_EVERY_S, stop, self._swept),
                                    daemon=True)]
        for thread in threads:
            thread.start()
        try:
            call_command("runserver", f"127.0.0.1:{port}", use_reloader=False)
        finally:
            stop.set()
            for thread in threads:
                thread.join(timeout=5)
            self._stop(self.worker)

    def _start_worker(self) -> subprocess.Popen:
        # Its own process group: stopping it (or it dying) never takes the site with it.
        return subprocess.Popen([sys.executable, "-m", "celery", "-A", "webapp", "worker", "--loglevel", "INFO",
                                 "--concurrency", str(settings.PHASEWRIGHT_SERVE_CHECKS_AT_ONCE),
                                 "--hostname", "phasewright-dev@%h"], start_new_session=True,
                                env={**os.environ, PARENT_ENV: str(os.getpid())})

    def _keep_worker(self, stop: threading.Event) -> None:
        """Start a new worker whenever the running one exits without being asked to."""
        started = time.monotonic()
        while not stop.wait(WORKER_POLL_S):
            code = self.worker.poll()
            if code is None or stop.is_set():
                continue
            if code > 0 and time.monotonic() - started < WORKER_MIN_UPTIME_S:
                # A worker that cannot even start (bad setting, broken install) exits with an error code at once:
                # no tight loop. One killed by a signal (negative code) is replaced at once.
                self.stdout.write(f"worker exited ({code}) within {WORKER_MIN_UPTIME_S:.0f} s of starting; "
                                  f"trying again in {WORKER_RETRY_S:.0f} s (see its log above)")
                if stop.wait(WORKER_RETRY_S):
                    return
            self.worker = self._start_worker()
            started = time.monotonic()
            self.stdout.write(f"worker exited ({code}); started another (pid {self.worker.pid})")

    def _swept(self, requeued: int, failed: int) -> None:
        self.stdout.write(f"sweeper: requeued {requeued} checks whose worker went silent, failed {failed}")

    def _stop(self, worker: subprocess.Popen) -> None:
        """Ask the worker for a warm shutdown, then make sure it and its pool are gone."""
        if worker.poll() is None:
            worker.send_signal(signal.SIGTERM)
            deadline = time.monotonic() + 20
            while worker.poll() is None and time.monotonic() < deadline:
                time.sleep(0.2)
        try:
            os.killpg(worker.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
        worker.wait()
        self.stdout.write("site, worker and sweeper stopped")


def _exit_on(signum, _frame) -> None:
    raise SystemExit(128 + signum)
