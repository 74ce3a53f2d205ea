"""min_feature: thin material on the printed layers, against widths known by construction."""

import numpy as np
import pytest
from manifold3d import Manifold

from services import catalogue
from services.rules import min_feature

PX = 0.05


def fins(widths, *, x0=1.013, height=1.5):
    """Return a 0.5 mm plate carrying fins of the given widths (3 mm long), 2 mm apart from x0."""
    part = Manifold.cube((2.0 * len(widths) + 2.0, 4.0, 0.5))
    for i, w in enumerate(widths):
        part += Manifold.cube((w, 3.0, height + 0.1)).translate((x0 + 2.0 * i, 0.5, 0.4))
    return part


def test_it_flags_the_thin_fin_and_passes_the_wide_one(stack_of, printer, run_check):
    """A 0.10 mm fin fails a 0.15 mm limit, a 0.20 mm fin passes (by construction)."""
    part, stack = stack_of(fins([0.10, 0.20]))
    out = run_check(min_feature, part, stack, printer(min_feature={"supported_mm": 0.15, "severity": "blocker"}))
    assert len(out.findings) == 1
    f = out.findings[0]
    assert (f.rule, f.severity, f.count, f.limit, f.unit) == ("min_feature", "blocker", 1, 0.15, "mm")
    assert abs(f.measured - 0.10) <= PX  # within one pixel of the drawn width
    assert abs(f.location_mm[0] - 1.063) <= 0.5 and 0.5 <= f.location_mm[2] <= 2.0  # on the thin fin
    assert f.layers[0] >= 10 and f.layers[1] <= 39
    assert "widen to at least 0.15 mm" in f.message
    assert out.figures[f.picture][:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize("pixel_mm", [0.025, 0.05, 0.1])
def test_the_same_fin_reads_within_a_pixel_at_any_grid(stack_of, printer, run_check, pixel_mm):
    """A 0.33 mm fin, off the pixel grid, measures within one pixel at 25, 50 and 100 um pixels."""
    part, stack = stack_of(fins([0.33], x0=1.0137), pixel_mm=pixel_mm)
    out = run_check(min_feature, part, stack, printer(min_feature={"supported_mm": 0.6, "severity": "caution"}))
    (f,) = out.findings
    assert abs(f.measured - 0.33) <= pixel_mm


def test_wide_material_with_round_and_square_edges_passes(stack_of, printer, run_check):
    """Staircase edges of wide discs, rings and square corners are not features (no false positives)."""
    shape = (Manifold.cylinder(1.0, 3.0, circular_segments=128).translate((4.0, 4.0, 0.0))
             + Manifold.cube((3.0, 2.0, 1.0)).translate((8.013, 1.011, 0.0))
             + (Manifold.cylinder(1.0, 2.0, circular_segments=128) - Manifold.cylinder(1.0, 1.2, circular_segments=128))
             .translate((13.0, 4.0, 0.0)))
    for pixel_mm in (0.025, 0.05):
        part, stack = stack_of(shape, pixel_mm=pixel_mm)
        out = run_check(min_feature, part, stack, printer(min_feature={"supported_mm": 0.3, "severity": "blocker"}))
        assert out.findings == ()


def _pillars(centres, diameters, height=0.5):
    plate = Manifold.cube((4.0, 2.0, 0.5))
    for (x, y), d in zip(centres, diameters):
        plate += Manifold.cylinder(height + 0.1, d / 2, circular_segments=32).translate((x, y, 0.4))
    return plate


def test_a_150_um_pillar_passes_and_a_100_um_pillar_fails_on_the_resin_feature_limit(stack_of, run_check):
    """Common practice, no published source: a desktop resin printer makes ~150 um features.

    The starter resin profile carries 0.15 mm for supported and free-standing features alike; a 150 um
    pillar centred on a pixel prints 3 pixels wide and passes, a 100 um pillar prints 2 pixels wide
    and fails.
    """
    profile = catalogue.printer("bay1-lcd-resin")
    assert profile.rules["min_feature"]["supported_mm"] == profile.rules["min_feature"]["unsupported_mm"] == 0.15
    part, stack = stack_of(_pillars([(1.025, 1.025), (3.0, 1.0)], [0.15, 0.10]))
    out = run_check(min_feature, part, stack, profile)
    features = [f for f in out.findings if f.severity != "note"]
    assert len(features) == 1 and features[0].count == 1
    assert abs(features[0].location_mm[0] - 3.0) < 0.5  # the 100 um pillar
    assert abs(features[0].measured - 0.10) <= PX


def test_free_standing_pillars_meet_the_free_standing_limit(stack_of, run_check):
    """On the laser resin profile both pillars are free-standing pins under its 0.4 mm pin limit.

    The free-standing pin minimum of 0.3-0.5 mm (from memory, mid value 0.4 mm) is what the starter
    laser-scanned profile carries; a pin counts once it rises more than that limit above its plate.
    """
    part, stack = stack_of(_pillars([(1.025, 1.025), (3.0, 1.0)], [0.15, 0.10], height=1.0))
    out = run_check(min_feature, part, stack, catalogue.printer("bay3-laser-resin"))
    (f,) = out.findings
    assert f.count == 2 and f.limit == 0.4 and "free-standing" in f.message
    assert abs(f.measured - 0.10) <= PX  # the narrowest is the 100 um pillar


def test_a_pillar_field_is_one_finding_with_a_count(stack_of, printer, run_check):
    """36 identical thin pillars give one finding counting 36, not 36 rows."""
    xs = np.arange(6) * 0.5 + 0.75
    centres = [(x, y) for x in xs for y in xs]
    plate = Manifold.cube((4.0, 4.0, 0.5))
    for x, y in centres:
        plate += Manifold.cylinder(1.1, 0.05, circular_segments=16).translate((x, y, 0.4))
    part, stack = stack_of(plate)
    out = run_check(min_feature, part, stack, printer(min_feature={"supported_mm": 0.15, "severity": "blocker"}))
    (f,) = out.findings
    assert f.count == 36


def test_a_switched_off_rule_finds_nothing_and_a_missing_limit_is_a_note(stack_of, printer, run_check):
    part, stack = stack_of(fins([0.10]))
    off = run_check(min_feature, part, stack, printer(min_feature={"enabled": False, "supported_mm": 0.15}))
    assert off.findings == ()
    missing = run_check(min_feature, part, stack, printer(min_feature={"severity": "blocker"}))
    (note,) = missing.findings
    assert note.severity == "note" and "gives no" in note.message
