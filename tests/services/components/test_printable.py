"""Generators make what the chosen printer can make: by construction, or a refusal with a sentence."""

import math

import numpy as np
import pytest

from services import catalogue
from services.components import KINDS, build_component
from services.components.base import smallest_printable_mm
from services.components.multilevel import printable_rings
from services.errors import UnusableInput
from services.profiles import check_pairing
from services.layers import build_layer_stack
from services.rules import run_rules
from services.rules.build_fit import check_build_fit

PRINTERS = {p.slug: p for p in catalogue.printers()}


def test_rings_narrower_than_the_printer_join_the_ring_inside():
    """Widths 2, 0.3, 1.5, 0.2 mm with a 0.5 mm limit: the 0.3 mm ring joins the first, the last 0.2 mm ring
    joins the one before it; every ring left is at least 0.5 mm wide."""
    edges = np.array([0.0, 2.0, 2.3, 3.8, 4.0])
    heights = np.array([3.0, 2.0, 1.0, 3.0])
    kept_edges, kept_heights, merged = printable_rings(edges, heights, 0.5)
    assert merged == 2 and list(kept_edges) == [0.0, 2.3, 4.0] and list(kept_heights) == [3.0, 1.0]
    assert np.diff(kept_edges).min() >= 0.5
    same = printable_rings(edges, heights, 0.0)
    assert same[2] == 0 and np.array_equal(same[0], edges)


@pytest.mark.parametrize(("charge", "steps"), [(1, 0), (2, 0), (1, 8)])
def test_the_spiral_is_held_between_a_and_total_less_a_near_its_axis_and_prints(charge, steps):
    """Each layer of a spiral is a sector; where r 2 pi z / total < s (the printer's smallest wall or gap, arc
    length s = r theta) the void low down and the solid high up are too narrow. The generator holds the ramp's
    height over the base between a(r) = s total / (2 pi r) and total - a(r): every top vertex within that band,
    the ramp untouched where a(r) is below half a layer, and the rules find no narrow wall or gap."""
    printer = PRINTERS["bay1-lcd-resin"]
    component = build_component("spiral", {"charge": charge, "steps": steps}, material=catalogue.material("standard-resin"),
                                printer=printer)
    part, derived = component.part, component.derived
    base, total = component.to_dict()["parameters"]["base_thickness_mm"], derived["total_step_mm"]
    s = smallest_printable_mm(printer)
    v = part.vertices_mm
    lo, hi = v.min(axis=0), v.max(axis=0)
    r = np.hypot(v[:, 0] - (lo[0] + hi[0]) / 2, v[:, 1] - (lo[1] + hi[1]) / 2)
    top = v[:, 2] > base / 2  # not the bottom face's
    band = top & (r > derived["core_radius_mm"] / 2) & (r <= 2 * s * total / (2 * math.pi * printer.layer_height_mm))
    a = s * total / (2 * math.pi * r[band])  # the apex on the axis is at half the rise, inside the band
    assert np.all(v[band, 2] >= base + np.minimum(a, total / 2) - 1e-6)
    assert np.all(v[band, 2] <= base + total - np.minimum(a, total / 2) + 1e-6)
    assert derived["clamped_within_mm"] == pytest.approx(s * total / (2 * math.pi * printer.layer_height_mm))
    # Past where a(r) is half a layer the full ramp is kept: its lowest and highest heights are on the rim.
    rim = top & (r > 0.99 * r.max())
    assert v[rim, 2].min() == pytest.approx(base, abs=1e-6)
    assert v[rim, 2].max() == pytest.approx(base + total * (1 if steps == 0 else (steps - 1) / steps), abs=1e-3)
    narrow = [f for f in _printability_findings(part, printer) if f.rule in ("min_gap", "min_feature", "min_hole")]
    assert not narrow, [f.message for f in narrow]


def _pairs():
    for printer in catalogue.printers():
        for material in catalogue.materials():
            try:
                check_pairing(printer, material)
            except UnusableInput:
                continue
            yield printer, material


def _printability_findings(part, printer):
    """Return what the check says of printing the part: mesh health, build fit and every design rule."""
    stack = build_layer_stack(part, pixel_mm=printer.pixel_mm, layer_height_mm=printer.layer_height_mm)
    fit, _ = check_build_fit(part, printer)
    return [*part.findings, *fit, *run_rules(stack=stack, part=part, printer=printer).findings]


@pytest.mark.slow
@pytest.mark.parametrize("kind", KINDS)
def test_every_generator_on_every_starter_pair_prints_or_says_why(kind):
    """At default parameters each generator, on each starter printer and material it can print, gives a part the
    design rules find no blocker in, or refuses with a sentence."""
    for printer, material in _pairs():
        try:
            component = build_component(kind, {}, material=material, printer=printer)
        except UnusableInput as refusal:
            assert refusal.message.endswith(".") and len(refusal.message) > 30
            continue
        blockers = [f.message for f in _printability_findings(component.part, printer) if f.severity == "blocker"]
        assert not blockers, (kind, printer.slug, material.slug, blockers)
