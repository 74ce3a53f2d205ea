"""Stages: one monotonic progress, and two branches side by side that fail as they would in order."""

from __future__ import annotations

import threading

import pytest

from services.stages import Stages, StageCancelled

SHARES = (("a", 0.2), ("b", 0.3), ("c", 0.1), ("d", 0.4))


def _stage_threads() -> list[threading.Thread]:
    return [t for t in threading.enumerate() if t.name.startswith("phasewright-stage")]


def _order_of(name: str) -> int:
    return [n for n, _ in SHARES].index(name)


def test_two_branches_report_one_progress_that_never_goes_back():
    """Fractions reported from two threads in turn give a rising bar and stage names that only move on."""
    seen: list[tuple[str, float]] = []
    stages = Stages(SHARES, lambda name, fraction: seen.append((name, fraction)))
    turn = [threading.Event() for _ in range(8)]

    def branch(name: str, mine: range, then: str | None = None):
        def run(progress):
            for i in mine:  # a branch moves only on its turn, so the two interleave step by step
                assert turn[i].wait(5)
                progress(0.25 * (i // 2 + 1) if i < 7 else 0.9)
                if i + 1 < len(turn):
                    turn[i + 1].set()
            return name
        return lambda: (stages.run(name, run), stages.run(then, lambda p: then) if then else None)

    turn[0].set()
    first, second = stages.side_by_side(branch("b", range(0, 8, 2), then="c"), branch("a", range(1, 8, 2)),
                                        poll_s=0.001)
    assert first == ("b", "c") and second == ("a", None)
    fractions = [f for _, f in seen]
    assert fractions == sorted(fractions) and fractions[-1] == pytest.approx(0.6)  # a + b + c done
    names = [_order_of(n) for n, _ in seen]
    assert names == sorted(names)
    assert set(stages.timings_s) == {"a", "b", "c"}


def test_an_error_of_the_first_branch_stops_the_second_and_is_raised():
    """The second branch is stopped at its next progress report; no stage thread outlives the call."""
    second_started, ended = threading.Event(), []
    stages = Stages(SHARES, lambda name, fraction: None)

    def first():
        assert second_started.wait(5)
        raise ValueError("rules broke")

    def second_step(progress):
        second_started.set()
        try:
            for _ in range(500):
                threading.Event().wait(0.01)
                progress(0.5)
        except StageCancelled:
            ended.append("cancelled")
            raise
        ended.append("finished")

    with pytest.raises(ValueError, match="rules broke"):
        stages.side_by_side(first, lambda: stages.run("d", second_step), poll_s=0.005)
    assert ended == ["cancelled"]
    assert not _stage_threads()


def test_an_error_of_the_second_branch_waits_for_the_first_as_in_order():
    """In order, the first branch would have finished before the second failed: it still does, then the error."""
    finished = []
    stages = Stages(SHARES, None)

    def first():
        threading.Event().wait(0.2)
        finished.append("first")
        return 1

    def second():
        raise KeyError("optics broke")

    with pytest.raises(KeyError, match="optics broke"):
        stages.side_by_side(first, second, poll_s=0.005)
    assert finished == ["first"]


def test_when_both_branches_fail_the_first_branch_error_wins():
    """Run in order, the first branch's error would have ended the run before the second began."""
    stages = Stages(SHARES, None)
    second_failed = threading.Event()

    def first():
        assert second_failed.wait(5)
        raise ValueError("first")

    def second():
        second_failed.set()
        raise KeyError("second")

    with pytest.raises(ValueError, match="first"):
        stages.side_by_side(first, second, poll_s=0.005)


def test_an_exception_in_the_calling_thread_stops_both_branches():
    """A time limit's signal arrives in the calling thread: both branches stop and none outlives the call."""
    class Limit(Exception):
        pass

    stopped = []

    def progress(name, fraction):
        if fraction > 0.1:  # the calling thread passes progress on; here the "signal" fires
            raise Limit()

    stages = Stages(SHARES, progress)

    def busy(name):
        def step(p):
            try:
                for _ in range(1000):
                    threading.Event().wait(0.01)
                    p(0.5)
            except StageCancelled:
                stopped.append(name)
                raise
        return lambda: stages.run(name, step)

    with pytest.raises(Limit):
        stages.side_by_side(busy("a"), busy("d"), poll_s=0.005)
    assert sorted(stopped) == ["a", "d"]
    assert not _stage_threads()


def test_the_gil_switch_interval_is_short_while_branches_run_and_restored_after():
    """Branches see the shorter interval; the process's own interval is back once the call returns."""
    import sys

    from services.stages import SWITCH_INTERVAL_S

    before = sys.getswitchinterval()
    stages = Stages(SHARES, None)
    seen = stages.side_by_side(sys.getswitchinterval, sys.getswitchinterval)
    assert seen == (pytest.approx(min(before, SWITCH_INTERVAL_S)),) * 2
    assert sys.getswitchinterval() == before


def test_a_stage_thread_that_cannot_start_is_a_memory_error(monkeypatch):
    """Under the address-space bound a new thread's stack may not fit: the check ends as out of memory."""
    real_start, started = threading.Thread.start, []

    def start(thread):
        if thread.name.startswith("phasewright-stage") and started:
            raise RuntimeError("can't start new thread")
        started.append(thread.name)
        return real_start(thread)

    monkeypatch.setattr(threading.Thread, "start", start)
    stages = Stages(SHARES, None)
    with pytest.raises(MemoryError):
        stages.side_by_side(lambda: stages.run("a", lambda p: [(threading.Event().wait(0.01), p(0.5))
                                                               for _ in range(500)]), lambda: 2, poll_s=0.005)
    assert len(started) == 1 and not _stage_threads()


def test_a_failed_branch_frees_its_arrays_without_waiting_for_a_garbage_collection():
    """Out of memory, the failed stage's arrays must go as soon as the error is handled, not at the next gc."""
    import gc
    import weakref

    import numpy as np

    held = []

    def first():
        big = np.ones(1000)
        held.append(weakref.ref(big))
        raise MemoryError("past the bound")

    gc.disable()
    try:
        try:
            Stages(SHARES, None).side_by_side(first, lambda: None, poll_s=0.005)
        except MemoryError:
            pass
        assert held[0]() is None
    finally:
        gc.enable()


def test_a_stage_either_branch_may_run_is_run_once_by_the_branch_that_ends_first():
    """The branch whose own work ends first runs the shared stage; the other goes on without it; it runs once, is
    timed, and its value is there after both end, whichever branch ran it."""
    from services.stages import EitherBranch

    for slow_first in (True, False):
        stages = Stages(SHARES, None)
        ran: list[str] = []
        shared = EitherBranch(stages, "d", lambda p: ran.append(threading.current_thread().name) or "drawn")
        slow_done = threading.Event()

        def slow():
            assert slow_done.wait(5)
            shared.take()
            return "slow"

        fast_thread: list[str] = []

        def fast():
            fast_thread.append(threading.current_thread().name)
            shared.take()  # runs it: the slow branch is still busy
            slow_done.set()
            return "fast"

        branches = (slow, fast) if slow_first else (fast, slow)
        assert stages.side_by_side(*branches) == tuple(b.__name__ for b in branches)
        assert shared.result() == "drawn" and ran == fast_thread and "d" in stages.timings_s

    never = EitherBranch(Stages(SHARES, None), "d", lambda p: None)
    with pytest.raises(RuntimeError):
        never.result()
