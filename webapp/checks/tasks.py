"""Celery shims: load nothing, decide nothing, call the service of the same name."""

import logging

from celery import Task, shared_task
from celery.exceptions import SoftTimeLimitExceeded, TimeLimitExceeded
from django.db import InterfaceError, OperationalError

logger = logging.getLogger(__name__)

TIME_LIMIT_SENTENCE = ("The check ran past its time limit; the part may be too large or too detailed for this "
                       "printer's grid.")
MEMORY_LIMIT_SENTENCE = ("The check ran out of memory; the part may be too large or too detailed for this "
                         "printer's grid.")
# The database blinked (restart, failover, network): retry with backoff, covering an outage of a few minutes.
TRANSIENT_DB_ERRORS = (OperationalError, InterfaceError)


class CheckTask(Task):
    """A check task that runs under the worker's own limits and records a hard time limit on the check."""

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

            services.check_fail(check_id=args[0], code="time_limit", message=TIME_LIMIT_SENTENCE)


@shared_task(bind=True, base=CheckTask, autoretry_for=TRANSIENT_DB_ERRORS, retry_backoff=True,
             retry_backoff_max=60, retry_jitter=True, max_retries=8)
def run_check(self, check_id: int) -> None:
    from webapp.checks import services

    out_of_memory = False
    try:
        services.check_run(check_id=check_id)
    except SoftTimeLimitExceeded:
        services.check_fail(check_id=check_id, code="time_limit", message=TIME_LIMIT_SENTENCE)
    except MemoryError:
        out_of_memory = True  # record it below, once the traceback and its large arrays are gone
    except TRANSIENT_DB_ERRORS:
        raise  # autoretry with backoff
    except Exception:
        logger.exception("check %s stopped on an internal error", check_id)
        services.check_fail(check_id=check_id, code="internal_error", message="The check stopped on an internal "
                            "error; the team has the details in the worker log. Try again, or report the design.")
    if out_of_memory:
        services.check_fail(check_id=check_id, code="memory_limit", message=MEMORY_LIMIT_SENTENCE)
