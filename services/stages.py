"""The pipeline's stages: one overall progress, each stage's time, and two branches of stages run side by side.

Rules (with the estimate that needs their support volume) and optics only read the layer stack and the
part, so they can run at once in two threads: numpy, SciPy and OpenCV release the GIL in their loops.
Progress stays in the calling thread: the branches record their fractions, and the caller hands one
overall fraction, which never goes back, to ``progress`` (a Django progress writer keeps its database
connection in the thread that made it). Errors come out as they would have in order: the first
branch's error wins, and a failing first branch stops the second at its next progress report.
"""

from __future__ import annotations

import sys
import threading
import time
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ThreadPoolExecutor, wait

Progress = Callable[[str, float], None]
POLL_S = 0.1  # how often the calling thread passes the branches' progress on while it waits for them
# While two branches run, a thread back from a short OpenCV or numpy call waits for the GIL until the other
# thread's switch interval ends (5 ms by default); the rules make thousands of such calls, so a shorter interval
# keeps them from queueing behind optics' Python code (benchmarks/README.md, "Whole check").
SWITCH_INTERVAL_S = 0.001


class StageCancelled(Exception):
    """Raised in a branch's progress report once the side-by-side run is abandoned (the other branch failed)."""


class Stages:
    """Turn per-stage fractions into one overall progress call, and time each stage.

    ``shares`` is ((stage, share of the bar), ...) in run order. The overall fraction is the sum of
    each stage's share times the furthest fraction it reported; the stage named is the earliest one
    started and not finished, so with two branches at once the name and the bar both only move on.
    """

    def __init__(self, shares: Sequence[tuple[str, float]], progress: Progress | None) -> None:
        self.progress = progress
        self.timings_s: dict[str, float] = {}
        self._order = [name for name, _ in shares]
        self._share = dict(shares)
        self._done: dict[str, float] = {}  # stage -> furthest fraction reported (started stages only)
        self._finished: set[str] = set()
        self._sent: tuple[str, float] | None = None
        self._lock = threading.Lock()
        self._owner = threading.current_thread()
        self.cancel = threading.Event()

    def run(self, name: str, step: Callable[[Callable[[float], None]], object]):
        """Run ``step(progress)`` as stage ``name`` and time it."""
        t0 = time.perf_counter()
        self.report(name, 0.0)
        result = step(lambda fraction: self.report(name, fraction))
        with self._lock:
            self.timings_s[name] = round(time.perf_counter() - t0, 3)
        self.report(name, 1.0)
        with self._lock:
            self._finished.add(name)
        self.flush()
        return result

    def report(self, name: str, fraction: float) -> None:
        """Record a stage's fraction; pass it on now when called from the owning thread."""
        if self.cancel.is_set() and threading.current_thread() is not self._owner:
            raise StageCancelled(name)
        with self._lock:
            self._done[name] = max(self._done.get(name, 0.0), max(0.0, min(1.0, fraction)))
        self.flush()

    def flush(self) -> None:
        """Hand the overall progress to ``progress`` if it moved (owning thread only; elsewhere it waits for it)."""
        if self.progress is None or threading.current_thread() is not self._owner:
            return
        with self._lock:
            running = [n for n in self._order if n in self._done and n not in self._finished]
            name = running[0] if running else max(self._done, key=self._order.index, default=self._order[0])
            overall = min(1.0, sum(self._share[n] * f for n, f in self._done.items()))
            if self._sent is not None:  # a branch that starts a moment late must not pull the name back
                name = max(name, self._sent[0], key=self._order.index)
                overall = max(overall, self._sent[1])
            if self._sent == (name, overall):
                return
            self._sent = (name, overall)
        self.progress(name, overall)

    def side_by_side(self, first: Callable[[], object], second: Callable[[], object], *, poll_s: float = POLL_S):
        """Return (first(), second()) run in two threads, raising what running them in order would raise.

        An error of ``first`` stops ``second`` (at its next progress report) and is raised; an error of
        ``second`` is raised once ``first`` has finished cleanly. An exception in the calling thread
        (a time limit's signal) stops both and is raised once both threads have ended: none outlives the call.
        """
        futures = self._run_both(first, second, poll_s)
        self.flush()
        try:
            return futures[0].result(), futures[1].result()
        finally:
            # A raised error's traceback holds this frame, whose futures hold the error: without breaking the
            # cycle, the failed stage's arrays outlive the check until a garbage collection (out of memory most of all).
            futures = None

    def _run_both(self, first: Callable[[], object], second: Callable[[], object], poll_s: float) -> tuple[Future, Future]:
        """Return both branches' futures once both threads have ended, under the shorter GIL switch interval."""
        interval = sys.getswitchinterval()
        sys.setswitchinterval(min(interval, SWITCH_INTERVAL_S))
        try:
            with ThreadPoolExecutor(max_workers=2, thread_name_prefix="phasewright-stage") as pool:
                futures: tuple = ()
                try:
                    futures = (_started(pool, first), _started(pool, second))
                    self._wait_for(futures, poll_s)
                except BaseException:
                    self.cancel.set()
                    futures = ()  # the error's traceback keeps this frame; it need not keep the stages' arrays
                    raise  # leaving the block joins both threads
        finally:
            sys.setswitchinterval(interval)
        return futures

    def _wait_for(self, futures: tuple[Future, Future], poll_s: float) -> None:
        pending = set(futures)
        while pending:
            _, pending = wait(pending, timeout=poll_s, return_when=FIRST_COMPLETED)
            self.flush()
            if futures[0].done() and futures[0].exception() is not None:
                self.cancel.set()


class EitherBranch:
    """A stage either of two side-by-side branches may run: the first to call ``take`` when its own work is done
    runs it, the other goes on at once. The shorter branch then carries it (a plate's rules end seconds before its
    optics; a lens's optics before its rules), and the outcome is the same whichever runs it."""

    def __init__(self, stages: Stages, name: str, step: Callable[[Callable[[float], None]], object]) -> None:
        self._stages, self._name, self._step = stages, name, step
        self._lock = threading.Lock()
        self._taken = False
        self._value: object = None

    def take(self) -> None:
        """Run the stage here unless the other branch has taken it."""
        with self._lock:
            if self._taken:
                return
            self._taken = True
        self._value = self._stages.run(self._name, self._step)

    def result(self) -> object:
        """Return the stage's value once both branches have ended (one of them ran it)."""
        if not self._taken:
            raise RuntimeError(f"stage {self._name!r} was never taken by either branch")
        return self._value


def _started(pool: ThreadPoolExecutor, branch: Callable[[], object]) -> Future:
    """Submit a branch; a thread that cannot start (its stack is past the memory bound) is a MemoryError."""
    try:
        return pool.submit(branch)
    except RuntimeError as exc:
        if "start new thread" not in str(exc):
            raise
        raise MemoryError("no address space left to start a stage thread") from exc


def prepare_threads() -> None:
    """Run two stage threads once, so their stacks and malloc arenas are mapped before a memory bound is set.

    glibc keeps both once the threads end and hands them to the next threads, so a check run under the
    bound (RLIMIT_AS) is not charged for them: 144 MiB of address space, 80 MiB under MALLOC_ARENA_MAX=2.
    """
    both = threading.Barrier(2)

    def touch():
        both.wait(timeout=10)  # two threads alive at once: each gets its own stack and arena
        return len(bytearray(1 << 16))  # past Python's small-object pools, so malloc picks the thread's arena

    Stages((("threads", 1.0),), None).side_by_side(touch, touch)
