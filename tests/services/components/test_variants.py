"""Design variants a designer would try first when a target is missed (common practice), each a valid parameter set."""

from services.components.specs import resolve_parameters
from services.components.variants import design_variants


def test_variants_change_one_parameter_each_in_words_and_stay_valid():
    record = {"kind": "multilevel", "levels": 4, "base_thickness_mm": 1.0, "eps_r": 2.7, "material": "pla"}
    variants = design_variants(record, smallest_mm=0.3)
    assert [words for words, _ in variants] == ["8 levels (was 4)", "base thickness 0.5 mm (was 1 mm)"]
    for _, params in variants:
        assert "eps_r" not in params and "kind" not in params  # only the generator's own parameters
        resolve_parameters("multilevel", params)  # raises on an invalid value


def test_no_variant_goes_below_the_printer_or_past_a_limit_and_an_upload_has_none():
    assert design_variants({"kind": "multilevel", "levels": 16, "base_thickness_mm": 0.4}, smallest_mm=0.3) == []
    spiral = dict(design_variants({"kind": "spiral", "steps": 8, "base_thickness_mm": 0.2}, smallest_mm=0.3))
    assert list(spiral.values()) == [{"steps": 16, "base_thickness_mm": 0.2}]
    assert design_variants({"kind": "spiral", "steps": 64})[0][0] == "a continuous ramp (was 64 steps)"
    assert [w for w, _ in design_variants({"kind": "window", "matching": "none"})] == ["matching grooves (was none)"]
    assert design_variants(None) == [] and design_variants({"kind": "no-such-kind"}) == []
