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


def test_a_graded_plate_the_printer_clipped_is_offered_a_coarser_period_within_the_limit():
    """Where the printer's smallest hole and wall clipped the cells, a coarser lattice spans more fills: the variant
    is 1.4 times the period, kept to 3/4 of the no-diffraction limit; a plate hardly clipped is not offered one."""
    record = {"kind": "graded-index", "cell": "hole", "period_mm": 0.9, "period_limit_mm": 1.8006, "cells": 829,
              "cells_clipped": 532}
    words = [w for w, _ in design_variants(record)]
    assert words[:3] == ["cell pillar (was hole)", "period 0.72 mm (was 0.9 mm)", "period 1.26 mm (was 0.9 mm)"]
    near_limit = dict(design_variants({**record, "period_mm": 1.2}))
    assert "period 1.35 mm (was 1.2 mm)" in near_limit  # 0.75 x 1.8006, not 1.4 x 1.2
    assert not any("1.26" in w for w, _ in design_variants({**record, "cells_clipped": 8}))
    for _, params in design_variants(record):
        resolve_parameters("graded-index", params)

