"""What one model of the part (as designed, as printed, or a tolerance variant) does to the beam."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.optics.focus import Spot, best_focus_mm, encircled_power, ideal_lens_phase, spot_at, wavefront_focus_mm
from services.optics.illumination import Illumination
from services.optics.propagate import AngularSpectrum
from services.optics.transmission import CellSParams

# Focusing efficiency: power inside a radius of three spot widths over the incident power, after
# Arbabi et al., Nat. Commun. 6, 7069 (2015) (from memory); we take three times the diffraction-limited
# FWHM so a blurred spot does not widen its own iris.
EFFICIENCY_RADIUS_FWHM = 3.0
SCAN_FROM, SCAN_TO = 0.1, 2.0  # best-focus search range as a share of the intended focal length
REFERENCE_SAMPLES = 120  # the reference's peak is searched over a narrower range, so with fewer samples


@dataclass(frozen=True, slots=True, eq=False)
class Losses:
    """Illumination-weighted power transmission and reflection per frequency, and weighted S-parameters."""

    transmission: np.ndarray
    reflection: np.ndarray
    s11: np.ndarray
    s21: np.ndarray
    s22: np.ndarray

    def to_dict(self, spillover_db) -> dict:
        """Return the loss split in dB: absorption_db + reflection_db = transmission_loss_db."""
        total = -10 * np.log10(self.transmission)
        reflection = -10 * np.log10(1 - self.reflection)
        return {
            "transmission_loss_db": _r(total),
            "absorption_db": _r(total - reflection),
            "reflection_db": _r(reflection),
            "spillover_db": _r(np.full(len(total), spillover_db)),
            "power_transmission": _r(self.transmission, 6),
            "power_reflection": _r(self.reflection, 6),
        }


def _r(values, digits: int = 4) -> list[float]:
    return [round(float(v), digits) for v in values]


def losses(sp: CellSParams, illum: Illumination) -> Losses:
    """Weight each cell's |S21|^2 and |S11|^2 by the illumination power on the clear aperture.

    The complex S-parameters take the power-weighted magnitude and the phase of the weighted mean,
    so a focusing part's phase spread does not read as lost power.
    """
    w = illum.weights / illum.weights.sum()
    t = (np.abs(sp.s21) ** 2 * w).sum(axis=(1, 2))
    r = (np.abs(sp.s11) ** 2 * w).sum(axis=(1, 2))
    r2 = (np.abs(sp.s22) ** 2 * w).sum(axis=(1, 2))

    def weighted(s, power):
        return np.sqrt(power) * np.exp(1j * np.angle((s * w).sum(axis=(1, 2))))

    return Losses(t, r, weighted(sp.s11, r), weighted(sp.s21, t), weighted(sp.s22, r2))


@dataclass(frozen=True, slots=True, eq=False)
class FocusMetrics:
    """One frequency's focus; distances from the part's far extreme along the axis.

    best_focus_mm : the on-axis intensity peak; wavefront_focus_mm : the centre of the best-fit
    converging sphere of the exit wavefront (the geometric focus)
    """

    best_focus_mm: float
    wavefront_focus_mm: float
    fwhm_mm: tuple[float, float]
    diffraction_limited_fwhm_mm: tuple[float, float]
    strehl: float
    focusing_efficiency: float
    scan_mm: np.ndarray
    scan_intensity: np.ndarray
    spot: Spot
    ideal: Spot
    design_plane_fwhm_mm: tuple[float, float] | None = None
    ideal_peak_mm: float | None = None  # where the ideal reference wave's on-axis peak lies (Strehl's denominator)


def focus_metrics(field: np.ndarray, illum: Illumination, *, wavelength_mm: float, intended_mm: float,
                  exit_offset_mm: float, axis_index: tuple[int, int], reference_depth_mm: float = 0.0) -> FocusMetrics:
    """Propagate the field on the exit plane (on the analysis cells) and measure the focus.

    field : (ny, nx) complex, the beam as it leaves the part (``CellSParams.exit_field``), or a thin
    element's illumination x aperture x S21.
    exit_offset_mm : how far the model's exit plane lies beyond the part's far extreme (the
    reference plane), so a distance d from the exit plane is d + offset from the reference.
    reference_depth_mm : how far below the exit plane the part's exit surface starts (a lens's rim).
    The diffraction-limited reference is the ideal converging wave from there: the field is taken
    back to that plane through air (where the rim's wave really begins, before it has diffracted),
    and the reference keeps its amplitude (cut to the clear aperture, at the whole power) with a perfect
    spherical wavefront converging on the wavefront focus; Strehl is the ratio of the two on-axis
    intensity peaks, so an aberration-free part reads 1 (within 0.01 from Fresnel number 10 up; about
    1.02 at Fresnel number 5, where the on-axis peak is a broad maximum of a wave not quite spherical).
    """
    asm = AngularSpectrum(field, cell_mm=illum.cell_mm, wavelength_mm=wavelength_mm)
    lo = max(SCAN_FROM * intended_mm - exit_offset_mm, wavelength_mm)
    hi = max(SCAN_TO * intended_mm - exit_offset_mm, 2 * lo)
    d_best, scan_d, scan_i = best_focus_mm(asm, axis_index, lo, hi)
    spot = spot_at(asm, d_best)
    depth = max(float(reference_depth_mm), 0.0)
    pupil = asm.plane(-depth) if depth > 0 else field
    # The pupil is the clear aperture: light the rim has already scattered outside it is no part of the
    # ideal wave (Born & Wolf 9.1, from memory), and its stray phase would pull the fit; the ideal wave
    # carries the whole power, so the share scattered off the pupil does not read as gain.
    power = float((np.abs(pupil) ** 2).sum())
    pupil = pupil * illum.aperture
    pupil = pupil * np.sqrt(power / max(float((np.abs(pupil) ** 2).sum()), 1e-300))
    d_ref, _ = wavefront_focus_mm(pupil, illum.cell_mm, axis_index, wavelength_mm, lo + depth, hi + depth)
    ideal = _ideal_spot(np.abs(pupil), illum.cell_mm, axis_index, wavelength_mm, d_ref, lo + depth, hi + depth)
    # A requirement on spot size means the spot where the detector sits: the design focal plane.
    design_plane = spot_at(asm, max(intended_mm - exit_offset_mm, wavelength_mm))
    iris = EFFICIENCY_RADIUS_FWHM * float(np.mean(ideal.fwhm_mm))
    inside = encircled_power(np.abs(spot.field) ** 2, illum.cell_mm, spot.peak_index, iris)
    return FocusMetrics(
        best_focus_mm=d_best + exit_offset_mm, wavefront_focus_mm=d_ref - depth + exit_offset_mm,
        fwhm_mm=spot.fwhm_mm, diffraction_limited_fwhm_mm=ideal.fwhm_mm,
        strehl=spot.peak_intensity / ideal.peak_intensity, focusing_efficiency=inside / illum.aperture_power,
        scan_mm=scan_d + exit_offset_mm, scan_intensity=scan_i, spot=spot, ideal=ideal,
        design_plane_fwhm_mm=design_plane.fwhm_mm, ideal_peak_mm=ideal.distance_mm - depth + exit_offset_mm,
    )


def _ideal_spot(amplitude: np.ndarray, cell_mm: float, axis_index: tuple[int, int], wavelength_mm: float,
                focal_mm: float, lo_mm: float, hi_mm: float) -> Spot:
    """Return the brightest spot of the amplitude with a perfect wavefront converging ``focal_mm`` away."""
    radius = np.hypot(*np.meshgrid((np.arange(amplitude.shape[1]) - axis_index[1]) * cell_mm,
                                   (np.arange(amplitude.shape[0]) - axis_index[0]) * cell_mm))
    asm = AngularSpectrum(amplitude * ideal_lens_phase(radius, focal_mm, wavelength_mm), cell_mm=cell_mm,
                          wavelength_mm=wavelength_mm)
    # An aberration-free wave peaks short of its centre by about 1 / (1 + pi^2 N^2 / 12) of it (Li & Wolf
    # 1981, from memory): past a quarter of it down to Fresnel number N = 0.6.
    span = (max(lo_mm, focal_mm / 4), min(hi_mm, 1.05 * focal_mm))
    return spot_at(asm, best_focus_mm(asm, axis_index, *span, samples=REFERENCE_SAMPLES)[0])


def surface_depth_mm(sp: CellSParams, illum: Illumination) -> float:
    """Return how far below the exit plane the exit surface starts inside the clear aperture (a lens's rim)."""
    inside = (illum.aperture >= 0.5) & (sp.surface_mm > 0)
    return float(sp.top_mm - sp.surface_mm[inside].min()) if inside.any() else 0.0


def design_plane_ratio(m: FocusMetrics) -> float:
    """Return the spot's mean FWHM at the design focal plane over the diffraction-limited FWHM."""
    return float(np.mean(m.design_plane_fwhm_mm) / np.mean(m.diffraction_limited_fwhm_mm))


def focus_dict(intended_mm: float, metrics: list[FocusMetrics]) -> dict:
    """Return the report's ``focus`` section, one entry per frequency."""
    return {
        "intended_mm": intended_mm,
        "best_focus_mm": _r([m.best_focus_mm for m in metrics], 3),
        "wavefront_focus_mm": _r([m.wavefront_focus_mm for m in metrics], 3),
        "fwhm_mm": [[round(v, 4) for v in m.fwhm_mm] for m in metrics],
        "diffraction_limited_fwhm_mm": [[round(v, 4) for v in m.diffraction_limited_fwhm_mm] for m in metrics],
        "fwhm_ratio": _r([np.mean(m.fwhm_mm) / np.mean(m.diffraction_limited_fwhm_mm) for m in metrics]),
        "design_plane_fwhm_mm": [[round(v, 4) for v in m.design_plane_fwhm_mm] for m in metrics],
        "design_plane_fwhm_ratio": _r([design_plane_ratio(m) for m in metrics]),
        "strehl": _r([m.strehl for m in metrics]),
        "ideal_peak_mm": _r([m.ideal_peak_mm for m in metrics], 3),
        "focusing_efficiency": _r([m.focusing_efficiency for m in metrics]),
    }
