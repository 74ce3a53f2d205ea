"""Read an uploaded mesh, refuse what cannot be checked, and report the mesh's health and units.

Every file is sniffed from its bytes, read raw (no silent repair), bounded by ``IntakeLimits``,
converted to millimetres once, and then examined: open edges, winding, degenerate faces, bodies,
inside-out shells and what the geometry kernel (manifold3d) says about the solid. Refusals are
``UnusableInput`` with one sentence that names the file.
"""

from __future__ import annotations

import hashlib
import io
import re
import zipfile
import zlib
from dataclasses import dataclass

import manifold3d as m3d
import numpy as np
import trimesh
from lxml import etree
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order, connected_components

from services.errors import UnusableInput
from services.findings import Finding
from services.part import Part


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


UNITS = {"mm": 1.0, "um": 1e-3, "m": 1e3, "inch": 25.4, "cm": 10.0}

# The values of <model unit="..."> in the 3MF core specification, with our label and size in mm.
_3MF_UNITS = {
    "micron": ("um", 1e-3), "millimeter": ("mm", 1.0), "centimeter": ("cm", 10.0),
    "inch": ("inch", 25.4), "foot": ("ft", 304.8), "meter": ("m", 1000.0),
}
# A lens, phase plate or matching layer for mm-wave to THz beams spans about 1 mm to 1 m (common practice).
PLAUSIBLE_EXTENT_MM = (1.0, 1000.0)

_FORMAT_NAMES = {"stl_binary": "binary STL", "stl_ascii": "ASCII STL", "3mf": "3MF", "obj": "OBJ", "ply": "PLY"}
_STL_RECORD = np.dtype([("normal", "<f4", 3), ("v", "<f4", (3, 3)), ("attr", "<u2")])
_OBJ_KEYWORDS = frozenset("v vt vn vp f l p g o s mg mtllib usemtl".split())
_SNIFF_BYTES = 65536
_ZIP_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")
_ARCHIVE_SUFFIXES = (".zip", ".3mf", ".gz", ".tgz", ".bz2", ".xz", ".7z", ".rar", ".tar", ".zst", ".jar")
_ARCHIVE_MAGIC = (b"PK\x03\x04", b"PK\x05\x06", b"\x1f\x8b", b"7z\xbc\xaf", b"Rar!", b"BZh", b"\xfd7zXZ",
                  b"\x28\xb5\x2f\xfd")
_MODEL = "3d/3dmodel.model"
_CONTENT_TYPES = "[content_types].xml"
# The same lxml options trimesh uses for 3MF: no entities, no DTD, no network, no huge trees.
_XML_OPTIONS = {"resolve_entities": False, "no_network": True, "load_dtd": False, "huge_tree": False}
# Checking overlaps means a boolean union of every body; beyond this many it is skipped and said so.
_OVERLAP_MAX_BODIES = 256
# Faces with area below this fraction of the part's largest extent squared count as zero-area.
_DEGENERATE_REL_AREA = 1e-12


# ---------------------------------------------------------------------------------------------- public


def sniff_format(data: bytes, *, name: str = "the upload") -> str:
    """Return the mesh format the bytes hold ("stl_binary", "stl_ascii", "3mf", "obj", "ply")."""
    if not data:
        raise _refuse("empty_file", name, "the file is empty; export the part again and upload the new file.")
    if data[:4] in _ZIP_MAGIC:
        return "3mf"
    if len(data) >= 84 and len(data) == 84 + 50 * _stl_declared(data):
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
        raise _refuse("too_large", name, f"the file is {len(data) / 2**20:,.1f} MiB, over the "
                      f"{limits.max_bytes / 2**20:,.0f} MiB limit; simplify the mesh or export it as binary STL.")
    fmt = sniff_format(data, name=name)
    vertices, faces, file_unit = _read_raw(data, fmt, name=name, limits=limits)
    unit, scale, unit_findings = _resolve_unit(file_unit, units, name=name)
    vertices, faces = _checked_arrays(vertices, faces, name=name, limits=limits)
    vertices_mm = vertices * scale
    _check_extent(vertices_mm, name=name, limits=limits, unit=unit, scale=scale)
    plausibility = _units_finding(vertices_mm, name=name, unit=unit, scale=scale, from_file=file_unit is not None)
    if plausibility is not None:
        unit_findings.append(plausibility)
    return _assemble(vertices_mm, faces, name=name, sha256=hashlib.sha256(data).hexdigest(),
                     source_format=fmt, units=unit, findings=unit_findings)


def part_from_arrays(vertices_mm, faces, *, name: str, source_format: str = "generated",
                     parameters: dict | None = None) -> Part:
    """Return a checked Part from vertex (n, 3) mm and face (m, 3) arrays, as a generator makes them."""
    vertices = np.ascontiguousarray(vertices_mm, dtype=np.float64).reshape(-1, 3)
    faces = np.ascontiguousarray(faces, dtype=np.int64).reshape(-1, 3)
    sha256 = hashlib.sha256(vertices.tobytes() + faces.tobytes()).hexdigest()
    limits = IntakeLimits()
    vertices, faces = _checked_arrays(vertices, faces, name=name, limits=limits)
    _check_extent(vertices, name=name, limits=limits, unit="mm", scale=1.0)
    return _assemble(vertices, faces, name=name, sha256=sha256, source_format=source_format, units="mm",
                     findings=[], parameters=parameters)


# ------------------------------------------------------------------------------------------- sniffing


def _refuse(code: str, name: str, text: str) -> UnusableInput:
    """Return the refusal for a file, its sentence prefixed with the file's name."""
    return UnusableInput(code, f"{name}: {text}")


def _num(x: float) -> str:
    """Format a length or volume for a sentence: thousands separators, four significant digits."""
    return f"{x:,.0f}" if abs(x) >= 1000 else f"{x:.4g}"


def _count(n: int, noun: str) -> str:
    """Return "1 face was" or "3 faces were"."""
    return f"1 {noun} was" if n == 1 else f"{n:,} {noun}s were"


def _shown(member: str) -> str:
    """Return an archive member name safe to quote in a message."""
    clean = "".join(c if c.isprintable() else "?" for c in member)
    return clean if len(clean) <= 80 else clean[:77] + "..."


def _stl_declared(data: bytes) -> int:
    """Return the triangle count a binary STL header declares."""
    return int.from_bytes(data[80:84], "little")


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


# -------------------------------------------------------------------------------------------- reading


def _read_raw(data: bytes, fmt: str, *, name: str, limits: IntakeLimits) -> tuple[np.ndarray, np.ndarray, str | None]:
    """Return raw vertices, faces and the file's own unit (3MF only) without any repair."""
    if fmt == "stl_binary":
        return (*_read_stl_binary(data, name=name, limits=limits), None)
    if fmt == "stl_ascii":
        return (*_read_stl_ascii(data, name=name), None)
    if fmt == "3mf":
        file_unit = _check_3mf(data, name=name, limits=limits)
        return (*_load_with_trimesh(data, "3mf", name=name), file_unit)
    _precheck_face_count(data, fmt, name=name, limits=limits)
    return (*_load_with_trimesh(data, fmt, name=name), None)


def _read_stl_binary(data: bytes, *, name: str, limits: IntakeLimits) -> tuple[np.ndarray, np.ndarray]:
    """Return the triangle soup of a binary STL, read straight into numpy."""
    n = _stl_declared(data)
    _check_triangle_count(n, name=name, limits=limits)
    tris = np.frombuffer(data, _STL_RECORD, count=n, offset=84)["v"].astype(np.float64)
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
        raise _refuse("stl_malformed", name, f"the ASCII STL has {done:,} facets but {values.size:,} numbers "
                      f"instead of {12 * done:,}; export the part again.")
    tris = values.reshape(done, 4, 3)[:, 1:]
    return tris.reshape(-1, 3), np.arange(3 * done, dtype=np.int64).reshape(-1, 3)


def _precheck_face_count(data: bytes, fmt: str, *, name: str, limits: IntakeLimits) -> None:
    """Refuse an OBJ or PLY whose face count is over the limit before parsing allocates for it."""
    if fmt == "ply":
        header = data[: data.find(b"end_header")]
        match = re.search(rb"element\s+face\s+(\d+)", header)
        count = int(match.group(1)) if match else 0
    else:
        count = data.count(b"\nf ") + data.startswith(b"f ")
    _check_triangle_count(count, name=name, limits=limits)


def _load_with_trimesh(data: bytes, fmt: str, *, name: str) -> tuple[np.ndarray, np.ndarray]:
    """Return the raw vertices and faces trimesh parses (process=False: nothing merged or dropped)."""
    try:
        mesh = trimesh.load(io.BytesIO(data), file_type=fmt, process=False, force="mesh")
        vertices = np.asarray(mesh.vertices, dtype=np.float64).reshape(-1, 3)
        faces = np.asarray(mesh.faces, dtype=np.int64).reshape(-1, 3)
    except Exception as exc:  # any parser failure is a broken file; the cause stays chained for the log
        raise _refuse("unreadable", name, f"the {_FORMAT_NAMES[fmt]} data could not be read; export the part "
                      "again from your CAD program.") from exc
    return vertices, faces


# ----------------------------------------------------------------------------------------------- 3MF


def _check_3mf(data: bytes, *, name: str, limits: IntakeLimits) -> str:
    """Vet a 3MF package before any parser inflates it, and return its model's unit attribute."""
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as zf:
            model = _checked_members(zf, name=name, limits=limits)
            _refuse_doctype(zf, model, name=name)
            return _model_unit(zf, model, name=name)
    except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, OSError, zlib.error, RuntimeError,
            NotImplementedError, ValueError) as exc:
        raise _refuse("zip_corrupt", name, "the 3MF archive is damaged (its contents do not match its index); "
                      "export the part again.") from exc


def _checked_members(zf: zipfile.ZipFile, *, name: str, limits: IntakeLimits) -> zipfile.ZipInfo:
    """Apply the member count, name, size and ratio caps from the ZIP index; return the model member."""
    infos = zf.infolist()
    if len(infos) > limits.zip_max_members:
        raise _refuse("zip_too_many_members", name, f"the 3MF archive holds {len(infos):,} files, more than the "
                      f"{limits.zip_max_members:,} allowed; export the part alone, without extra attachments.")
    for info in infos:
        _check_member(info, name=name, limits=limits)
    total = sum(info.file_size for info in infos)
    if total > limits.zip_max_total_bytes:
        raise _refuse("zip_bomb", name, f"the 3MF archive would inflate to {total / 2**20:,.0f} MiB, over the "
                      f"{limits.zip_max_total_bytes / 2**20:,.0f} MiB limit; export a smaller mesh.")
    model = _model_member(infos, name=name)
    for info in infos:
        _refuse_nested(zf, info, name=name)
    return model


def _check_member(info: zipfile.ZipInfo, *, name: str, limits: IntakeLimits) -> None:
    """Refuse one ZIP member with an unsafe name, an archive inside, or a bomb's declared size."""
    member = info.filename.replace("\\", "/")
    if member.startswith("/") or ".." in member.split("/") or re.match(r"[A-Za-z]:", member):
        raise _refuse("zip_unsafe_name", name, f"the 3MF archive holds a file named '{_shown(info.filename)}' "
                      "that points outside the package; export the part again from your CAD program.")
    if member.lower().endswith(_ARCHIVE_SUFFIXES):
        raise _refuse("zip_nested", name, f"the 3MF archive holds another archive ('{_shown(info.filename)}'); "
                      "upload the 3MF file itself, not a packed collection.")
    ratio = info.file_size / max(info.compress_size, 1)
    if info.file_size > limits.zip_max_member_bytes or ratio > limits.zip_max_ratio:
        raise _refuse("zip_bomb", name, f"the 3MF member '{_shown(info.filename)}' would inflate from "
                      f"{info.compress_size:,} to {info.file_size:,} bytes ({ratio:,.0f} to 1), which looks like "
                      "a ZIP bomb; export the part again from your CAD program.")


def _model_member(infos: list[zipfile.ZipInfo], *, name: str) -> zipfile.ZipInfo:
    """Return the single 3D/3dmodel.model member, refusing a package without one or with decoys."""
    lowered = {info.filename.lower(): info for info in infos}
    decoys = [n for n in lowered if _MODEL in n and n != _MODEL]
    if _MODEL not in lowered or _CONTENT_TYPES not in lowered or decoys:
        raise _refuse("3mf_missing_model", name, "the archive lacks the 3MF parts '3D/3dmodel.model' and "
                      "'[Content_Types].xml' (or holds look-alikes), so it is not a 3MF file; export it again.")
    return lowered[_MODEL]


def _refuse_nested(zf: zipfile.ZipFile, info: zipfile.ZipInfo, *, name: str) -> None:
    """Refuse a member whose first bytes are another archive's signature."""
    if info.is_dir():
        return
    with zf.open(info) as fh:
        head = fh.read(8)
    if head.startswith(_ARCHIVE_MAGIC):
        raise _refuse("zip_nested", name, f"the 3MF archive holds another archive ('{_shown(info.filename)}'); "
                      "upload the 3MF file itself, not a packed collection.")


def _refuse_doctype(zf: zipfile.ZipFile, info: zipfile.ZipInfo, *, name: str) -> None:
    """Refuse a model that declares a DTD or entities (3MF core spec: consumers treat DTDs as errors)."""
    tail = b""
    with zf.open(info) as fh:
        while chunk := fh.read(1 << 20):
            window = tail + chunk.lower()
            if b"<!doctype" in window or b"<!entity" in window:
                raise _refuse("xml_doctype", name, "the 3MF model declares a DTD or XML entities, which 3MF "
                              "forbids and we refuse; export the part again from your CAD program.")
            tail = window[-16:]


def _model_unit(zf: zipfile.ZipFile, info: zipfile.ZipInfo, *, name: str) -> str:
    """Return the model element's unit attribute (millimeter when absent, as the spec says)."""
    try:
        with zf.open(info) as fh:
            _, root = next(etree.iterparse(fh, events=("start",), **_XML_OPTIONS))
    except (etree.XMLSyntaxError, StopIteration) as exc:
        raise _refuse("xml_malformed", name, "the 3MF model is not well-formed XML; export the part "
                      "again.") from exc
    if etree.QName(root).localname != "model":
        raise _refuse("xml_malformed", name, "the 3MF model part does not start with a <model> element; export "
                      "the part again.")
    unit = root.get("unit", "millimeter")
    if unit not in _3MF_UNITS:
        raise _refuse("unknown_unit", name, f"the 3MF model's unit {unit!r} is not one the 3MF standard "
                      "defines; export the part again with millimetres.")
    return unit


# ------------------------------------------------------------------------------------ units and limits


def _resolve_unit(file_unit: str | None, units: str | None, *, name: str) -> tuple[str, float, list[Finding]]:
    """Return the unit label, its size in mm and any note; a 3MF's own unit wins over the user's."""
    if file_unit is None:
        unit = units or "mm"
        return unit, UNITS[unit], []
    label, scale = _3MF_UNITS[file_unit]
    if units is None or UNITS[units] == scale:
        return label, scale, []
    note = Finding("units", "note", f"{name}: the 3MF file states its unit as {file_unit}, so {label} was used "
                   f"instead of the {units} you chose.")
    return label, scale, [note]


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
    bad = ~np.isfinite(vertices).all(axis=1)
    if bad.any():
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


def _largest_extent_mm(vertices_mm: np.ndarray) -> float:
    """Return the part's largest axis-aligned extent."""
    return float(np.ptp(vertices_mm, axis=0).max())


def _plausible_unit(raw_extent: float) -> tuple[str, float] | None:
    """Return the unit (and resulting mm size) that makes an extent most plausible, if any does."""
    lo, hi = PLAUSIBLE_EXTENT_MM
    fits = {u: raw_extent * s for u, s in UNITS.items() if lo <= raw_extent * s <= hi}
    if not fits:
        return None
    middle = np.sqrt(lo * hi)  # the geometric middle of the plausible range
    best = min(fits, key=lambda u: abs(np.log(fits[u] / middle)))
    return best, fits[best]


def _check_extent(vertices_mm: np.ndarray, *, name: str, limits: IntakeLimits, unit: str, scale: float) -> None:
    """Refuse a part larger than the extent limit, saying which unit would make it plausible."""
    extent = _largest_extent_mm(vertices_mm)
    if extent <= limits.max_extent_mm:
        return
    better = _plausible_unit(extent / scale)
    hint = f"if it was drawn in {better[0]}, upload it again with units {better[0]}" if better else \
        "scale it to its real size"
    raise _refuse("too_large_extent", name, f"read in {unit} the part is {_num(extent)} mm across, beyond the "
                  f"{_num(limits.max_extent_mm)} mm limit; {hint}.")


def _units_finding(vertices_mm: np.ndarray, *, name: str, unit: str, scale: float, from_file: bool) -> Finding | None:
    """Return a caution when the part is implausibly small or large for a quasi-optical part in its unit."""
    extent = _largest_extent_mm(vertices_mm)
    lo, hi = PLAUSIBLE_EXTENT_MM
    if extent <= 0 or lo <= extent <= hi:
        return None
    size = "small" if extent < lo else "large"
    better = _plausible_unit(extent / scale)
    if better is None:
        hint = "no unit we know makes it 1 to 1,000 mm across, so check the model's scale"
    else:
        how = "set that unit in the file and export it again" if from_file else \
            f"upload it again with units {better[0]}"
        hint = f"if it was drawn in {better[0]} it is {_num(better[1])} mm across: {how}"
    message = (f"{name}: read in {unit} the part is {_num(extent)} mm across at its largest, implausibly {size} "
               f"for a quasi-optical part; {hint}.")
    return Finding("units", "caution", message, measured=extent, limit=lo if extent < lo else hi, unit="mm")


# --------------------------------------------------------------------------------------------- health


@dataclass(frozen=True, slots=True)
class _Edges:
    """The undirected edges of a face array, and which faces meet along them.

    vertices : (e, 2) int64, each edge's vertex indices, smaller first
    counts : (e,) int64, how many faces use each edge
    pair_faces : (p, 2) int64, the two faces of each edge used exactly twice
    pair_same : (p,) bool, True where both faces run that edge the same way (inconsistent winding)
    links : (k, 2) int64, pairs of faces that share any edge
    """

    vertices: np.ndarray
    counts: np.ndarray
    pair_faces: np.ndarray
    pair_same: np.ndarray
    links: np.ndarray


def _edge_table(faces: np.ndarray) -> _Edges:
    """Return the edge table of a face array."""
    directed = faces[:, [0, 1, 1, 2, 2, 0]].reshape(-1, 2)
    lo, hi = directed.min(axis=1), directed.max(axis=1)
    key = lo * (int(faces.max()) + 1) + hi
    order = np.argsort(key, kind="stable")
    sorted_key = key[order]
    repeats = sorted_key[1:] == sorted_key[:-1]
    starts = np.flatnonzero(np.r_[True, ~repeats])
    counts = np.diff(np.r_[starts, len(sorted_key)])
    first = order[starts]
    two = starts[counts == 2]
    a, b = order[two], order[two + 1]
    return _Edges(
        vertices=np.column_stack([lo[first], hi[first]]),
        counts=counts,
        pair_faces=np.column_stack([a // 3, b // 3]),
        pair_same=directed[a, 0] == directed[b, 0],
        links=np.column_stack([order[:-1][repeats], order[1:][repeats]]) // 3,
    )


def _components(n: int, pairs: np.ndarray) -> tuple[int, np.ndarray]:
    """Return the number of connected components of n nodes joined by pairs, and each node's label."""
    graph = coo_matrix((np.ones(len(pairs), np.int8), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    return connected_components(graph, directed=False)


def _merge_vertices(vertices: np.ndarray, faces: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Merge bit-identical vertex positions (STL repeats every corner once per facet)."""
    order = np.lexsort(vertices.T[::-1])
    ordered = vertices[order]
    new = np.r_[True, np.any(ordered[1:] != ordered[:-1], axis=1)]
    inverse = np.empty(len(vertices), np.int64)
    inverse[order] = np.cumsum(new) - 1
    return ordered[new], inverse[faces]


def _drop_degenerate(vertices: np.ndarray, faces: np.ndarray) -> tuple[np.ndarray, int]:
    """Return the faces without zero-area ones (repeated corners or collinear), and how many went."""
    tri = vertices[faces]
    cross = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    twice_area = np.sqrt(np.einsum("ij,ij->i", cross, cross))
    extent = max(_largest_extent_mm(vertices), 1e-300)
    repeated = (faces[:, 0] == faces[:, 1]) | (faces[:, 1] == faces[:, 2]) | (faces[:, 2] == faces[:, 0])
    bad = repeated | (twice_area <= 2 * _DEGENERATE_REL_AREA * extent**2)
    return faces[~bad], int(bad.sum())


def _propagate_parity(pred: np.ndarray, rel: np.ndarray, root: int) -> np.ndarray:
    """Return each node's parity relative to the root of a tree, by pointer jumping (log depth steps)."""
    up = pred.copy()
    up[root] = root
    parity = rel.copy()
    parity[root] = False
    while True:
        next_up = up[up]
        if np.array_equal(next_up, up):
            return parity
        parity = parity ^ parity[up]
        up = next_up


def _fix_winding(faces: np.ndarray, edges: _Edges) -> tuple[np.ndarray, int]:
    """Flip faces so neighbours run shared edges in opposite directions; keep each shell's majority winding."""
    if not edges.pair_same.any():
        return faces, 0
    n = len(faces)
    n_shells, shell = _components(n, edges.pair_faces)
    roots = np.unique(shell, return_index=True)[1]
    # A virtual node n joins one face of every shell so a single breadth-first search reaches all faces.
    a = np.r_[edges.pair_faces[:, 0], np.full(len(roots), n)]
    b = np.r_[edges.pair_faces[:, 1], roots]
    rel = np.r_[edges.pair_same, np.zeros(len(roots), bool)]
    graph = coo_matrix((np.ones(len(a), np.int8), (a, b)), shape=(n + 1, n + 1)).tocsr()
    _, pred = breadth_first_order(graph, n, directed=False, return_predecessors=True)
    key = np.minimum(a, b) * (n + 1) + np.maximum(a, b)
    order = np.argsort(key)
    node = np.arange(n + 1)
    tree_key = np.minimum(node, pred) * (n + 1) + np.maximum(node, pred)
    tree_rel = rel[order[np.clip(np.searchsorted(key[order], tree_key), 0, len(key) - 1)]]
    flip = _propagate_parity(pred, tree_rel, root=n)[:n]
    flips_per_shell = np.bincount(shell, weights=flip, minlength=n_shells)
    flip ^= (2 * flips_per_shell > np.bincount(shell, minlength=n_shells))[shell]
    fixed = faces.copy()
    fixed[flip] = fixed[flip][:, ::-1]
    return fixed, int(flip.sum())


def _signed_volumes(vertices: np.ndarray, faces: np.ndarray, labels: np.ndarray, n: int) -> np.ndarray:
    """Return the signed volume of each labelled body (divergence theorem over its triangles)."""
    centre = (vertices.min(axis=0) + vertices.max(axis=0)) / 2  # centred coordinates keep the sum accurate
    tri = vertices[faces] - centre
    per_face = np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])) / 6.0
    return np.bincount(labels, weights=per_face, minlength=n)


@dataclass(frozen=True, slots=True)
class _Health:
    """A repaired mesh and what its examination found."""

    vertices_mm: np.ndarray
    faces: np.ndarray
    bodies: int
    watertight: bool
    volume_mm3: float
    findings: tuple[Finding, ...]


def _mesh_health(vertices_mm: np.ndarray, faces: np.ndarray, *, name: str) -> _Health:
    """Merge, examine and repair a raw mesh, reporting each defect before it is repaired."""
    vertices_mm, faces = _merge_vertices(vertices_mm, faces)
    faces, removed = _drop_degenerate(vertices_mm, faces)
    if len(faces) == 0:
        raise _refuse("no_triangles", name, "every triangle has zero area; export the part again.")
    vertices_mm, faces = _compact(vertices_mm, faces)
    edges = _edge_table(faces)
    findings = _topology_findings(vertices_mm, edges, name=name, removed=removed)
    faces, flipped = _fix_winding(faces, edges)
    n_bodies, body = _components(len(faces), edges.links)  # flipping faces keeps which faces touch
    volumes = _signed_volumes(vertices_mm, faces, body, n_bodies)
    watertight = not bool((edges.counts % 2).any())
    inverted = watertight and bool((volumes < 0).all())
    if inverted:
        faces, volumes = faces[:, ::-1].copy(), -volumes
        # After a winding repair that kept the inward majority, the faces that were really wrong are the rest.
        flipped = len(faces) - flipped if flipped else 0
    findings += _orientation_findings(_edge_table(faces) if flipped else edges, flipped,
                                      inverted=inverted and not flipped, name=name)
    if n_bodies > 1:
        findings.append(Finding("mesh_health", "note", f"{name}: the mesh holds {n_bodies:,} separate bodies; "
                                "check that each is meant (a cavity, or a part printed with the rest).",
                                measured=float(n_bodies), unit="bodies", count=n_bodies))
    if watertight:
        findings += _kernel_findings(vertices_mm, faces, volumes, name=name)
    return _Health(vertices_mm, faces, n_bodies, watertight, float(volumes.sum()), tuple(findings))


def _topology_findings(vertices_mm: np.ndarray, edges: _Edges, *, name: str, removed: int) -> list[Finding]:
    """Return the findings about degenerate faces, open edges and over-shared edges of the raw mesh."""
    findings = []
    if removed:
        findings.append(Finding("mesh_health", "note", f"{name}: {_count(removed, 'zero-area face')} removed.",
                                measured=float(removed), unit="faces", count=removed))
    open_finding = _open_edges_finding(vertices_mm, edges, name=name)
    if open_finding is not None:
        findings.append(open_finding)
    shared = int((edges.counts > 2).sum())
    if shared:
        edges_are = "edge is" if shared == 1 else "edges are"
        findings.append(Finding("mesh_health", "caution", f"{name}: {shared:,} {edges_are} shared by more than two "
                                "faces (bodies touching along an edge); the printer may fuse them or leave them "
                                "barely joined.", measured=float(shared), unit="edges", count=shared))
    return findings


def _open_edges_finding(vertices_mm: np.ndarray, edges: _Edges, *, name: str) -> Finding | None:
    """Return a blocker for edges not closed by a pair of faces, located at the largest hole."""
    is_open = edges.counts % 2 == 1
    n_open = int(is_open.sum())
    if not n_open:
        return None
    ends = edges.vertices[is_open]
    _, vertex_hole = _components(len(vertices_mm), ends)
    _, hole = np.unique(vertex_hole[ends[:, 0]], return_inverse=True)
    biggest = np.bincount(hole).argmax()
    where = vertices_mm[ends[hole == biggest]].mean(axis=(0, 1))
    n_holes = int(hole.max()) + 1
    x, y, z = (round(float(c), 4) for c in where)
    message = (f"{name}: the surface is not closed: {n_open:,} open edges in {n_holes:,} "
               f"{'hole' if n_holes == 1 else 'holes'}, the largest around ({_num(x)}, {_num(y)}, {_num(z)}) mm; "
               "a printer cannot make an open surface, so close the mesh in your CAD program and export it again.")
    return Finding("mesh_health", "blocker", message, measured=float(n_open), limit=0.0, unit="edges",
                   location_mm=(x, y, z), count=n_open)


def _orientation_findings(edges_after: _Edges, flipped: int, *, inverted: bool, name: str) -> list[Finding]:
    """Return notes on repaired winding or an inside-out part, and a caution if faces still disagree."""
    findings = []
    if inverted:
        findings.append(Finding("mesh_health", "note", f"{name}: the part was inside out (every face pointed "
                                "inward); it was turned outside out."))
    if flipped:
        findings.append(Finding("mesh_health", "note", f"{name}: {_count(flipped, 'face')} wound against "
                                "their neighbours; they were flipped to match.", measured=float(flipped),
                                unit="faces", count=flipped))
    left = int(edges_after.pair_same.sum())
    if left:
        joins = "edge still joins" if left == 1 else "edges still join"
        findings.append(Finding("mesh_health", "caution", f"{name}: {left:,} {joins} faces wound against each "
                                "other (a one-sided surface); the inside of the part is ambiguous.",
                                measured=float(left), unit="edges", count=left))
    return findings


# ------------------------------------------------------------------------------------- geometry kernel

_KERNEL_WORDS = {
    "NotManifold": "its surface is not a closed two-manifold",
    "NonFiniteVertex": "a vertex has non-finite coordinates",
    "VertexOutOfBounds": "a face refers to a missing vertex",
}


def _kernel(result: m3d.Manifold, *, name: str) -> m3d.Manifold:
    """Return a manifold3d result, or raise our own error when its status is not NoError."""
    status = result.status()
    if status == m3d.Error.NoError:
        return result
    words = _KERNEL_WORDS.get(status.name, f"it reports {status.name}")
    raise _refuse(f"kernel_{status.name.lower()}", name, f"the geometry kernel could not build a solid from the "
                  f"mesh ({words}); the printed shape may differ from the file, so repair the mesh and export "
                  "it again.")


def _kernel_findings(vertices_mm: np.ndarray, faces: np.ndarray, volumes: np.ndarray, *, name: str) -> list[Finding]:
    """Return what manifold3d reports about a closed mesh: a failed build or overlapping bodies."""
    try:
        mesh = m3d.Mesh64(vert_properties=np.ascontiguousarray(vertices_mm, np.float64),
                          tri_verts=np.ascontiguousarray(faces, np.uint64))
        solid = _kernel(m3d.Manifold(mesh), name=name)
        if len(volumes) < 2 or (volumes <= 0).any():
            return []  # one body cannot overlap another; a cavity shell is not a body to unite
        if len(volumes) > _OVERLAP_MAX_BODIES:
            return [Finding("mesh_health", "note", f"{name}: with {len(volumes):,} bodies, overlaps between "
                            "bodies were not checked.")]
        return _overlap_findings(solid, name=name)
    except UnusableInput as exc:
        return [Finding("mesh_health", "caution", exc.message)]


def _overlap_findings(solid: m3d.Manifold, *, name: str) -> list[Finding]:
    """Return a caution when bodies intersect one another (their union is smaller than their sum)."""
    pieces = [_kernel(piece, name=name) for piece in solid.decompose()]
    union = _kernel(m3d.Manifold.batch_boolean(pieces, m3d.OpType.Add), name=name).volume()
    summed = sum(piece.volume() for piece in pieces)
    overlap = summed - union
    if overlap <= 1e-9 * summed:
        return []
    return [Finding("mesh_health", "caution", f"{name}: bodies intersect one another: they add up to "
                    f"{_num(summed)} mm3 but their union is {_num(union)} mm3; unite them in your CAD program so "
                    "the volume and the quote are right.", measured=overlap, unit="mm3")]


def _assemble(vertices_mm: np.ndarray, faces: np.ndarray, *, name: str, sha256: str, source_format: str,
              units: str, findings: list[Finding], parameters: dict | None = None) -> Part:
    """Return the Part after the health examination, with intake's findings."""
    health = _mesh_health(vertices_mm, faces, name=name)
    return Part(name=name, sha256=sha256, source_format=source_format, units=units,
                vertices_mm=health.vertices_mm, faces=health.faces, bodies=health.bodies,
                watertight=health.watertight, findings=health.findings + tuple(findings),
                parameters=parameters, volume_mm3=health.volume_mm3)
