"""STL and 3MF export, read back with numpy-stl and trimesh."""

import io
import zipfile

import numpy as np
import pytest
import trimesh
from stl import mesh as stl_mesh

from services.components import KINDS, build_component, export_mesh
from services.errors import UnusableInput
from services.intake import read_part

SMALL = {
    "plano-convex": {"diameter_mm": 20.0, "focal_length_mm": 30.0},
    "zoned": {"diameter_mm": 20.0, "focal_length_mm": 20.0, "freq_ghz": 300.0},
    "multilevel": {"diameter_mm": 20.0, "focal_length_mm": 20.0, "freq_ghz": 300.0},
    "graded-index": {"diameter_mm": 6.0, "focal_length_mm": 6.0},
    "spiral": {"diameter_mm": 12.0},
    "window": {"diameter_mm": 12.0, "matching": "grooves"},
}


@pytest.fixture(scope="module")
def parts(resin):
    return {kind: build_component(kind, SMALL[kind], material=resin).part for kind in KINDS}


@pytest.mark.parametrize("kind", KINDS)
def test_binary_stl_reads_back_with_the_same_volume(parts, kind):
    """numpy-stl (a reference reader) sees 84 + 50 n bytes, the same triangles and the same closed volume."""
    part = parts[kind]
    data = export_mesh(part, "stl")
    assert len(data) == 84 + 50 * len(part.faces)
    read = stl_mesh.Mesh.from_file("part.stl", fh=io.BytesIO(data))
    volume, _, _ = read.get_mass_properties()
    assert volume == pytest.approx(part.volume_mm3, rel=1e-5)
    assert read.normals.shape == (len(part.faces), 3)


@pytest.mark.parametrize("kind", KINDS)
def test_the_stl_passes_our_own_intake(parts, kind):
    """Reading the export back through intake gives a clean, watertight, single-body part."""
    back = read_part(export_mesh(parts[kind], "stl"), name=f"{kind}.stl", units="mm")
    assert back.watertight and back.bodies == 1 and back.findings == ()
    assert back.volume_mm3 == pytest.approx(parts[kind].volume_mm3, rel=1e-5)


def test_3mf_is_in_millimetres_and_reads_back(parts):
    """The model part declares unit="millimeter" (3MF core spec); trimesh loads the same solid."""
    part = parts["zoned"]
    data = export_mesh(part, "3mf")
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        assert set(zf.namelist()) == {"[Content_Types].xml", "_rels/.rels", "3D/3dmodel.model"}
        assert 'unit="millimeter"' in zf.read("3D/3dmodel.model").decode()
    loaded = trimesh.load(io.BytesIO(data), file_type="3mf", force="mesh")
    assert loaded.is_watertight
    assert loaded.volume == pytest.approx(part.volume_mm3, rel=1e-5)
    assert np.asarray(loaded.bounds) == pytest.approx(part.bounds_mm, abs=1e-5)


def test_exports_are_reproducible(parts, resin):
    """The same parameters give the same bytes and the same part hash (no timestamps)."""
    again = build_component("spiral", SMALL["spiral"], material=resin).part
    assert again.sha256 == parts["spiral"].sha256
    assert export_mesh(again, "3mf") == export_mesh(parts["spiral"], "3mf")
    assert export_mesh(again, "stl") == export_mesh(parts["spiral"], "stl")


def test_it_refuses_an_unknown_format(parts):
    with pytest.raises(UnusableInput, match="stl or 3mf"):
        export_mesh(parts["spiral"], "obj")
