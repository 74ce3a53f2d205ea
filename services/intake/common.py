"""What every intake step shares: the limits, the refusal with the file's name, and the array checks."""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput


@dataclass(frozen=True, slots=True)
class IntakeLimits:
    """Upper bounds on what intake will read; the web app fills them from its settings."""

    max_bytes: int = 200 * 2**20
    max_triangles: int = 5_000_000
    max_extent_mm: float = 2000.0
    zip_max_members: int = 200
    zip_max_member_bytes: int = 512 * 2**20
    zip_max_total_bytes: int = 1024 * 2**20
    zip_max_ratio: float = 100.0
    max_3mf_components: int = 100_000
    max_3mf_depth: int = 16
    max_3mf_instances: int = 1_000_000


_FORMAT_NAMES = {"stl_binary": "binary STL", "stl_ascii": "ASCII STL", "3mf": "3MF", "obj": "OBJ", "ply": "PLY"}


_PLURALS = {"vertex": "vertices"}


_SNIFF_BYTES = 65536


def _refuse(code: str, name: str, text: str) -> UnusableInput:
    """Return the refusal for a file, its sentence prefixed with the file's name."""
    return UnusableInput(code, f"{name}: {text}")


def _num(x: float) -> str:
    """Format a length or volume for a sentence: four significant digits, thousands separators up to a million."""
    if abs(x) >= 1e7:
        return f"{x:.3g}"  # 1e+30, not thirty-one digits of float noise
    return f"{x:,.0f}" if abs(x) >= 1000 else f"{x:.4g}"


def _count(n: int, noun: str) -> str:
    """Return "1 face was" or "3 faces were"."""
    return f"1 {noun} was" if n == 1 else f"{n:,} {noun}s were"


def _shown(member: str) -> str:
    """Return an archive member name safe to quote in a message."""
    clean = "".join(c if c.isprintable() else "?" for c in member)
    return clean if len(clean) <= 80 else clean[:77] + "..."


def _check_triangle_count(count: int, *, name: str, limits: IntakeLimits) -> None:
    """Refuse a mesh with more triangles than the limit."""
    if count > limits.max_triangles:
        raise _refuse("too_many_triangles", name, f"the mesh has {count:,} triangles, more than the "
                      f"{limits.max_triangles:,} allowed; export it with a coarser tessellation.")


def _checked_arrays(vertices: np.ndarray, faces: np.ndarray, *, name: str,
                    limits: IntakeLimits) -> tuple[np.ndarray, np.ndarray]:
    """Return the vertices the faces use and re-indexed faces, refusing empty, huge or broken meshes."""
    if len(faces) == 0:
        raise _refuse("no_triangles", name, "the file holds no triangles; export the part as a surface mesh.")
    _check_triangle_count(len(faces), name=name, limits=limits)
    if faces.min() < 0 or faces.max() >= len(vertices):
        raise _refuse("bad_faces", name, "some faces refer to vertices the file does not hold; export the "
                      "part again.")
    vertices, faces = _compact(vertices, faces)
    if not np.isfinite(vertices).all():
        bad = ~np.isfinite(vertices).all(axis=1)
        have = "vertex has" if bad.sum() == 1 else "vertices have"
        raise _refuse("non_finite", name, f"{int(bad.sum()):,} {have} NaN or infinite coordinates; "
                      "repair the mesh in your CAD program and export it again.")
    return vertices, faces


def _compact(vertices: np.ndarray, faces: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return only the vertices the faces use, and the faces re-indexed to them."""
    used = np.zeros(len(vertices), bool)
    used[faces.ravel()] = True
    if used.all():
        return vertices, faces
    new_index = np.cumsum(used) - 1
    return vertices[used], new_index[faces]
