"""overhang: downward-facing surfaces against the self-supporting angle, and the support volume."""

import math

import numpy as np
from manifold3d import CrossSection, Manifold

from services.rules import overhang

PX = DZ = 0.05


def ledge(angle_deg: float, *, reach=2.0, foot=1.0, depth=3.0):
    """Return a 2 mm column with a ledge whose underside rises at ``angle_deg`` from (2, foot) outwards."""
    rise = reach * math.tan(math.radians(angle_deg))
    profile = [(0.0, 0.0), (2.0, 0.0), (2.0, foot), (2.0 + reach, foot + rise), (2.0 + reach, foot + rise + 1.0),
               (0.0, foot + rise + 1.0)]
    return Manifold.extrude(CrossSection([np.array(profile)]), depth).rotate((90.0, 0.0, 0.0)).translate((0.013, 3.0, 0.0))


def test_a_20_degree_chamfer_needs_support_and_a_60_degree_one_does_not(stack_of, printer, run_check):
    """Against a 30 deg self-supporting angle (by construction): 20 deg fails, 60 deg passes."""
    rules = printer(overhang={"self_supporting_deg": 30.0, "severity": "caution"})
    part, stack = stack_of(ledge(20.0))
    out = run_check(overhang, part, stack, rules)
    (f,) = out.findings
    assert (f.rule, f.severity, f.limit, f.unit, f.count) == ("overhang", "caution", 30.0, "deg", 1)
    # the angle comes from the step between layers: that step within one pixel of dz / tan(20 deg)
    step = DZ / math.tan(math.radians(f.measured))
    assert abs(step - DZ / math.tan(math.radians(20.0))) <= PX
    assert 2.0 <= f.location_mm[0] <= 4.1 and 1.0 <= f.location_mm[2] <= 1.8
    assert 20 <= f.layers[0] <= f.layers[1] <= 36  # the ledge's underside runs from z = 1.0 to 1.73 mm
    assert f.picture in out.figures
    part, stack = stack_of(ledge(60.0))
    out = run_check(overhang, part, stack, rules)
    assert out.findings == () and out.summary["support_volume_mm3"] == 0.0


def test_support_volume_counts_the_columns_under_the_overhang(stack_of, printer, run_check):
    """The support under a 20 deg ledge is the prism between it and the plate (by construction).

    Under the ledge: depth x (foot x reach + reach^2 tan(20 deg) / 2) = 3 x (2 + 0.728) = 8.18 mm3. A column
    ends at the bottom of the layer where the ledge first covers its pixel, on average half a layer
    under the drawn surface: 8.18 - 6 mm2 x 0.025 mm = 8.03 mm3. Every step of the surface is supported,
    also those that pass the angle alone by the pixel of tolerance (a 20 deg step is 2.75 px: 2 or 3 px drawn).
    """
    part, stack = stack_of(ledge(20.0))
    out = run_check(overhang, part, stack, printer(overhang={"self_supporting_deg": 30.0, "severity": "caution"}))
    expected = 3.0 * (1.0 * 2.0 + 2.0 ** 2 * math.tan(math.radians(20.0)) / 2) - 3.0 * 2.0 * DZ / 2
    assert abs(out.summary["support_volume_mm3"] - expected) <= 0.1
