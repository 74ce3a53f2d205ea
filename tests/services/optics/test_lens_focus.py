"""A meshed plano-hyperbolic lens through the whole cell model and the propagator (slow)."""

import numpy as np
import pytest

from services.layers import build_layer_stack
from services.optics import grids
from services.optics.cells import cell_footprint
from services.optics.evaluate import focus_metrics
from services.optics.illumination import illumination_for
from services.optics.materials import rf_values, wavelength_mm
from services.optics.transmission import cell_sparams
from tests.services.optics.helpers import hyperbolic_lens, material

EPS_SI = 11.68  # high-resistivity silicon, n = 3.4176 (shared/references/optics.md section 2.2)
FREQ_GHZ = 1000.0


@pytest.mark.slow
def test_hyperbolic_lens_focuses_at_its_design_distance_and_shifts_at_low_fresnel_number():
    """Fresnel number 20: focus within 2 % of f and FWHM within 10 % of the diffraction limit; at 2 the
    on-axis peak moves toward the lens (Li & Wolf 1981). Textbook profile: Silver 1949, Goldsmith 1998 ch. 5.

    The per-cell model is a thin element (straight through each cell), which adds spherical
    aberration of order a^4 / (4 (n - 1) f^3) to a hyperbolic lens; a^2 / f^2 / (2 (n - 1)) = 1.3 %
    of focal shift here (computed), so the lens is silicon at f / D = 2.
    """
    n = np.sqrt(EPS_SI)
    lam = float(wavelength_mm(FREQ_GHZ))
    alpha, fresnel = 0.25, 20.0
    focal = fresnel * lam / alpha**2
    radius = alpha * focal
    part = hyperbolic_lens(radius, n, focal, base_mm=0.5, points=600, segments=512)
    stack = build_layer_stack(part, pixel_mm=lam / 8, layer_height_mm=lam / (16 * (n - 1)))
    rf = rf_values(material(EPS_SI, 0.0), [FREQ_GHZ, FREQ_GHZ / 10])
    grid = grids.analysis_grid(part, lam / 8, lam)
    sp = cell_sparams(stack, grid, rf)["nominal"]
    uniform = illumination_for(edge_taper_db=None, beam_waist_mm=1e6, rim_radius_mm=radius, grid=grid,
                               aperture=cell_footprint(stack, grid))
    offset = sp.top_mm - float(part.bounds_mm[1][2])
    high, low = (focus_metrics(sp.s21[i], uniform, wavelength_mm=float(wavelength_mm(f)), intended_mm=focal,
                               exit_offset_mm=offset, axis_index=grid.axis_index)
                 for i, f in enumerate(rf.freqs_ghz))
    assert high.best_focus_mm == pytest.approx(focal, rel=0.02)
    assert np.mean(high.fwhm_mm) == pytest.approx(np.mean(high.diffraction_limited_fwhm_mm), rel=0.10)
    # and against the uniform-aperture Airy width 1.029 lambda N (Born & Wolf 8.5.2)
    assert np.mean(high.fwhm_mm) == pytest.approx(1.028994 * lam * focal / (2 * radius), rel=0.10)
    assert low.best_focus_mm < 0.9 * focal
