"""Generators make what the chosen printer can make: by construction, or a refusal with a sentence."""

import math

import numpy as np
import pytest

from services import catalogue
from services.components import KINDS, build_component
from services.components.base import smallest_printable_mm
from services.components.multilevel import printable_rings
from services.components.spiral import centre_fill_radius_mm
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


def test_the_spiral_centre_is_filled_where_its_sectors_are_too_narrow():
    """A continuous ramp's narrowest sector is one layer's rise: 2 pi dz / total radians; the pin's radius is
    the printer's smallest wall or gap over that angle (arc length s = r theta)."""
    printer = PRINTERS["bay1-lcd-resin"]
    smallest = smallest_printable_mm(printer)
    total = 3.0
    r = centre_fill_radius_mm(printer, total, 0, 15.0)
    assert r == pytest.approx(smallest / (2 * math.pi * printer.layer_height_mm / total))
    assert centre_fill_radius_mm(printer, total, 8, 15.0) == pytest.approx(smallest / (2 * math.pi / 8))
    assert centre_fill_radius_mm(None, total, 8, 15.0) == 0.0


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
