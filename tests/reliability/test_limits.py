"""A worker child is bounded in memory and time: a part past either ends with a sentence, the worker lives on.

The limits come from the worker's environment, as in production (deploy/env.example), set small here.
"""

from datetime import timedelta

import pytest
from celery.exceptions import SoftTimeLimitExceeded, TimeLimitExceeded

from tests.reliability.helpers import box_stl, sphere_stl, submit
from tests.reliability.servers import wait_until
from tests.webapp.worker import worker_process
from webapp.checks.models import Check
from services.limits import memory_limit_sentence, time_limit_sentence
from services.settings import CheckSettings, OpticsSettings
from webapp.checks.tasks import run_check, time_limit_sentence as worker_time_limit_sentence

# As a worker machine runs: one numerical thread, two malloc arenas (deploy/env.example).
WORKER_ENV = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MALLOC_ARENA_MAX": "2"}


def _ended(check: Check) -> Check:
    wait_until(lambda: (check.refresh_from_db() or check).status in ("done", "failed"), timeout_s=180,
               what=f"check of {check.design.name} ending")
    return check


@pytest.mark.slow
@pytest.mark.django_db(transaction=True)
def test_a_part_over_the_memory_or_time_limit_ends_with_a_sentence_and_the_worker_lives_on(alice, seeded, redis):
    """With 320 MiB per check a big plate runs out of memory; with a 5 s soft limit a big ball out of time."""
    # Measured on this machine: a small box adds ~180 MiB of address space to a child and takes under 1 s;
    # the 120 x 75 mm plate needs far more at 900 GHz; the 60 mm ball takes over 30 s. The limits are the worker's.
    # The plate runs under a generous time limit of its own: on a loaded CI machine it once took over 5 s to
    # reach 320 MiB and ended by the clock, which says nothing about the memory limit.
    memory_env = {**WORKER_ENV, "PHASEWRIGHT_CHECK_MEMORY_MIB": "320", "PHASEWRIGHT_CHECK_SOFT_LIMIT_S": "120",
                  "PHASEWRIGHT_CHECK_HARD_LIMIT_S": "150"}
    with worker_process(redis_url=redis.url, extra_env=memory_env) as worker:
        # At 900 GHz the optics' grids are fine enough for the plate to need far more than 320 MiB. (At 300 GHz it
        # did until the as-designed raster learnt to reuse the printed stack: then it finished within 320 MiB.)
        at_900 = CheckSettings(optics=OpticsSettings(freqs_ghz=(900.0,)))
        plate = _ended(submit(alice, box_stl(120.0, 75.0, 10.0), "plate.stl", at_900))
        assert worker.poll() is None
    time_env = {**WORKER_ENV, "PHASEWRIGHT_CHECK_MEMORY_MIB": "2048", "PHASEWRIGHT_CHECK_SOFT_LIMIT_S": "5",
                "PHASEWRIGHT_CHECK_HARD_LIMIT_S": "30"}
    with worker_process(redis_url=redis.url, extra_env=time_env) as worker:
        ball = _ended(submit(alice, sphere_stl(30.0, 5), "ball.stl"))
        small = _ended(submit(alice, box_stl(), "small.stl"))
        assert worker.poll() is None
    assert (plate.status, plate.error_code, plate.error) == ("failed", "memory_limit", memory_limit_sentence(320))
    assert (ball.status, ball.error_code, ball.error) == ("failed", "time_limit", time_limit_sentence(5))
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
    assert (check.status, check.error_code, check.error) == ("failed", "time_limit", worker_time_limit_sentence())
    assert "600 s" in check.error  # the limit is named


def test_the_sender_leaves_the_limits_to_the_worker():
    """A queued check carries no time limits of its own, so the worker's environment decides them."""
    from unittest import mock

    from webapp.celery import app
    from webapp.checks.queue import send_run_check

    with mock.patch.object(app.amqp, "send_task_message") as send:
        send_run_check(1)
    assert send.call_args[0][2].headers["timelimit"] == [None, None]


@pytest.mark.django_db
@pytest.mark.parametrize(("raised", "code", "limit_words"), [
    (MemoryError, "memory_limit", "memory limit (4,096 MiB)"),
    (SoftTimeLimitExceeded, "time_limit", "time limit (600 s)"),
])
def test_a_limit_reached_while_the_file_is_parsed_names_the_limit(alice, seeded, django_capture_on_commit_callbacks,
                                                                 monkeypatch, raised, code, limit_words):
    """A limit inside the mesh parser ends the check with the limit's sentence, not "export the part again"."""
    import trimesh

    def parser(*args, **kwargs):
        raise raised()

    monkeypatch.setattr(trimesh, "load", parser)
    with django_capture_on_commit_callbacks():
        check = submit(alice, b"v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n", "part.obj")
    run_check(check.pk)
    check.refresh_from_db()
    assert (check.status, check.error_code) == ("failed", code)
    assert limit_words in check.error and "export" not in check.error
