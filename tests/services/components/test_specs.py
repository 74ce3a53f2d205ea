"""Parameters of each kind, their defaults, and the sentences bad input gets."""

import pytest

from services.components import KINDS, build_component, component_parameters
from services.errors import UnusableInput


@pytest.mark.parametrize("kind", KINDS)
def test_every_kind_lists_typed_parameters_with_units_and_help(kind):
    """Each parameter has a unit-suffixed name, help text and a default of the type the CLI infers."""
    specs = component_parameters(kind)
    assert specs and len({s.name for s in specs}) == len(specs)
    for s in specs:
        assert s.help
        if s.name.endswith("_mm"):
            assert s.unit == "mm"
        if s.type == "choice":
            assert s.default in s.choices
        elif s.type == "int":
            assert isinstance(s.default, int) and not isinstance(s.default, bool)
        else:
            assert s.default is None or isinstance(s.default, float)
        assert s.to_dict()["name"] == s.name


def test_it_refuses_an_unknown_kind(resin):
    """An unknown kind names the kinds there are."""
    with pytest.raises(UnusableInput, match="plano-convex"):
        build_component("fresnel-mirror", {}, material=resin)


def test_it_refuses_an_unknown_parameter(resin):
    """A misspelt parameter is named, with the ones the kind takes."""
    with pytest.raises(UnusableInput, match="diametre_mm") as info:
        build_component("zoned", {"diametre_mm": 40}, material=resin)
    assert "diameter_mm" in info.value.message


@pytest.mark.parametrize(("kind", "params", "words"), [
    ("plano-convex", {"diameter_mm": 0}, "The diameter must be greater than 0 mm"),
    ("zoned", {"diameter_mm": -60}, "The diameter must be greater than 0 mm"),
    ("zoned", {"min_thickness_mm": 0}, "The minimum thickness must be greater than 0"),
    ("spiral", {"base_thickness_mm": -1}, "The base thickness must be greater than 0"),
    ("window", {"freq_min_ghz": 0}, "The lowest frequency must be greater than 0 GHz"),
    ("multilevel", {"levels": 1}, "The number of levels must be at least 2"),
    ("multilevel", {"levels": 17}, "The number of levels must be at most 16"),
    ("multilevel", {"levels": 2.5}, "whole number"),
    ("multilevel", {"profile": "axicon"}, "lens, deflector"),
    ("graded-index", {"lattice": "triangular"}, "square, hex"),
    ("plano-convex", {"diameter_mm": "wide"}, "must be a number"),
    ("plano-convex", {"diameter_mm": float("nan")}, "finite"),
])
def test_it_refuses_out_of_range_values_with_the_limit(resin, kind, params, words):
    """Non-positive sizes, level counts outside 2-16 and unknown choices get one sentence naming the limit."""
    with pytest.raises(UnusableInput) as info:
        build_component(kind, params, material=resin)
    assert words in info.value.message
    assert info.value.message.endswith(".")
    assert "_mm" not in info.value.message and "_ghz" not in info.value.message  # words, never code names


def test_it_refuses_a_topological_charge_of_zero(resin):
    """Charge 0 is a flat plate, not a spiral."""
    with pytest.raises(UnusableInput, match="charge of 0"):
        build_component("spiral", {"charge": 0}, material=resin)


@pytest.mark.parametrize("kind", ["plano-convex", "zoned", "multilevel", "graded-index"])
def test_it_refuses_a_focal_length_below_half_the_aperture(resin, kind):
    """f/D below 0.5 is refused, and the message states the limit and the shortest f."""
    with pytest.raises(UnusableInput, match=r"f/D of at least 0\.5, so f of at least 20 mm"):
        build_component(kind, {"diameter_mm": 40.0, "focal_length_mm": 19.9}, material=resin)


def test_it_accepts_f_over_d_of_exactly_one_half(resin):
    """The limit itself is allowed."""
    part = build_component("plano-convex", {"diameter_mm": 40.0, "focal_length_mm": 20.0}, material=resin).part
    assert part.watertight


@pytest.mark.parametrize(("kind", "params"), [
    ("plano-convex", {"freq_ghz": 2100.0}),
    ("zoned", {"freq_ghz": 24.0}),
    ("graded-index", {"max_freq_ghz": 2100.0}),
    ("window", {"freq_min_ghz": 1900.0, "freq_max_ghz": 2100.0}),
])
def test_it_refuses_a_frequency_far_outside_the_material_data(resin, kind, params):
    """The message gives the material's range, 50 to 1000 GHz, and the factor-2 rule."""
    with pytest.raises(UnusableInput, match="far outside the RF data of Flat test resin \\(50 to 1000 GHz\\): within a factor 2"):
        build_component(kind, params, material=resin)


def test_it_refuses_a_part_larger_than_every_build_volume(resin):
    """A 150 mm lens fits neither a 130 x 80 x 160 nor a 100 mm cube vat."""
    with pytest.raises(UnusableInput, match="fits no build volume") as info:
        build_component("plano-convex", {"diameter_mm": 150.0, "focal_length_mm": 200.0,
                                         "build_volumes_mm": [(130, 80, 160), (100, 100, 100)]}, material=resin)
    assert info.value.code == "too_large"


def test_it_checks_the_printers_build_volume_when_no_list_is_given(resin, coarse_printer):
    """Without a list the printer's own vat (130 x 80 x 160 mm) decides; a part may stand on its side."""
    with pytest.raises(UnusableInput, match="fits no build volume"):
        build_component("window", {"diameter_mm": 140.0}, material=resin, printer=coarse_printer)
    # 100 x 100 x 2 mm fits 130 x 80 x 160 mm only standing on its edge, which is allowed.
    assert build_component("window", {"diameter_mm": 100.0}, material=resin, printer=coarse_printer).part.watertight


def test_it_accepts_a_part_that_fits_one_of_several_volumes(resin):
    """One volume that holds the part is enough."""
    component = build_component("plano-convex", {"diameter_mm": 90.0, "focal_length_mm": 120.0,
                                                 "build_volumes_mm": [(50, 50, 50), (220, 220, 250)]}, material=resin)
    assert component.part.bbox_mm[0] == pytest.approx(90.0, abs=1e-6)
