"""Read an uploaded mesh, refuse what cannot be checked, and report the mesh's health and units.

The public surface is ``read_part``, ``part_from_arrays``, ``sniff_format``, ``IntakeLimits`` and ``UNITS``; the
formats (``stl``, ``threemf`` with its ZIP gate, ``objply``), ``units`` and mesh ``health`` are modules of their own.

Every file is sniffed from its bytes, read raw (no silent repair), bounded by ``IntakeLimits``,
converted to millimetres once, and then examined: open edges, winding, degenerate faces, bodies,
inside-out shells and what the geometry kernel (manifold3d) says about the solid. Refusals are
``UnusableInput`` with one sentence that names the file."""

from __future__ import annotations

import hashlib
import re

import numpy as np

from services.findings import Finding
from services.intake.common import IntakeLimits, _SNIFF_BYTES, _check_triangle_count, _checked_arrays, _count, _refuse
from services.intake.health import _mesh_health
from services.intake.objply import _OBJ_KEYWORDS, _load_with_trimesh, _vet_ply, _vetted_obj
from services.intake.stl import (_looks_like_stl_records, _read_stl_ascii, _read_stl_binary, _stl_count_error,
                                 _stl_declared, _stl_stray_bytes)
from services.intake.threemf import _ZIP_MAGIC, _check_3mf, _read_3mf_model
from services.intake.units import UNITS, _check_extent, _largest_extent_mm, _resolve_unit, _units_finding
from services.part import Part
from services.sizes import over_limit_text

__all__ = ["UNITS", "IntakeLimits", "part_from_arrays", "read_part", "sniff_format"]


def sniff_format(data: bytes, *, name: str = "the upload") -> str:
    """Return the mesh format the bytes hold ("stl_binary", "stl_ascii", "3mf", "obj", "ply")."""
    if not data:
        raise _refuse("empty_file", name, "the file is empty; export the part again and upload the new file.")
    if data[:4] in _ZIP_MAGIC:
        return "3mf"
    if len(data) >= 84 and len(data) == 84 + 50 * _stl_declared(data):
        return "stl_binary"
    if _stl_stray_bytes(data):
        return "stl_binary"
    text_format = _sniff_text(data[:_SNIFF_BYTES], complete=len(data) <= _SNIFF_BYTES)
    if text_format:
        return text_format
    if len(data) >= 84 + 50 and _looks_like_stl_records(data):
        raise _stl_count_error(data, name)
    raise _refuse("unknown_format", name, "the file is not a binary or ASCII STL, 3MF, OBJ or PLY mesh; "
                  "export the part in one of these formats.")


def read_part(data: bytes, *, name: str, units: str | None = None, limits: IntakeLimits = IntakeLimits()) -> Part:
    """Read, validate and convert an uploaded mesh to a Part in millimetres."""
    if units is not None and units not in UNITS:
        raise _refuse("unknown_unit", name, f"the unit {units!r} is not one we know; choose one of "
                      f"{', '.join(UNITS)}.")
    if len(data) > limits.max_bytes:
        raise _refuse("too_large", name, f"{over_limit_text(len(data), limits.max_bytes)}; "
                      "simplify the mesh or export it as binary STL.")
    fmt = sniff_format(data, name=name)
    vertices, faces, file_unit = _read_raw(data, fmt, name=name, limits=limits)
    unit, scale, unit_findings = _resolve_unit(file_unit, units, name=name)
    stray = _stl_stray_bytes(data) if fmt == "stl_binary" else 0
    if stray:
        unit_findings.append(Finding("mesh_health", "note", f"{name}: {_count(stray, 'stray byte')} ignored after "
                                     f"the last of its {len(faces):,} triangles (less than one 50-byte triangle)."))
    vertices, faces = _checked_arrays(vertices, faces, name=name, limits=limits)
    extent = _largest_extent_mm(vertices, scale=scale)
    _check_extent(extent, name=name, limits=limits, unit=unit, scale=scale)
    plausibility = _units_finding(extent, name=name, unit=unit, scale=scale, from_file=file_unit is not None)
    if plausibility is not None:
        unit_findings.append(plausibility)
    # The raw corners go to the health examination unscaled: it merges them first and scales only the merged ones.
    return _assemble(vertices, faces, name=name, sha256=hashlib.sha256(data).hexdigest(),
                     source_format=fmt, units=unit, findings=unit_findings, scale=scale)


def part_from_arrays(vertices_mm, faces, *, name: str, source_format: str = "generated",
                     parameters: dict | None = None) -> Part:
    """Return a checked Part from vertex (n, 3) mm and face (m, 3) arrays, as a generator makes them."""
    vertices = np.ascontiguousarray(vertices_mm, dtype=np.float64).reshape(-1, 3)
    faces = np.ascontiguousarray(faces, dtype=np.int64).reshape(-1, 3)
    sha256 = hashlib.sha256(vertices.tobytes() + faces.tobytes()).hexdigest()
    limits = IntakeLimits()
    vertices, faces = _checked_arrays(vertices, faces, name=name, limits=limits)
    _check_extent(_largest_extent_mm(vertices), name=name, limits=limits, unit="mm", scale=1.0)
    return _assemble(vertices, faces, name=name, sha256=sha256, source_format=source_format, units="mm",
                     findings=[], parameters=parameters)


def _sniff_text(head: bytes, *, complete: bool) -> str | None:
    """Return "stl_ascii", "ply" or "obj" when the head is text in one of those formats (PLY: its header)."""
    if re.match(rb"ply\r?\nformat ", head):
        return "ply"
    if b"\x00" in head:
        return None
    text = head.removeprefix(b"\xef\xbb\xbf").decode("latin-1")
    if text.lstrip().lower().startswith("solid"):
        return "stl_ascii"
    lines = text.splitlines()
    if not complete:
        lines = lines[:-1]  # the sniffed head may cut its last line in half
    tokens = [ln.split(None, 1)[0] for ln in lines if ln.strip() and not ln.lstrip().startswith("#")]
    if tokens and "v" in tokens and all(t in _OBJ_KEYWORDS for t in tokens):
        return "obj"
    return None


def _read_raw(data: bytes, fmt: str, *, name: str, limits: IntakeLimits) -> tuple[np.ndarray, np.ndarray, str | None]:
    """Return raw vertices, faces and the file's own unit (3MF only) without any repair."""
    if fmt == "stl_binary":
        return (*_read_stl_binary(data, name=name, limits=limits), None)
    if fmt == "stl_ascii":
        return (*_read_stl_ascii(data, name=name), None)
    if fmt == "3mf":
        file_unit = _check_3mf(data, name=name, limits=limits)
        return (*_read_3mf_model(data, name=name, limits=limits), file_unit)
    if fmt == "obj":
        data = _vetted_obj(data, name=name)
    else:
        _vet_ply(data, name=name)
    _precheck_face_count(data, fmt, name=name, limits=limits)
    return (*_load_with_trimesh(data, fmt, name=name), None)


def _precheck_face_count(data: bytes, fmt: str, *, name: str, limits: IntakeLimits) -> None:
    """Refuse an OBJ or PLY whose face count is over the limit before parsing allocates for it."""
    if fmt == "ply":
        header = data[: data.find(b"end_header")]
        match = re.search(rb"element\s+face\s+(\d+)", header)
        count = int(match.group(1)) if match else 0
    else:
        count = data.count(b"\nf ") + data.startswith(b"f ")  # tabs are spaces by now (_vetted_obj)
    _check_triangle_count(count, name=name, limits=limits)


def _assemble(vertices: np.ndarray, faces: np.ndarray, *, name: str, sha256: str, source_format: str,
              units: str, findings: list[Finding], parameters: dict | None = None, scale: float = 1.0) -> Part:
    """Return the Part (in mm) after the health examination of vertices in a unit of ``scale`` mm."""
    health = _mesh_health(vertices, faces, name=name, scale=scale)
    return Part(name=name, sha256=sha256, source_format=source_format, units=units,
                vertices_mm=health.vertices_mm, faces=health.faces, bodies=health.bodies,
                watertight=health.watertight, findings=health.findings + tuple(findings),
                parameters=parameters, volume_mm3=health.volume_mm3)
