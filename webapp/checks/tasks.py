"""Celery shims: load nothing, decide nothing, call the service of the same name."""

import logging

from celery import Task, shared_task
from celery.exceptions import SoftTimeLimitExceeded, TimeLimitExceeded
from django.conf import settings
from django.db import InterfaceError, OperationalError

from services import limits

logger = logging.getLogger(__name__)


def time_limit_sentence() -> str:
    """Return the sentence for a check past this worker's time limit, naming the limit."""
    return limits.time_limit_sentence(settings.CELERY_TASK_SOFT_TIME_LIMIT)


def memory_limit_sentence() -> str:
    """Return the sentence for a check past this worker's memory headroom, naming the limit."""
    return limits.memory_limit_sentence(settings.PHASEWRIGHT_CHECK_MEMORY_MIB)


# The database blinked (restart, failover, network): retry with backoff, 1, 2, 4 ... s capped at 60 s, without
# jitter (it may shorten every wait to nothing), 15 times: about 10 minutes, past a 5-minute outage.
TRANSIENT_DB_ERRORS = (OperationalError, InterfaceError)
DB_RETRY_BACKOFF_MAX_S = 60
DB_RETRIES = 15


class CheckTask(Task):
    """A check task that runs under the worker's own limits and records a hard time limit on the check."""

    # Keeps the worker's heartbeat informed and requeues the check of a lost pool process at once.
    Request = "webapp.checks.heartbeat:CheckRequest"

    def apply_async(self, args=None, kwargs=None, **options):
        # Celery stamps the sender's time limits into the message, and a worker obeys those first; with
        # None the worker's own settings apply, so a worker machine's environment decides its limits.
        options.setdefault("time_limit", None)
        options.setdefault("soft_time_limit", None)
        return super().apply_async(args, kwargs, **options)

    def on_failure(self, exc, task_id, args, kwargs, einfo):
        # Celery calls this in the worker's main process when the hard limit killed the child.
        if isinstance(exc, TimeLimitExceeded) and args:
            from webapp.checks import services

            services.check_fail(check_id=args[0], code="time_limit", message=time_limit_sentence())


@shared_task(bind=True, base=CheckTask, autoretry_for=TRANSIENT_DB_ERRORS, retry_backoff=True,
             retry_backoff_max=DB_RETRY_BACKOFF_MAX_S, retry_jitter=False, max_retries=DB_RETRIES)
def run_check(self, check_id: int) -> None:
    from webapp.checks import services

    out_of_memory = False
    try:
        services.check_run(check_id=check_id, retry=self.request.retries > 0)
    except SoftTimeLimitExceeded:
        services.check_fail(check_id=check_id, code="time_limit", message=time_limit_sentence())
    except MemoryError:
        out_of_memory = True  # record it below, once the traceback and its large arrays are gone
    except TRANSIENT_DB_ERRORS:
        raise  # autoretry with backoff
    except Exception:
        logger.exception("check %s stopped on an internal error", check_id)
        services.check_fail(check_id=check_id, code="internal_error", message="The check stopped on an internal "
                            "error; the team has the details in the worker log. Try again, or report the design.")
    if out_of_memory:
        services.check_fail(check_id=check_id, code="memory_limit", message=memory_limit_sentence())
