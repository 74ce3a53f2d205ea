"""Closed forms of the ideal profiles, and the material's index at the design frequency."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from services.errors import UnusableInput
from services.optics.materials import rf_values, wavelength_mm
from services.profiles import Material

# Below f/D = 0.5 the rim rays of a lens meet its surface so obliquely that reflection and the
# thin-element phase models both break down; dielectric lens antennas stay above it (common practice).
MIN_F_NUMBER = 0.5


@dataclass(frozen=True, slots=True)
class Medium:
    """The material at one frequency: permittivity, loss tangent, index and wavelength in air."""

    freq_ghz: float
    eps_r: float
    tan_delta: float

    @property
    def n(self) -> float:
        return float(np.sqrt(self.eps_r))

    @property
    def wavelength_mm(self) -> float:
        return float(wavelength_mm(self.freq_ghz))

    @property
    def full_wave_step_mm(self) -> float:
        """Return lambda / (n - 1), the height that adds one wavelength of optical path."""
        return self.wavelength_mm / (self.n - 1.0)

    def to_dict(self) -> dict:
        return {**asdict(self), "n": self.n, "wavelength_mm": self.wavelength_mm}


def medium_at(material: Material, freq_ghz: float) -> Medium:
    """Return the material at a frequency, interpolated (or extrapolated near the data) as the optics section does."""
    values = rf_values(material, [freq_ghz])
    eps = float(values.eps_r[0])
    if eps <= 1.0:
        raise UnusableInput("bad_material", f"{material.name} has a permittivity of {eps:g} at {freq_ghz:g} GHz; "
                            "a lens needs more than 1.")
    return Medium(float(freq_ghz), eps, float(values.tan_delta[0]))


def hyperbolic_sag_mm(y_mm, f_mm: float, n: float):
    """Return the sag z(y) of the plano-hyperbolic lens surface facing its focus.

    (n^2 - 1) z^2 + 2 (n - 1) f z - y^2 = 0, the equal-path condition R - n R cos(theta) = f - n f
    (Silver, Microwave Antenna Theory and Design, 1949, ch. 11; optics notes section 8).
    """
    y = np.asarray(y_mm, dtype=float)
    a = n * n - 1.0
    b = (n - 1.0) * f_mm
    # Rationalised root, exact at y = 0 and free of cancellation for small y.
    return y * y / (b + np.sqrt(b * b + a * y * y))


def thin_lens_path_mm(r_mm, f_mm: float):
    """Return sqrt(r^2 + f^2) - f, the path a thin lens must take out at radius r (optics notes section 8)."""
    r = np.asarray(r_mm, dtype=float)
    return r * r / (np.sqrt(r * r + f_mm * f_mm) + f_mm)


def path_radius_mm(path_mm, f_mm: float):
    """Return the radius where sqrt(r^2 + f^2) - f equals path: sqrt(2 s f + s^2) (optics notes section 8)."""
    s = np.asarray(path_mm, dtype=float)
    return np.sqrt(2.0 * s * f_mm + s * s)


def no_diffraction_period_mm(wavelength_mm_: float, n_max: float, lattice: str) -> float:
    """Return the period below which no diffraction order propagates at normal incidence.

    Square lattice (and 1-D gratings): period < lambda / n_max (grating equation; Raguin & Morris
    1993). Hexagonal lattice of nearest-neighbour spacing a: the shortest reciprocal vector is
    4 pi / (sqrt(3) a), so a < 2 lambda / (sqrt(3) n_max) (computed from the reciprocal lattice).
    """
    limit = wavelength_mm_ / n_max
    return limit * 2.0 / np.sqrt(3.0) if lattice == "hex" else limit


def largest_micron_below(limit_mm: float) -> float:
    """Return the largest whole number of microns strictly below the limit, in mm."""
    value = float(np.floor(limit_mm * 1000) / 1000)
    return round(value - 0.001 if value >= limit_mm else value, 3)


def check_f_number(focal_length_mm: float, diameter_mm: float, kind: str) -> None:
    """Raise UnusableInput when the focal length is too short for the aperture."""
    if focal_length_mm < MIN_F_NUMBER * diameter_mm:
        raise UnusableInput("focal_length_too_short", f"A focal length of {focal_length_mm:g} mm is too short for a "
                            f"{diameter_mm:g} mm {kind}: Phasewright needs f/D of at least {MIN_F_NUMBER:g}, "
                            f"so f of at least {MIN_F_NUMBER * diameter_mm:g} mm.")


def radial_samples(r_outer_mm: float, r_inner_mm: float, step_mm: float) -> np.ndarray:
    """Return radii from r_outer down to r_inner (both included), spaced at most step_mm."""
    count = max(2, int(np.ceil((r_outer_mm - r_inner_mm) / step_mm)) + 1)
    return np.linspace(r_outer_mm, r_inner_mm, count)


def profile_step_mm(radius_of_curvature_mm: float, tol_mm: float, cap_mm: float = 0.5) -> float:
    """Return the radial step whose chord stays within tol of a curve: sqrt(8 rho tol), capped."""
    return float(min(cap_mm, np.sqrt(8.0 * radius_of_curvature_mm * tol_mm)))
