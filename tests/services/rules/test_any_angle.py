"""The rules at any angle on the plate and right at their limits (issue 19).

A seeded sweep turns each feature about z by angles in 0-90 degrees and draws it at widths from the
limit - 2 px to the limit + 2 px (by construction, off the pixel grid): a feature one pixel or more
over the limit is never reported, one a pixel or more under it always is, located on the feature. The
one-pixel band either side is the grid's own uncertainty (a wall sampled at pixel centres is n pixels
wide with |n px - w| < 1 px). Widths exactly at a limit pass (the rules' convention).
"""

import math

import numpy as np
import pytest
from manifold3d import Manifold

from services.rules import island, min_feature, min_gap, min_hole, trapped_volume

PX = 0.05
SEED = 19
WALL_MM = 0.3  # supported feature and gap limit used below: 6 px
PIN_MM = 0.4   # free-standing limit: 8 px
HOLE_MM = 0.5  # hole limit: 10 px


def angles(kind: str, n: int = 6) -> list[float]:
    """Return n seeded angles in 0-90 degrees for a feature kind, with 0 and 45 always among the cases."""
    rng = np.random.default_rng([SEED, sum(map(ord, kind))])
    return [0.0, 45.0] + sorted(np.round(rng.uniform(0.0, 90.0, n), 2).tolist())


def offset(angle: float) -> tuple[float, float]:
    """Return a sub-pixel shift that changes with the angle, so no case sits on the pixel grid."""
    return 0.013 + 0.0007 * angle, 0.007 + 0.0003 * angle


def turned(shape: Manifold, angle: float, z: float = 0.0) -> Manifold:
    dx, dy = offset(angle)
    return shape.rotate((0.0, 0.0, angle)).translate((dx, dy, z))


def plate(size: float = 6.0, thickness: float = 0.5) -> Manifold:
    return Manifold.cube((size, size, thickness), center=True).translate((0.0, 0.0, thickness / 2))


def judged(findings):
    return [f for f in findings if f.severity != "note"]


def assert_contract(findings, width_mm: float, limit_mm: float, where: tuple[float, float], reach_mm: float):
    """Over the limit by a pixel: nothing; under by a pixel: one finding within reach of the feature's centre."""
    found = judged(findings)
    if width_mm >= limit_mm + PX - 1e-9:
        assert found == [], (width_mm, [f.message for f in found])
    elif width_mm <= limit_mm - PX + 1e-9:
        assert len(found) == 1, (width_mm, found)
        (f,) = found
        assert math.dist(f.location_mm[:2], where) <= reach_mm, (width_mm, f.location_mm)
        assert f.measured < limit_mm and abs(f.measured - width_mm) <= PX + 1e-9


WIDTHS_PX = (-2, -1, 1, 2)


def fin(width: float, angle: float) -> Manifold:
    """A 3 mm fin standing 1 mm on a plate."""
    return plate() + turned(Manifold.cube((width, 3.0, 1.1), center=True), angle, z=1.0)


def slot(width: float, angle: float) -> Manifold:
    """A 3 mm slot through a 0.6 mm plate (its square ends are not gaps)."""
    return plate(thickness=0.6) - turned(Manifold.cube((width, 3.0, 2.0), center=True), angle)


def square_pin(width: float, angle: float) -> Manifold:
    """A square pin rising 1.2 mm from a plate (its side is its width)."""
    return plate() + turned(Manifold.cube((width, width, 1.3), center=True), angle, z=1.1)


def hole(width: float, angle: float) -> Manifold:
    """A round hole (a 48-gon) through a 1 mm plate."""
    return plate(thickness=1.0) - turned(Manifold.cylinder(3.0, width / 2, circular_segments=48, center=True), angle)


# kind -> (shape, rule module, the rule's limits, the limit judged, how far from the centre a finding may sit)
SWEEP = {
    "fin": (fin, min_feature, {"min_feature": {"supported_mm": WALL_MM, "severity": "blocker"}}, WALL_MM, 1.6),
    "slot": (slot, min_gap, {"min_gap": {"xy_mm": WALL_MM, "severity": "caution"}}, WALL_MM, 1.6),
    "pin": (square_pin, min_feature,
            {"min_feature": {"supported_mm": 0.1, "unsupported_mm": PIN_MM, "severity": "blocker"}}, PIN_MM, 0.5),
    "hole": (hole, min_hole, {"min_hole": {"along_z_mm": HOLE_MM, "severity": "caution"}}, HOLE_MM, 0.1),
}


@pytest.mark.parametrize("kind,angle", [(kind, angle) for kind in SWEEP for angle in angles(kind)])
@pytest.mark.parametrize("steps", WIDTHS_PX)
def test_a_feature_at_any_angle(stack_of, printer, run_check, kind, angle, steps):
    """Fins and slots against 0.3 mm, square pins against a 0.4 mm free-standing limit, holes against 0.5 mm."""
    shape, rule, limits, limit_mm, reach_mm = SWEEP[kind]
    width = limit_mm + steps * PX
    part, stack = stack_of(shape(width, angle))
    out = run_check(rule, part, stack, printer(**limits))
    assert_contract(out.findings, width, limit_mm, offset(angle), reach_mm=reach_mm)


LIMITS = {"severity": "blocker", "cup_severity": "caution", "drain_hole_mm": 1.0}


def box(angle: float, wall_mm: float, open_side: str | None) -> Manifold:
    """Return a 4 x 4 x 3 mm box turned by angle, hollow with walls of wall_mm (0.5 mm floor and roof).

    open_side "top" opens the roof, "plate" the floor (the opening lies on the build plate).
    """
    outer = Manifold.cube((4.0, 4.0, 3.0), center=True).translate((0.0, 0.0, 1.5))
    inner_h = {None: 2.0, "top": 3.0, "plate": 3.0}[open_side]
    inner_z = {None: 1.5, "top": 2.0, "plate": 1.0}[open_side]
    inner = Manifold.cube((4.0 - 2 * wall_mm, 4.0 - 2 * wall_mm, inner_h), center=True).translate((0.0, 0.0, inner_z))
    return turned(outer - inner, angle)


@pytest.mark.parametrize("angle", angles("cavity"))
@pytest.mark.parametrize("wall_mm", [0.06, 0.12])
def test_a_sealed_box_at_any_angle_traps_its_cavity(stack_of, printer, run_check, angle, wall_mm):
    """A sealed box with walls of 1.2-2.4 px traps its cavity (the void is 4-connected: a diagonal wall holds)."""
    part, stack = stack_of(box(angle, wall_mm, None))
    (f,) = judged(run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS)).findings)
    expected = (4.0 - 2 * wall_mm) ** 2 * 2.0  # by construction
    assert f.severity == "blocker" and f.unit == "mm3" and abs(f.measured - expected) <= 0.05 * expected
    assert math.dist(f.location_mm[:2], offset(angle)) <= 2.0 * math.sqrt(2)


@pytest.mark.parametrize("angle", angles("cup"))
@pytest.mark.parametrize("open_side", ["top", "plate"])
def test_an_open_box_at_any_angle_is_a_cup_not_a_sealed_cavity(stack_of, printer, run_check, angle, open_side):
    """Open at the top or on the build plate: nothing is trapped once printed; the vat film or plate seals it."""
    part, stack = stack_of(box(angle, 0.12, open_side))
    (f,) = judged(run_check(trapped_volume, part, stack, printer(trapped_volume=LIMITS)).findings)
    assert f.severity == "caution" and "suction" in f.message
    assert abs(f.measured - (4.0 - 0.24) ** 2) <= 0.03 * (4.0 - 0.24) ** 2  # its section, mm2


def corner_pair(angle: float, gap_mm: float) -> Manifold:
    """Return a 1 mm post 3 mm tall and a 0.15 mm block from z = 2 mm off the post's corner, gap_mm away diagonally.

    Negative gaps overlap the corners; 0 touches at the corner point.
    """
    post = Manifold.cube((1.0, 1.0, 3.0))
    step = 1.0 + gap_mm / math.sqrt(2)
    return turned(post + Manifold.cube((0.15, 0.15, 0.5)).translate((step, step, 2.0)), angle)


@pytest.mark.parametrize("angle", angles("island"))
def test_a_block_touching_a_post_at_a_corner_is_not_an_island(stack_of, printer, run_check, angle):
    """A block starting beside a post, touching it only at a corner, rests on it; three pixels off, it does not.

    Square to the grid the corners touch at a point, so the block's first pixel meets the post's only
    diagonally (8-neighbour contact). Turned, a point contact is not resolved by pixel centres, so
    the corners overlap by one pixel instead.
    """
    rules = printer(island={"severity": "blocker"}, overhang={"self_supporting_deg": 30.0, "severity": "caution"})
    part, stack = stack_of(corner_pair(angle, 0.0 if angle == 0 else -PX * math.sqrt(2)))
    assert judged(run_check(island, part, stack, rules).findings) == []
    part, stack = stack_of(corner_pair(angle, 3 * PX))
    (f,) = judged(run_check(island, part, stack, rules).findings)
    assert f.count == 1 and abs(f.location_mm[2] - 2.025) <= PX


@pytest.mark.parametrize("angle", [0.0, 30.0, 45.0, 60.0])
def test_a_fin_a_slot_and_a_pin_exactly_at_the_limit_pass(stack_of, printer, run_check, angle):
    """A 0.30 mm fin and slot against a 0.30 mm limit, a 0.40 mm pin against 0.40 mm: a value at the limit passes."""
    for kind in ("fin", "slot", "pin"):
        shape, rule, limits, limit_mm, _ = SWEEP[kind]
        part, stack = stack_of(shape(limit_mm, angle))
        assert judged(run_check(rule, part, stack, printer(**limits)).findings) == [], kind
    wall = turned(Manifold.cube((PIN_MM, 2.0, 1.3), center=True), angle, z=1.1)  # a free-standing fin
    part, stack = stack_of(plate() + wall)
    assert run_check(min_feature, part, stack, printer(**SWEEP["pin"][2])).findings == ()


@pytest.mark.slow
@pytest.mark.parametrize("kind,angle", [(kind, angle) for kind in SWEEP for angle in angles(kind + "-wide", 30)])
@pytest.mark.parametrize("steps", WIDTHS_PX)
def test_a_feature_at_many_more_angles(stack_of, printer, run_check, kind, angle, steps):
    """The same contract over 30 more seeded angles per kind (slow: about 500 small stacks)."""
    test_a_feature_at_any_angle(stack_of, printer, run_check, kind, angle, steps)
