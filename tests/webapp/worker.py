"""Start a real Celery worker process against the test database, for end-to-end tests."""

import contextlib
import os
import signal
import subprocess
import sys
import time

from django.conf import settings
from django.db import connection

from webapp.celery import app


def database_url() -> str:
    """Return a URL for the test database this process is using, for the worker to share."""
    d = connection.settings_dict
    if d["ENGINE"].endswith("sqlite3"):
        return f"sqlite:///{d['NAME']}"
    return f"postgres://{d['USER']}@{d['HOST']}:{d['PORT']}/{d['NAME']}"


@contextlib.contextmanager
def broker(url: str, transport_options: dict):
    """Point this process's producer at ``url`` for the duration (the worker gets the same)."""
    saved = app.conf.broker_url, app.conf.broker_transport_options
    app.conf.broker_url, app.conf.broker_transport_options = url, transport_options
    _forget_connections()
    try:
        yield
    finally:
        app.conf.broker_url, app.conf.broker_transport_options = saved
        _forget_connections()


def _forget_connections() -> None:
    """Drop the pools that cache connections (and the transport) of the previous broker.

    kombu also keeps producer pools in a process-wide registry keyed by the connection's URL: left
    there, the next context on the same URL would pick up the pool closed here.
    """
    from kombu import pools

    if app._pool is not None:
        app._pool.force_close_all()
    app._pool = None
    app.amqp._producer_pool = None
    pools.reset()


@contextlib.contextmanager
def worker_process(*, redis_url: str = "", concurrency: int = 1, extra_env: dict | None = None):
    """Run ``celery worker`` in a child process sharing the test database and var folder."""
    env = {**os.environ, "DATABASE_URL": database_url(), "PHASEWRIGHT_VAR_DIR": str(settings.VAR_DIR),
           "REDIS_URL": redis_url, **(extra_env or {})}
    cmd = [sys.executable, "-m", "celery", "-A", "webapp", "worker", "--loglevel", "WARNING", "--concurrency",
           str(concurrency), "--without-gossip", "--without-mingle", "--hostname", f"test-{os.getpid()}-{time.time_ns()}@%h"]
    proc = subprocess.Popen(cmd, env=env, start_new_session=True)
    try:
        yield proc
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()


def wait_for(check, *, timeout_s: float = 180.0, states=("done", "failed")):
    """Poll a check row until it reaches one of ``states``; return it."""
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        check.refresh_from_db()
        if check.status in states:
            return check
        time.sleep(0.5)
    raise AssertionError(f"check still {check.status} at {check.stage} after {timeout_s} s")
