"""A material's permittivity and loss tangent at the design frequencies."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.errors import UnusableInput
from services.profiles import Material

C0_MM_GHZ = 299.792458  # speed of light in mm * GHz, so lambda_mm = C0_MM_GHZ / f_ghz
NEPER_DB = 8.685889638  # 20 log10(e)


# Within this factor of the data's ends a frequency is extrapolated with a caution; beyond it the
# check refuses: a polymer's loss can change several-fold over an octave (optics notes section 1).
FAR_OUTSIDE_FACTOR = 2.0
RULE_SENTENCE = (f"within a factor {FAR_OUTSIDE_FACTOR:g} in frequency of the data the values are extrapolated "
                 "with a caution; further out the check refuses")
TAN_DELTA_FLOOR = 1e-9  # log-log interpolation needs a positive loss tangent; 1e-9 is below any measurement


@dataclass(frozen=True, slots=True, eq=False)
class RFValues:
    """Permittivity and loss tangent interpolated at each frequency, with the table's range.

    outside : (nf,) bool, True where the frequency lies outside the material's RF table (extrapolated)
    """

    freqs_ghz: np.ndarray
    eps_r: np.ndarray
    tan_delta: np.ndarray
    outside: np.ndarray
    table_range_ghz: tuple[float, float]

    @property
    def eps(self) -> np.ndarray:
        """Return each frequency's complex permittivity, e^{+j omega t}: eps' (1 - j tan delta)."""
        return self.eps_r * (1 - 1j * self.tan_delta)


def wavelength_mm(freq_ghz):
    """Return the free-space wavelength in mm."""
    return C0_MM_GHZ / np.asarray(freq_ghz, dtype=float)


def rf_values(material: Material, freqs_ghz) -> RFValues:
    """Interpolate eps_r (PCHIP in log f) and tan_delta (straight in log-log); extrapolate near the data."""
    pts = _points(material)
    f = np.asarray(freqs_ghz, dtype=float)
    table_f = np.array([p.freq_ghz for p in pts])
    lo, hi = float(table_f[0]), float(table_f[-1])
    far = (f < lo / FAR_OUTSIDE_FACTOR * (1 - 1e-9)) | (f > hi * FAR_OUTSIDE_FACTOR * (1 + 1e-9))
    if far.any():
        bad = ", ".join(f"{v:g}" for v in f[far])
        raise UnusableInput("frequency_far_outside_data",
                            f"{bad} GHz lies far outside the RF data of {material.name} ({_range_text(lo, hi)}): "
                            f"{RULE_SENTENCE}, so choose a frequency from {lo / FAR_OUTSIDE_FACTOR:g} to "
                            f"{hi * FAR_OUTSIDE_FACTOR:g} GHz or add measured data for this material.")
    eps = _eps_r(table_f, np.array([p.eps_r for p in pts]), f)
    tand = _tan_delta(table_f, np.array([p.tan_delta for p in pts]), f)
    # A relative slack keeps a frequency typed as the table's own end point inside the table.
    outside = (f < lo * (1 - 1e-9)) | (f > hi * (1 + 1e-9))
    return RFValues(f, eps, tand, outside, (lo, hi))


def _points(material: Material):
    if not material.rf:
        raise UnusableInput("no_rf_data", f"Material {material.name!r} has no permittivity data; add at least one RF point.")
    return sorted(material.rf, key=lambda p: p.freq_ghz)


def _range_text(lo: float, hi: float) -> str:
    return f"{lo:g} GHz only" if lo == hi else f"{lo:g} to {hi:g} GHz"


def rf_coverage_text(material: Material) -> str:
    """Return where a material's RF data lie and its band, e.g. 'RF data 75 to 1000 GHz, band 75-110 GHz'."""
    freqs = [p.freq_ghz for p in material.rf]
    text = f"RF data {_range_text(min(freqs), max(freqs))}" if freqs else "no RF data"
    return text + (f", band {material.band_ghz[0]:g}-{material.band_ghz[1]:g} GHz" if material.band_ghz else "")


def _eps_r(table_f: np.ndarray, table_eps: np.ndarray, f: np.ndarray) -> np.ndarray:
    """PCHIP in log f: smooth, and never overshooting between points; held at the end values outside."""
    if len(table_f) == 1:
        return np.full(f.shape, float(table_eps[0]))
    from scipy.interpolate import PchipInterpolator

    x = np.log(table_f)
    return PchipInterpolator(x, table_eps, extrapolate=False)(np.clip(np.log(f), x[0], x[-1]))


def _tan_delta(table_f: np.ndarray, table_tand: np.ndarray, f: np.ndarray) -> np.ndarray:
    """Straight lines in log tan_delta against log f, the end segments continued outside the data.

    Polymer loss tangents rise roughly as a power of frequency across the mm-wave and THz range, so a
    power law is the least surprising continuation (optics notes section 1: holding a low-frequency
    value underestimates loss).
    """
    if len(table_f) == 1:
        return np.full(f.shape, float(table_tand[0]))
    x, y = np.log(table_f), np.log(np.maximum(table_tand, TAN_DELTA_FLOOR))
    xf = np.log(f)
    out = np.interp(xf, x, y)
    below, above = xf < x[0], xf > x[-1]
    out[below] = y[0] + (xf[below] - x[0]) * (y[1] - y[0]) / (x[1] - x[0])
    out[above] = y[-1] + (xf[above] - x[-1]) * (y[-1] - y[-2]) / (x[-1] - x[-2])
    return np.exp(out)


def band_freqs_ghz(band_ghz: tuple[float, float]) -> tuple[float, float, float]:
    """Return a band's low end, centre and high end."""
    lo, hi = band_ghz
    return float(lo), float((lo + hi) / 2), float(hi)


def design_freqs_ghz(material: Material, given=(), required_band_ghz: tuple[float, float] | None = None
                     ) -> tuple[tuple[float, ...], str | None]:
    """Return the frequencies to check and a note when they were chosen for the user.

    Given frequencies win; else the requirements' band, else the material's band; else ask for one.
    """
    if given:
        return tuple(float(f) for f in given), None
    if required_band_ghz:
        band, whose = required_band_ghz, "the requirements' band"
    elif material.band_ghz:
        band, whose = material.band_ghz, f"the band {material.name} is designed for"
    else:
        raise UnusableInput("no_frequency", f"Give a design frequency: no requirements state a band and "
                            f"{material.name} has none set, so there is no frequency to check at.")
    freqs = band_freqs_ghz(band)
    return freqs, (f"No design frequency was given; using {whose}, {band[0]:g}-{band[1]:g} GHz: its ends and "
                   f"centre ({', '.join(f'{v:g}' for v in freqs)} GHz).")


def complex_index(eps_r, tan_delta):
    """Return n = sqrt(eps_r (1 - j tan_delta)), the e^{+j omega t} convention (Im n <= 0)."""
    return np.sqrt(np.asarray(eps_r) * (1 - 1j * np.asarray(tan_delta)))


def attenuation_db_per_mm(eps_r, tan_delta, freq_ghz):
    """Return the plane-wave field attenuation in dB/mm (exact form, Pozar 2012 section 1.4)."""
    k0 = 2 * np.pi / wavelength_mm(freq_ghz)
    alpha_np_per_mm = -k0 * np.imag(complex_index(eps_r, tan_delta))
    return NEPER_DB * alpha_np_per_mm
