"""STL, binary and ASCII: the record layout, declared and stray bytes, and reading the triangles."""

from __future__ import annotations

import re

import numpy as np

from services.errors import UnusableInput
from services.intake.common import IntakeLimits, _check_triangle_count, _refuse


_STL_RECORD = np.dtype([("normal", "<f4", 3), ("v", "<f4", (3, 3)), ("attr", "<u2")])


def _stl_declared(data: bytes) -> int:
    """Return the triangle count a binary STL header declares."""
    return int.from_bytes(data[80:84], "little")


def _stl_stray_bytes(data: bytes) -> int:
    """Return how many bytes (1 to 49) follow a binary STL's declared triangles, else 0.

    Common STL readers ignore a tail shorter than one 50-byte record (some exporters pad the file).
    """
    if len(data) < 84 + 50:
        return 0
    declared = _stl_declared(data)
    stray = len(data) - 84 - 50 * declared
    return stray if declared and 0 < stray < 50 and _looks_like_stl_records(data) else 0


def _looks_like_stl_records(data: bytes) -> bool:
    """Return True when the first records hold the finite, modest floats of a binary STL."""
    n = min(8, (len(data) - 84) // 50)
    records = np.frombuffer(data, _STL_RECORD, count=n, offset=84)
    floats = np.concatenate([records["normal"].reshape(n, -1), records["v"].reshape(n, -1)], axis=1)
    a = np.abs(floats.astype(np.float64))
    # Random bytes read as float32 spread over 1e-38..1e38; real coordinates and normals do not.
    return bool(np.all(np.isfinite(a) & ((a == 0) | ((a > 1e-20) & (a < 1e7)))))


def _stl_count_error(data: bytes, name: str) -> UnusableInput:
    """Return the refusal for a binary STL whose header count disagrees with its size."""
    held, stray = divmod(len(data) - 84, 50)
    extra = f" and {stray} stray bytes" if stray else ""
    return _refuse("stl_count_mismatch", name, f"the header says {_stl_declared(data):,} triangles but the file "
                   f"holds {held:,}{extra}; the file is truncated or not a binary STL.")


def _read_stl_binary(data: bytes, *, name: str, limits: IntakeLimits) -> tuple[np.ndarray, np.ndarray]:
    """Return the triangle soup of a binary STL, read straight into numpy.

    The corners stay float32, as stored: intake merges them on their 32 bits and widens only the merged ones.
    """
    n = _stl_declared(data)
    _check_triangle_count(n, name=name, limits=limits)
    tris = np.ascontiguousarray(np.frombuffer(data, _STL_RECORD, count=n, offset=84)["v"])
    return tris.reshape(-1, 3), np.arange(3 * n, dtype=np.int64).reshape(-1, 3)


def _read_stl_ascii(data: bytes, *, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Return the triangle soup of an ASCII STL, refusing a file that is cut off or malformed."""
    lower = data.lower()
    ends_properly = lower.rstrip().rsplit(b"\n", 1)[-1].strip().startswith(b"endsolid")
    body = re.sub(rb"(?m)^[ \t]*(end)?solid\b[^\n]*$", b" ", lower)  # solid names may hold any text
    done = len(re.findall(rb"\bendfacet\b", body))
    if len(re.findall(rb"\bfacet\b", body)) != done or body.count(b"endloop") != done or not ends_properly:
        raise _refuse("stl_truncated", name, f"the ASCII STL breaks off after {done:,} complete facets "
                      "(a facet or the closing 'endsolid' is missing); export the part again.")
    if done == 0:
        return np.empty((0, 3)), np.empty((0, 3), np.int64)
    numbers = re.sub(rb"\b(facet|normal|outer|loop|vertex|endloop|endfacet)\b", b" ", body)
    try:
        values = np.fromstring(numbers, dtype=np.float64, sep=" ")
    except ValueError as exc:
        raise _refuse("stl_malformed", name, "the ASCII STL holds text where numbers belong; export the "
                      "part again.") from exc
    if values.size != 12 * done:
        raise _refuse("stl_malformed", name, f"the ASCII STL has {done:,} facet{'s' if done != 1 else ''} but "
                      f"{values.size:,} numbers instead of {12 * done:,} (a normal and three corners each); export "
                      "the part again.")
    tris = values.reshape(done, 4, 3)[:, 1:]
    return tris.reshape(-1, 3), np.arange(3 * done, dtype=np.int64).reshape(-1, 3)
