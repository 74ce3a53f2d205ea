"""`manage.py serve` keeps a worker running: a killed one is replaced at once, a broken one is not looped."""

import contextlib
import io
import subprocess
import sys
import threading
import time

from webapp.checks.management.commands import serve


def _supervise(monkeypatch, exit_code: int, run_s: float) -> list[str]:
    """Run the supervisor over stand-in workers that exit with ``exit_code``; return what it printed."""
    monkeypatch.setattr(serve, "WORKER_POLL_S", 0.02)
    monkeypatch.setattr(serve, "WORKER_RETRY_S", 0.5)
    command = serve.Command(stdout=io.StringIO())
    started = []

    def start_worker():
        started.append(time.monotonic())
        return subprocess.Popen([sys.executable, "-c", "import os, signal; os.kill(os.getpid(), signal.SIGKILL)"
                                 if exit_code < 0 else f"raise SystemExit({exit_code})"])

    monkeypatch.setattr(command, "_start_worker", start_worker)
    command.worker = start_worker()
    stop = threading.Event()
    thread = threading.Thread(target=command._keep_worker, args=(stop,))
    thread.start()
    time.sleep(run_s)
    stop.set()
    thread.join(timeout=5)
    command.worker.wait(timeout=5)
    return command.stdout.getvalue().splitlines()


def test_a_killed_worker_is_replaced_at_once(monkeypatch):
    """SIGKILL (exit -9): a new worker each time, no waiting."""
    lines = _supervise(monkeypatch, -9, run_s=1.0)
    assert len(lines) >= 3 and all(line.startswith("worker exited (-9); started another") for line in lines), lines


def test_a_worker_that_cannot_start_is_retried_slowly_with_a_sentence(monkeypatch):
    """Exit 1 right after starting: one sentence and a pause before each new try."""
    lines = _supervise(monkeypatch, 1, run_s=1.2)
    waits = [line for line in lines if "trying again in" in line]
    assert 1 <= len(waits) <= 3, lines  # a tight loop would have started about 60 workers
    assert all(line.startswith("worker exited (1) within 5 s of starting") for line in waits), waits


def _effective_settings(env: dict) -> subprocess.CompletedProcess:
    """Load the settings in a fresh process under ``env`` and print the checks serve runs at once."""
    from pathlib import Path

    code = ("import django; django.setup(); from django.conf import settings as s; "
            "print(s.PHASEWRIGHT_SERVE_CHECKS_AT_ONCE, s.PHASEWRIGHT_CONCURRENT_STAGES)")
    base = {"DJANGO_SETTINGS_MODULE": "webapp.settings", "PATH": "/usr/bin:/bin"}
    return subprocess.run([sys.executable, "-c", code], env=base | env, cwd=Path(__file__).resolve().parents[3],
                          capture_output=True, text=True)


def test_serve_runs_one_check_per_core_up_to_two_unless_told():
    """Default min(2, cores) checks at once and stages side by side; both follow the environment; 0 is refused."""
    import os

    assert _effective_settings({}).stdout.split() == [str(min(2, os.cpu_count() or 1)), "True"]
    told = _effective_settings({"PHASEWRIGHT_SERVE_CHECKS_AT_ONCE": "3", "PHASEWRIGHT_CONCURRENT_STAGES": "False"})
    assert told.stdout.split() == ["3", "False"]
    refused = _effective_settings({"PHASEWRIGHT_SERVE_CHECKS_AT_ONCE": "0"})
    assert refused.returncode != 0 and "PHASEWRIGHT_SERVE_CHECKS_AT_ONCE must be 1 or more" in refused.stderr


def test_the_worker_serve_starts_has_that_many_pool_processes(monkeypatch, settings):
    """The worker's command line carries the setting as its pool size."""
    settings.PHASEWRIGHT_SERVE_CHECKS_AT_ONCE = 3
    started = []
    monkeypatch.setattr(serve.subprocess, "Popen", lambda argv, **kwargs: started.append(argv))
    serve.Command(stdout=io.StringIO())._start_worker()
    [argv] = started
    assert argv[argv.index("--concurrency") + 1] == "3"


def test_the_worker_watch_asks_for_a_warm_shutdown_once_its_parent_is_gone(tmp_path):
    """A stand-in worker under a stand-in serve: SIGKILL the serve, and the worker gets SIGTERM (warm shutdown)."""
    import os
    import signal

    from tests.reliability.servers import wait_until

    worker = (
        "import os, signal, sys, time\n"
        "from webapp.checks.parent_watch import PARENT_ENV, watch_parent\n"
        f"signal.signal(signal.SIGTERM, lambda *_: (open({str(tmp_path / 'term')!r}, 'w').close(), os._exit(0)))\n"
        "assert os.environ[PARENT_ENV] == str(os.getppid())\n"
        f"watch_parent(every_s=0.05); open({str(tmp_path / 'ready')!r}, 'w').close(); time.sleep(30)\n")
    parent = (
        "import os, subprocess, sys, time\n"
        "from webapp.checks.parent_watch import PARENT_ENV\n"
        f"subprocess.Popen([sys.executable, '-c', {worker!r}], env={{**os.environ, PARENT_ENV: str(os.getpid())}})\n"
        "time.sleep(30)\n")
    serve_stand_in = subprocess.Popen([sys.executable, "-c", parent], start_new_session=True)
    try:
        wait_until(lambda: (tmp_path / "ready").exists(), timeout_s=20, what="the stand-in worker watching")
        time.sleep(0.2)
        assert not (tmp_path / "term").exists()  # a living parent is left alone
        os.kill(serve_stand_in.pid, signal.SIGKILL)
        wait_until(lambda: (tmp_path / "term").exists(), timeout_s=5, what="the worker asking itself to stop")
    finally:
        with contextlib.suppress(ProcessLookupError):
            os.killpg(serve_stand_in.pid, signal.SIGKILL)
        serve_stand_in.wait()


def test_a_worker_not_started_by_serve_is_not_watched(monkeypatch):
    from webapp.checks.parent_watch import PARENT_ENV, watch_parent

    monkeypatch.delenv(PARENT_ENV, raising=False)
    assert watch_parent() is None
