"""N-level phase plates: step heights, level counts, ring radii and the deflector's period."""

import numpy as np
import pytest

from services.components import build_component

from .conftest import solid_of, thickness_at, wavelength

STEP_100GHZ = 4.45245  # lambda / (n - 1) at 100 GHz, n = 1.67332 (optics.md section 8 [C])


def _levels_on_mesh(part, base):
    """Return the distinct heights of the upward faces above the base, from the mesh."""
    tri = part.vertices_mm[part.faces]
    normal = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    flat_up = (normal[:, 2] > 0) & (np.hypot(normal[:, 0], normal[:, 1]) < 1e-9 * np.abs(normal[:, 2]))
    return np.unique(np.round(tri[flat_up, 0, 2], 9))


@pytest.mark.parametrize("levels", [2, 4, 8, 16])
def test_the_lens_has_n_levels_a_quarter_step_apart(resin, levels):
    """Steps of lambda / (N (n - 1)); the 4-level step is 1.11311 mm at 100 GHz (optics.md section 8)."""
    component = build_component("multilevel", {"levels": levels, "diameter_mm": 60.0, "focal_length_mm": 100.0,
                                               "freq_ghz": 100.0, "base_thickness_mm": 1.0}, material=resin)
    heights = _levels_on_mesh(component.part, 1.0)
    assert len(heights) == levels
    assert np.diff(heights) == pytest.approx(STEP_100GHZ / levels, abs=1e-6)
    assert heights[0] == pytest.approx(1.0, abs=1e-9)
    assert component.derived["step_height_mm"] == pytest.approx(STEP_100GHZ / levels, abs=5e-6)
    if levels == 4:
        assert component.derived["step_height_mm"] == pytest.approx(1.11311, abs=5e-6)
    # First-order efficiency of an N-level blaze, sinc^2(1/N): 0.40528, 0.81057, 0.94964, 0.98721 (optics.md 5, 13).
    expected = {2: 0.40528, 4: 0.81057, 8: 0.94964, 16: 0.98721}[levels]
    assert component.derived["efficiency_ideal"] == pytest.approx(expected, abs=5e-6)


def test_the_rings_sit_where_the_path_grows_by_lambda_over_n(resin):
    """Ring j at sqrt(2 s f + s^2), s = j lambda / N; every N-th is a zone, r_1 = 24.66926 mm (optics.md 8)."""
    lam, f = wavelength(100.0), 100.0
    component = build_component("multilevel", {"levels": 4, "diameter_mm": 80.0, "focal_length_mm": f,
                                               "freq_ghz": 100.0}, material=resin)
    rings = np.array(component.derived["ring_radii_mm"])
    s = np.arange(1, len(rings) + 1) * lam / 4
    assert rings == pytest.approx(np.sqrt(2 * s * f + s * s), abs=1e-9)
    assert component.derived["zone_radii_mm"][:2] == pytest.approx([24.66926, 35.14427], abs=5e-5)
    # The centre is the thickest level, as a converging lens must be.
    at_axis = thickness_at(component.part, np.array([[0.0123, 0.0217]]))[0]
    assert at_axis == pytest.approx(1.0 + 3 * STEP_100GHZ / 4, abs=1e-6)


def test_the_deflector_is_a_staircase_grating_rising_towards_plus_x(resin):
    """Period lambda / sin(theta); N levels per period, each period / N wide, heights rising with x."""
    theta, levels = 20.0, 4
    component = build_component("multilevel", {"profile": "deflector", "levels": levels, "deflection_deg": theta,
                                               "diameter_mm": 40.0, "freq_ghz": 100.0}, material=resin)
    period = wavelength(100.0) / np.sin(np.radians(theta))
    assert component.derived["grating_period_mm"] == pytest.approx(period, rel=1e-12)
    assert component.focal_length_mm is None and component.part.parameters["focal_length_mm"] is None
    heights = _levels_on_mesh(component.part, 1.0)
    assert len(heights) == levels
    # Thickness along the x axis at the middle of each level: base + (q mod N) step, q = floor(x N / period).
    x = (np.arange(-6, 6) + 0.5) * period / levels
    top = thickness_at(component.part, np.column_stack([x, np.full(len(x), 0.3137)]))
    assert top == pytest.approx(1.0 + (np.floor(x * levels / period) % levels) * STEP_100GHZ / levels, abs=1e-6)


def test_every_plate_is_a_closed_solid(resin):
    """Lens and deflector, with a flange: watertight, NoError, one body, positive volume."""
    for params in ({"flange_width_mm": 4.0}, {"profile": "deflector", "flange_width_mm": 4.0, "flange_thickness_mm": 5.0}):
        part = build_component("multilevel", params, material=resin).part
        assert part.watertight and part.bodies == 1 and part.findings == ()
        assert solid_of(part).volume() == pytest.approx(part.volume_mm3, rel=1e-9) and part.volume_mm3 > 0
        assert part.bbox_mm[0] == pytest.approx(58.0, abs=1e-6)
