"""Hostile uploads, built in code, and what Phasewright does with each; the source of docs/security.md's table.

    .venv/bin/python -m tests.security.hostile          # print the table
    .venv/bin/python -m tests.security.hostile --write  # rewrite the table in docs/security.md

Every file goes through the worker's reader (services.intake.read_part) with the site's own limits.
The byte-level encoders come from tests/data/make_files.py (plain writers of the open formats).
"""

from __future__ import annotations

import argparse
import gzip
import io
import struct
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from tests.data.make_files import (CONTENT_TYPES, CORE_NS, RELS, assembly_xml, billion_laughs, cube, fan_out_3mf,
                                   lying_zip, model_xml, obj, package, ply_binary, stl_ascii, stl_binary, zip_bytes)

ROOT = Path(__file__).resolve().parents[2]
DOC = ROOT / "docs" / "security.md"
START, END = "<!-- hostile-table:start -->", "<!-- hostile-table:end -->"
SIDE_MM = 20.0


@dataclass(frozen=True)
class Hostile:
    """One hostile upload: the name it arrives under, what it tries, and how to build its bytes."""

    name: str
    tries: str
    build: Callable[[], bytes]
    units: str | None = "mm"


def _cube() -> tuple[np.ndarray, np.ndarray]:
    return cube(SIDE_MM)


def _stl(**kwargs) -> bytes:
    return stl_binary(*_cube(), **kwargs)


def _stl_with(transform) -> bytes:
    """Return a binary STL of the cube after ``transform(triangles)`` edits its float32 corners."""
    v, f = _cube()
    tris = v[f].astype("<f4")
    transform(tris)
    rec = np.zeros(len(f), np.dtype([("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")]))
    rec["v"] = tris
    return b"hostile".ljust(80, b" ") + struct.pack("<I", len(f)) + rec.tobytes()


def _set(index, value):
    def edit(tris):
        tris[index] = value
    return edit


def _model(**kwargs) -> bytes:
    return model_xml(*_cube(), unit="millimeter", **kwargs)


def _package(extra: dict[str, bytes]) -> bytes:
    return package(_model(), extra)


def _flag_encrypted(data: bytes) -> bytes:
    """Set the 'encrypted' bit in every local and central ZIP header (the payload stays plain)."""
    out = bytearray(data)
    for sig, offset in ((b"PK\x03\x04", 6), (b"PK\x01\x02", 8)):
        at = out.find(sig)
        while at != -1:
            out[at + offset] |= 0x01
            at = out.find(sig, at + 4)
    return bytes(out)


def _deep_xml(depth: int = 20_000) -> bytes:
    # Random attribute values keep the member from compressing like a ZIP bomb, so the XML parser meets it.
    marks = np.random.default_rng(11).integers(0, 2**32, depth)
    opening = b"".join(b'<g id="%08x">' % int(m) for m in marks)
    return package(b'<?xml version="1.0"?><model unit="millimeter" xmlns="' + CORE_NS.encode() + b'">'
                   + opening + b"</g>" * depth + b"</model>")


def _xxe() -> bytes:
    prolog = '<!DOCTYPE model [<!ENTITY secret SYSTEM "file:///etc/passwd">]>\n'
    return package(_model(prolog=prolog).replace(b'xml:lang="en-US"', b'xml:lang="&secret;"'))


def _bad_vertex_index() -> bytes:
    return package(_model().replace(b'v3="', b'v3="9', 1))


def _many_members(count: int = 300) -> bytes:
    return _package({f"Metadata/note-{i}.txt": b"x" for i in range(count)})


def _high_ratio() -> bytes:
    # 8 MiB of one byte value: under every size cap, but it deflates about a thousand to one.
    return _package({"Metadata/thumbnail.txt": b"\x00" * (8 * 2**20)})


def _plain_zip() -> bytes:
    return zip_bytes({"part.stl": _stl()})


def _ten_million_stl() -> bytes:
    # A real 10-million-triangle binary STL is 500,000,084 bytes: here all zeros after a true header.
    n = 10_000_000
    return b"ten million".ljust(80, b" ") + struct.pack("<I", n) + bytes(50 * n)


def _ten_million_obj() -> bytes:
    return b"v 0 0 0\nv 1 0 0\nv 0 1 0\n" + b"f 1 2 3\n" * 10_000_000


def _ply_header(vertices: int, faces: int, body: bytes = b"") -> bytes:
    return (f"ply\nformat binary_little_endian 1.0\nelement vertex {vertices}\nproperty float x\n"
            f"property float y\nproperty float z\nelement face {faces}\n"
            "property list uchar int vertex_indices\nend_header\n").encode() + body


def _assembly(assemblies: dict, root: str) -> bytes:
    return package(assembly_xml({"1": _cube()}, assemblies, [(root, None)]))


def _component_cycle() -> bytes:
    return _assembly({"2": [("1", None), ("3", None)], "3": [("2", "1 0 0 0 1 0 0 0 1 30 0 0")]}, "2")


def _component_fan_out(width: int = 10, levels: int = 6) -> bytes:
    # Each level places the one below ten times: 12 x 10^6 triangles from a file of a few kilobytes.
    shifts = [f"1 0 0 0 1 0 0 0 1 {30 * i} 0 0" for i in range(width)]
    tree = {str(k): [(str(k - 1), t) for t in shifts] for k in range(2, levels + 2)}
    return _assembly(tree, str(levels + 1))


def _deep_components(levels: int = 40) -> bytes:
    return _assembly({str(k): [(str(k - 1), None)] for k in range(2, levels + 2)}, str(levels + 1))


def _case_twins() -> bytes:
    v, f = _cube()
    return zip_bytes({"[Content_Types].xml": CONTENT_TYPES, "_rels/.rels": RELS,
                      "3D/3dmodel.model": model_xml(v, f, unit="millimeter"),
                      "3D/3DModel.model": model_xml(v, f, unit="inch")})


def _ascii_ply(faces_declared: int, faces_held: int, fmt: str = "ascii") -> bytes:
    v, f = _cube()
    header = (f"ply\nformat {fmt} 1.0\nelement vertex {len(v)}\nproperty float x\nproperty float y\n"
              f"property float z\nelement face {faces_declared}\nproperty list uchar int vertex_indices\nend_header\n")
    rows = "".join(f"{x:g} {y:g} {z:g}\n" for x, y, z in v) + "".join(f"3 {a} {b} {c}\n" for a, b, c in f[:faces_held])
    return (header + rows).encode()


def _png() -> bytes:
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(np.random.default_rng(3).integers(0, 255, (32, 32, 3), dtype=np.uint8)).save(buf, "PNG")
    return buf.getvalue()


def _pdf() -> bytes:
    from fpdf import FPDF

    pdf = FPDF()
    pdf.add_page()
    pdf.set_font("helvetica", size=12)
    pdf.cell(text="Tarn Valley Millimetre Lab: not a mesh")
    return bytes(pdf.output())


def _single_triangle() -> bytes:
    v, f = _cube()
    return stl_binary(v, f[:1])


def _all_degenerate() -> bytes:
    v, f = _cube()
    return stl_binary(np.zeros_like(v), f)


HOSTILE: tuple[Hostile, ...] = (
    # ZIP and 3MF packaging
    Hostile("bomb.3mf", "ZIP bomb: a 40 kB model member that inflates to 40 MiB", lambda: package(b" " * (40 * 2**20))),
    Hostile("bomb-lying-index.3mf", "ZIP bomb whose index claims 1,000 bytes for 40 MiB", lambda: lying_zip(40 * 2**20, 1000)),
    Hostile("high-ratio.3mf", "a member deflated a thousand to one, under every size cap", _high_ratio),
    Hostile("many-members.3mf", "300 extra members", _many_members),
    Hostile("nested-zip.3mf", "another ZIP inside the package", lambda: _package({"Metadata/parts.zip": zip_bytes({"a": b"b"})})),
    Hostile("nested-disguised.3mf", "a ZIP inside under an image's name",
            lambda: _package({"Metadata/thumb.png": zip_bytes({"a": b"b"})})),
    Hostile("nested-gzip.3mf", "a gzip stream inside the package", lambda: _package({"Metadata/extra.bin": gzip.compress(b"x" * 100)})),
    Hostile("traversal.3mf", "member named ../../evil.model", lambda: _package({"../../evil.model": b"x"})),
    Hostile("absolute-path.3mf", "member named /etc/cron.d/evil", lambda: _package({"/etc/cron.d/evil": b"x"})),
    Hostile("drive-letter.3mf", "member named C:\\evil.model", lambda: _package({"C:\\evil.model": b"x"})),
    Hostile("no-model.3mf", "a ZIP without 3D/3dmodel.model", lambda: zip_bytes({"[Content_Types].xml": CONTENT_TYPES,
                                                                                 "_rels/.rels": RELS})),
    Hostile("plain-zip.3mf", "an ordinary ZIP of an STL, named .3mf", _plain_zip),
    Hostile("truncated.3mf", "a 3MF cut off before its central directory", lambda: package(_model())[:-60]),
    Hostile("encrypted.3mf", "members flagged as encrypted", lambda: _flag_encrypted(package(_model()))),
    # XML inside 3MF
    Hostile("billion-laughs.3mf", "XML entity expansion (billion laughs)", lambda: package(billion_laughs(*_cube()))),
    Hostile("external-entity.3mf", "XML external entity reading /etc/passwd", _xxe),
    Hostile("deep-nesting.3mf", "XML nested 20,000 elements deep", _deep_xml),
    Hostile("malformed-xml.3mf", "a model document that is not well-formed XML", lambda: package(b"<model><resources>")),
    Hostile("bad-vertex-index.3mf", "a triangle naming a vertex that does not exist", _bad_vertex_index),
    # 3MF components (each counted and capped before anything is expanded)
    Hostile("component-cycle.3mf", "an object that contains itself through its components", _component_cycle),
    Hostile("component-fan-out.3mf", "six levels of ten components: 12 million triangles from a few kB",
            _component_fan_out),
    Hostile("component-flood.3mf", "100,001 components of one cube", lambda: fan_out_3mf(100_001)),
    Hostile("component-depth.3mf", "components nested 40 levels deep", _deep_components),
    Hostile("missing-object.3mf", "a component naming an object the model does not define",
            lambda: _assembly({"2": [("1", None), ("9", None)]}, "2")),
    Hostile("case-twins.3mf", "two model parts whose names differ only in case, with different units", _case_twins),
    # STL
    Hostile("lying-header.stl", "binary STL header claims 1,200 triangles, holds 12", lambda: _stl(count=1200)),
    Hostile("header-zero.stl", "binary STL header claims 0 triangles, holds 12", lambda: _stl(count=0)),
    Hostile("header-4-billion.stl", "binary STL header claims 4,294,967,295 triangles", lambda: _stl(count=2**32 - 1)[:84 + 50]),
    Hostile("truncated-binary.stl", "binary STL cut in the middle of a triangle", lambda: _stl()[:-17]),
    Hostile("nan.stl", "NaN coordinates", lambda: _stl_with(_set((3, 1), (np.nan, 0, 0)))),
    Hostile("infinity.stl", "infinite coordinates", lambda: _stl_with(_set((0, 0), (np.inf, -np.inf, 0)))),
    Hostile("huge-coordinates.stl", "coordinates of 1e30 mm", lambda: _stl_with(_set((0, 0), (1e30, 1e30, 1e30)))),
    Hostile("ten-million.stl", "10 million triangles in a true 500 MB binary STL", _ten_million_stl),
    Hostile("truncated-ascii.stl", "ASCII STL cut off mid-facet", lambda: stl_ascii(*_cube())[:700]),
    Hostile("text-numbers.stl", "ASCII STL with words where numbers belong",
            lambda: stl_ascii(*_cube()).replace(b"0.000000e+00", b"zero", 1)),
    Hostile("empty-solid.stl", "ASCII STL with no facets", lambda: b"solid empty\nendsolid empty\n"),
    Hostile("single-triangle.stl", "one triangle: an open surface, not a solid", _single_triangle),
    Hostile("all-degenerate.stl", "12 triangles of zero area", _all_degenerate),
    # Empty, tiny, wrong extension, not a mesh at all
    Hostile("empty.stl", "zero bytes", lambda: b""),
    Hostile("one-byte.stl", "a single byte", lambda: b"\x00"),
    Hostile("picture.stl", "a PNG picture named .stl", _png),
    Hostile("script.stl", "an HTML page with a script named .stl", lambda: b"<html><script>alert(1)</script></html>"),
    Hostile("document.3mf", "a PDF named .3mf", _pdf),
    Hostile("gzipped.stl", "a gzip-compressed STL named .stl", lambda: gzip.compress(_stl())),
    Hostile("binary-stl.obj", "a binary STL named .obj", _stl),
    Hostile("obj-named.stl", "an OBJ named .stl", lambda: obj(*_cube())),
    Hostile("ply-named.3mf", "a PLY named .3mf", lambda: ply_binary(*_cube())),
    Hostile("random.bin", "4,000 random bytes", lambda: np.random.default_rng(7).bytes(4000)),
    # OBJ and PLY
    Hostile("ten-million.obj", "an OBJ with 10 million faces (80 MB)", _ten_million_obj),
    Hostile("bad-index.obj", "an OBJ face naming vertex 9 of 3", lambda: b"v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 9\n"),
    Hostile("ten-million-header.ply", "a PLY header declaring 10 million faces", lambda: _ply_header(3, 10_000_000)),
    Hostile("four-billion-vertices.ply", "a PLY header declaring 4 billion vertices, then nothing",
            lambda: _ply_header(4_000_000_000, 1)),
    Hostile("bare-header.ply", "a PLY header and no data", lambda: _ply_header(3, 1)[:-1]),
    Hostile("zero-index.obj", "an OBJ face naming vertex 0 (OBJ counts from 1)",
            lambda: b"v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nf 0 1 2\nf 1 2 3\n"),
    Hostile("tabs.obj", "an OBJ cube whose fields are separated by tabs", lambda: obj(*_cube()).replace(b" ", b"\t")),
    Hostile("short-rows.ply", "an ASCII PLY declaring 12 faces that holds 6", lambda: _ascii_ply(12, 6)),
    Hostile("middle-endian.ply", "a PLY in format binary_middle_endian", lambda: _ascii_ply(12, 12, "binary_middle_endian")),
    Hostile("stray-byte.stl", "a binary STL with one stray byte after its last triangle", lambda: _stl() + b"\n"),
    # Hostile names on good content (the web layer stores under a generated name)
    Hostile("../../etc/passwd.stl", "a path-traversal upload name", _stl),
    Hostile("C:\\Windows\\system32\\lens.stl", "a Windows path as upload name", _stl),
    Hostile("lens\x00.stl\r\n<script>.stl", "control characters and markup in the name", _stl),
    Hostile("x" * 300 + ".stl", "a 304-character name", _stl),
)


@dataclass(frozen=True)
class Outcome:
    """What intake did: refused with a code and sentence, or read (with the report's verdict so far)."""

    kind: str  # "refused" or "read"
    code: str
    sentence: str


def outcome(item: Hostile, *, limits, data: bytes | None = None) -> Outcome:
    """Run one hostile file (its bytes, built when not given) through the worker's reader."""
    from services.errors import UnusableInput
    from services.findings import verdict_of
    from services.intake import read_part

    data = item.build() if data is None else data
    try:
        part = read_part(data, name=display_name(item.name), units=item.units, limits=limits)
    except UnusableInput as exc:
        return Outcome("refused", exc.code, exc.message)
    worst = next((f.message for f in part.findings if f.severity == "blocker"), "")
    return Outcome("read", verdict_of(part.findings), worst)


def display_name(name: str) -> str:
    """Return the name as the site keeps it (webapp.checks.services._clean_name)."""
    from webapp.checks.services import _clean_name

    return _clean_name(name)


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def table(limits) -> str:
    """Return the Markdown table of every hostile file and its outcome."""
    rows = ["| # | upload name | what it tries | outcome | the sentence the user sees |", "|---|---|---|---|---|"]
    for i, item in enumerate(HOSTILE, 1):
        result = outcome(item, limits=limits)
        shown = repr(item.name)[1:-1] if len(item.name) < 60 else repr(item.name[:20])[1:-1] + "... (304 chars)"
        verdict = f"refused `{result.code}`" if result.kind == "refused" else f"read, verdict `{result.code}`"
        rows.append(f"| {i} | `{_cell(shown)}` | {_cell(item.tries)} | {verdict} | {_cell(result.sentence) or '-'} |")
    return "\n".join(rows)


def site_limits():
    """Return the intake limits the site's settings give (as the worker uses them)."""
    import django

    django.setup()
    from webapp.checks.services import intake_limits

    return intake_limits()


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--write", action="store_true", help="rewrite the table in docs/security.md")
    args = parser.parse_args(argv)
    text = table(site_limits())
    if not args.write:
        print(text)
        return 0
    doc = DOC.read_text()
    head, rest = doc.split(START, 1)
    _, tail = rest.split(END, 1)
    DOC.write_text(f"{head}{START}\n{text}\n{END}{tail}")
    print(f"wrote {len(HOSTILE)} rows to {DOC.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    import os

    os.environ.setdefault("DJANGO_SETTINGS_MODULE", "webapp.settings")
    sys.exit(main(sys.argv[1:]))
