"""Tests for services.intake: sniffing, hostile files, good files in every format, mesh health, units."""

from __future__ import annotations

import hashlib
import io
import tracemalloc
import zipfile
from pathlib import Path

import numpy as np
import pytest
import trimesh
from stl import mesh as stl_mesh  # numpy-stl, a general-purpose STL library from PyPI

from services.errors import UnusableInput
from services.findings import verdict_of
from services.intake import IntakeLimits, part_from_arrays, read_part, sniff_format
from services.intake.health import _kernel

DATA = Path(__file__).resolve().parents[1] / "data"
INCH_MM = 25.4
# The test cube is one inch on a side; its volume is side cubed (elementary geometry).
CUBE_MM3 = INCH_MM**3
CUBE_FILES = ["cube_binary.stl", "cube_ascii.stl", "cube.obj", "cube.ply", "cube_inch.3mf"]


def read(name: str, **kwargs):
    """Return the Part for a file in tests/data."""
    return read_part((DATA / name).read_bytes(), name=name, **kwargs)


def refusal(data: bytes, name: str, **kwargs) -> UnusableInput:
    """Return the UnusableInput that reading the bytes raises."""
    with pytest.raises(UnusableInput) as caught:
        read_part(data, name=name, **kwargs)
    return caught.value


def binary_stl(triangles: np.ndarray) -> bytes:
    """Encode (n, 3, 3) triangles as a binary STL with numpy-stl's writer (a library other than ours)."""
    solid = stl_mesh.Mesh(np.zeros(len(triangles), dtype=stl_mesh.Mesh.dtype))
    solid.vectors[:] = triangles
    buf = io.BytesIO()
    solid.save("part.stl", fh=buf, mode=stl_mesh.stl.Mode.BINARY, update_normals=False)
    return buf.getvalue()


def box(side: float = 10.0, offset=(0.0, 0.0, 0.0)) -> tuple[np.ndarray, np.ndarray]:
    """Return the vertices and outward faces of an axis-aligned cube centred at offset."""
    cube = trimesh.creation.box(extents=(side, side, side))
    return np.asarray(cube.vertices) + offset, np.asarray(cube.faces)


def peak_bytes(call) -> int:
    """Return the peak traced memory a call allocates beyond what was live when it started."""
    tracemalloc.start()
    try:
        start = tracemalloc.get_traced_memory()[0]
        try:
            call()
        except UnusableInput:
            pass
        return tracemalloc.get_traced_memory()[1] - start
    finally:
        tracemalloc.stop()


def findings_of(part, rule: str) -> list:
    """Return the part's findings for one rule."""
    return [f for f in part.findings if f.rule == rule]


# ------------------------------------------------------------------------------------- hostile files


def test_it_refuses_a_zip_bomb_dressed_as_3mf_before_inflating_it():
    """A 41 kB 3MF whose model inflates to 40 MiB is refused from the ZIP index, in bounded memory."""
    data = (DATA / "bomb.3mf").read_bytes()
    naive = peak_bytes(lambda: zipfile.ZipFile(io.BytesIO(data)).read("3D/3dmodel.model"))
    ours = peak_bytes(lambda: read_part(data, name="bomb.3mf"))
    assert refusal(data, "bomb.3mf").code == "zip_bomb"
    assert naive > 40 * 2**20  # the measurement sees an inflated member, so the bound below means something
    assert ours < 2**20


def test_it_refuses_a_3mf_whose_zip_index_understates_a_member():
    """A member that claims 1,000 bytes but inflates to 40 MiB fails its check, without inflating it all."""
    data = (DATA / "bomb_lying_size.3mf").read_bytes()
    assert refusal(data, "bomb_lying_size.3mf").code == "zip_corrupt"
    assert peak_bytes(lambda: read_part(data, name="bomb_lying_size.3mf")) < 4 * 2**20


@pytest.mark.parametrize(
    ("limits", "code"),
    [
        (IntakeLimits(zip_max_members=2), "zip_too_many_members"),
        (IntakeLimits(zip_max_member_bytes=500), "zip_bomb"),
        (IntakeLimits(zip_max_total_bytes=1000), "zip_bomb"),
        (IntakeLimits(zip_max_ratio=1.5), "zip_bomb"),
    ],
)
def test_it_applies_each_zip_cap_to_a_3mf(limits, code):
    """Member count, member size, total size and ratio caps each refuse an otherwise good 3MF."""
    assert refusal((DATA / "cube_inch.3mf").read_bytes(), "cube_inch.3mf", limits=limits).code == code


def test_it_refuses_a_binary_stl_whose_header_lies_about_its_triangle_count():
    """The refusal names the file and gives both the declared and the real count."""
    error = refusal((DATA / "lying_header.stl").read_bytes(), "lens.stl")
    assert error.code == "stl_count_mismatch"
    assert error.message == ("lens.stl: the header says 1,200 triangles but the file holds 12; "
                             "the file is truncated or not a binary STL.")


def test_it_refuses_random_bytes():
    """Bytes in no mesh format are refused as an unrecognised format."""
    assert refusal((DATA / "random.bin").read_bytes(), "random.bin").code == "unknown_format"


def test_it_refuses_nan_vertices():
    """A binary STL with a NaN coordinate is refused, with the number of bad vertices."""
    v, f = box()
    tris = v[f]
    tris[3, 1] = (np.nan, 0.0, np.inf)
    error = refusal(binary_stl(tris), "nan.stl")
    assert error.code == "non_finite"
    assert error.message.startswith("nan.stl: 1 vertex has NaN or infinite coordinates")


def test_it_refuses_an_empty_file():
    """A zero-byte upload is refused as empty."""
    assert refusal(b"", "lens.stl").code == "empty_file"


def test_it_refuses_a_truncated_ascii_stl():
    """An ASCII STL cut off mid-facet is refused, not read as a smaller mesh."""
    assert refusal((DATA / "truncated_ascii.stl").read_bytes(), "cut.stl").code == "stl_truncated"


def test_it_refuses_a_nested_archive_inside_a_3mf():
    """A 3MF that carries another ZIP is refused."""
    assert refusal((DATA / "nested.3mf").read_bytes(), "nested.3mf").code == "zip_nested"


def test_it_refuses_a_nested_archive_by_its_signature_whatever_its_name():
    """A ZIP hidden under an innocent member name is found from its first bytes."""
    data = (DATA / "nested.3mf").read_bytes().replace(b"Metadata/parts.zip", b"Metadata/parts.png")
    assert refusal(data, "nested.3mf").code == "zip_nested"


def test_it_refuses_path_traversal_names_in_a_3mf():
    """A member named '../../evil.model' is refused and quoted in the message."""
    error = refusal((DATA / "traversal.3mf").read_bytes(), "traversal.3mf")
    assert error.code == "zip_unsafe_name"
    assert "'../../evil.model'" in error.message


def test_it_refuses_a_3mf_with_an_xml_entity():
    """A model with a DOCTYPE declaring nested entities (billion laughs) is refused before parsing."""
    data = (DATA / "entity.3mf").read_bytes()
    assert refusal(data, "entity.3mf").code == "xml_doctype"
    assert peak_bytes(lambda: read_part(data, name="entity.3mf")) < 2**20


def test_it_refuses_a_3mf_without_its_model():
    """A ZIP without 3D/3dmodel.model is not a 3MF."""
    assert refusal((DATA / "no_model.3mf").read_bytes(), "no_model.3mf").code == "3mf_missing_model"


def test_it_refuses_a_file_over_the_size_limit():
    """The byte limit applies before anything is parsed."""
    error = refusal((DATA / "cube_binary.stl").read_bytes(), "big.stl", limits=IntakeLimits(max_bytes=100))
    assert error.code == "too_large"


@pytest.mark.parametrize("name", ["cube_binary.stl", "cube_ascii.stl", "cube.obj", "cube.ply", "cube_inch.3mf"])
def test_it_refuses_too_many_triangles_in_every_format(name):
    """A 12-triangle cube is refused under a 10-triangle limit whatever its format."""
    error = refusal((DATA / name).read_bytes(), name, limits=IntakeLimits(max_triangles=10))
    assert error.code == "too_many_triangles"
    assert "12 triangles" in error.message


def test_it_refuses_a_part_beyond_the_extent_limit_and_names_a_better_unit():
    """A one-inch cube read as inches under a 100 mm limit is refused, suggesting mm."""
    error = refusal((DATA / "cube_binary.stl").read_bytes(), "cube.stl", units="inch",
                    limits=IntakeLimits(max_extent_mm=100.0))
    assert error.code == "too_large_extent"
    assert "645.2 mm across" in error.message and "units mm" in error.message


def test_an_absurd_extent_is_said_in_powers_of_ten():
    """A box 1e30 mm long is refused with '1e+30 mm across', not thirty-one digits (Python format spec 'g')."""
    box = trimesh.creation.box((1e30, 1.0, 1.0))
    error = refusal(box.export(file_type="stl"), "huge.stl", units="mm")
    assert error.code == "too_large_extent"
    assert "the part is 1e+30 mm across" in error.message and "000,000" not in error.message


def test_it_refuses_a_file_with_no_triangles():
    """A well-formed ASCII STL with no facets is refused."""
    assert refusal(b"solid empty\nendsolid empty\n", "empty.stl").code == "no_triangles"


@pytest.mark.parametrize(
    ("data", "code"),
    [
        (b"solid x\nfacet normal 0 0 1\nouter loop\nvertex 0 0 0\nvertex 1 0 0\nvertex 0 one 0\nendloop\n"
         b"endfacet\nendsolid x\n", "stl_malformed"),
        (b"v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\nf 1 2 9\n", "unreadable"),
        (b"v 0 0 0\nv 1 0 0\nv 0 1 0\n", "no_triangles"),
        (b"ply\nformat ascii 1.0\nelement vertex 3\nproperty float x\nend_header\n", "ply_truncated"),
        ((DATA / "cube_inch.3mf").read_bytes()[:-30], "zip_corrupt"),
    ],
)
def test_it_refuses_malformed_files_with_a_specific_code(data, code):
    """Broken numbers, bad face indices, missing faces, a bare PLY header and a cut ZIP are refused."""
    assert refusal(data, "broken").code == code


def test_it_refuses_an_unknown_unit():
    """Only the listed units are accepted; nothing is guessed."""
    error = refusal((DATA / "cube_binary.stl").read_bytes(), "cube.stl", units="furlong")
    assert error.code == "unknown_unit"


HOSTILE = {
    "bomb.3mf": {}, "bomb_lying_size.3mf": {}, "lying_header.stl": {}, "random.bin": {},
    "truncated_ascii.stl": {}, "nested.3mf": {}, "traversal.3mf": {}, "entity.3mf": {}, "no_model.3mf": {},
    "cube_binary.stl": {"limits": IntakeLimits(max_triangles=1)},
}


@pytest.mark.parametrize("name", sorted(HOSTILE))
def test_every_refusal_is_one_sentence_that_names_the_file(name):
    """Each refusal is a single sentence, prefixed with the file's name, with no traceback text."""
    message = refusal((DATA / name).read_bytes(), f"upload-{name}", **HOSTILE[name]).message
    assert message.startswith(f"upload-{name}: ")
    assert message.endswith(".") and message.count(". ") == 0
    assert "\n" not in message and "Traceback" not in message


# ---------------------------------------------------------------------------------------- good files


def test_it_reads_a_binary_stl_and_agrees_with_numpy_stl():
    """The volume matches numpy-stl's get_mass_properties and the analytic cube."""
    part = read("cube_binary.stl")
    # numpy-stl (PyPI) computes the volume from the same float32 triangles independently.
    reference_mm3 = stl_mesh.Mesh.from_file(str(DATA / "cube_binary.stl")).get_mass_properties()[0]
    assert part.source_format == "stl_binary" and part.units == "mm"
    assert part.volume_mm3 == pytest.approx(reference_mm3, rel=1e-12)
    assert part.volume_mm3 == pytest.approx(CUBE_MM3, rel=1e-6)  # float32 rounding of 25.4
    assert (len(part.vertices_mm), len(part.faces), part.bodies, part.watertight) == (8, 12, 1, True)
    assert part.findings == ()
    assert part.sha256 == hashlib.sha256((DATA / "cube_binary.stl").read_bytes()).hexdigest()


def test_it_reads_an_ascii_stl_and_agrees_with_numpy_stl():
    """The ASCII reader agrees with numpy-stl's volume for the same file."""
    part = read("cube_ascii.stl")
    # numpy-stl (PyPI) reads the ASCII form too, but into float32, hence the looser tolerance.
    reference_mm3 = stl_mesh.Mesh.from_file(str(DATA / "cube_ascii.stl")).get_mass_properties()[0]
    assert part.source_format == "stl_ascii"
    assert part.volume_mm3 == pytest.approx(reference_mm3, rel=1e-6)
    assert part.volume_mm3 == pytest.approx(CUBE_MM3, rel=1e-12)


@pytest.mark.parametrize("name", CUBE_FILES)
def test_every_format_gives_the_same_volume_for_the_same_cube(name):
    """STL (both forms), OBJ, PLY and a 3MF in inches all give 25.4^3 mm^3, closed, in one body."""
    part = read(name)
    assert part.volume_mm3 == pytest.approx(CUBE_MM3, rel=1e-6)
    assert part.bbox_mm == pytest.approx((INCH_MM,) * 3, rel=1e-6)
    assert (part.bodies, part.watertight, verdict_of(part.findings)) == (1, True, "printable")


def test_it_scales_a_3mf_in_inches_to_mm():
    """The 3MF's unit="inch" is honoured: a 1-unit cube becomes 25.4 mm."""
    part = read("cube_inch.3mf")
    assert (part.source_format, part.units) == ("3mf", "inch")
    assert part.volume_mm3 == pytest.approx(CUBE_MM3, rel=1e-9)


def test_the_3mf_unit_wins_over_the_users_and_says_so():
    """A user's "mm" for an inch 3MF is overruled by the file, with a units note."""
    part = read("cube_inch.3mf", units="mm")
    assert part.units == "inch" and part.volume_mm3 == pytest.approx(CUBE_MM3, rel=1e-9)
    notes = findings_of(part, "units")
    assert [f.severity for f in notes] == ["note"] and "inch" in notes[0].message


def test_a_user_unit_that_matches_the_3mf_adds_no_note():
    """Saying "inch" for an inch 3MF is no conflict."""
    assert findings_of(read("cube_inch.3mf", units="inch"), "units") == []


def test_it_applies_the_users_unit_to_a_unitless_file():
    """The same STL read as inches is 25.4 times larger along each axis."""
    part = read("cube_binary.stl", units="inch")
    assert part.units == "inch"
    assert part.bbox_mm == pytest.approx((INCH_MM * INCH_MM,) * 3, rel=1e-6)
    assert part.volume_mm3 == pytest.approx(CUBE_MM3 * INCH_MM**3, rel=1e-6)


@pytest.mark.parametrize(("name", "fmt"), [("cube_binary.stl", "stl_binary"), ("cube_ascii.stl", "stl_ascii"),
                                           ("cube.obj", "obj"), ("cube.ply", "ply"), ("cube_inch.3mf", "3mf")])
def test_it_sniffs_the_format_from_the_bytes(name, fmt):
    """Each file's format comes from its content."""
    assert sniff_format((DATA / name).read_bytes()) == fmt


def test_it_ignores_a_misleading_extension():
    """A binary STL named .obj, whose header even starts with "solid", is read as binary STL."""
    data = (DATA / "cube_binary.stl").read_bytes()
    assert data.startswith(b"solid")
    assert read_part(data, name="lens.obj").source_format == "stl_binary"


# -------------------------------------------------------------------------------------- mesh health


def test_it_blocks_an_open_mesh_and_counts_its_open_edges():
    """A cube without its top face is a blocker with 4 open edges located at the hole."""
    v, f = box(10.0)
    top = np.all(v[f][:, :, 2] > 0, axis=1)
    part = read_part(binary_stl(v[f[~top]]), name="open.stl")
    [blocker] = [f for f in part.findings if f.severity == "blocker"]
    assert blocker.rule == "mesh_health" and blocker.count == 4 and blocker.measured == 4
    assert blocker.location_mm == pytest.approx((0.0, 0.0, 5.0))
    assert "4 open edges" in blocker.message
    assert not part.watertight and verdict_of(part.findings) == "not_printable"


def test_it_repairs_inconsistent_winding_and_says_so():
    """One reversed face is flipped back, noted, and the cube's volume is right."""
    v, f = box(10.0)
    f = f.copy()
    f[0] = f[0][::-1]
    part = part_from_arrays(v, f, name="wound.stl")
    [note] = findings_of(part, "mesh_health")
    assert note.severity == "note" and note.count == 1
    assert part.volume_mm3 == pytest.approx(1000.0)
    assert trimesh.Trimesh(part.vertices_mm, part.faces, process=False).is_winding_consistent


def test_it_keeps_the_outward_side_when_most_faces_are_reversed():
    """Seven of twelve faces reversed: the seven are the ones reported and fixed."""
    v, f = box(10.0)
    f = f.copy()
    f[:7] = f[:7, ::-1]
    part = part_from_arrays(v, f, name="wound.stl")
    assert [(x.severity, x.count) for x in part.findings] == [("note", 7)]
    assert part.volume_mm3 == pytest.approx(1000.0)


def test_it_repairs_winding_by_each_shells_majority_and_keeps_a_cavity():
    """A hollow cube whose outer shell has its first face reversed: only that face flips; volume 7,000."""
    outer_v, outer_f = box(20.0)
    inner_v, inner_f = box(10.0)
    outer_f = outer_f.copy()
    outer_f[0] = outer_f[0][::-1]
    part = part_from_arrays(np.r_[outer_v, inner_v], np.r_[outer_f, inner_f[:, ::-1] + 8], name="hollow.stl")
    assert part.volume_mm3 == pytest.approx(8000.0 - 1000.0)  # analytic: 20^3 - 10^3 mm^3
    assert [(f.severity, f.count) for f in part.findings if f.unit == "faces"] == [("note", 1)]


def test_it_turns_an_inside_out_part_outside_out():
    """A cube with every face reversed is flipped as a whole and noted."""
    v, f = box(10.0)
    part = part_from_arrays(v, f[:, ::-1], name="inverted.stl")
    assert "inside out" in part.findings[0].message
    assert part.volume_mm3 == pytest.approx(1000.0)


def test_it_keeps_a_cavity_shell_inward():
    """An inner shell wound inward is a cavity, not an inside-out part: volume is outer minus inner."""
    outer_v, outer_f = box(20.0)
    inner_v, inner_f = box(10.0)
    part = part_from_arrays(np.r_[outer_v, inner_v], np.r_[outer_f, inner_f[:, ::-1] + 8], name="hollow.stl")
    assert part.bodies == 2 and part.volume_mm3 == pytest.approx(8000.0 - 1000.0)
    assert all("inside out" not in f.message for f in part.findings)


def test_it_removes_degenerate_faces_and_says_so():
    """A face with a repeated corner and a collinear sliver are removed; the cube stays closed."""
    v, f = box(10.0)
    v = np.r_[v, [(v[0] + v[1]) / 2]]
    part = part_from_arrays(v, np.r_[f, [[0, 0, 1], [0, 8, 1]]], name="slivers.stl")
    [note] = findings_of(part, "mesh_health")
    assert note.count == 2 and "zero-area" in note.message
    assert part.watertight and len(part.faces) == 12 and len(part.vertices_mm) == 8


def test_it_counts_two_bodies():
    """Two separate cubes are two bodies, noted, with twice the volume."""
    (v1, f1), (v2, f2) = box(10.0), box(10.0, offset=(20.0, 0.0, 0.0))
    part = read_part(binary_stl(np.r_[v1[f1], v2[f2]]), name="pair.stl")
    assert part.bodies == 2 and part.volume_mm3 == pytest.approx(2000.0, rel=1e-6)
    assert [(f.severity, f.count) for f in part.findings] == [("note", 2)]


def test_it_flags_bodies_that_intersect():
    """Two unit cubes overlapping by half: manifold3d's union is 1.5 cubes, a caution for 0.5."""
    (v1, f1), (v2, f2) = box(10.0), box(10.0, offset=(5.0, 0.0, 0.0))
    part = part_from_arrays(np.r_[v1, v2], np.r_[f1, f2 + 8], name="overlap.stl")
    [caution] = [f for f in part.findings if f.severity == "caution"]
    assert caution.measured == pytest.approx(500.0)  # analytic: 2 x 1000 - 1500 mm^3
    assert verdict_of(part.findings) == "printable_with_cautions"


def test_it_turns_a_kernel_status_into_our_own_error():
    """A manifold3d result with a status other than NoError raises UnusableInput naming the status."""
    import manifold3d as m3d

    v, f = box(10.0)
    open_solid = m3d.Manifold(m3d.Mesh(vert_properties=v.astype(np.float32), tri_verts=f[1:].astype(np.uint32)))
    with pytest.raises(UnusableInput) as caught:
        _kernel(open_solid, name="open.stl")
    assert caught.value.code == "kernel_notmanifold" and caught.value.message.startswith("open.stl: ")


def test_it_flags_an_implausibly_small_part_and_suggests_metres():
    """A part 0.06 long read as mm is a units caution: in m it would be 60 mm, the most plausible unit."""
    tris = trimesh.creation.box(extents=(0.06, 0.04, 0.02)).triangles
    part = read_part(binary_stl(tris), name="tiny.stl")
    [caution] = findings_of(part, "units")
    assert caution.severity == "caution" and caution.measured == pytest.approx(0.06, rel=1e-6)
    # In inches it would be 1.5 mm, also within 1-1000 mm, but 60 mm sits nearer the range's middle.
    assert "drawn in m it is 60 mm across" in caution.message and "units m." in caution.message


def test_it_flags_an_implausibly_large_part_and_suggests_mm():
    """A 60-unit part read in inches is 1,524 mm: the caution suggests mm."""
    tris = trimesh.creation.box(extents=(60.0, 60.0, 10.0)).triangles
    part = read_part(binary_stl(tris), name="plate.stl", units="inch")
    [caution] = findings_of(part, "units")
    assert caution.limit == 1000.0 and "drawn in mm it is 60 mm across" in caution.message


def test_part_from_arrays_hashes_the_arrays_and_keeps_parameters():
    """A generated part's sha256 covers its float64 vertices and int64 faces; parameters ride along."""
    v, f = box(10.0)
    part = part_from_arrays(v, f, name="zoned lens", parameters={"diameter_mm": 60.0})
    expected = hashlib.sha256(v.astype(np.float64).tobytes() + f.astype(np.int64).tobytes()).hexdigest()
    assert (part.sha256, part.source_format, part.units) == (expected, "generated", "mm")
    assert part.parameters == {"diameter_mm": 60.0} and part.findings == ()


# ------------------------------------------------------------------ sentences and formats (issue 17, 16)


def test_a_3mf_with_model_parts_differing_only_in_case_is_refused():
    """3D/3dmodel.model beside 3D/3DModel.model: which is meant is ambiguous, so neither is read."""
    from tests.data.make_files import CONTENT_TYPES, RELS, model_xml, zip_bytes

    v, f = cube_mm(10.0)
    data = zip_bytes({"[Content_Types].xml": CONTENT_TYPES, "_rels/.rels": RELS,
                      "3D/3dmodel.model": model_xml(v, f, unit="millimeter"),
                      "3D/3DModel.model": model_xml(v * 2, f, unit="inch")})
    error = refusal(data, "twins.3mf")
    assert error.code == "3mf_ambiguous_parts"
    assert "'3D/3dmodel.model'" in error.message and "'3D/3DModel.model'" in error.message


def cube_mm(side: float):
    from tests.data.make_files import cube

    return cube(side)


def test_a_binary_stl_with_a_stray_trailing_byte_is_read_with_a_note():
    """Readers accept a tail shorter than one 50-byte record; the note says how many bytes were ignored."""
    from tests.data.make_files import stl_binary

    data = stl_binary(*cube_mm(10.0)) + b"\n"
    part = read_part(data, name="stray.stl")
    assert len(part.faces) == 12 and part.volume_mm3 == pytest.approx(1000.0)
    notes = [f.message for f in part.findings if "stray" in f.message]
    assert notes == ["stray.stl: 1 stray byte was ignored after the last of its 12 triangles (less than one 50-byte "
                     "triangle)."]


def test_a_binary_stl_a_whole_triangle_short_is_still_refused():
    """A file cut inside its last triangle is truncated, not padded."""
    from tests.data.make_files import stl_binary

    assert refusal(stl_binary(*cube_mm(10.0))[:-17], "cut.stl").code == "stl_count_mismatch"


def test_obj_faces_separated_by_tabs_are_read():
    """OBJ fields are separated by any white space; a tab-separated cube reads as the cube."""
    from tests.data.make_files import obj

    data = obj(*cube_mm(10.0)).replace(b" ", b"\t")
    part = read_part(data, name="tabs.obj")
    assert len(part.faces) == 12 and part.volume_mm3 == pytest.approx(1000.0)


def test_an_obj_face_naming_vertex_zero_is_refused():
    """OBJ numbers vertices from 1 (negatives count back from the last); 0 names no vertex."""
    error = refusal(b"v 0 0 0\nv 10 0 0\nv 0 10 0\nv 0 0 10\nf 0 1 2\nf 1 2 3\n", "zero.obj")
    assert error.code == "obj_zero_index" and "vertex 0" in error.message


def test_a_single_triangle_gets_the_open_surface_finding_in_a_report():
    """One triangle is an open surface: the report stands with the blocker, not a refusal as an empty part."""
    from services import catalogue
    from services.report import build_report
    from tests.data.make_files import stl_binary

    v, f = cube_mm(10.0)
    part = read_part(stl_binary(v, f[:1]), name="one.stl")
    report = build_report(part=part, printer=catalogue.printer("bay1-lcd-resin"),
                          material=catalogue.material("standard-resin"))
    assert report.verdict == "not_printable" and report.estimate is None and report.optics is None
    rules = [(x.rule, x.severity) for x in report.findings]
    assert ("mesh_health", "blocker") in rules and ("not_computed", "note") in rules
    assert any("not closed" in x.message for x in report.findings)


def _ascii_ply(v, f, *, declared_faces: int | None = None, fmt: str = "ascii") -> bytes:
    header = (f"ply\nformat {fmt} 1.0\nelement vertex {len(v)}\nproperty float x\nproperty float y\n"
              f"property float z\nelement face {len(f) if declared_faces is None else declared_faces}\n"
              "property list uchar int vertex_indices\nend_header\n")
    rows = "".join(f"{x:g} {y:g} {z:g}\n" for x, y, z in v) + "".join(f"3 {a} {b} {c}\n" for a, b, c in f)
    return (header + rows).encode()


def test_an_ascii_ply_declaring_more_faces_than_it_holds_is_refused():
    """12 faces declared, 6 present: the file is cut off, so nothing is read silently as half a part."""
    v, f = cube_mm(10.0)
    assert read_part(_ascii_ply(v, f), name="whole.ply").volume_mm3 == pytest.approx(1000.0)
    error = refusal(_ascii_ply(v, f[:6], declared_faces=12), "half.ply")
    assert error.code == "ply_truncated"
    assert "8 vertices and 12 faces (20 rows)" in error.message and "14 rows" in error.message


def test_a_ply_in_an_undefined_format_is_refused():
    """The PLY format line allows ascii, binary_little_endian and binary_big_endian (Turk's PLY description)."""
    v, f = cube_mm(10.0)
    error = refusal(_ascii_ply(v, f, fmt="binary_middle_endian"), "odd.ply")
    assert error.code == "ply_format" and "'binary_middle_endian'" in error.message


def test_a_huge_extent_is_written_with_a_few_digits():
    """1e30 mm is said as 1e+30, not as thirty-one digits of float noise."""
    from tests.data.make_files import stl_binary

    v, f = cube_mm(10.0)
    v = v.copy()
    v[0] = (1e30, 1e30, 1e30)
    error = refusal(stl_binary(v, f), "huge.stl")
    assert error.code == "too_large_extent" and "1e+30 mm across" in error.message
    assert max(len(tok) for tok in error.message.split()) < 20


def test_a_file_over_the_size_limit_says_both_real_sizes():
    """One byte over the limit: both sizes in bytes (services.sizes), so they never read as equal."""
    from tests.data.make_files import stl_binary

    data = stl_binary(*cube_mm(10.0))
    limit = len(data) - 1
    error = refusal(data, "big.stl", limits=IntakeLimits(max_bytes=limit))
    assert error.code == "too_large"
    assert f"big.stl: {len(data):,} bytes is over the {limit:,}-byte limit" in error.message


def test_a_memory_limit_while_parsing_is_not_reported_as_a_broken_file(monkeypatch):
    """MemoryError inside the OBJ parser passes through (the caller names the limit), not 'export again'."""
    def out_of_memory(*args, **kwargs):
        raise MemoryError

    monkeypatch.setattr(trimesh, "load", out_of_memory)
    with pytest.raises(MemoryError):
        read_part((DATA / "cube.obj").read_bytes(), name="cube.obj")


def test_a_time_limit_while_parsing_is_not_reported_as_a_broken_file(monkeypatch):
    """The worker's soft time limit inside the parser passes through as itself."""
    from celery.exceptions import SoftTimeLimitExceeded

    def too_slow(*args, **kwargs):
        raise SoftTimeLimitExceeded()

    monkeypatch.setattr(trimesh, "load", too_slow)
    with pytest.raises(SoftTimeLimitExceeded):
        read_part((DATA / "cube.ply").read_bytes(), name="cube.ply")


def test_the_corner_merge_matches_trimeshs_for_a_triangle_soup():
    """An icosphere written as STL (every corner repeated per facet) merges back to trimesh's own vertex count
    (trimesh's merge_vertices, a reference from PyPI), with every face's corners where they were."""
    import trimesh

    from services.intake.merge import _merge_vertices

    sphere = trimesh.creation.icosphere(subdivisions=5, radius=7.0)
    soup = sphere.vertices[sphere.faces].reshape(-1, 3)
    merged, faces = _merge_vertices(soup, np.arange(len(soup)).reshape(-1, 3))
    assert len(merged) == len(sphere.vertices)
    assert np.array_equal(merged[faces], sphere.vertices[sphere.faces])
