"""The starter catalogue: profiles and materials load, and their numbers match their cited sources."""

from __future__ import annotations

import math

import pytest

from services import catalogue
from services.errors import UnusableInput
from services.profiles import PROCESSES

C0_M_S = 299_792_458.0  # SI definition of the metre
TAGS = ("[S]", "[S2]", "[M]", "[C]", "[R]", "common practice", "invented demo value")
RULE_KEYS = {
    "min_feature": {"supported_mm", "unsupported_mm", "severity"},
    "min_gap": {"xy_mm", "z_mm", "severity"},
    "min_hole": {"along_z_mm", "across_z_mm", "severity"},
    "aspect_ratio": {"caution", "blocker"},
    "overhang": {"self_supporting_deg", "severity"},
    "island": {"severity"},
    "trapped_volume": {"severity", "cup_severity", "drain_hole_mm"},
    "build_fit": {"spacing_mm"},
}
COST_KEYS = {"machine_rate_per_h", "labour_rate_per_h", "setup_labour_h", "post_process_per_build",
             "post_process_per_part", "consumables_per_build", "margin", "p_fail", "currency", "spacing_mm"}

# Each starter limit beside the source it was taken from (manufacturing.md §1.3 and its Appendix).
PINNED_LIMITS = {
    "bay1-lcd-resin": {
        ("min_feature", "supported_mm"): 0.15,   # common practice, no published source
        ("min_feature", "unsupported_mm"): 0.15,  # common practice, no published source (~150 um features)
        ("min_gap", "xy_mm"): 0.30,              # common practice, no published source
        ("min_gap", "z_mm"): 0.5,                # Appendix, 0.5 mm along Z (over-cure) [R]; Xu et al. 2022 [S]
        ("min_hole", "along_z_mm"): 0.5,         # bureau guide A: holes < 0.5 mm may close off [S]
        ("min_hole", "across_z_mm"): 0.8,        # Appendix, 0.8 mm axis across Z [R]
        ("aspect_ratio", "caution"): 6.0,        # Appendix, pin h/d warn > 6 [R]
        ("aspect_ratio", "blocker"): 12.0,       # Appendix, pin h/d error > 12 [R]
        ("overhang", "self_supporting_deg"): 30.0,  # Appendix, LCD-masked VPP 30 deg [R]
        ("trapped_volume", "drain_hole_mm"): 2.5,   # Appendix, holes >= 2.5 mm [R]
        ("build_fit", "spacing_mm"): 3.5,        # §5, 2-5 mm for VPP (from memory) [M], mid value
    },
    "bay3-laser-resin": {
        ("min_feature", "supported_mm"): 0.15,   # common practice, no published source
        ("min_feature", "unsupported_mm"): 0.4,  # §1.3 pin >= 0.3-0.5 mm (from memory) [M], mid value
        ("min_gap", "xy_mm"): 0.30,              # common practice, no published source
        ("min_gap", "z_mm"): 0.5,                # Appendix, 0.5 mm along Z (over-cure) [R]
        ("min_hole", "along_z_mm"): 0.5,         # bureau guide A: holes < 0.5 mm may close off [S]
        ("min_hole", "across_z_mm"): 0.8,        # Appendix, 0.8 mm axis across Z [R]
        ("aspect_ratio", "caution"): 6.0,        # Appendix, pin h/d warn > 6 [R]
        ("aspect_ratio", "blocker"): 10.0,       # §1.3 pin h/d <= 10 (from memory) [M]
        ("overhang", "self_supporting_deg"): 19.0,  # bureau guide A: >= 19 deg from horizontal [S]
        ("trapped_volume", "drain_hole_mm"): 2.5,   # Appendix, holes >= 2.5 mm [R]
        ("build_fit", "spacing_mm"): 3.5,        # §5, 2-5 mm for VPP (from memory) [M], mid value
    },
    "bay2-filament": {
        ("min_feature", "supported_mm"): 0.8,    # §1.3 wall >= 0.8 mm, two perimeters, design guides [S]
        ("min_feature", "unsupported_mm"): 2.0,  # §1.3 min feature > 2 mm, guide C [S]; Appendix pin >= 2 mm [R]
        ("min_gap", "xy_mm"): 0.5,               # Appendix, MEX min gap 0.5 mm [R]
        ("min_gap", "z_mm"): 0.5,                # Appendix, MEX min gap 0.5 mm [R]
        ("min_hole", "along_z_mm"): 2.0,         # Appendix, MEX min hole 2 mm [R]
        ("min_hole", "across_z_mm"): 2.0,        # Appendix, MEX min hole 2 mm [R]
        ("aspect_ratio", "caution"): 5.0,        # Appendix, MEX pin h/d warn > 5 [R]
        ("aspect_ratio", "blocker"): 10.0,       # Appendix, MEX pin h/d error > 10 [R]
        ("overhang", "self_supporting_deg"): 45.0,  # §1.3, 45 deg, several guides [S]; Mazlan et al. 2020 [S]
        ("build_fit", "spacing_mm"): 5.0,        # §5, >= 5 mm for MEX skirts (from memory) [M]
    },
}

# Island and trapped-volume severities follow the Appendix ("error (needs support)", voids "error" on VPP,
# "info only" on MEX, cups "warn" on VPP) [R].
PINNED_SEVERITIES = {
    "bay1-lcd-resin": {("island", "severity"): "blocker", ("trapped_volume", "severity"): "blocker",
                       ("trapped_volume", "cup_severity"): "caution"},
    "bay3-laser-resin": {("island", "severity"): "blocker", ("trapped_volume", "severity"): "blocker",
                         ("trapped_volume", "cup_severity"): "caution"},
    "bay2-filament": {("island", "severity"): "blocker", ("trapped_volume", "severity"): "note"},
}

# The invented lab of the product brief (/work/shared/brief.md): pixel or nozzle, layers, build volume.
DEMO_LAB = {
    "bay1-lcd-resin": ("lcd_masked", 0.05, (0.05,), (130.0, 80.0, 160.0)),
    "bay2-filament": ("filament", 0.2, (0.2,), (220.0, 220.0, 250.0)),
    "bay3-laser-resin": ("laser_scanned", 0.05, (0.025, 0.05, 0.1), (145.0, 145.0, 185.0)),
}

# Densities in g/cm3 against handbook ranges (manufacturing.md §6).
DENSITY_RANGES = {
    "standard-resin": (1.10, 1.20),  # cured photopolymer 1.10-1.20 (from memory) [M]
    "tough-resin": (1.10, 1.20),     # cured photopolymer 1.10-1.20 (from memory) [M]
    "pla": (1.24, 1.25),             # filament density pages [S]
    "abs": (1.04, 1.04),             # filament density pages [S]
    "hips": (1.04, 1.05),            # (from memory) [M]
    "pp": (0.90, 0.90),              # (from memory) [M]
    "hdpe-machined": (0.94, 0.97),   # HDPE about 0.95 (from memory) [M]
    "ptfe-machined": (2.14, 2.20),   # sintered PTFE 2.14-2.20 (from memory) [M]
}


def _tan_delta_from_alpha_p(alpha_p_cm: float, freq_ghz: float, n: float) -> float:
    # tan_delta ~ alpha_p c0 / (2 pi f n), optics.md §1 (Pozar low-loss form, from memory)
    return alpha_p_cm * 100.0 * C0_M_S / (2.0 * math.pi * freq_ghz * 1e9 * n)


def test_it_loads_every_printer_and_material():
    """Every starter profile and material builds through from_dict."""
    assert [p.slug for p in catalogue.printers()] == ["bay1-lcd-resin", "bay2-filament", "bay3-laser-resin"]
    slugs = {m.slug for m in catalogue.materials()}
    assert {"standard-resin", "tough-resin", "pla", "abs", "hips", "pp", "hdpe-machined", "ptfe-machined"} <= slugs
    assert catalogue.printer("bay3-laser-resin").technology == "laser_scanned"
    assert catalogue.material("pla").price_unit == "kg"


def test_it_names_the_known_slugs_for_an_unknown_one():
    """An unknown slug is unusable input and the message lists the known slugs."""
    with pytest.raises(UnusableInput) as e:
        catalogue.printer("bay9")
    assert "bay1-lcd-resin" in e.value.message and "bay3-laser-resin" in e.value.message
    with pytest.raises(UnusableInput) as e:
        catalogue.material("unobtainium")
    assert "ptfe-machined" in e.value.message


def test_it_hands_out_fresh_copies():
    """Editing one caller's profile dicts does not change the next caller's."""
    catalogue.printer("bay1-lcd-resin").rules["min_feature"]["supported_mm"] = 9.0
    assert catalogue.printer("bay1-lcd-resin").rules["min_feature"]["supported_mm"] == 0.15


@pytest.mark.parametrize("slug", list(DEMO_LAB))
def test_profiles_match_the_demo_lab(slug):
    """Technology, layers and build volume are the invented lab's (product brief)."""
    p = catalogue.printer(slug)
    technology, layer, layers, volume = DEMO_LAB[slug]
    assert p.technology == technology and p.technology in PROCESSES[p.process]
    assert p.layer_height_mm == layer and p.layer_heights_mm == layers
    assert p.build_volume_mm == volume


@pytest.mark.parametrize("slug", list(PINNED_LIMITS))
def test_rule_limits_are_pinned_to_their_cited_values(slug):
    """Each starter limit equals its cited value and the profile names its source."""
    p = catalogue.printer(slug)
    for (rule, key), value in {**PINNED_LIMITS[slug], **PINNED_SEVERITIES[slug]}.items():
        assert p.rules[rule][key] == value, (rule, key)
        assert any(t in p.sources[f"rules.{rule}.{key}"] for t in TAGS), (rule, key)


@pytest.mark.parametrize("slug", list(PINNED_LIMITS))
def test_rules_use_the_shared_keys(slug):
    """Every rule the checks read is present with exactly the agreed keys, each with a source."""
    p = catalogue.printer(slug)
    assert set(p.rules) == set(RULE_KEYS)
    for rule, keys in RULE_KEYS.items():
        assert set(p.rules[rule]) - {"enabled"} == keys, rule
        for key in keys:
            assert p.sources.get(f"rules.{rule}.{key}"), f"rules.{rule}.{key} has no source"
        for key in ("severity", "cup_severity"):
            assert p.rules[rule].get(key, "note") in ("blocker", "caution", "note")


@pytest.mark.parametrize("slug", list(PINNED_LIMITS))
def test_costs_and_times_are_labelled_invented(slug):
    """Rates, labour and time constants are present and labelled as invented demo values."""
    p = catalogue.printer(slug)
    assert set(p.cost) == COST_KEYS
    assert 0 <= p.cost["p_fail"] < 1 and p.cost["margin"] >= 0
    assert p.cost["spacing_mm"] == p.rules["build_fit"]["spacing_mm"]
    assert "invented demo value" in p.sources["cost"]
    assert "invented" in p.sources["time_model"] and p.time_model


def test_every_rf_point_has_a_tagged_source():
    """Every permittivity and loss tangent names where it comes from, with a reference-notes tag."""
    for m in catalogue.materials():
        assert m.rf, m.slug
        for point in m.rf:
            assert any(t in point.source for t in ("[S]", "[S2]", "[M]", "[C]")), (m.slug, point.freq_ghz)
        assert "invented demo value" in m.sources["price"]
        assert m.sources["density_g_cm3"]


@pytest.mark.parametrize("slug", ["hdpe-machined", "ptfe-machined"])
def test_reference_materials_cover_75_ghz_to_1_thz(slug):
    """The machined references span the app's band, 75 GHz to 1 THz (optics.md scope)."""
    freqs = [p.freq_ghz for p in catalogue.material(slug).rf]
    assert min(freqs) <= 75.0 and max(freqs) >= 1000.0


def test_rf_values_match_the_reference_table():
    """Spot values against optics.md §9 and its conversion check values."""
    hdpe, ptfe, pp = (catalogue.material(s) for s in ("hdpe-machined", "ptfe-machined", "pp"))
    at = lambda m, f: next(p for p in m.rf if p.freq_ghz == f)  # noqa: E731
    # Goldsmith 1998, p. 81 (second-hand) [S2]: n 1.519 / 1.4386 / 1.502, tan_delta 3.6e-4 / 5.3e-4 / 5.6e-4
    assert at(hdpe, 90.0).eps_r == pytest.approx(1.519**2, rel=1e-3) and at(hdpe, 90.0).tan_delta == 3.6e-4
    assert at(ptfe, 90.0).eps_r == pytest.approx(1.4386**2, rel=1e-3) and at(ptfe, 90.0).tan_delta == 5.3e-4
    assert at(pp, 90.0).eps_r == pytest.approx(1.502**2, rel=1e-3) and at(pp, 90.0).tan_delta == 5.6e-4
    # optics.md §1 conversion check [C]: n = 1.53, alpha_p = 0.2 cm-1 at 1 THz gives tan_delta 6.24e-4
    assert _tan_delta_from_alpha_p(0.2, 1000.0, 1.53) == pytest.approx(6.24e-4, rel=2e-3)
    # Lamb 1996 (from memory): HDPE alpha_p 0.1-0.5 cm-1 at 1 THz, mid 0.3; PTFE 0.5-1 cm-1, mid 0.75
    assert at(hdpe, 1000.0).tan_delta == pytest.approx(_tan_delta_from_alpha_p(0.3, 1000.0, 1.53), rel=1e-3)
    assert at(ptfe, 1000.0).tan_delta == pytest.approx(_tan_delta_from_alpha_p(0.75, 1000.0, 1.435), rel=1e-3)
    # Jang et al. 2024 [S], mid n 1.725, kappa 0.08: eps' = n^2 - kappa^2, tan_delta = 2 n kappa / eps' (optics.md §1)
    resin = at(catalogue.material("standard-resin"), 1000.0)
    assert resin.eps_r == pytest.approx(1.725**2 - 0.08**2, rel=1e-3)
    assert resin.tan_delta == pytest.approx(2 * 1.725 * 0.08 / (1.725**2 - 0.08**2), rel=1e-3)


@pytest.mark.parametrize("slug", list(DENSITY_RANGES))
def test_densities_match_handbook_values(slug):
    """Densities lie in the handbook range named beside each (manufacturing.md §6)."""
    low, high = DENSITY_RANGES[slug]
    assert low - 1e-9 <= catalogue.material(slug).density_g_cm3 <= high + 1e-9


def test_printable_materials_name_a_known_process():
    """Printable materials name the ISO/ASTM 52900 process they print on; machined references none."""
    for m in catalogue.materials():
        assert set(m.processes) <= set(PROCESSES)
        assert (m.kind == "machined") == (not m.processes), m.slug
