"""Fundamental-mode Gaussian beams (Goldsmith, Quasioptical Systems, 1998, ch. 2-3).

The field amplitude is exp(-r^2 / w^2), so w is the 1/e field radius.
"""

from __future__ import annotations

import numpy as np

DB_PER_NEPER_SQ = 20 * np.log10(np.e)  # edge taper T_e(dB) = 8.686 (r/w)^2, Goldsmith 1998 ch. 2


def confocal_distance_mm(waist_mm, wavelength_mm):
    """Return z_c = pi w0^2 / lambda (Goldsmith 1998 ch. 2)."""
    return np.pi * np.asarray(waist_mm) ** 2 / wavelength_mm


def beam_radius_mm(z_mm, waist_mm, wavelength_mm):
    """Return w(z) = w0 sqrt(1 + (z / z_c)^2) (Goldsmith 1998 ch. 2)."""
    return waist_mm * np.sqrt(1 + (np.asarray(z_mm) / confocal_distance_mm(waist_mm, wavelength_mm)) ** 2)


def curvature_radius_mm(z_mm, waist_mm, wavelength_mm):
    """Return R(z) = z + z_c^2 / z (Goldsmith 1998 ch. 2); infinite at the waist."""
    z = np.asarray(z_mm, dtype=float)
    zc = confocal_distance_mm(waist_mm, wavelength_mm)
    with np.errstate(divide="ignore"):
        return z + zc**2 / z


def gouy_phase_rad(z_mm, waist_mm, wavelength_mm):
    """Return phi0(z) = atan(z / z_c) (Goldsmith 1998 ch. 2)."""
    return np.arctan(np.asarray(z_mm) / confocal_distance_mm(waist_mm, wavelength_mm))


def edge_taper_db(radius_mm, beam_radius):
    """Return the edge taper 20 log10(e) (r / w)^2 in dB at radius r (Goldsmith 1998 ch. 2)."""
    return DB_PER_NEPER_SQ * (np.asarray(radius_mm) / beam_radius) ** 2


def beam_radius_for_taper_mm(radius_mm, taper_db):
    """Return the beam radius w that gives ``taper_db`` at ``radius_mm``."""
    return radius_mm * np.sqrt(DB_PER_NEPER_SQ / np.asarray(taper_db))


def power_within(radius_mm, beam_radius):
    """Return the fraction of the beam's power inside radius r: 1 - exp(-2 r^2 / w^2) (Goldsmith 1998)."""
    return 1 - np.exp(-2 * (np.asarray(radius_mm) / beam_radius) ** 2)


def thin_lens_waist(waist_mm, d_in_mm, focal_mm, wavelength_mm):
    """Return (d_out_mm, w0_out_mm) behind a thin lens (Goldsmith 1998 ch. 3; Self 1983).

    d_out = f + (d_in - f) f^2 / ((d_in - f)^2 + z_c^2); w0' = w0 / sqrt((1 - d_in/f)^2 + (z_c/f)^2).
    """
    zc = confocal_distance_mm(waist_mm, wavelength_mm)
    d = d_in_mm - focal_mm
    d_out = focal_mm + d * focal_mm**2 / (d**2 + zc**2)
    w_out = waist_mm / np.sqrt((1 - d_in_mm / focal_mm) ** 2 + (zc / focal_mm) ** 2)
    return d_out, w_out


def field(x_mm, y_mm, beam_radius):
    """Return the amplitude exp(-(x^2 + y^2) / w^2) of a beam at its waist."""
    return np.exp(-(np.asarray(x_mm) ** 2 + np.asarray(y_mm) ** 2) / beam_radius**2)
