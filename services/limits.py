"""Memory and time bounds on one check, shared by the worker and the CLI, and the sentences that name them.

Memory: RLIMIT_AS raised above what the process already maps, so an allocation past the headroom
raises MemoryError instead of swapping the machine. Time: SIGALRM raises TimeLimitReached in the
main thread (the CLI); the worker uses Celery's soft time limit, which this module also recognises.
"""

from __future__ import annotations

import ctypes
import functools
import resource
import signal
import threading
from contextlib import contextmanager

DEFAULT_MEMORY_MIB = 4096
DEFAULT_TIME_LIMIT_S = 600


def release_free_heap(at_least_bytes: int = 0) -> None:
    """Hand the heap's free pages back to the system (glibc's ``malloc_trim``; nothing where there is none),
    when it holds at least ``at_least_bytes`` free (glibc's ``mallinfo2``; where that is missing, always).

    A check allocates and frees frame-sized arrays run after run, in two threads; glibc keeps what was freed for
    the next allocation, so the resident size grows past what is in use (on the 100 mm lens at 25 um: 121 MB
    in use, 925 MB resident when the rules and optics had ended). The trim itself takes about 3 ms;
    its price comes later, as page faults when the pages are allocated again: trimmed after every run, the 2M
    lens's rules took 8.5-9.6 s instead of 5.9-6.2 s (measured here), hence the floor on what is worth handing
    back.
    """
    trim = _malloc_trim()
    if trim is None:
        return
    if at_least_bytes > 0:
        info = _mallinfo2()
        if info is not None and info().fordblks < at_least_bytes:
            return
    trim(0)


class _MallInfo2(ctypes.Structure):
    """glibc's ``struct mallinfo2`` (malloc.h, glibc 2.33 and later): byte counts of the whole heap."""

    _fields_ = [(name, ctypes.c_size_t) for name in ("arena", "ordblks", "smblks", "hblks", "hblkhd", "usmblks",
                                                     "fsmblks", "uordblks", "fordblks", "keepcost")]


@functools.cache
def _malloc_trim():
    try:
        return ctypes.CDLL(None).malloc_trim  # the process's own symbols: glibc's, where it is the C library
    except (OSError, AttributeError):
        return None


@functools.cache
def _mallinfo2():
    try:
        info = ctypes.CDLL(None).mallinfo2
    except (OSError, AttributeError):
        return None
    info.restype = _MallInfo2
    return info


class TimeLimitReached(Exception):
    """Raised in the main thread when a check runs past its time limit."""


def _time_limit_errors() -> tuple[type[BaseException], ...]:
    """Return the exception types that mean "the time limit was reached" (Celery's when installed)."""
    try:
        from celery.exceptions import SoftTimeLimitExceeded
    except ImportError:  # the CLI runs without Celery
        return (TimeLimitReached,)
    return (TimeLimitReached, SoftTimeLimitExceeded)


def is_limit(exc: BaseException) -> bool:
    """Return True when an exception is a memory or time limit, not a fault of the input."""
    return isinstance(exc, (MemoryError, *_time_limit_errors()))


def reraise_limits(exc: BaseException) -> None:
    """Re-raise a limit caught by a broad handler, so it is not reported as a broken file."""
    if is_limit(exc):
        raise exc


def address_space_bytes() -> int:
    """Return this process's mapped address space (VmSize), the quantity RLIMIT_AS bounds."""
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmSize:"):
                return int(line.split()[1]) * 1024
    raise OSError("no VmSize in /proc/self/status")


@contextmanager
def memory_limit(headroom_mib: int):
    """Cap the address space for the body (see cap_memory) and restore the previous cap after it."""
    previous = resource.getrlimit(resource.RLIMIT_AS)
    cap_memory(headroom_mib)
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, previous)


def cap_memory(headroom_mib: int) -> int | None:
    """Cap the address space at what the process maps now plus the headroom; return the cap in bytes.

    0 or less leaves memory unbounded. The hard limit is kept, so the cap can be changed again.
    """
    if headroom_mib <= 0:
        return None
    limit = address_space_bytes() + headroom_mib * 2**20
    _, hard = resource.getrlimit(resource.RLIMIT_AS)
    limit = limit if hard == resource.RLIM_INFINITY else min(limit, hard)
    resource.setrlimit(resource.RLIMIT_AS, (limit, hard))
    return limit


def _on_alarm(signum, frame) -> None:
    raise TimeLimitReached()


@contextmanager
def time_limit(seconds: int):
    """Raise TimeLimitReached in the main thread if the body runs longer than ``seconds`` (0: no limit)."""
    if seconds <= 0 or threading.current_thread() is not threading.main_thread():
        yield  # signals reach only the main thread; a caller in another thread brings its own bound
        return
    previous = signal.signal(signal.SIGALRM, _on_alarm)
    signal.alarm(int(seconds))
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


_RAISE_HINT = "whoever runs the checks can raise the limit"


def memory_limit_sentence(headroom_mib: int, *, name: str | None = None, raise_hint: str = _RAISE_HINT) -> str:
    """Return the sentence for a check that reached its memory limit, naming the limit."""
    who = f"{name}: the check" if name else "The check"
    return (f"{who} reached its memory limit ({headroom_mib:,} MiB); the part may be too large or too detailed "
            f"for this printer's grid, or {raise_hint}.")


def time_limit_sentence(limit_s: int, *, name: str | None = None, raise_hint: str = _RAISE_HINT) -> str:
    """Return the sentence for a check that reached its time limit, naming the limit."""
    who = f"{name}: the check" if name else "The check"
    return (f"{who} reached its time limit ({limit_s:,} s); the part may be too large or too detailed for this "
            f"printer's grid, or {raise_hint}.")
