"""Write the small real mesh files that tests/services/test_intake.py reads.

Run from the project root: ``.venv/bin/python tests/data/make_files.py``. The writers here are plain
byte-level encoders of the open formats (no mesh library), so the intake reader is tested against files
it did not write. The output is deterministic (fixed ZIP timestamps, a seeded generator).
"""

from __future__ import annotations

import io
import struct
import zipfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
INCH_MM = 25.4
ZIP_TIME = (2024, 1, 1, 0, 0, 0)
CORE_NS = "http://schemas.microsoft.com/3dmanufacturing/core/2015/02"
CONTENT_TYPES = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<Types xmlns="http://schemas.openxmlformats.org/package/2006/content-types">'
    '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.relationships+xml"/>'
    '<Default Extension="model" ContentType="application/vnd.ms-package.3dmanufacturing-3dmodel+xml"/>'
    "</Types>"
).encode()
RELS = (
    '<?xml version="1.0" encoding="UTF-8"?>\n'
    '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
    '<Relationship Target="/3D/3dmodel.model" Id="rel0" '
    'Type="http://schemas.microsoft.com/3dmanufacturing/2013/01/3dmodel"/></Relationships>'
).encode()


def cube(side: float) -> tuple[np.ndarray, np.ndarray]:
    """Return the vertices and outward-wound faces of a cube with one corner at the origin."""
    v = np.array([[x, y, z] for z in (0, 1) for y in (0, 1) for x in (0, 1)], float) * side
    f = np.array([[0, 2, 3], [0, 3, 1], [4, 5, 7], [4, 7, 6], [0, 1, 5], [0, 5, 4],
                  [2, 6, 7], [2, 7, 3], [0, 4, 6], [0, 6, 2], [1, 3, 7], [1, 7, 5]])
    return v, f


def stl_binary(v: np.ndarray, f: np.ndarray, *, header: bytes = b"binary cube", count: int | None = None) -> bytes:
    """Encode a binary STL; ``count`` overrides the header's triangle count."""
    tri = v[f].astype("<f4")
    normals = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    normals /= np.maximum(np.linalg.norm(normals, axis=1, keepdims=True), 1e-30)
    rec = np.zeros(len(f), np.dtype([("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")]))
    rec["n"], rec["v"] = normals, tri
    head = header.ljust(80, b" ")[:80] + struct.pack("<I", len(f) if count is None else count)
    return head + rec.tobytes()


def stl_ascii(v: np.ndarray, f: np.ndarray) -> bytes:
    """Encode an ASCII STL with zero normals (readers recompute them from the winding)."""
    lines = ["solid cube"]
    for tri in v[f]:
        lines += ["  facet normal 0 0 0", "    outer loop"]
        lines += [f"      vertex {x:.6e} {y:.6e} {z:.6e}" for x, y, z in tri]
        lines += ["    endloop", "  endfacet"]
    return ("\n".join(lines + ["endsolid cube"]) + "\n").encode()


def obj(v: np.ndarray, f: np.ndarray) -> bytes:
    """Encode a Wavefront OBJ with 1-based indices."""
    lines = ["# cube"] + [f"v {x:.6f} {y:.6f} {z:.6f}" for x, y, z in v]
    lines += [f"f {a + 1} {b + 1} {c + 1}" for a, b, c in f]
    return ("\n".join(lines) + "\n").encode()


def ply_binary(v: np.ndarray, f: np.ndarray) -> bytes:
    """Encode a little-endian binary PLY (Turk's format) with uchar-counted int face lists."""
    head = ("ply\nformat binary_little_endian 1.0\n"
            f"element vertex {len(v)}\nproperty float x\nproperty float y\nproperty float z\n"
            f"element face {len(f)}\nproperty list uchar int vertex_indices\nend_header\n").encode()
    faces = b"".join(struct.pack("<B3i", 3, *map(int, row)) for row in f)
    return head + v.astype("<f4").tobytes() + faces


def model_xml(v: np.ndarray, f: np.ndarray, *, unit: str, prolog: str = "") -> bytes:
    """Encode a 3MF core model document."""
    verts = "".join(f'<vertex x="{x:.6f}" y="{y:.6f}" z="{z:.6f}"/>' for x, y, z in v)
    tris = "".join(f'<triangle v1="{a}" v2="{b}" v3="{c}"/>' for a, b, c in f)
    return (f'<?xml version="1.0" encoding="UTF-8"?>\n{prolog}'
            f'<model unit="{unit}" xml:lang="en-US" xmlns="{CORE_NS}"><resources>'
            f'<object id="1" type="model"><mesh><vertices>{verts}</vertices><triangles>{tris}</triangles>'
            '</mesh></object></resources><build><item objectid="1"/></build></model>').encode()


def assembly_xml(meshes: dict[str, tuple[np.ndarray, np.ndarray]], assemblies: dict[str, list[tuple[str, str | None]]],
                 items: list[tuple[str, str | None]], *, unit: str = "millimeter") -> bytes:
    """Encode a 3MF model of mesh objects, component objects (child id, transform) and build items."""
    def transform(t: str | None) -> str:
        return f' transform="{t}"' if t else ""

    objects = []
    for oid, (v, f) in meshes.items():
        verts = "".join(f'<vertex x="{x:g}" y="{y:g}" z="{z:g}"/>' for x, y, z in v)
        tris = "".join(f'<triangle v1="{a}" v2="{b}" v3="{c}"/>' for a, b, c in f)
        objects.append(f'<object id="{oid}" type="model"><mesh><vertices>{verts}</vertices><triangles>{tris}'
                       "</triangles></mesh></object>")
    for oid, comps in assemblies.items():
        inner = "".join(f'<component objectid="{c}"{transform(t)}/>' for c, t in comps)
        objects.append(f'<object id="{oid}" type="model"><components>{inner}</components></object>')
    build = "".join(f'<item objectid="{o}"{transform(t)}/>' for o, t in items)
    return (f'<?xml version="1.0" encoding="UTF-8"?>\n<model unit="{unit}" xmlns="{CORE_NS}"><resources>'
            f'{"".join(objects)}</resources><build>{build}</build></model>').encode()


def fan_out_3mf(components: int, *, side_mm: float = 0.5, pitch_mm: float = 1.0) -> bytes:
    """Return a 3MF whose one assembly places one cube ``components`` times on a square grid."""
    per_row = int(components**0.5) + 1
    comps = [("1", f"1 0 0 0 1 0 0 0 1 {(i % per_row) * pitch_mm:g} {(i // per_row) * pitch_mm:g} 0")
             for i in range(components)]
    return package(assembly_xml({"1": cube(side_mm)}, {"2": comps}, [("2", None)]))


def zip_bytes(members: dict[str, bytes]) -> bytes:
    """Return a deflated ZIP of the members, with fixed timestamps."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for member, payload in members.items():
            info = zipfile.ZipInfo(member, ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            zf.writestr(info, payload, compresslevel=9)
    return buf.getvalue()


def package(model: bytes, extra: dict[str, bytes] | None = None) -> bytes:
    """Return a 3MF package around a model document, with extra members by name."""
    members = {"[Content_Types].xml": CONTENT_TYPES, "_rels/.rels": RELS, "3D/3dmodel.model": model}
    return zip_bytes(members | (extra or {}))


def lying_zip(payload_bytes: int, declared: int) -> bytes:
    """Return a 3MF whose model member claims ``declared`` bytes but inflates to ``payload_bytes``."""
    data = bytearray(package(b" " * payload_bytes))
    real = struct.pack("<I", payload_bytes)
    fake = struct.pack("<I", declared)
    assert data.count(real) == 2, "the size must appear once in the local and once in the central header"
    return bytes(data.replace(real, fake))


def billion_laughs(v: np.ndarray, f: np.ndarray) -> bytes:
    """Return a model whose DTD declares nested entities (the classic entity-expansion attack)."""
    ents = ['<!ENTITY lol0 "lol">']
    ents += [f'<!ENTITY lol{i} "{f"&lol{i - 1};" * 10}">' for i in range(1, 10)]
    prolog = "<!DOCTYPE model [" + "".join(ents) + "]>\n"
    return model_xml(v, f, unit="millimeter", prolog=prolog).replace(b'xml:lang="en-US"', b'xml:lang="&lol9;"')


def files() -> dict[str, bytes]:
    """Return every test file by name."""
    v_mm, f = cube(INCH_MM)
    v_in, _ = cube(1.0)
    ascii_stl = stl_ascii(v_mm, f)
    return {
        "cube_binary.stl": stl_binary(v_mm, f, header=b"solid cube, binary despite the word solid"),
        "cube_ascii.stl": ascii_stl,
        "cube.obj": obj(v_mm, f),
        "cube.ply": ply_binary(v_mm, f),
        "cube_inch.3mf": package(model_xml(v_in, f, unit="inch")),
        "lying_header.stl": stl_binary(v_mm, f, count=1200),
        "truncated_ascii.stl": ascii_stl[: len(ascii_stl) * 2 // 3],
        "random.bin": np.random.default_rng(20240101).bytes(4000),
        "bomb.3mf": package(b" " * (40 * 2**20)),
        "bomb_lying_size.3mf": lying_zip(40 * 2**20, 1000),
        "nested.3mf": package(model_xml(v_mm, f, unit="millimeter"),
                              {"Metadata/parts.zip": zip_bytes({"a.txt": b"inner"})}),
        "traversal.3mf": package(model_xml(v_mm, f, unit="millimeter"), {"../../evil.model": b"x"}),
        "entity.3mf": package(billion_laughs(v_mm, f)),
        "no_model.3mf": zip_bytes({"[Content_Types].xml": CONTENT_TYPES, "_rels/.rels": RELS}),
    }


def main() -> None:
    """Write the files next to this script."""
    for name, payload in files().items():
        assert len(payload) < 50_000, f"{name} is {len(payload)} bytes"
        (HERE / name).write_bytes(payload)
        print(f"{name}: {len(payload):,} bytes")


if __name__ == "__main__":
    main()
