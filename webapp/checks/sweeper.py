"""The sweeper: requeue checks whose worker went silent, again and again (serve's thread, the production service)."""

from __future__ import annotations

import base64
import json
import logging
import threading
from collections.abc import Callable
from pathlib import Path

from django.conf import settings
from django.db import DatabaseError, close_old_connections, connection

from webapp.checks.services import check_requeue_stale
from webapp.checks.task_names import RUN_CHECK

logger = logging.getLogger(__name__)


def folder_queue_check_ids(broker_url: str | None = None, options: dict | None = None) -> set[int] | None:
    """Return the ids of the checks whose run messages wait in the folder broker's queue (None: another broker).

    A message file is read as kombu's folder transport writes it (JSON, the body base64 JSON of [args, kwargs,
    embed]); a file that cannot be read (taken meanwhile, half written) is skipped.
    """
    url = str(broker_url if broker_url is not None else settings.CELERY_BROKER_URL)
    if not url.startswith("filesystem://"):
        return None
    folder = Path((options if options is not None else settings.CELERY_BROKER_TRANSPORT_OPTIONS)["data_folder_in"])
    ids = set()
    for path in folder.glob("*.msg"):
        try:
            message = json.loads(path.read_bytes())
            if (message.get("headers") or {}).get("task") != RUN_CHECK:
                continue
            body = message["body"]
            if (message.get("properties") or {}).get("body_encoding") == "base64":
                body = base64.b64decode(body)
            ids.add(int(json.loads(body)[0][0]))
        except (OSError, ValueError, KeyError, IndexError, TypeError):
            continue
    return ids


def sweep_once(stale_after_s: int | None = None) -> tuple[int, int]:
    """Run one sweep; a database that is away costs this sweep only. Return (requeued, failed)."""
    try:
        close_old_connections()
        return check_requeue_stale(stale_after_s=stale_after_s, pending_ids=folder_queue_check_ids())
    except DatabaseError as exc:
        logger.warning("sweep skipped: %s", exc)
        return 0, 0
    finally:
        connection.close()


def sweep_every(every_s: float, stop: threading.Event, report: Callable[[int, int], None] | None = None,
                stale_after_s: int | None = None) -> None:
    """Sweep every ``every_s`` until ``stop`` is set, reporting sweeps that did something."""
    while not stop.wait(every_s):
        try:
            requeued, failed = sweep_once(stale_after_s)
        except Exception:  # a sweeper that dies leaves every later lost check stuck
            logger.exception("sweep failed")
            continue
        if (requeued or failed) and report:
            report(requeued, failed)
