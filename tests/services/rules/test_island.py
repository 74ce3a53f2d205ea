"""island: regions of a layer that rest on nothing below."""

from manifold3d import Manifold

from services.rules import island


def rules(printer):
    return printer(island={"severity": "blocker"}, overhang={"self_supporting_deg": 30.0, "severity": "caution"})


def test_a_t_whose_bar_starts_in_mid_air_is_an_island(stack_of, printer, run_check):
    """A 1 mm post under a 6 x 2 mm bar at z = 2 mm: the bar starts over nothing (by construction)."""
    tee = Manifold.cube((1.0, 2.0, 2.0)).translate((2.5, 0.0, 0.0)) + Manifold.cube((6.0, 2.0, 0.5)).translate((0.0, 0.0, 2.0))
    part, stack = stack_of(tee)
    out = run_check(island, part, stack, rules(printer))
    (f,) = out.findings
    assert (f.rule, f.severity, f.unit) == ("island", "blocker", "mm2")
    assert abs(f.location_mm[2] - 2.025) <= 0.05 and f.layers == (40, 40)
    assert 0.0 <= f.location_mm[0] <= 6.0
    assert f.count == 2  # the bar's two arms, each side of the post


def test_a_separate_body_starting_in_mid_air_is_an_island_and_a_plain_block_is_not(stack_of, printer, run_check):
    """A block floating 1 mm over another starts unsupported; a block on the plate does not."""
    part, stack = stack_of(Manifold.cube((2.0, 2.0, 2.0)))
    assert run_check(island, part, stack, rules(printer)).findings == ()
    floating = Manifold.cube((2.0, 2.0, 1.0)) + Manifold.cube((1.0, 1.0, 1.0)).translate((0.5, 0.5, 2.0))
    part, stack = stack_of(floating)
    (f,) = run_check(island, part, stack, rules(printer)).findings
    assert f.count == 1 and abs(f.measured - 1.0) <= 0.1  # its first layer's area, 1 mm2
