"""Optics rules: phase error of the print against the design, diffracting periods, and a focus that is none."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft as scipy_fft

from services.findings import Finding

MARECHAL_STREHL = 0.8  # Marechal criterion (Born & Wolf section 9.3): S >= 0.8, sigma_phi <= 0.47 rad
MIN_PEAK_SHARE = 0.05  # a lattice's first-order spectral peak holds this share of the pattern's AC power (computed)
# A Strehl ratio above 1 with the on-axis peak well short of the ideal reference's own peak compares two distances.
# Measured here: lenses peak where their reference does (within 7 %; a 30 mm plano-convex lens at f = 15 mm, 100 GHz,
# reads 1.06 with both peaks at 13.0 mm), a graded-index plate with most holes clipped 1.41 at 7.4 against 18.2 mm.
STREHL_ABOVE = 1.02
PEAK_SHORT_OF_IDEAL = 0.8


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


def strehl_reads_nothing(strehl, best_focus_mm, ideal_peak_mm) -> np.ndarray:
    """Return, per frequency, whether the Strehl ratio reads above 1 with the on-axis peak well short of the ideal
    wave's: nearer the part the same power peaks brighter (Fresnel diffraction of the aperture, a part that barely
    focuses), so the ratio compares two distances and says nothing of the wavefront."""
    s, best, ideal = (np.asarray(v, float) for v in (strehl, best_focus_mm, ideal_peak_mm))
    return (s > STREHL_ABOVE) & (best < PEAK_SHORT_OF_IDEAL * ideal)


def strehl_above_one_finding(freqs_ghz: np.ndarray, strehl: np.ndarray, best_focus_mm: np.ndarray,
                             wavefront_focus_mm: np.ndarray, ideal_peak_mm: np.ndarray) -> Finding | None:
    """Return a note where the Strehl ratio measures nothing (``strehl_reads_nothing``), else None."""
    above = np.flatnonzero(strehl_reads_nothing(strehl, best_focus_mm, ideal_peak_mm))
    if above.size == 0:
        return None
    i = int(above[np.argmax(np.asarray(strehl)[above])])
    if above.size == 1:
        where = (f"The Strehl ratio reads {strehl[i]:.2f} at {freqs_ghz[i]:g} GHz, above 1: the beam's on-axis peak "
                 "lies ")
    else:
        at = ", ".join(f"{freqs_ghz[k]:g} GHz ({strehl[k]:.2f})" for k in above)
        where = f"The Strehl ratio reads above 1 at {at}: at {freqs_ghz[i]:g} GHz the beam's on-axis peak lies "
    message = (f"{where}{best_focus_mm[i]:.1f} mm from the part, short of where an aberration-free wave from the same "
               f"aperture peaks ({ideal_peak_mm[i]:.1f} mm) and of where its wavefront converges "
               f"({wavefront_focus_mm[i]:.1f} mm). Nearer the part the same power peaks brighter, so the ratio "
               "compares two different distances and says nothing of the wavefront; read the wavefront focus, the "
               "focusing efficiency and the spot in the design plane instead.")
    return Finding(rule="focus", severity="note", message=message, measured=round(float(strehl[i]), 4),
                   limit=STREHL_ABOVE, unit="strehl", count=int(above.size))


def detect_period_mm(mask: np.ndarray, pixel_mm: float, max_period_mm: float) -> float | None:
    """Return the period of a lattice-like raster from its strongest spectral peak, or None.

    The peak must lie below ``max_period_mm``, above three periods across the pattern, and carry
    at least MIN_PEAK_SHARE of the pattern's AC power (3 x 3 bins, so an off-bin peak still counts).
    The raster is real, so its power spectrum is symmetric (P(-f) = P(f)): the half that ``rfft2`` gives,
    in single precision, holds every peak, at a quarter of the memory of the full double one (a 100 mm
    part at 25 um: 0.85 GB before).
    """
    rows, cols = np.flatnonzero(mask.any(axis=1)), np.flatnonzero(mask.any(axis=0))
    if len(rows) < 8 or len(cols) < 8:
        return None
    crop = mask[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1].astype(np.float32)
    crop -= crop.mean(dtype=np.float64)
    ny, nx = crop.shape
    spectrum = scipy_fft.rfft2(crop)
    del crop
    power = np.square(spectrum.real)
    power += np.square(spectrum.imag)
    del spectrum
    half = power.shape[1]
    twice = np.full(half, 2.0)  # each column but f = 0 (and Nyquist, for an even width) stands for +f and -f
    twice[0] = 1.0
    if nx % 2 == 0:
        twice[-1] = 1.0
    total = float(power.sum(axis=0, dtype=np.float64) @ twice)
    if total <= 0:
        return None
    fy = np.fft.fftfreq(ny, d=pixel_mm).astype(np.float32)[:, None]
    fx = np.fft.rfftfreq(nx, d=pixel_mm).astype(np.float32)[None, :]
    extent = pixel_mm * max(ny, nx)
    f_min = max(1.0 / max_period_mm, 3.0 / extent)
    allowed = fx * fx + fy * fy >= np.float32(f_min * f_min)
    if not allowed.any():
        return None
    framed = _mirror_framed(power, nx)
    local = np.zeros_like(power)
    for dx in (-1, 0, 1):
        columns = framed[:, 1 + dx:1 + dx + half]
        local += columns
        local += np.roll(columns, 1, axis=0)
        local += np.roll(columns, -1, axis=0)
    candidate = np.where(allowed, local, np.float32(-1.0))
    del local, allowed
    k = np.unravel_index(int(np.argmax(candidate)), power.shape)
    if candidate[k] < MIN_PEAK_SHARE * total:
        return None
    return float(1.0 / _centroid_frequency(framed, pixel_mm, (ny, nx), k))


def _mirror_framed(power: np.ndarray, nx: int) -> np.ndarray:
    """Return the half spectrum with one column more on each side: the bins at -1 and at one past the last,
    read from their mirror images (P(fy, -fx) = P(-fy, fx)), so 3 x 3 sums need no wrap along x."""
    ny, half = power.shape
    flip = np.r_[0, ny - 1:0:-1]  # row of -fy
    framed = np.empty((ny, half + 2), power.dtype)
    framed[:, 1:-1] = power
    framed[:, 0] = power[flip, 1]
    framed[:, -1] = power[flip, nx - half]  # the bin one past the last is -(nx - half), mirrored: nx - half < half
    return framed


def _centroid_frequency(framed: np.ndarray, pixel_mm: float, shape: tuple[int, int], k: tuple) -> float:
    """Return |f| of the power centroid of the 3 x 3 bins around peak k (finer than one bin)."""
    ny, nx = shape
    rows = [(k[0] + d) % ny for d in (-1, 0, 1)]
    p = framed[np.ix_(rows, [k[1], k[1] + 1, k[1] + 2])].astype(np.float64)
    # Unwrapped neighbour frequencies: the peak's own frequency plus -1, 0, +1 bin.
    fy0 = np.fft.fftfreq(ny, d=pixel_mm)[k[0]]
    gx = (k[1] + np.array([-1, 0, 1])) / (nx * pixel_mm)
    gy = fy0 + np.array([-1, 0, 1]) / (ny * pixel_mm)
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
