"""The effective configuration, not the presence of a line (a misspelt setting silently never applies)."""

from unittest import mock

import pytest
from celery.exceptions import Retry
from django.db import OperationalError

from webapp.celery import app
from webapp.checks.tasks import run_check


def test_celery_runs_late_ack_one_at_a_time_with_limits(settings):
    """Workers ack after the task, reserve one message, and have soft and hard time limits in force."""
    assert app.conf.task_acks_late is True
    assert app.conf.task_reject_on_worker_lost is True
    assert app.conf.worker_prefetch_multiplier == 1
    assert app.conf.task_soft_time_limit == settings.CELERY_TASK_SOFT_TIME_LIMIT == 600
    assert app.conf.task_time_limit == 660 and app.conf.task_time_limit > app.conf.task_soft_time_limit
    assert app.conf.worker_max_memory_per_child > 0


def test_it_is_never_eager():
    """The embedded default behaves like production: a real worker process, never eager mode."""
    assert app.conf.task_always_eager is False


def test_the_broker_needs_no_server_without_redis(settings):
    """Without REDIS_URL the broker is the folder transport, whose visibility needs no timeout."""
    if not settings.REDIS_URL:
        assert app.conf.broker_url.startswith("filesystem://")
        assert "data_folder_in" in app.conf.broker_transport_options
    else:
        assert app.conf.broker_transport_options["visibility_timeout"] > app.conf.task_time_limit


def _retry_waits_s() -> list[float]:
    """Return the waits Celery itself chooses for run_check's retries while the database refuses every query."""
    waits = []

    def record(*args, countdown=None, **kwargs):
        waits.append(countdown)
        raise Retry()

    with mock.patch("webapp.checks.services.check_run", side_effect=OperationalError("connection refused")), \
            mock.patch.object(run_check, "retry", side_effect=record):
        for retries in range(run_check.max_retries):
            run_check.push_request(retries=retries, id="t", called_directly=False)
            try:
                with pytest.raises(Retry):
                    run_check.run(1)
            finally:
                run_check.pop_request()
    return waits


def test_database_retries_outlast_a_five_minute_outage():
    """Backoff 1, 2, 4 ... s capped at 60 s, no jitter: the retries together span about 10 minutes.

    A 5-minute outage (the target in issue 17) must end before the last retry; jitter is off because
    Celery's full jitter draws each wait from 0 up to the cap, which can shorten the span to seconds.
    """
    waits = _retry_waits_s()
    assert max(waits) == 60 and waits[:3] == [1, 2, 4]
    assert 300 + 60 < sum(waits) <= 12 * 60, waits


def test_run_check_requests_feed_the_heartbeat():
    """The request class the worker builds for run_check (as celery.worker.strategy resolves it) feeds the heartbeat."""
    from celery.signals import task_received, worker_ready
    from kombu.utils.imports import symbol_by_name

    from webapp.celery import hold_received_check, start_heartbeat
    from webapp.checks.heartbeat import CheckRequest

    assert symbol_by_name(app.tasks["webapp.checks.tasks.run_check"].Request) is CheckRequest
    assert hold_received_check in [ref() for _, ref in task_received.receivers]
    assert start_heartbeat in [ref() for _, ref in worker_ready.receivers]


def test_the_worker_and_the_cli_share_their_limits_and_the_deploy_guide_says_them(settings):
    """Settings default to services.limits (which the CLI's options use), and deploy/README.md says the same."""
    import re
    from pathlib import Path

    from services import limits

    assert settings.PHASEWRIGHT_CHECK_MEMORY_MIB == limits.DEFAULT_MEMORY_MIB
    assert settings.CELERY_TASK_SOFT_TIME_LIMIT == limits.DEFAULT_TIME_LIMIT_S
    guide = (Path(__file__).resolve().parents[2] / "deploy" / "README.md").read_text()
    said = re.search(r"`PHASEWRIGHT_CHECK_MEMORY_MIB` \((\d+)", guide)
    assert said and int(said.group(1)) == limits.DEFAULT_MEMORY_MIB
