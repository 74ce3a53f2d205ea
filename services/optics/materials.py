"""A material's permittivity and loss tangent at the design frequencies."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput
from services.profiles import Material

C0_MM_GHZ = 299.792458  # speed of light in mm * GHz, so lambda_mm = C0_MM_GHZ / f_ghz
NEPER_DB = 8.685889638  # 20 log10(e)


@dataclass(frozen=True, slots=True, eq=False)
class RFValues:
    """Permittivity and loss tangent interpolated at each frequency, with the table's range.

    outside : (nf,) bool, True where the frequency lies outside the material's RF table
    """

    freqs_ghz: np.ndarray
    eps_r: np.ndarray
    tan_delta: np.ndarray
    outside: np.ndarray
    table_range_ghz: tuple[float, float]


def wavelength_mm(freq_ghz):
    """Return the free-space wavelength in mm."""
    return C0_MM_GHZ / np.asarray(freq_ghz, dtype=float)


def rf_values(material: Material, freqs_ghz) -> RFValues:
    """Interpolate eps_r and tan_delta linearly in log frequency; hold the end values outside."""
    if not material.rf:
        raise UnusableInput("no_rf_data", f"Material {material.name!r} has no permittivity data; add at least one RF point.")
    pts = sorted(material.rf, key=lambda p: p.freq_ghz)
    f = np.asarray(freqs_ghz, dtype=float)
    log_table = np.log([p.freq_ghz for p in pts])
    eps = np.interp(np.log(f), log_table, [p.eps_r for p in pts])
    tand = np.interp(np.log(f), log_table, [p.tan_delta for p in pts])
    lo, hi = pts[0].freq_ghz, pts[-1].freq_ghz
    # A relative slack keeps a frequency typed as the table's own end point inside the table.
    outside = (f < lo * (1 - 1e-9)) | (f > hi * (1 + 1e-9))
    return RFValues(f, eps, tand, outside, (lo, hi))


def default_freqs_ghz(material: Material) -> tuple[float, ...]:
    """Return three frequencies around the geometric centre of the material's RF table."""
    if not material.rf:
        raise UnusableInput("no_rf_data", f"Material {material.name!r} has no permittivity data; add at least one RF point.")
    freqs = [p.freq_ghz for p in material.rf]
    lo, hi = min(freqs), max(freqs)
    centre = float(np.sqrt(lo * hi))
    if hi / lo < 1.2:
        return (centre,)
    # +-10 % around the centre, clipped to the table so the default never triggers a caution.
    return tuple(float(v) for v in (max(lo, 0.9 * centre), centre, min(hi, 1.1 * centre)))


def complex_index(eps_r, tan_delta):
    """Return n = sqrt(eps_r (1 - j tan_delta)), the e^{+j omega t} convention (Im n <= 0)."""
    return np.sqrt(np.asarray(eps_r) * (1 - 1j * np.asarray(tan_delta)))


def attenuation_db_per_mm(eps_r, tan_delta, freq_ghz):
    """Return the plane-wave field attenuation in dB/mm (exact form, Pozar 2012 section 1.4)."""
    k0 = 2 * np.pi / wavelength_mm(freq_ghz)
    alpha_np_per_mm = -k0 * np.imag(complex_index(eps_r, tan_delta))
    return NEPER_DB * alpha_np_per_mm
