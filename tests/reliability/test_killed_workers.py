"""Whole worker processes killed mid-check, 20 times under `make run`'s shape and 20 under Redis: nothing lost.

Embedded default: `manage.py serve` (folder broker, SQLite), which restarts its worker and sweeps.
Production shape: two workers on a private Redis and `requeue_stale_checks --every-s`, with a killed
worker replaced at once as systemd's Restart=always does. Each kill is SIGKILL of the worker's whole
process group (main process and pool child: the machine died) while it runs a check. The heartbeat,
stale age and sweep period are scaled down (1 s, 3 s, 1 s) so the file takes about two minutes; the
production defaults (10 s, 45 s, 15 s) are timed by hand in docs/reliability.md.
"""

from __future__ import annotations

import contextlib
import os
import signal
import subprocess
import sys
import time
from dataclasses import dataclass, field

import pytest
from django.conf import settings
from django.utils import timezone

from tests.reliability.helpers import assert_one_report, child_pids, sphere_stl, submit
from tests.reliability.servers import free_port, wait_until
from tests.webapp.worker import database_url, worker_process
from webapp.checks.models import Check

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]

KILLS = 20
FINISH_WITHIN_S = 120  # the target: a check whose worker died ends within 2 minutes of the kill
# The memory bound is off so a new worker's child imports the pipeline after its claim, not before: each
# round's kill comes a second sooner (the bound itself is tested in test_limits.py).
FAST_BEATS = {"PHASEWRIGHT_HEARTBEAT_S": "1", "PHASEWRIGHT_STALE_AFTER_S": "3", "PHASEWRIGHT_SWEEP_EVERY_S": "1",
              "PHASEWRIGHT_CHECK_MEMORY_MIB": "0"}
# A ball of this size takes a second or two: long enough to be killed mid-run, short enough for 40 rounds.
BALL = sphere_stl(3.5)


@dataclass
class Tally:
    """Kill times per check, for the lost / duplicated / stuck count at the end."""

    killed_at: dict[int, list[float]] = field(default_factory=dict)
    checks: list[Check] = field(default_factory=list)

    def hit(self, check_ids, when: float) -> None:
        for pk in check_ids:
            self.killed_at.setdefault(pk, []).append(when)


def _process_env() -> dict:
    return {**os.environ, **FAST_BEATS, "DATABASE_URL": database_url(), "PHASEWRIGHT_VAR_DIR": str(settings.VAR_DIR)}


def _keep_one_queued(owner, tally: Tally) -> None:
    """Top up the queue so a fresh worker always finds a check to start at once."""
    if not Check.objects.filter(pk__in=[c.pk for c in tally.checks], status=Check.QUEUED).exists():
        tally.checks.append(submit(owner, BALL, f"ball-{len(tally.checks)}.stl"))


def _running_since(started, owner, tally: Tally) -> list[int]:
    """Return the checks claimed after ``started`` (by the current worker), none while one is on its last attempt.

    `make run`'s worker runs two checks at once, and a kill ends both: one on its last attempt would fail.
    """
    _keep_one_queued(owner, tally)
    running = Check.objects.filter(status=Check.RUNNING, started_at__gt=started)
    if running.filter(attempts__gte=settings.PHASEWRIGHT_MAX_ATTEMPTS).exists():
        return []
    return list(running.values_list("pk", flat=True))


def _kill_group(pid: int) -> None:
    with contextlib.suppress(ProcessLookupError):
        os.killpg(pid, signal.SIGKILL)


def _kill_mid_check(worker_pid: int, started, owner, tally: Tally) -> bool:
    """Kill the worker's group as soon as it runs a check; return whether the kill caught one mid-run."""
    try:
        wait_until(lambda: _running_since(started, owner, tally), timeout_s=60, every_s=0.05,
                   what="the worker starting a check")
    except AssertionError as exc:
        rows = Check.objects.filter(pk__in=[c.pk for c in tally.checks]).order_by("pk").values_list(
            "pk", "status", "stage", "attempts", "heartbeat_at")
        raise AssertionError(f"{exc} after {sum(map(len, tally.killed_at.values()))} kills: " + "; ".join(
            f"{pk} {status}/{stage} x{attempts} beat {beat:%H:%M:%S.%f}" if beat else f"{pk} {status}/{stage} "
            f"x{attempts} no beat" for pk, status, stage, attempts, beat in rows)) from None
    _kill_group(worker_pid)
    when = time.time()
    # Every check the dead worker ran, also one it claimed between the look and the kill.
    victims = list(Check.objects.filter(status=Check.RUNNING, started_at__gt=started).values_list("pk", flat=True))
    tally.hit(victims, when)
    return bool(victims)


def _settle_and_count(tally: Tally, label: str) -> dict:
    """Wait for every check to end; return the lost, duplicated and stuck counts and the slowest kill-to-end time."""
    ids = [c.pk for c in tally.checks]
    wait_until(lambda: not Check.objects.filter(pk__in=ids, status__in=Check.ACTIVE).exists(),
               timeout_s=FINISH_WITHIN_S + 30, every_s=0.5, what=f"every check ending ({label})")
    rows = {c.pk: c for c in Check.objects.filter(pk__in=ids)}
    # A check whose worker died on every one of its attempts is failed by design, with the sentence saying so;
    # the kills avoid a last attempt, but one claimed between the look and the kill can still be hit.
    out_of_attempts = [pk for pk, c in rows.items() if c.status == "failed" and c.error_code == "worker_lost"
                       and len(tally.killed_at.get(pk, ())) >= settings.PHASEWRIGHT_MAX_ATTEMPTS]
    lost = [pk for pk, c in rows.items() if c.status != "done" and pk not in out_of_attempts]
    duplicated = [pk for pk, c in rows.items() if c.attempts > len(tally.killed_at.get(pk, ())) + 1]
    for check in tally.checks:
        if check.pk not in lost and check.pk not in out_of_attempts:
            assert_one_report(check)  # one row and one copy of each file, however often it ran
    kill_to_end = [rows[pk].finished_at.timestamp() - max(times) for pk, times in tally.killed_at.items()
                   if pk not in out_of_attempts]
    stuck = [t for t in kill_to_end if t > FINISH_WITHIN_S]
    counts = {"kills": sum(map(len, tally.killed_at.values())), "checks": len(ids), "hit": len(tally.killed_at),
              "failed_out_of_attempts": len(out_of_attempts), "lost": len(lost),
              "lost_as": [f"{rows[pk].status}/{rows[pk].error_code or rows[pk].stage} after "
                          f"{len(tally.killed_at.get(pk, ()))} kills" for pk in lost],
              "duplicated": len(duplicated), "stuck": len(stuck), "slowest_kill_to_done_s": round(max(kill_to_end), 1)}
    print(f"\n{label}: {counts}")
    return counts


@contextlib.contextmanager
def _serve(log_path):
    """Run `manage.py serve` (site, worker, sweeper) on a free port, as `make run` does."""
    env = {**_process_env(), "REDIS_URL": ""}
    with open(log_path, "w") as log:
        proc = subprocess.Popen([sys.executable, "manage.py", "serve", "--port", str(free_port())], env=env,
                                cwd=settings.BASE_DIR, stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    try:
        yield proc
    finally:
        workers = child_pids(proc.pid) if proc.poll() is None else []
        with contextlib.suppress(ProcessLookupError):
            os.kill(proc.pid, signal.SIGTERM)  # serve stops its worker on the way out
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            _kill_group(proc.pid)
            proc.wait()
        for pid in workers:
            _kill_group(pid)


def _on_the_embedded_database() -> None:
    """Skip unless the test database is SQLite: the embedded default (`make run`) is SQLite and the folder broker.

    `make test` runs this file again on SQLite after its PostgreSQL pass; the Redis test runs on PostgreSQL, the
    production shape. (An earlier stall seen here on PostgreSQL was not seen again in 3 of 3 runs of both tests
    there, once under two busy loops, after a taken-but-never-started message was let go: docs/reliability.md.)
    """
    from django.db import connection

    if connection.vendor != "sqlite":
        pytest.skip("make run's shape uses SQLite; make test runs this on SQLite in its own pass")


def test_killing_the_embedded_worker_20_times_loses_nothing(alice, seeded, tmp_path):
    """make run's shape: serve restarts the worker, its sweeper requeues; every check ends done, once, within 2 min."""
    _on_the_embedded_database()
    tally = Tally()
    started = timezone.now()  # a worker claims nothing before it has booted (over a second), so seeing it is enough
    with _serve(tmp_path / "serve.log") as serve:
        [worker] = wait_until(lambda: child_pids(serve.pid), timeout_s=30, what="serve running a worker")
        kills = 0
        while kills < KILLS:
            kills += _kill_mid_check(worker, started, alice, tally)
            [worker] = wait_until(lambda: [p for p in child_pids(serve.pid) if p != worker], timeout_s=30,
                                  every_s=0.05, what="serve's next worker")
            started = timezone.now()
        counts = _settle_and_count(tally, "embedded (folder broker)")
        assert serve.poll() is None
    assert (counts["lost"], counts["duplicated"], counts["stuck"]) == (0, 0, 0), counts


def test_killing_redis_workers_20_times_loses_nothing(alice, seeded, redis, tmp_path):
    """Production shape: a worker, the sweeper service; a killed worker is replaced at once. Nothing lost, once, within 2 min."""
    tally = Tally()
    sweeper = subprocess.Popen([sys.executable, "manage.py", "requeue_stale_checks", "--every-s", "1"],
                               env={**_process_env(), "REDIS_URL": redis.url}, cwd=settings.BASE_DIR,
                               stdout=subprocess.DEVNULL, start_new_session=True)
    try:
        with contextlib.ExitStack() as stack:
            kills = 0
            while kills < KILLS:
                started = timezone.now()
                proc = stack.enter_context(worker_process(redis_url=redis.url, extra_env=FAST_BEATS))
                kills += _kill_mid_check(proc.pid, started, alice, tally)
                proc.wait(timeout=20)
            stack.enter_context(worker_process(redis_url=redis.url, extra_env=FAST_BEATS))
            counts = _settle_and_count(tally, "production shape (Redis)")
    finally:
        sweeper.send_signal(signal.SIGTERM)
        sweeper.wait(timeout=20)
    assert (counts["lost"], counts["duplicated"], counts["stuck"]) == (0, 0, 0), counts
