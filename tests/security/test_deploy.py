"""The production configuration in deploy/: Django's deployment checks pass, bad values stop the start,
and the proxy, gunicorn and service files agree with the settings."""

from __future__ import annotations

import os
import re
import shutil
import socket
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DEPLOY = ROOT / "deploy"


def example_env(tmp_path: Path) -> dict[str, str]:
    """Return deploy/env.example as an environment, its files and folders moved under tmp_path."""
    env = {}
    for line in (DEPLOY / "env.example").read_text().splitlines():
        if line.strip() and not line.startswith("#"):
            key, value = line.split("=", 1)
            env[key] = value
    secret = tmp_path / "secret_key"
    secret.write_text("tarn-valley-" + "k3y-" * 20)
    env |= {"PHASEWRIGHT_SECRET_KEY_FILE": str(secret), "PHASEWRIGHT_VAR_DIR": str(tmp_path / "var"),
            "PHASEWRIGHT_STORAGE_DIR": str(tmp_path / "private")}
    return env


def run_django(env: dict[str, str], *args: str) -> subprocess.CompletedProcess:
    """Run manage.py with exactly this environment (no settings leak in from the test run)."""
    base = {"PATH": os.environ["PATH"], "HOME": os.environ.get("HOME", "/tmp"), "DJANGO_SETTINGS_MODULE": "webapp.settings"}
    return subprocess.run([sys.executable, "manage.py", *args], cwd=ROOT, env=base | env, capture_output=True,
                          text=True, timeout=120)


def test_the_deployment_checks_pass_with_the_example_environment(tmp_path):
    """`manage.py check --deploy --fail-level WARNING` passes: HTTPS, HSTS, secure cookies, a strong key."""
    result = run_django(example_env(tmp_path), "check", "--deploy", "--fail-level", "WARNING")
    assert result.returncode == 0, result.stdout + result.stderr
    assert "no issues" in result.stdout


def test_the_example_environment_gives_the_production_settings(tmp_path):
    """The effective values, not the lines: debug off, https, Redis cache, limits as documented."""
    code = ("from django.conf import settings as s; print(s.DEBUG, s.SECURE_SSL_REDIRECT, s.SESSION_COOKIE_SECURE,"
            " s.SECURE_PROXY_SSL_HEADER[1], s.CACHES['default']['BACKEND'].rsplit('.', 1)[1], s.CELERY_BROKER_URL,"
            " s.CELERY_TASK_SOFT_TIME_LIMIT, s.CELERY_TASK_TIME_LIMIT, s.PHASEWRIGHT_CHECK_MEMORY_MIB,"
            " s.CELERY_BROKER_TRANSPORT_OPTIONS['visibility_timeout'])")
    result = run_django(example_env(tmp_path), "shell", "--no-imports", "-c", code)
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == ["False", "True", "True", "https", "RedisCache",
                                     "redis://broker.tarnvalley.example:6379/0", "600", "660", "2048", "3600"]


@pytest.mark.parametrize(("change", "sentence"), [
    ({"PHASEWRIGHT_MAX_UPLOAD_BYTES": "200MB"}, "PHASEWRIGHT_MAX_UPLOAD_BYTES must be a whole number, not '200MB'"),
    ({"PHASEWRIGHT_HTTPS": "yes"}, "PHASEWRIGHT_HTTPS must be True or False, not 'yes'"),
    ({"PHASEWRIGHT_STORAGE": "nfs"}, "PHASEWRIGHT_STORAGE must be one of local, s3, not 'nfs'"),
    ({"PHASEWRIGHT_SECRET_KEY_FILE": "", "PHASEWRIGHT_SECRET_KEY": "short"}, "must hold a random string of at least 50"),
    ({"PHASEWRIGHT_SITE_ROOT": "http://optics.tarnvalley.example"}, "must start with https://"),
    ({"PHASEWRIGHT_CHECK_SOFT_LIMIT_S": "700"}, "PHASEWRIGHT_CHECK_SOFT_LIMIT_S must be below"),
    ({"PHASEWRIGHT_VISIBILITY_TIMEOUT_S": "600"}, "PHASEWRIGHT_VISIBILITY_TIMEOUT_S must exceed"),
    ({"PHASEWRIGHT_STORAGE": "s3"}, "PHASEWRIGHT_S3_BUCKET must name the bucket"),
    ({"PHASEWRIGHT_STALE_AFTER_S": "20"}, "PHASEWRIGHT_STALE_AFTER_S must be at least 3 x PHASEWRIGHT_HEARTBEAT_S"),
    ({"PHASEWRIGHT_HEARTBEAT_S": "0"}, "PHASEWRIGHT_STALE_AFTER_S must be at least 3 x PHASEWRIGHT_HEARTBEAT_S"),
    ({"PHASEWRIGHT_SWEEP_EVERY_S": "0"}, "PHASEWRIGHT_SWEEP_EVERY_S must be above 0"),
])
def test_a_bad_setting_stops_the_start_with_a_sentence(tmp_path, change, sentence):
    """Nothing is guessed: a malformed or unsafe value ends the start, naming the variable."""
    result = run_django(example_env(tmp_path) | change, "check")
    assert result.returncode != 0 and sentence in result.stderr, result.stderr[-2000:]


def test_s3_storage_is_chosen_from_the_environment(tmp_path):
    """PHASEWRIGHT_STORAGE=s3 puts designs and reports in a private bucket through django-storages."""
    pytest.importorskip("storages.backends.s3")
    env = example_env(tmp_path) | {"PHASEWRIGHT_STORAGE": "s3", "PHASEWRIGHT_S3_BUCKET": "designs",
                                   "PHASEWRIGHT_S3_ENDPOINT_URL": "http://127.0.0.1:9"}
    code = ("from django.core.files.storage import storages; d = storages['default']; "
            "print(type(d).__name__, d.bucket_name, d.default_acl, d.querystring_auth, d.file_overwrite, d.location)")
    result = run_django(env, "shell", "--no-imports", "-c", code)
    assert result.returncode == 0, result.stderr
    assert result.stdout.split() == ["S3Storage", "designs", "None", "True", "True", "phasewright"]


def _nginx_conf() -> str:
    return (DEPLOY / "nginx.conf").read_text()


def test_the_proxy_allows_exactly_the_sites_request_size():
    """nginx's client_max_body_size is Django's PHASEWRIGHT_MAX_REQUEST_BYTES (file limit plus 1 MiB)."""
    from django.conf import settings

    [size] = re.findall(r"client_max_body_size\s+(\d+)m;", _nginx_conf())
    assert int(size) * 2**20 == settings.PHASEWRIGHT_MAX_REQUEST_BYTES


def test_the_proxy_serves_static_files_but_never_the_private_storage(tmp_path):
    """The only folder nginx serves is STATIC_ROOT; the storage folder appears in no root or alias."""
    env = example_env(tmp_path)
    served = re.findall(r"^\s*(?:alias|root)\s+([^;]+);", _nginx_conf(), re.M)
    assert served == ["/var/lib/phasewright/static/"]
    assert (DEPLOY / "env.example").read_text().count("PHASEWRIGHT_VAR_DIR=/var/lib/phasewright") == 1
    assert not served[0].startswith("/var/lib/phasewright/private")
    assert env["PHASEWRIGHT_STORAGE_DIR"] not in _nginx_conf()


def test_the_worker_units_wait_for_a_running_check_and_the_sweeper_runs_as_a_service():
    """A stopped worker may finish its check (TimeoutStopSec > the hard limit); the sweeper runs every 15 s, always."""
    worker = (DEPLOY / "systemd" / "phasewright-worker@.service").read_text()
    [stop_s] = re.findall(r"^TimeoutStopSec=(\d+)", worker, re.M)
    hard_s = int(re.search(r"^PHASEWRIGHT_CHECK_HARD_LIMIT_S=(\d+)", (DEPLOY / "env.example").read_text(), re.M)[1])
    assert int(stop_s) > hard_s and "--concurrency 1" in worker and "Restart=always" in worker
    service = (DEPLOY / "systemd" / "phasewright-maintenance.service").read_text()
    assert "manage.py requeue_stale_checks --every-s 15" in service
    assert re.search(r"^Type=simple$", service, re.M) and re.search(r"^Restart=always$", service, re.M)
    assert not (DEPLOY / "systemd" / "phasewright-maintenance.timer").exists()
    assert "requeue_stale_checks --every-s" in (DEPLOY / "single-host.sh").read_text()


def test_single_host_starts_redis_with_the_durable_configuration():
    """The Redis single-host.sh starts reads redis-phasewright.conf: append-only, fsync every second, no eviction."""
    conf = dict(line.split(None, 1) for line in (DEPLOY / "redis-phasewright.conf").read_text().splitlines()
                if line.strip() and not line.startswith("#"))
    assert (conf["appendonly"], conf["appendfsync"], conf["maxmemory-policy"]) == ("yes", "everysec", "noeviction")
    assert 'redis-server "$ROOT/deploy/redis-phasewright.conf"' in (DEPLOY / "single-host.sh").read_text()


def test_gunicorn_accepts_its_configuration(tmp_path):
    """gunicorn --check-config loads deploy/gunicorn.conf.py and the site with the production environment."""
    base = {"PATH": os.environ["PATH"], "HOME": os.environ.get("HOME", "/tmp")}
    result = subprocess.run([str(Path(sys.executable).with_name("gunicorn")), "--check-config", "-c",
                             "deploy/gunicorn.conf.py", "webapp.wsgi"], cwd=ROOT, env=base | example_env(tmp_path),
                            capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stdout + result.stderr


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.skipif(not shutil.which("nginx"), reason="nginx is not installed")
def test_a_real_nginx_refuses_an_oversized_upload_with_our_configuration(tmp_path):
    """nginx -t accepts deploy/nginx.conf, and with it answers 413 to a body one byte over the limit."""
    port, upstream = _free_port(), _free_port()
    conf = _nginx_conf()
    conf = re.sub(r"server 127\.0\.0\.1:8000;", f"server 127.0.0.1:{upstream};", conf)
    conf = re.sub(r"listen 80;\s*listen \[::\]:80;", f"listen 127.0.0.1:{_free_port()};", conf)
    conf = re.sub(r"listen 443 ssl;\s*listen \[::\]:443 ssl;\s*http2 on;", f"listen 127.0.0.1:{port};", conf)
    conf = re.sub(r"\s*ssl_\w+ [^;]+;", "", conf)
    conf = conf.replace("/etc/nginx/phasewright_proxy_params", str(DEPLOY / "nginx-proxy-params.conf"))
    conf = conf.replace("/var/lib/phasewright/static/", f"{tmp_path}/static/")
    (tmp_path / "logs").mkdir()
    main = (f"pid {tmp_path}/nginx.pid; error_log {tmp_path}/logs/error.log; daemon off;\n"
            "events { worker_connections 64; }\n"
            f"http {{ access_log off; client_body_temp_path {tmp_path}/body; proxy_temp_path {tmp_path}/proxy;\n"
            f"fastcgi_temp_path {tmp_path}/f; uwsgi_temp_path {tmp_path}/u; scgi_temp_path {tmp_path}/s;\n{conf}\n}}\n")
    (tmp_path / "nginx.conf").write_text(main)
    nginx = ["nginx", "-p", str(tmp_path), "-c", str(tmp_path / "nginx.conf")]
    checked = subprocess.run([*nginx, "-t"], capture_output=True, text=True, timeout=60)
    assert checked.returncode == 0, checked.stderr
    proc = subprocess.Popen(nginx, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        from tests.reliability.servers import answers, wait_until

        wait_until(lambda: answers(port), timeout_s=20, what="nginx listening")
        from django.conf import settings

        with socket.create_connection(("127.0.0.1", port), timeout=10) as s:
            s.sendall(f"POST /designs/new/ HTTP/1.1\r\nHost: optics.tarnvalley.example\r\nContent-Length: "
                      f"{settings.PHASEWRIGHT_MAX_REQUEST_BYTES + 1}\r\n\r\n".encode())
            head = s.recv(4096).decode("latin-1")
        assert head.startswith("HTTP/1.1 413"), head[:200]
    finally:
        proc.terminate()
        proc.wait(timeout=20)


def test_the_guide_states_the_defaults_the_settings_use():
    """Every `PHASEWRIGHT_...` (N) in deploy/README.md is the effective default of that setting."""
    from django.conf import settings

    setting_of = {"PHASEWRIGHT_WORKER_MAX_MEMORY_KIB": "CELERY_WORKER_MAX_MEMORY_PER_CHILD"}
    stated = re.findall(r"`(PHASEWRIGHT_\w+)` \((\d+)", (DEPLOY / "README.md").read_text())
    assert len(stated) >= 3
    for name, value in stated:
        assert name not in os.environ, f"{name} is set in this test run's environment"
        assert getattr(settings, setting_of.get(name, name)) == int(value), name
