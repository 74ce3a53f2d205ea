"""Freed heap handed back to the system between a check's stages (services.limits.release_free_heap)."""

import platform
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.skipif(platform.libc_ver()[0] != "glibc", reason="malloc_trim is glibc's")
def test_freed_heap_goes_back_to_the_system():
    """glibc keeps freed arrays under its mmap threshold (which rises to 32 MiB once a mapped block is freed, per
    its mallopt(3) manual page) for later allocations: 40 freed 8 MB arrays stay resident until trimmed. Run in a
    fresh interpreter, so that the test's own heap does not blur the measure."""
    code = textwrap.dedent('''
        import sys
        import numpy as np
        sys.path.insert(0, sys.argv[1])
        from services.limits import release_free_heap
        def rss_mb():
            return int(next(l for l in open("/proc/self/status") if l.startswith("VmRSS")).split()[1]) / 1024
        big = np.ones(2 ** 21)
        del big  # a mapped 16 MB block freed: later 8 MB arrays come from the heap
        blocks = [np.ones(2 ** 20) for _ in range(40)]
        keep = blocks[-1]  # the last one holds the heap's top: only a trim frees the pages under it
        del blocks
        before = rss_mb()
        release_free_heap()
        print(before, rss_mb())
    ''')
    out = subprocess.run([sys.executable, "-c", code, str(ROOT)], capture_output=True, text=True, check=True)
    before, after = map(float, out.stdout.split())
    assert before - after > 250  # of the 312 MB freed


@pytest.mark.skipif(platform.libc_ver()[0] != "glibc", reason="malloc_trim and mallinfo2 are glibc's")
def test_a_heap_holding_less_free_than_asked_is_left_as_it_is():
    """The rules trim after a run only when the heap holds at least TRIM_FREE_BYTES free (a trim's price is the
    page faults of the next allocations). 312 MB freed: a floor of 1 GiB keeps it resident, 256 MiB releases it;
    the free bytes are glibc's own count (mallinfo2(3)), read by the same call."""
    code = textwrap.dedent('''
        import sys
        import numpy as np
        sys.path.insert(0, sys.argv[1])
        from services.limits import release_free_heap
        def rss_mb():
            return int(next(l for l in open("/proc/self/status") if l.startswith("VmRSS")).split()[1]) / 1024
        big = np.ones(2 ** 21)
        del big
        blocks = [np.ones(2 ** 20) for _ in range(40)]
        keep = blocks[-1]
        del blocks
        before = rss_mb()
        release_free_heap(at_least_bytes=1 << 30)
        kept = rss_mb()
        release_free_heap(at_least_bytes=256 << 20)
        print(before, kept, rss_mb())
    ''')
    out = subprocess.run([sys.executable, "-c", code, str(ROOT)], capture_output=True, text=True, check=True)
    before, kept, after = map(float, out.stdout.split())
    assert before - kept < 20  # nothing handed back: 312 MB free is under the 1 GiB floor
    assert kept - after > 250  # over the 256 MiB floor: handed back
