"""Closed forms against the worked values of the optics notes (shared/references/optics.md)."""

import numpy as np
import pytest

from services.components.formulas import (
    hyperbolic_sag_mm, medium_at, no_diffraction_period_mm, path_radius_mm, thin_lens_path_mm,
)
from services.errors import UnusableInput
from services.profiles import Material, RFPoint

from .conftest import N, wavelength


@pytest.mark.parametrize(("y", "sag"), [(10.0, 0.73536), (25.0, 4.38425), (50.0, 15.39625)])
def test_hyperbolic_sag_matches_the_worked_values(y, sag):
    """n = 1.67332, f = 100 mm: the sag table of optics.md section 8 [C] (Silver 1949, ch. 11)."""
    assert hyperbolic_sag_mm(y, 100.0, 1.67332) == pytest.approx(sag, abs=5e-6)


def test_hyperbolic_sag_agrees_with_the_polar_form():
    """R(theta) = (n - 1) f / (n cos theta - 1) about the focus traces the same surface (optics.md section 8)."""
    n, f = 1.67332, 100.0
    theta = np.linspace(0.0, 0.45, 40)
    r = (n - 1) * f / (n * np.cos(theta) - 1)
    y, sag = r * np.sin(theta), r * np.cos(theta) - f
    assert hyperbolic_sag_mm(y, f, n) == pytest.approx(sag, abs=1e-9)


def test_thin_lens_zone_radii_match_the_worked_values():
    """r_m = sqrt(2 m lambda f + (m lambda)^2) at 100 GHz, f = 100 mm: 24.66926, 35.14427, 43.35485, 56.76807, 83.03375 mm."""
    lam = wavelength(100.0)
    radii = path_radius_mm(np.array([1, 2, 3, 5, 10]) * lam, 100.0)
    assert radii == pytest.approx([24.66926, 35.14427, 43.35485, 56.76807, 83.03375], abs=5e-5)
    assert thin_lens_path_mm(radii, 100.0) == pytest.approx(np.array([1, 2, 3, 5, 10]) * lam, rel=1e-12)


def test_the_no_diffraction_period_matches_the_reference():
    """n 1.6733 at 100 GHz, normal incidence: period below 1.7916 mm (optics.md section 7 [C])."""
    assert no_diffraction_period_mm(wavelength(100.0), 1.6733, "square") == pytest.approx(1.7916, abs=5e-5)


def test_the_hexagonal_lattice_allows_a_period_2_over_sqrt3_longer():
    """The shortest reciprocal vector of a hexagonal lattice of spacing a is 4 pi / (sqrt(3) a) (computed)."""
    square = no_diffraction_period_mm(wavelength(100.0), N, "square")
    assert no_diffraction_period_mm(wavelength(100.0), N, "hex") == pytest.approx(square * 2 / np.sqrt(3), rel=1e-12)


def test_the_medium_interpolates_the_material_table():
    """eps 2.8 gives n = 1.67332 and lambda / (n - 1) = 4.45245 mm at 100 GHz (optics.md section 8 [C])."""
    material = Material(slug="m", name="M", kind="resin", processes=(), density_g_cm3=1, price=1, price_unit="kg",
                        currency="EUR", waste_factor=0, rf=(RFPoint(90.0, 2.8, 0.01, "t"), RFPoint(110.0, 2.8, 0.03, "t")))
    medium = medium_at(material, 100.0)
    assert medium.n == pytest.approx(1.67332, abs=5e-6)
    assert medium.full_wave_step_mm == pytest.approx(4.45245, abs=5e-6)
    assert 0.01 < medium.tan_delta < 0.03
    assert medium_at(material, 111.0).eps_r == pytest.approx(2.8)  # within a factor 2: extrapolated
    with pytest.raises(UnusableInput, match="90 to 110 GHz"):
        medium_at(material, 221.0)
