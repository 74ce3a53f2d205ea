"""A dense plate of sub-2-pixel pillars runs through every rule at every starter grid (issue 14's crash)."""

from dataclasses import replace

import numpy as np

import pytest
from manifold3d import Manifold, OpType

from services import catalogue
from services.rules import run_rules

GRIDS = [(slug, dz) for slug in ("bay1-lcd-resin", "bay2-filament", "bay3-laser-resin")
         for dz in catalogue.printer(slug).layer_heights_mm]


def dense_plate(px: float, n: int = 8, height_mm: float = 1.2):
    """Return an n x n field of pillars 1.6 px across on a 5 px pitch, the outer row at the plate's edge."""
    pitch, diameter = 5 * px, 1.6 * px
    plate = Manifold.cube((n * pitch, n * pitch, 0.5))
    pins = [Manifold.cylinder(height_mm + 0.1, diameter / 2, circular_segments=12)
            .translate((pitch / 2 + i * pitch + 0.013 * j, pitch / 2 + j * pitch, 0.4)) for i in range(n) for j in range(n)]
    return Manifold.batch_boolean([plate] + pins, OpType.Add)


@pytest.mark.parametrize("slug,dz", GRIDS)
def test_every_pillar_of_a_dense_plate_is_judged(stack_of, run_check, slug, dz):
    """All 64 pillars come back as slender (every profile's blocker or caution), none lost and no internal error.

    A pillar 1.6 px across rising 1.2 mm is at least 1.2 / (2 px) = 6 times taller than wide on every
    starter grid (by construction), over every profile's caution limit (5 or 6).
    """
    profile = replace(catalogue.printer(slug), layer_height_mm=dz)
    part, stack = stack_of(dense_plate(profile.pixel_mm), pixel_mm=profile.pixel_mm, layer_height_mm=dz)
    out = run_rules(stack=stack, part=part, printer=profile)
    slender = [f for f in out.findings if f.rule == "aspect_ratio"]
    assert sum(f.count for f in slender) == 64
    if profile.rules["min_feature"]["unsupported_mm"] < 1.2:  # the pins rise higher than the free-standing limit
        (thin,) = [f for f in out.findings if f.rule == "min_feature"]
        assert thin.count == 64 and abs(thin.measured - 1.6 * profile.pixel_mm) <= profile.pixel_mm


def test_many_sections_refined_at_once_read_as_one_at_a_time(stack_of):
    """The batch refinement of a dense run (one fine distance map of the window) gives each section the width
    its own crop gives: discs and squares of 2-9 px (compact: mean with the area-equivalent diameter) and bars
    longer than a crop (elongated: the inscribed width alone), next to each other and at the window's edge."""
    from services.rules.scan import BATCH_FROM, Frame, RunView, refine_width, refine_widths

    px, shapes = 0.05, []
    for k in range(80):
        size, x, y = (2 + k % 8) * px, (k % 10) * 0.8, (k // 10) * 0.8
        cut = Manifold.cylinder(1.0, size / 2, circular_segments=24) if k % 3 else Manifold.cube((size, size, 1.0))
        shapes.append(cut.translate((x + 0.4, y + 0.4, 0.0)))
    shapes += [Manifold.cube((6.0, (2 + k) * px, 1.0)).translate((0.2, 7.0 + k * 0.6, 0.0)) for k in range(4)]
    part, stack = stack_of(Manifold.batch_boolean(shapes, OpType.Add), pixel_mm=px, layer_height_mm=px)
    frame = Frame(stack, 2)
    first, last, mask = next(iter(stack.runs()))
    view = RunView(frame, 0, first, last, frame.pad_mask(mask), None, None)
    width, at = view.exact_widths
    sections = np.flatnonzero(width > 0)
    assert sections.size == 84 >= BATCH_FROM
    batch = refine_widths(view, at[sections], width[sections])
    one_by_one = [refine_width(view.filled, int(at[s]), float(width[s])) for s in sections]
    np.testing.assert_array_equal(batch, one_by_one)
