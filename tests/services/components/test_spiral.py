"""Spiral phase plates: the azimuthal phase ramp of the mesh, sampled by ray casting."""

import numpy as np
import pytest

from services.components import build_component

from .conftest import N, solid_of, thickness_at, wavelength


def _ring(radius, count=720):
    # Off the sample azimuths of the mesh, so no ray runs along an edge.
    phi = (np.arange(count) + 0.5) * (2 * np.pi / count) + 1e-4
    return phi, np.column_stack([radius * np.cos(phi), radius * np.sin(phi)])


@pytest.mark.parametrize("charge", [1, 2, 3])
def test_the_continuous_ramp_carries_2_pi_l_of_phase(resin, charge):
    """Thickness sampled on a circle -> phase 2 pi (n - 1) t / lambda; its rise over one turn is 2 pi l within 2 %
    (Beijersbergen et al. 1994; optics.md section 8: total step l lambda / (n - 1), 4.45245 mm for l = 1 at 100 GHz)."""
    lam = wavelength(100.0)
    component = build_component("spiral", {"diameter_mm": 40.0, "freq_ghz": 100.0, "charge": charge,
                                           "base_thickness_mm": 1.0}, material=resin)
    assert component.derived["total_step_mm"] == pytest.approx(charge * 4.45245, abs=5e-5)
    phi, xy = _ring(10.0)
    phase = 2 * np.pi * (N - 1) * thickness_at(component.part, xy) / lam
    rise = phase[-1] - phase[0]
    assert rise == pytest.approx(2 * np.pi * charge, rel=0.02)
    slope = np.polyfit(phi, phase, 1)[0] * 2 * np.pi
    assert slope == pytest.approx(2 * np.pi * charge, rel=0.02)
    # The base stays under the whole ramp.
    assert thickness_at(component.part, xy).min() >= 1.0 - 1e-9


def test_the_stepped_plate_has_n_flat_steps(resin):
    """N = 8 steps of l lambda / (8 (n - 1)); every step is flat across its sector."""
    step = 4.45245 / 8
    component = build_component("spiral", {"diameter_mm": 30.0, "freq_ghz": 100.0, "steps": 8}, material=resin)
    assert component.derived["step_height_mm"] == pytest.approx(step, abs=5e-6)
    phi, xy = _ring(7.0, count=64)
    t = thickness_at(component.part, xy)
    assert t == pytest.approx(1.0 + np.floor(phi / (2 * np.pi / 8)) * step, abs=1e-6)


def test_a_negative_charge_turns_the_other_way(resin):
    """Charge -1 is the mirror image: thickness falls with azimuth."""
    part = build_component("spiral", {"diameter_mm": 30.0, "freq_ghz": 150.0, "charge": -1}, material=resin).part
    phi, xy = _ring(6.0, count=90)
    t = thickness_at(part, xy)
    assert np.polyfit(phi, t, 1)[0] < 0
    assert t.max() - t.min() == pytest.approx(wavelength(150.0) / (N - 1), rel=0.02)


@pytest.mark.parametrize("params", [{}, {"steps": 6, "charge": 2}, {"flange_width_mm": 3.0, "flange_thickness_mm": 4.0}])
def test_every_spiral_is_a_closed_solid(resin, params):
    """Watertight, NoError on re-import, one body, positive volume, intake finds nothing."""
    part = build_component("spiral", params, material=resin).part
    assert part.watertight and part.bodies == 1 and part.findings == ()
    assert solid_of(part).volume() == pytest.approx(part.volume_mm3, rel=1e-9) and part.volume_mm3 > 0
    assert part.parameters["charge"] == params.get("charge", 1) and part.parameters["kind"] == "spiral"
