"""Diffraction-limited focusing through the angular-spectrum propagator, and N-level phase gratings."""

import manifold3d as m3d
import numpy as np
import pytest

from services.layers import build_layer_stack
from services.optics.cells import CellGrid
from services.optics.evaluate import focus_metrics
from services.optics.focus import best_focus_mm, encircled_power, ideal_lens_phase, spot_at, wavefront_focus_mm
from services.optics.illumination import illumination_for
from services.optics.materials import rf_values
from services.optics.propagate import AngularSpectrum
from services.optics.transmission import cell_sparams
from tests.services.optics.helpers import box, checked, material, part_from

LAM, D, F = 1.0, 60.0, 300.0  # f-number N = 5; Fresnel number a^2 / (lambda f) = 3


def _ideal_lens(taper_db: float = 0.0, cell: float = 0.25):
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(D / 2 + 1, D / 2 + 1), cell_mm=cell)
    r = grid.radius_mm()
    amplitude = np.exp(-(taper_db / 8.685889638) * (r / (D / 2)) ** 2) * (r <= D / 2)
    field = amplitude * ideal_lens_phase(r, F, LAM)
    return grid, field, AngularSpectrum(field, cell_mm=cell, wavelength_mm=LAM)


def test_ideal_lens_gives_the_airy_pattern():
    """Uniformly lit ideal thin lens: FWHM 1.029 lambda N, first zero 1.22 lambda N, 83.8 % inside it (Born & Wolf 8.5.2)."""
    grid, field, asm = _ideal_lens()
    spot = spot_at(asm, F)
    lam_n = LAM * F / D
    assert spot.peak_index == grid.axis_index
    assert spot.fwhm_mm == pytest.approx((1.028994 * lam_n,) * 2, rel=0.01)
    intensity = np.abs(spot.field) ** 2
    ring = int(round(1.219670 * lam_n / grid.cell_mm))
    cut = intensity[grid.axis_index[0], grid.axis_index[1]:]
    assert int(np.argmin(cut[: ring + 4])) in (ring - 1, ring, ring + 1)
    assert cut[ring] < 2e-3 * spot.peak_intensity
    power = (np.abs(field) ** 2).sum() * grid.cell_mm**2
    inside = encircled_power(intensity, grid.cell_mm, spot.peak_index, 1.219670 * lam_n)
    assert inside / power == pytest.approx(0.83778, abs=0.005)


def test_tapered_illumination_widens_the_spot_as_computed():
    """A 10 dB Gaussian edge taper gives FWHM 1.149 lambda N (Hankel integration, optics.md section 4 [C])."""
    _, _, asm = _ideal_lens(taper_db=10.0)
    assert np.mean(spot_at(asm, F).fwhm_mm) == pytest.approx(1.1490 * LAM * F / D, rel=0.01)


def test_low_fresnel_number_moves_the_peak_toward_the_lens():
    """At Fresnel number 3 the on-axis intensity peaks before the geometric focus (Li & Wolf 1981)."""
    grid, _, asm = _ideal_lens()
    best, _, _ = best_focus_mm(asm, grid.axis_index, 0.1 * F, 2 * F)
    assert 0.8 * F < best < 0.97 * F


def test_the_wavefront_focus_is_the_spheres_centre_even_where_the_peak_is_not():
    """At Fresnel number 3 the sphere's centre is F exactly, while the intensity peaks short of it (Li & Wolf 1981);
    wrapping the phase into zones (a zone plate) leaves the fit unchanged, as exp(j 2 pi) = 1."""
    grid, field, asm = _ideal_lens()
    best, _, _ = best_focus_mm(asm, grid.axis_index, 0.1 * F, 2 * F)
    focus, coherence = wavefront_focus_mm(field, grid.cell_mm, grid.axis_index, LAM, 0.1 * F, 2 * F)
    assert focus == pytest.approx(F, rel=1e-4) and coherence == pytest.approx(1.0, abs=1e-3)
    assert best < 0.97 * focus
    wrapped = np.abs(field) * np.exp(1j * np.mod(np.angle(field), 2 * np.pi))
    again, _ = wavefront_focus_mm(wrapped, grid.cell_mm, grid.axis_index, LAM, 0.1 * F, 2 * F)
    assert again == pytest.approx(F, rel=1e-4)


@pytest.mark.parametrize(("focal", "aberration_rad", "expected"), [
    (300.0, 0.0, 1.0), (60.0, 0.0, 1.0),
    # W = a (rho^4 - rho^2), spherical balanced by defocus: sigma = a / (6 sqrt 5), S = exp(-sigma^2) (Marechal,
    # Born & Wolf 9.3; the rms of rho^4 - rho^2 over a uniform disc is 1 / (6 sqrt 5), computed from Zernike Z40)
    (300.0, 3.0, 0.95123), (60.0, 3.0, 0.95123),
])
def test_strehl_is_one_for_a_perfect_wave_and_marechal_for_an_aberrated_one(focal, aberration_rad, expected):
    """The reference converges on the wavefront focus, so an aberration-free field reads 1 at Fresnel number 3 and
    15 alike; primary spherical aberration of 0.22 rad rms reads the Marechal value within 0.01."""
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(D / 2 + 1, D / 2 + 1), cell_mm=0.25)
    r = grid.radius_mm()
    lit = illumination_for(edge_taper_db=None, beam_waist_mm=1e6, rim_radius_mm=D / 2, grid=grid, aperture=r <= D / 2)
    rho2 = (r / (D / 2)) ** 2
    aberration = np.exp(1j * aberration_rad * (rho2**2 - rho2))
    field = lit.amplitude * lit.aperture * ideal_lens_phase(r, focal, LAM) * aberration
    m = focus_metrics(field, lit, wavelength_mm=LAM, intended_mm=focal, exit_offset_mm=0.0, axis_index=grid.axis_index)
    assert m.strehl == pytest.approx(expected, abs=0.01)
    assert m.wavefront_focus_mm == pytest.approx(focal, rel=0.005)


def _grating(levels: int, eps_r: float, freq_ghz: float, step_mm: float = 2.0, periods: int = 6):
    """Mesh an N-level staircase blazed for 2 pi at freq_ghz: step j is j lambda / (N (n - 1)) high."""
    lam = 299.792458 / freq_ghz
    rise = lam / (np.sqrt(eps_r) - 1) / levels
    width = periods * levels * step_mm
    steps = [box(step_mm, 10.0, 1.0 + j * rise).translate((j * step_mm + step_mm / 2 - width / 2, 0, 0))
             for j in range(levels)]
    one = m3d.Manifold.batch_boolean(steps, m3d.OpType.Add)
    solid = checked(m3d.Manifold.batch_boolean([one.translate((k * levels * step_mm, 0, 0)) for k in range(periods)],
                                               m3d.OpType.Add))
    return part_from(solid, f"{levels}-level grating"), rise


@pytest.mark.parametrize(("levels", "expected"), [(2, 0.40528), (4, 0.81057), (8, 0.94964)])
def test_meshed_multilevel_gratings_reach_the_swanson_efficiency(levels, expected):
    """First-order efficiency of an N-level profile is sinc^2(1/N) (Swanson 1989), within 2 points."""
    step, periods = 2.0, 6
    part, rise = _grating(levels, 2.8, 100.0, step, periods)
    stack = build_layer_stack(part, pixel_mm=0.05, layer_height_mm=rise / 8)
    cell = 0.25
    x0 = float(part.bounds_mm[0][0])
    half = round(periods * levels * step / 2 / cell)
    # Cell edges on x0 + k cell, so no cell straddles a step.
    grid = CellGrid(cell_mm=cell, axis_mm=(x0 + cell / 2 + half * cell, 0.0), shape=(21, 2 * half + 1))
    t = cell_sparams(stack, grid, rf_values(material(2.8, 0.0), [100.0]))["nominal"].s21[0, 10]
    per_period = round(levels * step / cell)
    inner = t[per_period:per_period * (periods - 1)]  # whole periods away from the ends
    orders = np.abs(np.fft.fft(inner)) ** 2
    m = periods - 2
    assert max(orders[m], orders[-m]) / orders.sum() == pytest.approx(expected, abs=0.02)
