"""The effective configuration, not the presence of a line (a misspelt setting silently never applies)."""

from webapp.celery import app


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
