"""Optics rules: phase error of the print against the design, and diffracting periods."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.findings import Finding

MARECHAL_STREHL = 0.8  # Marechal criterion (Born & Wolf section 9.3): S >= 0.8, sigma_phi <= 0.47 rad
MIN_PEAK_SHARE = 0.05  # a lattice's first-order spectral peak holds this share of the pattern's AC power (computed)


@dataclass(frozen=True, slots=True, eq=False)
class PhaseError:
    """RMS phase error per frequency (piston removed, illumination-weighted) and its Marechal Strehl."""

    rms_rad: np.ndarray
    strehl: np.ndarray


def phase_error(t_printed: np.ndarray, t_designed: np.ndarray, weights: np.ndarray) -> PhaseError:
    """Return the weighted RMS of arg(t_printed / t_designed) with the mean phase removed.

    t_* : (nf, ny, nx) complex cell transmissions; weights : (ny, nx) illumination power in the aperture.
    Strehl S = exp(-sigma^2), the Marechal approximation (Born & Wolf section 9.3; Mahajan 1982).
    """
    w = weights / weights.sum()
    ratio = t_printed * np.conj(t_designed)
    unit = np.exp(1j * np.angle(ratio))
    piston = np.angle((unit * w).sum(axis=(1, 2)))
    dphi = np.angle(unit * np.exp(-1j * piston)[:, None, None])
    rms = np.sqrt((dphi**2 * w).sum(axis=(1, 2)))
    return PhaseError(rms, np.exp(-(rms**2)))


def phase_error_finding(err: PhaseError, freqs_ghz: np.ndarray, blocker_strehl: float) -> Finding | None:
    """Return a caution below the Marechal criterion, a blocker below the check's own limit, else None."""
    i = int(np.argmin(err.strehl))
    s = float(err.strehl[i])
    if s >= MARECHAL_STREHL:
        return None
    severity = "blocker" if s < blocker_strehl else "caution"
    limit = blocker_strehl if severity == "blocker" else MARECHAL_STREHL
    message = (f"Layer steps and pixel quantisation leave {err.rms_rad[i]:.2f} rad RMS phase error against the "
               f"design at {freqs_ghz[i]:g} GHz, a Strehl ratio of {s:.2f} (Marechal); print with finer layers "
               "or a finer pixel, or expect a weaker focus.")
    return Finding(rule="phase_error", severity=severity, message=message, measured=round(s, 4),
                   limit=limit, unit="strehl", picture="optics_phase_map.png")


def detect_period_mm(mask: np.ndarray, pixel_mm: float, max_period_mm: float) -> float | None:
    """Return the period of a lattice-like raster from its strongest spectral peak, or None.

    The peak must lie below ``max_period_mm``, above three periods across the pattern, and carry
    at least MIN_PEAK_SHARE of the pattern's AC power (3 x 3 bins, so an off-bin peak still counts).
    """
    rows, cols = np.flatnonzero(mask.any(axis=1)), np.flatnonzero(mask.any(axis=0))
    if len(rows) < 8 or len(cols) < 8:
        return None
    crop = mask[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1].astype(np.float32)
    crop -= crop.mean()
    power = np.abs(np.fft.fft2(crop)) ** 2
    total = power.sum()
    if total <= 0:
        return None
    fy = np.fft.fftfreq(crop.shape[0], d=pixel_mm)[:, None]
    fx = np.fft.fftfreq(crop.shape[1], d=pixel_mm)[None, :]
    f = np.hypot(fx, fy)
    extent = pixel_mm * max(crop.shape)
    allowed = (f >= 1.0 / max_period_mm) & (f >= 3.0 / extent)
    if not allowed.any():
        return None
    local = sum(np.roll(power, (dy, dx), axis=(0, 1)) for dy in (-1, 0, 1) for dx in (-1, 0, 1))
    candidate = np.where(allowed, local, -1.0)
    k = np.unravel_index(int(np.argmax(candidate)), power.shape)
    if candidate[k] < MIN_PEAK_SHARE * total:
        return None
    return float(1.0 / _centroid_frequency(power, fx, fy, k))


def _centroid_frequency(power: np.ndarray, fx: np.ndarray, fy: np.ndarray, k: tuple) -> float:
    """Return |f| of the power centroid of the 3 x 3 bins around peak k (finer than one bin)."""
    ny, nx = power.shape
    rows = [(k[0] + d) % ny for d in (-1, 0, 1)]
    cols = [(k[1] + d) % nx for d in (-1, 0, 1)]
    p = power[np.ix_(rows, cols)]
    # Unwrapped neighbour frequencies: the peak's own frequency plus +-1 bin.
    gx = fx[0, k[1]] + np.array([-1, 0, 1]) * (fx[0, 1] - fx[0, 0])
    gy = fy[k[0], 0] + np.array([-1, 0, 1]) * (fy[1, 0] - fy[0, 0])
    return float(np.hypot((p.sum(axis=0) * gx).sum() / p.sum(), (p.sum(axis=1) * gy).sum() / p.sum()))


def safe_period_mm(wavelength_mm: float, n_max: float, sin_theta: float = 0.0) -> float:
    """Return the largest period with only the zeroth order: lambda / (n_max + sin theta) (grating equation)."""
    return wavelength_mm / (n_max + sin_theta)


def period_finding(period_mm: float, source: str, wavelength_mm: float, n_max: float, freq_ghz: float,
                   sin_theta: float = 0.0) -> Finding | None:
    """Return a caution when the period lets diffraction orders propagate (Raguin & Morris 1993)."""
    limit = safe_period_mm(wavelength_mm, n_max, sin_theta)
    if period_mm < limit:
        return None
    message = (f"The {source} period of {period_mm:.3f} mm lets diffraction orders propagate at {freq_ghz:g} GHz "
               f"(index {n_max:.3f}); keep the period below {limit:.3f} mm so the structure acts as an effective medium.")
    return Finding(rule="period", severity="caution", message=message, measured=round(period_mm, 4),
                   limit=round(limit, 4), unit="mm")
