"""The manifold3d gate, facet counts, the build-volume fit, and what a Component carries."""

import json
import math

import manifold3d
import numpy as np
import pytest

from services.components import KINDS, build_component
from services.components.solid import CHORD_TOL_MM, check_fits, checked, from_arrays, segments_for
from services.errors import UnusableInput

from .test_export import SMALL


def test_a_mesh_that_is_not_a_closed_manifold_raises_our_error():
    """An open box (five faces of a cube) comes back from manifold3d as a status, which becomes UnusableInput."""
    v = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0], [0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1]], float)
    f = np.array([[0, 2, 1], [0, 3, 2], [0, 1, 5], [0, 5, 4], [1, 2, 6], [1, 6, 5], [2, 3, 7], [2, 7, 6],
                  [3, 0, 4], [3, 4, 7]])
    with pytest.raises(UnusableInput, match="NotManifold") as info:
        from_arrays(v, f, "test box")
    assert info.value.code == "geometry_failed"
    closed = np.vstack([f, [[4, 5, 6], [4, 6, 7]]])
    assert from_arrays(v, closed, "test box").volume() == pytest.approx(1.0)


def test_an_empty_result_is_not_taken_for_a_part():
    """Two solids that do not meet intersect in nothing: NoError, but empty, so still refused."""
    a = manifold3d.Manifold.cube((1.0, 1.0, 1.0))
    empty = manifold3d.Manifold.batch_boolean([a, a.translate((5.0, 0.0, 0.0))], manifold3d.OpType.Intersect)
    assert empty.status() == manifold3d.Error.NoError
    with pytest.raises(UnusableInput, match="came out empty"):
        checked(empty, "test part")


@pytest.mark.parametrize("radius", [0.1, 0.24, 1.0, 15.0, 30.0, 75.0])
def test_facets_stay_within_the_chord_tolerance_without_overdoing_it(radius):
    """Sagitta R (1 - cos(pi / N)) <= 5 um, well under a 25 um pixel; and N at most 4 + what that needs."""
    n = segments_for(radius)
    assert n % 4 == 0
    assert radius * (1 - math.cos(math.pi / n)) <= CHORD_TOL_MM + 1e-12
    needed = math.pi / math.acos(1 - CHORD_TOL_MM / radius) if radius > CHORD_TOL_MM else 0
    assert n <= max(12, needed + 4)


def test_a_part_may_be_turned_to_fit_a_build_volume():
    """100 x 100 x 2 mm fits 130 x 80 x 160 standing on an edge; 140 x 140 x 2 fits no way round."""
    check_fits((100.0, 100.0, 2.0), [(130.0, 80.0, 160.0)], "window")
    check_fits((1e4, 1e4, 1e4), None, "window")
    with pytest.raises(UnusableInput, match="130 x 80 x 160 mm"):
        check_fits((140.0, 140.0, 2.0), [(130.0, 80.0, 160.0)], "window")


@pytest.mark.parametrize("kind", KINDS)
def test_a_component_serialises_its_parameters(resin, kind):
    """kind, material slug, design frequency, index and derived values are plain JSON in the part's parameters."""
    component = build_component(kind, SMALL[kind], material=resin)
    text = json.dumps(component.to_dict())
    p = component.part.parameters
    assert p["kind"] == kind and p["material"] == "flat-resin" and p["freq_ghz"] > 0 and p["n"] > 1
    assert all(p[key] == value for key, value in component.derived.items())
    assert json.loads(text)["derived"] == component.derived
    assert component.part.source_format == "generated" and component.part.units == "mm"
