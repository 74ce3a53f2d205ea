"""At-least-once delivery made safe: a killed worker costs an attempt, never a check or a second report.

Real worker processes on a private Redis; the sweep (check_requeue_stale) is called the way the sweeper
service calls it, with a stale age scaled down from production's 45 s.
"""

import os
import signal

import pytest

from tests.reliability.helpers import assert_one_report, child_pids, kill_group, sphere_stl, submit
from tests.reliability.servers import wait_until
from tests.webapp.worker import worker_process
from webapp.checks.models import Check
from webapp.checks.services import check_requeue_stale, worker_lost_sentence

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]

STALE_AFTER_S = 3


def _state(check: Check) -> Check:
    check.refresh_from_db()
    return check


def _requeue_when_stale() -> bool:
    requeued, _ = check_requeue_stale(stale_after_s=STALE_AFTER_S)
    return requeued > 0


def test_a_check_whose_worker_is_killed_completes_on_another(alice, seeded, redis):
    """SIGKILL of the whole worker mid-check: the job requeues it, worker B finishes it, one report, attempts 2."""
    with worker_process(redis_url=redis.url) as worker_a:
        # A 24 mm ball: about 8-17 s of checking here (a 40 mm one took about a minute, run twice), long enough
        # to be killed mid-check once its progress shows.
        check = submit(alice, sphere_stl(12.0, 4), "ball.stl")
        wait_until(lambda: _state(check).status == "running" and check.progress > 0, timeout_s=120,
                   what="worker A starting the check")
        with worker_process(redis_url=redis.url) as worker_b:
            kill_group(worker_a)
            wait_until(_requeue_when_stale, timeout_s=60, what="the sweep requeueing the check")
            wait_until(lambda: _state(check).status in ("done", "failed"), timeout_s=180, what="the check ending")
            assert worker_b.poll() is None
    assert_one_report(check)
    assert check.attempts == 2


def test_a_check_that_loses_its_worker_three_times_fails_with_a_sentence(alice, seeded, redis):
    """Each of three attempts loses its pool process (requeued at once); the third ends it failed with a sentence."""
    with worker_process(redis_url=redis.url) as worker:
        check = submit(alice, sphere_stl(20.0, 4), "ball.stl")
        for attempt in (1, 2, 3):
            wait_until(lambda: _state(check).status == "running" and check.attempts == attempt, timeout_s=120,
                       what=f"attempt {attempt} starting")
            [child] = child_pids(worker.pid)
            os.kill(child, signal.SIGKILL)  # what the kernel's OOM killer does
        # The worker's main process fails it at the third loss itself: no sweep needed.
        wait_until(lambda: _state(check).status == "failed", timeout_s=60, what="the worker failing the check")
        after = submit(alice, sphere_stl(3.0), "small-ball.stl")
        wait_until(lambda: _state(after).status in ("done", "failed"), timeout_s=120, what="the next check ending")
        assert worker.poll() is None
    check.refresh_from_db()
    assert (check.status, check.attempts, check.error_code) == ("failed", 3, "worker_lost")
    assert check.error == worker_lost_sentence()
    assert check.error.startswith("The worker was lost three times") and check.report is None
    assert after.status == "done"
