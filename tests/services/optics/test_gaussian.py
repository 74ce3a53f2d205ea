"""Gaussian beams (Goldsmith 1998) and the angular-spectrum propagator against them."""

import numpy as np
import pytest

from services.optics import gaussian
from services.optics.propagate import AngularSpectrum

LAM_100 = 299.792458 / 100.0


@pytest.mark.parametrize(("z", "w", "r", "gouy_deg"), [
    # Goldsmith 1998 ch. 2 formulas; values computed in shared/references/optics.md section 3 [C]
    (26.198, 7.07107, 52.396, 45.0),
    (50.0, 10.7733, 63.727, 62.347),
    (100.0, 19.7295, 106.863, 75.320),
    (200.0, 38.4968, 203.432, 82.537),
])
def test_beam_parameters_match_goldsmith(z, w, r, gouy_deg):
    """w(z), R(z) and the Gouy phase of a 5 mm waist at 100 GHz."""
    assert gaussian.confocal_distance_mm(5.0, LAM_100) == pytest.approx(26.1981, abs=1e-4)
    assert gaussian.beam_radius_mm(z, 5.0, LAM_100) == pytest.approx(w, abs=2e-4)
    assert gaussian.curvature_radius_mm(z, 5.0, LAM_100) == pytest.approx(r, abs=2e-3)
    assert np.degrees(gaussian.gouy_phase_rad(z, 5.0, LAM_100)) == pytest.approx(gouy_deg, abs=2e-3)


@pytest.mark.parametrize(("ratio", "taper", "inside"), [
    (0.5, 2.1715, 0.393469), (1.0, 8.6859, 0.864665), (1.5, 19.543, 0.988891), (2.0, 34.744, 0.999665),
])
def test_edge_taper_and_truncated_power_match_goldsmith(ratio, taper, inside):
    """T_e = 8.686 (r/w)^2 and F(r) = 1 - exp(-2 r^2 / w^2); the 4w rule spills 3.355e-4 (Goldsmith 1998 ch. 2)."""
    assert gaussian.edge_taper_db(ratio * 10.0, 10.0) == pytest.approx(taper, abs=1e-3)
    assert gaussian.power_within(ratio * 10.0, 10.0) == pytest.approx(inside, abs=1e-6)
    assert gaussian.beam_radius_for_taper_mm(ratio * 10.0, taper) == pytest.approx(10.0, rel=1e-4)


@pytest.mark.parametrize(("d_in", "d_out", "w_out"), [
    # Goldsmith 1998 ch. 3 / Self 1983, f = 100 mm, w0 = 5 mm, 100 GHz (optics.md section 3 [C])
    (100.0, 100.000, 19.0854), (200.0, 193.577, 4.8368), (50.0, -56.920, 8.8578), (0.0, 6.4226, 4.8368),
])
def test_thin_lens_waist_transformation(d_in, d_out, w_out):
    """The output waist and its distance behind a thin lens."""
    d, w = gaussian.thin_lens_waist(5.0, d_in, 100.0, LAM_100)
    assert d == pytest.approx(d_out, abs=2e-3)
    assert w == pytest.approx(w_out, abs=2e-4)


def _second_moment_radius(field, x):
    intensity = np.abs(field) ** 2
    return 2 * np.sqrt((intensity * x[None, :] ** 2).sum() / intensity.sum())


def test_paraxial_propagator_reproduces_w_of_z_exactly():
    """The Fresnel transfer function carries a 5 mm waist to w(z) and on-axis w0/w (Goldsmith; Goodman 4.2)."""
    x = (np.arange(512) - 256) * 0.5
    field = np.exp(-(x[None, :] ** 2 + x[:, None] ** 2) / 25.0)
    asm = AngularSpectrum(field, cell_mm=0.5, wavelength_mm=LAM_100, pad=1.0, paraxial=True)
    for z in (26.1981, 100.0, 200.0):
        out = asm.plane(z)
        w = gaussian.beam_radius_mm(z, 5.0, LAM_100)
        assert _second_moment_radius(out, x) == pytest.approx(w, rel=1e-5)
        assert abs(out[256, 256]) == pytest.approx(5.0 / w, rel=1e-4)
        # e^{+j omega t}: the Gouy phase advances the wave, +atan(z / z_c) after removing e^{-jkz}
        carrier = np.exp(-2j * np.pi * z / LAM_100)
        assert np.angle(out[256, 256] / carrier) == pytest.approx(gaussian.gouy_phase_rad(z, 5.0, LAM_100), abs=1e-5)
    assert (np.abs(asm.plane(200.0)) ** 2).sum() == pytest.approx((field**2).sum(), rel=1e-6)


def test_exact_propagator_reproduces_w_of_z_for_a_wide_beam():
    """A 30 mm (10 lambda) waist follows w(z) within the paraxial error, of order (lambda / pi w0)^2."""
    x = (np.arange(512) - 256) * 1.0
    field = np.exp(-(x[None, :] ** 2 + x[:, None] ** 2) / 900.0)
    asm = AngularSpectrum(field, cell_mm=1.0, wavelength_mm=LAM_100)
    zc = gaussian.confocal_distance_mm(30.0, LAM_100)
    w = _second_moment_radius(asm.plane(zc), x)
    assert w == pytest.approx(gaussian.beam_radius_mm(zc, 30.0, LAM_100), rel=(LAM_100 / (np.pi * 30.0)) ** 2)


def test_axis_scan_equals_full_planes():
    """The FFT-free on-axis scan returns the same field as propagating whole planes."""
    x = (np.arange(128) - 64) * 0.5
    field = np.exp(-(x[None, :] ** 2 + x[:, None] ** 2) / 16.0) * np.exp(1j * 0.01 * x[None, :] ** 2)
    asm = AngularSpectrum(field, cell_mm=0.5, wavelength_mm=LAM_100)
    z = np.linspace(5.0, 80.0, 16)
    scan = asm.on_axis(z, (64, 64))
    assert scan == pytest.approx([asm.plane(d)[64, 64] for d in z], rel=1e-7)


@pytest.mark.parametrize("paraxial", [False, True])
@pytest.mark.parametrize("z_mm", [-7.0, 0.0, 30.0, 400.0, 5000.0])
def test_the_transfer_function_is_taken_only_inside_its_band_limit(paraxial, z_mm):
    """H over the band limit's rectangle, 0 outside, as the whole-window formula of Goodman (2005) eq. 3-74 with
    Matsushima & Shimobaba's (2009) limit gives it: backwards (evanescent dropped), near and far (narrow band)."""
    rng = np.random.default_rng(3)
    asm = AngularSpectrum(rng.normal(size=(37, 52)) + 0j, cell_mm=0.6, wavelength_mm=LAM_100, paraxial=paraxial)
    lam, fx, fy = LAM_100, asm.fx, asm.fy
    f2 = fx**2 + fy**2
    if paraxial:
        h = np.exp(-2j * np.pi * z_mm / lam) * np.exp(1j * np.pi * lam * z_mm * f2)
    else:
        arg = 1.0 / lam**2 - f2
        kz = np.sqrt(np.abs(arg))
        h = np.where(arg >= 0, np.exp(-2j * np.pi * z_mm * kz), np.exp(-2 * np.pi * abs(z_mm) * kz))
    lim_x = 1.0 / (lam * np.sqrt((2 * z_mm / (asm.padded[1] * 0.6)) ** 2 + 1))
    lim_y = 1.0 / (lam * np.sqrt((2 * z_mm / (asm.padded[0] * 0.6)) ** 2 + 1))
    expected = h * ((np.abs(fx) < lim_x) & (np.abs(fy) < lim_y))
    np.testing.assert_allclose(asm.transfer(z_mm), expected, rtol=0, atol=1e-12)
