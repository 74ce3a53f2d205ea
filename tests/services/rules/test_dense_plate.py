"""A dense plate of sub-2-pixel pillars runs through every rule at every starter grid (issue 14's crash)."""

from dataclasses import replace

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
