"""The worker's heartbeat: its main process stamps the checks it holds, so a silent check means a dead worker.

The main process, not the pool child, beats: a child busy in one long numpy call cannot write, while the
main process is idle. It learns what it holds from the request's life (received, accepted, ended), and
a lost pool child (killed by the kernel for memory, most often) puts its check back in the queue at once.

A message taken but not started is stamped for a bounded time only. When the broker connection drops, Celery
forgets the messages it had taken and not yet handed to a pool process (their delivery tags die with the
channel) without ending their requests, so nothing here would ever release them: stamped for ever, their checks
would never look stale, and the sweeper would never resend them (seen: a Redis restart left checks queued past
five minutes). With prefetch 1 and late acks a taken message starts within seconds, so one that has waited a
whole stale age is let go; if it does start later, its claim fails against the resent copy's run.
"""

from __future__ import annotations

import logging
import threading
import time

from celery.exceptions import WorkerLostError
from celery.worker.request import Request

from webapp.checks.task_names import RUN_CHECK

logger = logging.getLogger(__name__)


class Heartbeat:
    """The checks this worker holds (taken, or running in a child) and the thread that stamps them."""

    def __init__(self, hold_taken_s: float = float("inf"), clock=time.monotonic) -> None:
        self._lock = threading.Lock()
        self._taken: dict[int, float] = {}  # check id -> when its message was taken (``clock``)
        self._running: set[int] = set()
        self._thread: threading.Thread | None = None
        self._stop = threading.Event()
        self._wake = threading.Event()
        self.hold_taken_s = hold_taken_s
        self._clock = clock

    def take(self, check_id: int) -> None:
        """Hold a check whose message this worker just took, and stamp it now rather than at the next beat.

        The folder broker deletes a message when it is taken: a worker killed before its first stamp
        would leave the check queued with no heartbeat, which the sweeper resends only after twice the
        time limit. With several pool processes a worker takes a message while another check starts, so
        that window is no longer closed by the claim that follows at once.
        """
        with self._lock:
            self._taken[check_id] = self._clock()
        self._wake.set()

    def start_running(self, check_id: int) -> None:
        with self._lock:
            self._taken.pop(check_id, None)
            self._running.add(check_id)

    def release(self, check_id: int) -> None:
        with self._lock:
            self._taken.pop(check_id, None)
            self._running.discard(check_id)

    def held(self) -> tuple[frozenset[int], frozenset[int]]:
        """Return (taken, running) check ids; a message taken longer than ``hold_taken_s`` ago is let go."""
        with self._lock:
            let_go_before = self._clock() - self.hold_taken_s
            for check_id in [pk for pk, when in self._taken.items() if when < let_go_before]:
                del self._taken[check_id]
                logger.warning("check %s was taken %.0f s ago and never started; no longer stamped, so the "
                               "sweeper can resend it", check_id, self.hold_taken_s)
            return frozenset(self._taken), frozenset(self._running)

    def beat(self) -> None:
        """Stamp every held check once; a database that is away costs this beat only."""
        from django.db import DatabaseError, close_old_connections, connection

        from webapp.checks.services import check_heartbeat

        taken, running = self.held()
        if not taken and not running:
            return
        try:
            close_old_connections()
            check_heartbeat(queued_ids=taken, running_ids=running)
        except DatabaseError as exc:
            logger.warning("heartbeat not written (%s); retrying in the next beat", exc)
        finally:
            # No connection survives between beats: pool children are forked from this process.
            connection.close()

    def start(self, every_s: float, hold_taken_s: float | None = None) -> None:
        """Start the beating thread (once); ``hold_taken_s`` bounds how long a taken, unstarted check is stamped."""
        if self._thread is not None:
            return
        if hold_taken_s is not None:
            self.hold_taken_s = hold_taken_s
        self._stop.clear()
        self._thread = threading.Thread(target=self._run, args=(every_s,), name="phasewright-heartbeat", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        self._wake.set()
        if self._thread is not None:
            self._thread.join(timeout=10)
        self._thread = None

    def _run(self, every_s: float) -> None:
        while True:
            self._wake.wait(every_s)  # every beat, or at once when a message is taken
            self._wake.clear()
            if self._stop.is_set():
                return
            try:
                self.beat()
            except Exception:  # the thread must outlive any one failure, or every check it holds goes stale
                logger.exception("heartbeat failed")


HEARTBEAT = Heartbeat()


def check_id_of(request) -> int | None:
    """Return the check id a run_check request carries (None for any other task)."""
    if request.name != RUN_CHECK or not request.args:
        return None
    return int(request.args[0])


class CheckRequest(Request):
    """A run_check request that tells the heartbeat what it holds and repairs a lost pool child's check."""

    def on_accepted(self, pid, time_accepted):
        check_id = check_id_of(self)
        if check_id is not None:
            HEARTBEAT.start_running(check_id)
        return super().on_accepted(pid, time_accepted)

    def on_success(self, failed__retval__runtime, **kwargs):
        self._release()
        return super().on_success(failed__retval__runtime, **kwargs)

    def on_failure(self, exc_info, send_failed_event=True, return_ok=False):
        self._release()
        exc = getattr(exc_info.exception, "exc", exc_info.exception)
        check_id = check_id_of(self)
        lost = isinstance(exc, WorkerLostError) or (
            isinstance(exc, SystemExit) and not (self._already_cancelled or self._already_revoked))
        if check_id is not None and lost:
            self._release_lost(check_id, exc)
        return super().on_failure(exc_info, send_failed_event=send_failed_event, return_ok=return_ok)

    def on_timeout(self, soft, timeout):
        if not soft:
            self._release()
        return super().on_timeout(soft, timeout)

    def _release_lost(self, check_id: int, exc: BaseException) -> None:
        """Requeue (or fail) the check before Celery requeues the message: its next delivery must find it claimable."""
        from django.db import DatabaseError, connection

        from webapp.checks.services import check_release_lost

        try:
            outcome = check_release_lost(check_id=check_id)
            logger.warning("check %s lost its pool process (%s): %s", check_id, exc, outcome or "already ended")
        except DatabaseError as db_exc:  # the sweeper requeues it once its heartbeat is stale
            logger.warning("check %s lost its pool process; database away (%s)", check_id, db_exc)
        finally:
            connection.close()  # pool children are forked from this process

    def _release(self) -> None:
        check_id = check_id_of(self)
        if check_id is not None:
            HEARTBEAT.release(check_id)


def on_task_received(request) -> None:
    """Hold a check from the moment this worker takes its message (signal task_received, main process)."""
    check_id = check_id_of(request) if request is not None else None
    if check_id is not None:
        HEARTBEAT.take(check_id)
