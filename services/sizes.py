"""Byte sizes as people read them, and a size beside its limit with enough digits to tell them apart."""

from __future__ import annotations

# Binary units, as file managers and the upload limits (powers of two) count them.
UNITS = (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10))


def _unit_of(n_bytes: int) -> tuple[str, int]:
    return next(((name, size) for name, size in UNITS if n_bytes >= size), ("bytes", 1))


def size_text(n_bytes: int) -> str:
    """Return a size in the largest binary unit it fills, to three significant digits: '4.7 MiB', '200 MiB'."""
    name, size = _unit_of(n_bytes)
    if size == 1:
        return f"{n_bytes:,} byte{'s' if n_bytes != 1 else ''}"
    value = n_bytes / size
    text = f"{value:,.{0 if value >= 100 else 1 if value >= 10 else 2}f}"
    return (text.rstrip("0").rstrip(".") if "." in text else text) + f" {name}"


def over_limit_text(n_bytes: int, limit_bytes: int) -> str:
    """Return '200.4 MiB is over the 200 MiB limit', never two sizes that read the same.

    Both are written in the limit's unit, with as many decimals as it takes for the size to read
    larger than the limit; when even that fails, in bytes.
    """
    name, size = _unit_of(limit_bytes)
    limit = size_text(limit_bytes) if limit_bytes % size == 0 or size == 1 else None
    for decimals in range(0, 4):
        written = round(n_bytes / size, decimals)
        limit_written = limit or f"{limit_bytes / size:,.{decimals}f} {name}"
        if size > 1 and written > round(limit_bytes / size, decimals):
            return f"{written:,.{decimals}f} {name} is over the {limit_written} limit"
    return f"{n_bytes:,} bytes is over the {limit_bytes:,}-byte limit"
