"""OBJ and PLY: vetted before trimesh reads them (vertex index 0, truncated or odd-format PLY)."""

from __future__ import annotations

import io
import re

import numpy as np
import trimesh

from services.intake.common import _FORMAT_NAMES, _PLURALS, _SNIFF_BYTES, _refuse
from services.limits import reraise_limits


_OBJ_KEYWORDS = frozenset("v vt vn vp f l p g o s mg mtllib usemtl".split())


# A face token whose vertex number is 0 ("0", "0/1", "0//1"): OBJ counts from 1, negatives from the end.
_OBJ_ZERO_INDEX = re.compile(rb"(?m)^[ \t]*f[ \t][^\n]*?(?<=[ \t])0(?=[/ \t\r\n]|$)")


def _vetted_obj(data: bytes, *, name: str) -> bytes:
    """Return the OBJ with tabs read as spaces (both separate fields); refuse a face naming vertex 0."""
    if b"\t" in data:
        data = data.replace(b"\t", b" ")
    if _OBJ_ZERO_INDEX.search(data):
        raise _refuse("obj_zero_index", name, "an OBJ face refers to vertex 0, but OBJ numbers vertices from 1 "
                      "(the file was written counting from 0); export the part again.")
    return data


def _vet_ply(data: bytes, *, name: str) -> None:
    """Refuse a PLY in a format other than the three the PLY specification defines, or with rows missing."""
    end = data.find(b"end_header", 0, _SNIFF_BYTES)
    header = data[:end if end >= 0 else _SNIFF_BYTES].decode("latin-1")
    fmt = re.search(r"^format\s+(\S+)", header, re.M)
    if fmt is None or fmt.group(1) not in ("ascii", "binary_little_endian", "binary_big_endian"):
        shown = fmt.group(1)[:40] if fmt else "none"
        raise _refuse("ply_format", name, f"the PLY format '{shown}' is not ascii, binary_little_endian or "
                      "binary_big_endian, the three the PLY specification defines; export the part again.")
    if fmt.group(1) != "ascii" or end < 0:
        return
    declared = {m.group(1): int(m.group(2)) for m in re.finditer(r"^element\s+(\S+)\s+(\d+)", header, re.M)}
    body = data[end:].split(b"\n", 1)[-1]
    # One row per element: count the lines (C speed), less the blank ones.
    blank = len(re.findall(rb"(?m)^[ \t\r]*\n", body))
    rows = body.count(b"\n") + (not body.endswith(b"\n")) - blank
    if rows < sum(declared.values()):
        counts = " and ".join(f"{n:,} {kind if n == 1 else _PLURALS.get(kind, kind + 's')}"
                              for kind, n in declared.items())
        raise _refuse("ply_truncated", name, f"the ASCII PLY header declares {counts} ({sum(declared.values()):,} "
                      f"rows) but the file holds {rows:,} rows; the file is cut off, so export the part again.")


def _load_with_trimesh(data: bytes, fmt: str, *, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Return the raw vertices and faces trimesh parses (process=False: nothing merged or dropped)."""
    try:
        mesh = trimesh.load(io.BytesIO(data), file_type=fmt, process=False, force="mesh")
        vertices = np.asarray(mesh.vertices, dtype=np.float64).reshape(-1, 3)
        faces = np.asarray(mesh.faces, dtype=np.int64).reshape(-1, 3)
    except Exception as exc:  # any parser failure is a broken file; the cause stays chained for the log
        reraise_limits(exc)
        raise _refuse("unreadable", name, f"the {_FORMAT_NAMES[fmt]} data could not be read; export the part "
                      "again from your CAD program.") from exc
    return vertices, faces
