"""A worker child is bounded in memory and time: a part past either ends with a sentence, the worker lives on.

The limits come from the worker's environment, as in production (deploy/env.example), set small here.
"""

from datetime import timedelta

import pytest
from celery.exceptions import TimeLimitExceeded

from tests.reliability.helpers import box_stl, sphere_stl, submit
from tests.reliability.servers import wait_until
from tests.webapp.worker import worker_process
from webapp.checks.models import Check
from webapp.checks.tasks import MEMORY_LIMIT_SENTENCE, TIME_LIMIT_SENTENCE, run_check

# As a worker machine runs: one numerical thread, two malloc arenas (deploy/env.example).
WORKER_ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MALLOC_ARENA_MAX": "2"}


def _ended(check: Check) -> Check:
    wait_until(lambda: (check.refresh_from_db() or check).status in ("done", "failed"), timeout_s=180,
               what=f"check of {check.design.name} ending")
    return check


@pytest.mark.slow
@pytest.mark.django_db(transaction=True)
def test_a_part_over_the_memory_or_time_limit_ends_with_a_sentence_and_the_worker_lives_on(alice, seeded, redis):
    """With 320 MiB per check and a 5 s soft limit: a big plate runs out of memory, a big ball out of time."""
    # Measured on this machine: a small box adds ~180 MiB of address space to a child and takes under 1 s;
    # the 120 x 75 mm plate adds ~520 MiB; the 60 mm ball takes over 30 s. The limits are the worker's.
    env = {**WORKER_ENV, "PHASEWRIGHT_CHECK_MEMORY_MIB": "320", "PHASEWRIGHT_CHECK_SOFT_LIMIT_S": "5",
           "PHASEWRIGHT_CHECK_HARD_LIMIT_S": "30"}
    with worker_process(redis_url=redis.url, extra_env=env) as worker:
        plate = _ended(submit(alice, box_stl(120.0, 75.0, 10.0), "plate.stl"))
        ball = _ended(submit(alice, sphere_stl(30.0, 5), "ball.stl"))
        small = _ended(submit(alice, box_stl(), "small.stl"))
        assert worker.poll() is None
    assert (plate.status, plate.error_code, plate.error) == ("failed", "memory_limit", MEMORY_LIMIT_SENTENCE)
    assert (ball.status, ball.error_code, ball.error) == ("failed", "time_limit", TIME_LIMIT_SENTENCE)
    assert ball.finished_at - ball.started_at < timedelta(seconds=30)  # ended by the soft limit, not the hard
    assert small.status == "done" and small.attempts == 1


@pytest.mark.django_db
def test_the_hard_time_limit_is_recorded_on_the_check(alice, seeded, django_capture_on_commit_callbacks):
    """A child killed at the hard limit cannot write; the worker's main process records the sentence instead."""
    # Celery calls Task.on_failure with TimeLimitExceeded in the main process (celery/worker/request.py,
    # Request.on_timeout); a real kill needs a C call longer than the soft limit, which no small part makes.
    with django_capture_on_commit_callbacks():
        check = submit(alice, box_stl(), "box.stl")
    Check.objects.filter(pk=check.pk).update(status="running", attempts=1)
    run_check.on_failure(TimeLimitExceeded(660), "task-id", (check.pk,), {}, None)
    check.refresh_from_db()
    assert (check.status, check.error_code, check.error) == ("failed", "time_limit", TIME_LIMIT_SENTENCE)


def test_the_sender_leaves_the_limits_to_the_worker():
    """A queued check carries no time limits of its own, so the worker's environment decides them."""
    from unittest import mock

    from webapp.celery import app

    with mock.patch.object(app.amqp, "send_task_message") as send:
        run_check.delay(1)
    assert send.call_args[0][2].headers["timelimit"] == [None, None]
