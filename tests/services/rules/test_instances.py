"""Grouped findings list their instances: each one located, worst first, capped, on the feature."""

import numpy as np
import trimesh

from services.findings import INSTANCES_SHOWN
from services.layers import build_layer_stack
from services.rules import run_rules


def _fins(make_part, widths_mm):
    """A 20 x 12 x 1 mm plate with 2 mm tall fins of the given widths, 3 mm apart along x."""
    parts = [trimesh.creation.box(extents=(20, 12, 1))]
    parts[0].apply_translation((10, 6, 0.5))
    for i, w in enumerate(widths_mm):
        fin = trimesh.creation.box(extents=(w, 8, 2))
        fin.apply_translation((2 + 3 * i, 6, 2.0))
        parts.append(fin)
    return make_part(trimesh.boolean.union(parts, engine="manifold"))


def test_each_thin_fin_is_an_instance_at_its_own_place(make_part, printer):
    """Three fins under the 0.15 mm limit (0.08, 0.1, 0.12 mm) and one over it: one finding, three instances,
    narrowest first, each located on its fin (x = 2, 5, 8 mm, within a pixel) and at its measured width."""
    part = _fins(make_part, [0.12, 0.08, 0.10, 0.5])
    stack = build_layer_stack(part, pixel_mm=0.02, layer_height_mm=0.05)
    out = run_rules(stack=stack, part=part, printer=printer(min_feature={"supported_mm": 0.15, "severity": "blocker"}))
    (f,) = [f for f in out.findings if f.rule == "min_feature"]
    assert f.count == 3 and len(f.instances) == 3
    widths = [i["measured"] for i in f.instances]
    assert widths == sorted(widths) and abs(widths[0] - 0.08) <= 0.02
    xs = sorted(round(i["location_mm"][0]) for i in f.instances)
    assert xs == [2, 5, 8]
    assert f.instances[0]["location_mm"] == list(f.location_mm)
    assert all(i["layers"][0] <= i["layers"][1] for i in f.instances)
    assert f.to_dict()["instances"][0]["measured"] == widths[0]


def test_a_field_of_problems_lists_the_worst_at_most(make_part, printer):
    """Far more instances than are listed: the count says all, the list holds INSTANCES_SHOWN, worst first."""
    pins = [trimesh.creation.box(extents=(30, 30, 1))]
    pins[0].apply_translation((15, 15, 0.5))
    for x in np.arange(1, 30, 1.4):
        for y in np.arange(1, 30, 1.4):
            pin = trimesh.creation.box(extents=(0.1, 0.1, 1.0))
            pin.apply_translation((x, y, 1.5))
            pins.append(pin)
    part = make_part(trimesh.boolean.union(pins, engine="manifold"))
    stack = build_layer_stack(part, pixel_mm=0.05, layer_height_mm=0.05)
    out = run_rules(stack=stack, part=part, printer=printer(min_feature={"supported_mm": 0.15, "unsupported_mm": 0.3,
                                                                          "severity": "blocker"}))
    grouped = [f for f in out.findings if f.count > INSTANCES_SHOWN]
    assert grouped, [(f.rule, f.count) for f in out.findings]
    for f in grouped:
        assert len(f.instances) == INSTANCES_SHOWN
        values = [i["measured"] for i in f.instances]
        assert values == sorted(values) or values == sorted(values, reverse=True)
