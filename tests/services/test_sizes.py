"""Sizes as people read them: binary units, and a size beside its limit that never reads the same.

Reference: IEC 80000-13 binary prefixes (1 KiB = 1024 bytes, 1 MiB = 1024 KiB, 1 GiB = 1024 MiB;
from memory).
"""

import pytest

from services.sizes import over_limit_text, size_text

MIB = 1024 * 1024


@pytest.mark.parametrize(("n_bytes", "text"), [
    (1, "1 byte"), (1000, "1,000 bytes"), (1536, "1.5 KiB"), (200 * MIB, "200 MiB"), (int(4.7 * MIB), "4.7 MiB"),
    (5 * 1024 * MIB, "5 GiB"), (int(12.34 * MIB), "12.3 MiB"),
])
def test_a_size_reads_in_the_largest_unit_it_fills(n_bytes, text):
    """Three significant digits in KiB, MiB or GiB; bytes below one KiB."""
    assert size_text(n_bytes) == text


@pytest.mark.parametrize(("n_bytes", "text"), [
    (200 * MIB + 1, "209,715,201 bytes is over the 209,715,200-byte limit"),
    (200 * MIB + MIB // 2, "200.5 MiB is over the 200 MiB limit"),
    (250 * MIB, "250 MiB is over the 200 MiB limit"),
    (200 * MIB + 30 * 1024, "200.03 MiB is over the 200 MiB limit"),
])
def test_a_size_over_its_limit_never_reads_as_the_limit(n_bytes, text):
    """'200 MB is over the 200 MB limit' cannot happen: as many decimals as it takes, else bytes."""
    assert over_limit_text(n_bytes, 200 * MIB) == text
