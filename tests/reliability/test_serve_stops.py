"""`manage.py serve` never leaves its worker behind: stopped with it, or stopping by itself once serve is gone.

Found while measuring two checks at once: serve stopped with SIGTERM ran none of its clean-up, so its worker (in
a session of its own) lived on, took the next serve's checks with the old code, and made "one check at a time"
run two at once (benchmarks/README.md, 4 December 2026, fourth session).
"""

from __future__ import annotations

import contextlib
import os
import signal
import subprocess
import sys
import time

import pytest
from django.conf import settings

from tests.reliability.helpers import child_pids
from tests.reliability.servers import free_port, wait_until
from tests.webapp.worker import database_url

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]


def _alive(pid: int) -> bool:
    """Return whether a process exists and is not a zombie waiting for a reaper."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False


@contextlib.contextmanager
def _serve(log_path):
    env = {**os.environ, "DATABASE_URL": database_url(), "PHASEWRIGHT_VAR_DIR": str(settings.VAR_DIR),
           "REDIS_URL": "", "PHASEWRIGHT_CHECK_MEMORY_MIB": "0"}
    with open(log_path, "w") as log:
        proc = subprocess.Popen([sys.executable, "manage.py", "serve", "--port", str(free_port())], env=env,
                                cwd=settings.BASE_DIR, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    workers: list[int] = []
    try:
        [worker] = wait_until(lambda: child_pids(proc.pid), timeout_s=30, what="serve running a worker")
        workers.append(worker)
        wait_until(lambda: "ready." in log_path.read_text(), timeout_s=60, what="the worker being ready")
        yield proc, worker
    finally:
        for pid in (proc.pid, *workers):
            with contextlib.suppress(ProcessLookupError):
                os.killpg(pid, signal.SIGKILL)
        proc.wait()


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP])
def test_serve_stopped_by_a_signal_stops_its_worker(tmp_path, sig):
    """SIGTERM (kill, a service manager) and SIGHUP (a closed terminal) stop the worker too, as Ctrl-C does."""
    with _serve(tmp_path / "serve.log") as (serve, worker):
        os.kill(serve.pid, sig)
        serve.wait(timeout=40)
        wait_until(lambda: not _alive(worker), timeout_s=10, what="the worker stopping with serve")
        assert "site, worker and sweeper stopped" in (tmp_path / "serve.log").read_text()


def test_a_worker_whose_serve_was_killed_outright_stops_by_itself(tmp_path):
    """SIGKILL leaves serve no clean-up: the worker sees its parent gone within a second and shuts down."""
    with _serve(tmp_path / "serve.log") as (serve, worker):
        os.kill(serve.pid, signal.SIGKILL)
        serve.wait(timeout=10)
        started = time.monotonic()
        wait_until(lambda: not _alive(worker), timeout_s=30, what="the orphaned worker stopping by itself")
        print(f"orphaned worker gone {time.monotonic() - started:.1f} s after serve was killed")
        assert "is gone: stopping after the running check" in (tmp_path / "serve.log").read_text()
