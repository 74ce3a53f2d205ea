"""aspect_ratio: slender free-standing pins against caution and blocker limits."""

from manifold3d import Manifold

from services.rules import aspect_ratio


def test_pins_of_aspect_4_8_and_15_meet_caution_6_and_blocker_12(stack_of, printer, run_check):
    """0.5 mm pins 2, 4 and 7.5 mm tall on a plate are 4, 8 and 15 times their width (by construction)."""
    plate = Manifold.cube((7.0, 2.0, 0.5))
    for x, ratio in ((1.0, 4), (3.5, 8), (6.0, 15)):
        plate += Manifold.cylinder(0.5 * ratio + 0.1, 0.25, circular_segments=48).translate((x, 1.0, 0.4))
    part, stack = stack_of(plate)
    out = run_check(aspect_ratio, part, stack, printer(aspect_ratio={"caution": 6.0, "blocker": 12.0}))
    by = {f.severity: f for f in out.findings}
    assert set(by) == {"caution", "blocker"}
    assert by["caution"].count == 1 and by["blocker"].count == 1
    # width within one pixel of 0.5 mm: the ratio within 8 x 0.5 / (0.5 +- 0.05)
    assert 8 * 0.5 / 0.55 <= by["caution"].measured <= 8 * 0.5 / 0.45
    assert abs(by["caution"].location_mm[0] - 3.5) <= 0.5
    assert 15 * 0.5 / 0.55 <= by["blocker"].measured <= 15 * 0.5 / 0.45
    assert abs(by["blocker"].location_mm[0] - 6.0) <= 0.5
    assert "widen to at least" in by["blocker"].message


def test_a_hollow_box_and_a_dome_are_not_slender(stack_of, printer, run_check):
    """Walls of a hollow box count by its outline; a dome's thin top carries nothing above it."""
    box = Manifold.cube((6.0, 6.0, 6.0)) - Manifold.cube((5.0, 5.0, 7.0)).translate((0.5, 0.5, 0.5))
    dome = Manifold.sphere(3.0, circular_segments=96).translate((12.0, 3.0, 0.0)) ^ Manifold.cube((6.0, 6.0, 3.0)).translate((9.0, 0.0, 0.0))
    part, stack = stack_of(box + dome)
    assert run_check(aspect_ratio, part, stack, printer(aspect_ratio={"caution": 6.0, "blocker": 12.0})).findings == ()
