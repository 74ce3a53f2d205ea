"""min_hole: holes that may close, against diameters known by construction."""

from manifold3d import Manifold

from services.rules import min_hole

PX = 0.05


def test_it_flags_the_small_hole_and_passes_the_large_one(stack_of, printer, run_check):
    """A 0.3 mm hole fails a 0.5 mm limit along z, a 1.0 mm hole passes (by construction)."""
    plate = Manifold.cube((5.0, 3.0, 1.0))
    for x, d in ((1.5, 0.3), (3.5, 1.0)):
        plate -= Manifold.cylinder(2.0, d / 2, circular_segments=64).translate((x, 1.5, -0.5))
    part, stack = stack_of(plate)
    out = run_check(min_hole, part, stack, printer(min_hole={"along_z_mm": 0.5, "severity": "caution"}))
    (f,) = [f for f in out.findings if f.severity != "note"]
    assert (f.count, f.limit, f.unit) == (1, 0.5, "mm")
    assert abs(f.measured - 0.3) <= PX  # equivalent diameter within one pixel
    assert abs(f.location_mm[0] - 1.5) <= 0.5 and abs(f.location_mm[1] - 1.5) <= 0.5
    assert "enlarge to at least 0.50 mm" in f.message


def test_horizontal_holes_meet_the_across_limit(stack_of, printer, run_check):
    """A 0.5 mm hole along x fails a 0.8 mm limit across z, a 1.5 mm hole passes (by construction)."""
    block = Manifold.cube((3.0, 6.0, 3.0))
    for y, d in ((1.5, 0.5), (4.0, 1.5)):
        block -= Manifold.cylinder(4.0, d / 2, circular_segments=64).rotate((0.0, 90.0, 0.0)).translate((-0.5, y, 1.5))
    part, stack = stack_of(block)
    out = run_check(min_hole, part, stack, printer(min_hole={"across_z_mm": 0.8, "severity": "caution"}))
    (f,) = [f for f in out.findings if f.severity != "note"]
    assert f.count == 1 and "across the build axis" in f.message
    assert abs(f.measured - 0.5) <= 0.05 + 1e-9  # the tallest column, within one layer
    assert abs(f.location_mm[1] - 1.5) <= 0.5 and abs(f.location_mm[2] - 1.5) <= 0.5
