"""Tests for services.intake.threemf_model: components counted and capped before expansion, expansion that matches
another reader, and every refusal with its sentence."""

from __future__ import annotations

import io
import tracemalloc
import zipfile

import numpy as np
import pytest
import trimesh

from services.errors import UnusableInput
from services.intake import IntakeLimits, read_part
from services.intake.threemf_model import ComponentLimits, read_model
from tests.data.make_files import assembly_xml, cube, fan_out_3mf, package

CUBE = {"1": cube(2.0)}
SHIFT_X10 = "1 0 0 0 1 0 0 0 1 10 0 0"
# A quarter turn about z then a shift: x' = -y + 5, y' = x (3MF core spec, from memory: p' = [p 1] M, rows m0 m1 m2 m3).
TURN_Z90_SHIFT = "0 1 0 -1 0 0 0 0 1 5 0 0"


def expanded(model: bytes, **caps) -> tuple[np.ndarray, np.ndarray]:
    return read_model(io.BytesIO(model), name="part.3mf", limits=ComponentLimits(**caps))


def refusal(model: bytes, **caps) -> UnusableInput:
    with pytest.raises(UnusableInput) as caught:
        expanded(model, **caps)
    return caught.value


def package_model_of(data: bytes) -> bytes:
    """Return the model document inside a 3MF package."""
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        return zf.read("3D/3dmodel.model")


def test_nested_components_land_where_another_reader_puts_them():
    """A cube placed twice through two levels of transforms has the corners trimesh's 3MF loader gives."""
    model = assembly_xml(CUBE, {"2": [("1", None), ("1", SHIFT_X10)], "3": [("2", TURN_Z90_SHIFT)]},
                         [("3", "1 0 0 0 1 0 0 0 1 0 0 7")])
    v, f = expanded(model)
    # trimesh (PyPI) reads the same package with its own scene graph: the reference for placement.
    ref = trimesh.load(io.BytesIO(package(model)), file_type="3mf", force="mesh", process=False)
    assert len(f) == 24 == len(ref.faces)
    assert np.allclose(np.sort(v[f].reshape(-1, 3), axis=0), np.sort(ref.vertices[ref.faces].reshape(-1, 3), axis=0))
    # By hand: x' = -y + 5 and y' = x, so the shifted copy (x in 10..12) lands at y 10..12; z lifted by 7.
    assert v.min(axis=0).tolist() == pytest.approx([3.0, 0.0, 7.0])
    assert v.max(axis=0).tolist() == pytest.approx([5.0, 12.0, 9.0])


def test_two_build_items_of_one_object_place_it_twice():
    """The build may place one object more than once; each item's transform applies to its copy."""
    v, f = expanded(assembly_xml(CUBE, {}, [("1", None), ("1", SHIFT_X10)]))
    assert len(f) == 24 and v.min(axis=0).tolist() == [0, 0, 0] and v.max(axis=0).tolist() == [12, 2, 2]


def test_a_fan_out_expands_to_one_cube_per_component():
    """500 components of one 12-triangle cube give 6,000 triangles on the grid the transforms name."""
    part = read_part(fan_out_3mf(500), name="fan.3mf")
    assert (len(part.faces), part.bodies) == (6000, 500)
    # 23 per row at a 1 mm pitch (ceil(sqrt(500)) = 23): rows 0..21, the last one partly filled.
    assert part.vertices_mm.max(axis=0).tolist() == pytest.approx([22.5, 21.5, 0.5])


def test_a_component_cycle_is_refused_before_any_expansion():
    """Object 2 holds 3 and 3 holds 2: refused by name, in a few kilobytes of memory."""
    model = assembly_xml(CUBE, {"2": [("1", None), ("3", None)], "3": [("2", SHIFT_X10)]}, [("2", None)])
    tracemalloc.start()
    error = refusal(model)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert error.code == "3mf_component_cycle" and "'2'" in error.message and "cycle" in error.message
    assert peak < 2**20


def test_a_self_reference_is_a_cycle():
    """An object that lists itself as its component is a cycle of one."""
    model = assembly_xml(CUBE, {"2": [("2", None)]}, [("2", None)])
    assert refusal(model).code == "3mf_component_cycle"


@pytest.mark.parametrize("model", [
    assembly_xml(CUBE, {"2": [("9", None)]}, [("2", None)]),
    assembly_xml(CUBE, {}, [("7", None)]),
], ids=["component", "item"])
def test_a_missing_object_is_refused_with_its_id(model):
    """A component or a build item naming an undefined object is refused, naming the id."""
    error = refusal(model)
    assert error.code == "3mf_missing_object" and ("'9'" in error.message or "'7'" in error.message)


def test_more_components_than_the_cap_are_refused_while_reading():
    """The component cap stops the stream at the first component past it."""
    error = refusal(package_model_of(fan_out_3mf(101)), max_components=100)
    assert error.code == "3mf_too_many_components" and "100" in error.message


def test_nesting_deeper_than_the_cap_is_refused():
    """A chain of 18 assemblies over one cube is 18 levels deep, past 16."""
    chain = {str(i): [(str(i - 1), None)] for i in range(2, 20)}
    error = refusal(assembly_xml(CUBE, chain, [("19", None)]))
    assert error.code == "3mf_too_deep" and "18 levels" in error.message


def test_a_doubling_fan_out_is_refused_from_its_counts_in_small_memory():
    """Ten levels of "two of the one below" ask for 12 x 2^10 triangles: refused without expanding."""
    levels = {str(i): [(str(i - 1), None), (str(i - 1), SHIFT_X10)] for i in range(2, 12)}
    model = assembly_xml(CUBE, levels, [("11", None)])
    tracemalloc.start()
    error = refusal(model, max_triangles=10_000)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert error.code == "too_many_triangles" and f"{12 * 2**10:,} triangles" in error.message
    assert peak < 2**20


def test_placed_objects_past_the_instance_cap_are_refused():
    """Empty assemblies still cost a placement each; their count is capped too."""
    levels = {str(i): [(str(i - 1), None)] * 4 for i in range(2, 10)}
    error = refusal(assembly_xml(CUBE, levels, [("9", None)]), max_instances=10_000)
    assert error.code == "3mf_too_many_components"


def test_a_transform_that_is_not_twelve_numbers_is_refused():
    """A transform of three numbers is malformed XML for 3MF."""
    model = assembly_xml(CUBE, {"2": [("1", "1 0 0")]}, [("2", None)])
    assert refusal(model).code == "xml_malformed"


def test_a_component_in_another_model_part_is_refused_with_its_path():
    """A production-extension component in another model part is refused, not silently dropped."""
    model = assembly_xml(CUBE, {"2": [("1", None)]}, [("2", None)]).replace(
        b'<component objectid="1"', b'<component xmlns:p="http://schemas.microsoft.com/3dmanufacturing/production/'
        b'2015/06" p:path="/3D/other.model" objectid="1"')
    error = refusal(model)
    assert error.code == "3mf_external_part" and "/3D/other.model" in error.message


def test_intake_passes_its_limits_to_the_component_caps():
    """IntakeLimits' component cap reaches the 3MF reader."""
    with pytest.raises(UnusableInput) as caught:
        read_part(fan_out_3mf(50), name="fan.3mf", limits=IntakeLimits(max_3mf_components=10))
    assert caught.value.code == "3mf_too_many_components" and caught.value.message.startswith("fan.3mf: ")
