"""Celery shims: load nothing, decide nothing, call the service of the same name."""

import logging

from celery import shared_task
from celery.exceptions import SoftTimeLimitExceeded
from django.db import OperationalError

logger = logging.getLogger(__name__)


@shared_task(bind=True, autoretry_for=(OperationalError,), retry_backoff=True, retry_backoff_max=60,
             retry_jitter=True, max_retries=5)
def run_check(self, check_id: int) -> None:
    from webapp.checks import services

    try:
        services.check_run(check_id=check_id)
    except SoftTimeLimitExceeded:
        services.check_fail(check_id=check_id, code="time_limit", message="The check ran past its time limit; "
                            "the part may be too large or too detailed for this printer's grid.")
    except MemoryError:
        services.check_fail(check_id=check_id, code="memory_limit", message="The check ran out of memory; "
                            "the part may be too large or too detailed for this printer's grid.")
    except OperationalError:
        raise  # the database blinked: autoretry with backoff
    except Exception:
        logger.exception("check %s stopped on an internal error", check_id)
        services.check_fail(check_id=check_id, code="internal_error", message="The check stopped on an internal "
                            "error; the team has the details in the worker log. Try again, or report the design.")
