"""The rule families together: order, the pipeline's support estimate, pictures, switching off."""

import json

import numpy as np
import pytest

from manifold3d import Manifold

from services import catalogue
from services.findings import RULES
from services.rules import registry, run_rules


def test_every_family_is_registered_in_run_order():
    names = [name for name, _ in registry.CHECKS]
    assert names == ["min_feature", "min_gap", "min_hole", "aspect_ratio", "overhang", "island", "trapped_volume"]
    assert set(names) <= set(RULES) and set(names) == set(registry.COLLECTORS)


def test_run_rules_gives_findings_pictures_and_the_support_estimate(stack_of):
    """A T on a thin fin: every finding serialises and names a PNG it carries; overhang gives support."""
    shape = (Manifold.cube((6.0, 3.0, 0.5)) + Manifold.cube((0.1, 2.0, 2.1)).translate((1.0, 0.5, 0.4))
             + Manifold.cube((1.0, 1.0, 2.0)).translate((4.0, 1.0, 0.4)) + Manifold.cube((3.0, 1.0, 0.5)).translate((3.0, 1.0, 2.4)))
    part, stack = stack_of(shape)
    out = run_rules(stack=stack, part=part, printer=catalogue.printer("bay1-lcd-resin"))
    rules = {f.rule for f in out.findings}
    assert {"min_feature", "island"} <= rules
    for f in out.findings:
        json.dumps(f.to_dict())
        assert f.picture is None or out.figures[f.picture][:4] == b"\x89PNG"
    assert out.summary["overhang"]["support_volume_mm3"] > 0


def test_a_profile_with_every_rule_switched_off_finds_nothing(stack_of):
    bay1 = catalogue.printer("bay1-lcd-resin")
    off = {name: {**limits, "enabled": False} for name, limits in bay1.rules.items()}
    profile = type(bay1).from_dict({**bay1.to_dict(), "rules": off})
    part, stack = stack_of(Manifold.cube((0.1, 2.0, 2.0)))
    out = run_rules(stack=stack, part=part, printer=profile)
    assert out.findings == () and "overhang" not in out.summary


def test_progress_follows_the_shared_pass_and_only_rises(stack_of):
    part, stack = stack_of(Manifold.cube((2.0, 2.0, 2.0)) + Manifold.cube((0.1, 1.0, 3.0)).translate((0.5, 0.5, 1.9)))
    seen = []
    run_rules(stack=stack, part=part, printer=catalogue.printer("bay1-lcd-resin"), progress=seen.append)
    assert seen == sorted(seen) and seen[-1] == 1.0 and any(0 < f < 0.9 for f in seen)


def test_the_shared_pass_counts_progress_by_work_not_by_layers():
    """A run's share of the pass is a fixed cost plus its solid box's pixels (scan.RUN_COST_PX, measured on this
    machine): one 9 Mpx layer under nine distinct one-pixel layers is over half the work, not a tenth, so a
    tried change's pace judged from the progress is not misled by a part whose layers differ in size."""
    from services.layers import LayerStack
    from services.rules import scan

    wide = np.ones((3000, 3000), bool)
    dots = [np.zeros((3000, 3000), bool) for _ in range(9)]
    for i, dot in enumerate(dots):
        dot[10 * i, 10 * i] = True
    done = scan._work_done(LayerStack.from_masks([wide, *dots], pixel_mm=0.1, layer_height_mm=0.1))
    # (a one-pixel layer's stored box is a byte wide: 8 pixels)
    assert done[0] == pytest.approx((9e6 + scan.RUN_COST_PX) / (9e6 + 10 * scan.RUN_COST_PX + 9 * 8))
    assert done[-1] == pytest.approx(1.0) and np.all(np.diff(done) > 0)
