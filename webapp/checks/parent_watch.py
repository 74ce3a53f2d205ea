"""A worker that `manage.py serve` started stops once that serve is gone, however it went.

serve stops its worker on the way out (Ctrl-C, SIGTERM, SIGHUP), but a serve killed outright (SIGKILL, a crash)
runs no clean-up, and its worker, in a session of its own, would live on: it would take the next serve's checks
with the old code, and two such workers on one folder broker ran two checks at once where one was asked for.
serve names itself in the worker's environment; the worker's main process looks at its parent once a second
and, once serve is no longer it, asks itself for a warm shutdown (SIGTERM: the check it runs is finished,
no new one is taken). Workers started any other way (production's systemd units) are not watched.
"""

from __future__ import annotations

import logging
import os
import signal
import threading
import time

PARENT_ENV = "PHASEWRIGHT_SERVE_PID"
WATCH_EVERY_S = 1.0

logger = logging.getLogger(__name__)


def watch_parent(every_s: float = WATCH_EVERY_S) -> threading.Thread | None:
    """Start the watch in this (worker main) process if serve started it; return the thread, or None."""
    parent = os.environ.get(PARENT_ENV, "")
    if not parent.isdigit():
        return None
    thread = threading.Thread(target=_watch, args=(int(parent), every_s), name="phasewright-parent-watch",
                              daemon=True)
    thread.start()
    return thread


def _watch(parent: int, every_s: float) -> None:
    while os.getppid() == parent:
        time.sleep(every_s)
    logger.warning("the serve process that started this worker (pid %s) is gone: stopping after the running check",
                   parent)
    os.kill(os.getpid(), signal.SIGTERM)
