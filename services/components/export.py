"""Write a Part as binary STL or as a 3MF package in millimetres, byte for byte reproducible."""

from __future__ import annotations

import io
import zipfile
from xml.sax.saxutils import quoteattr

import numpy as np

from services.errors import UnusableInput
from services.part import Part

_STL_HEADER = b"Phasewright generated part, units: mm".ljust(80, b" ")
_STL_RECORD = np.dtype([("normal", "<f4", 3), ("vertices", "<f4", (3, 3)), ("attribute", "<u2")])

# A fixed timestamp keeps the archive identical for identical parts (zip stores one per member).
_ZIP_TIME = (2024, 1, 1, 0, 0, 0)

_CONTENT_TYPES = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
    '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
    '<Default Extension="model" ContentType="application/vnd.ms-package.3dmanufacturing-3dmodel+xml"/>'
    "</Types>\n"
)
_RELS = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
    '<Relationship Target="/3D/3dmodel.model" Id="rel0" '
    'Type="http://schemas.microsoft.com/3dmanufacturing/2013/01/3dmodel"/>'
    "</Relationships>\n"
)


def export_mesh(part: Part, fmt: str) -> bytes:
    """Return the part as "stl" (binary) or "3mf" (unit="millimeter") bytes."""
    fmt = fmt.lower().lstrip(".")
    if fmt == "stl":
        return stl_bytes(part.vertices_mm, part.faces)
    if fmt == "3mf":
        return threemf_bytes(part.vertices_mm, part.faces, title=part.name)
    raise UnusableInput("bad_format", f"Parts can be written as stl or 3mf, not {fmt!r}.")


def stl_bytes(vertices_mm: np.ndarray, faces: np.ndarray) -> bytes:
    """Return binary STL: 80-byte header, uint32 count, 50-byte little-endian records."""
    tris = np.asarray(vertices_mm, dtype=np.float64)[np.asarray(faces)]
    normals = np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0])
    length = np.linalg.norm(normals, axis=1, keepdims=True)
    normals = np.divide(normals, length, out=np.zeros_like(normals), where=length > 0)
    records = np.zeros(len(tris), dtype=_STL_RECORD)
    records["normal"] = normals
    records["vertices"] = tris
    return _STL_HEADER + np.uint32(len(tris)).astype("<u4").tobytes() + records.tobytes()


def threemf_bytes(vertices_mm: np.ndarray, faces: np.ndarray, *, title: str) -> bytes:
    """Return a 3MF core package holding one mesh object, in millimetres."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_DEFLATED) as zf:
        for name, text in (("[Content_Types].xml", _CONTENT_TYPES), ("_rels/.rels", _RELS),
                           ("3D/3dmodel.model", _model_xml(vertices_mm, faces, title))):
            info = zipfile.ZipInfo(name, date_time=_ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            zf.writestr(info, text.encode("utf-8"))
    return buffer.getvalue()


def _model_xml(vertices_mm: np.ndarray, faces: np.ndarray, title: str) -> str:
    vertices = "".join(f'<vertex x="{x:.6f}" y="{y:.6f}" z="{z:.6f}"/>' for x, y, z in np.asarray(vertices_mm).tolist())
    triangles = "".join(f'<triangle v1="{a}" v2="{b}" v3="{c}"/>' for a, b, c in np.asarray(faces).tolist())
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        '<model unit="millimeter" xml:lang="en-US" '
        'xmlns="http://schemas.microsoft.com/3dmanufacturing/core/2015/02">'
        f'<metadata name="Title">{_text(title)}</metadata>'
        '<metadata name="Application">Phasewright</metadata>'
        '<resources><object id="1" type="model"><mesh>'
        f"<vertices>{vertices}</vertices><triangles>{triangles}</triangles>"
        '</mesh></object></resources><build><item objectid="1"/></build></model>\n'
    )


def _text(value: str) -> str:
    return quoteattr(value)[1:-1]
