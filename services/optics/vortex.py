"""Spiral phase plates: the ring of the vortex beam, its null on the axis and its orbital-angular-momentum purity.

A plate whose thickness rises with azimuth by l lambda / (n - 1) over one turn gives the beam the
phase factor of charge l (Beijersbergen et al., Opt. Commun. 112, 321, 1994). Charge +l here is the
handedness of a plate thickening counter-clockwise seen from +z (the generator's positive charge);
with the e^{+j omega t} sign the transmitted field then goes as exp(-j l phi). The mode purity is the
share of the beam's power in charge l, from an azimuthal decomposition of the field: the charges
are orthogonal and free propagation keeps each one's power, so it is read on the exit plane.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
from scipy.ndimage import map_coordinates

from services.optics.propagate import AngularSpectrum

ANGLES = 256                # azimuthal samples per ring: charges up to +-128 resolved
RING_RADII = (0.3, 0.5, 0.7)  # where the thickness is read to detect a spiral, as shares of the rim radius
MIN_TURN_LAYERS = 3         # a spiral rises by at least this many layers over a turn
RING_AGREEMENT = 0.9        # share of azimuths where every ring reads the same height
LEVEL_SAMPLES = 3           # a step holds at least this many azimuth samples
CONTINUOUS_LEVELS = 16      # more distinct heights than this per turn read as a continuous ramp
SHOWN_CHARGES = 3           # the mode spectrum lists charges l - 3 .. l + 3


@dataclass(frozen=True, slots=True)
class SpiralPlate:
    """A spiral phase plate: its charge, its steps per turn (0: continuous) and how it was known."""

    charge: int
    steps: int
    how: str

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, slots=True, eq=False)
class VortexMetrics:
    """One frequency's vortex beam: mode purity on the exit plane, the ring and the null at ``distance_mm``."""

    purity: float
    spectrum: dict[int, float]
    ring_radius_mm: float
    null_depth_db: float
    distance_mm: float


def spiral_plate(parameters: dict | None, stack, axis_mm: tuple[float, float], rim_radius_mm: float,
                 waves_per_mm: float) -> SpiralPlate | None:
    """Return the spiral the generator declared, else one detected from the thickness map, else None.

    waves_per_mm : (n - 1) / lambda at the design frequency, the delay in waves of one mm of height
    """
    p = parameters or {}
    if p.get("kind") == "spiral" and p.get("charge"):
        return SpiralPlate(int(p["charge"]), int(p.get("steps") or 0), "declared")
    return _detected(stack, axis_mm, rim_radius_mm, waves_per_mm)


def _detected(stack, axis_mm: tuple[float, float], rim_radius_mm: float, waves_per_mm: float) -> SpiralPlate | None:
    """Return a spiral when the thickness follows azimuth alone and ramps once round the axis.

    The ramp's rise over the turn, in waves of delay, is the charge: N flat steps show N - 1 of
    their N rises on the ring, a continuous ramp all of it.
    """
    rings = _rings(stack, axis_mm, rim_radius_mm)
    layer = stack.layer_height_mm
    rise = float(np.ptp(rings[1]))
    # Every radius agrees (to two layers, but for the few angles where a wall falls between samples).
    agree = float((np.abs(rings - rings[1]) <= 2 * layer).all(axis=0).mean())
    if rise < MIN_TURN_LAYERS * layer or agree < RING_AGREEMENT:
        return None
    jumps = np.diff(rings[1], append=rings[1][:1])
    drops, climbs = int((jumps < -rise / 2).sum()), int((jumps > rise / 2).sum())
    if drops + climbs != 1 and not (drops == 1 and climbs == 1):
        return None
    _, counts = np.unique(np.round(rings[1] / layer), return_counts=True)
    levels = int((counts >= LEVEL_SAMPLES).sum())  # a height met only where a wall crosses the ring is no step
    turns = rise * levels / (levels - 1) * waves_per_mm
    if turns < 0.5:
        return None
    steps = 0 if levels > CONTINUOUS_LEVELS * turns else levels
    return SpiralPlate(int(round(turns)) * (1 if drops else -1), steps, "detected")


def _rings(stack, axis_mm: tuple[float, float], rim_radius_mm: float) -> np.ndarray:
    """Return the thickness on ANGLES azimuths at each of RING_RADII, (len(RING_RADII), ANGLES)."""
    phi = np.arange(ANGLES) * 2 * np.pi / ANGLES
    rings = []
    for share in RING_RADII:
        r = share * rim_radius_mm
        col = (axis_mm[0] + r * np.cos(phi) - stack.x_centres_mm[0]) / stack.pixel_mm
        row = (axis_mm[1] + r * np.sin(phi) - stack.y_centres_mm[0]) / stack.pixel_mm
        rings.append(map_coordinates(stack.thickness_mm, [row, col], order=0, mode="constant"))
    return np.array(rings)


def mode_spectrum(field: np.ndarray, cell_mm: float, axis_index: tuple[int, int]) -> dict[int, float]:
    """Return each charge's share of the field's power, from rings of ANGLES samples about the axis.

    P_l = sum_r |c_l(r)|^2 r dr with c_l(r) the mean of E(r, phi) exp(+j l phi) over the ring (the charge
    +l field goes as exp(-j l phi)); rings every half cell out to the window's inscribed circle.
    """
    ny, nx = field.shape
    r = np.arange(0.5, min(axis_index[0], axis_index[1], ny - 1 - axis_index[0], nx - 1 - axis_index[1]), 0.5)
    phi = np.arange(ANGLES) * 2 * np.pi / ANGLES
    rows = axis_index[0] + r[:, None] * np.sin(phi)[None, :]
    cols = axis_index[1] + r[:, None] * np.cos(phi)[None, :]
    sampled = (map_coordinates(field.real, [rows, cols], order=1) + 1j * map_coordinates(field.imag, [rows, cols], order=1))
    coeff = np.fft.ifft(sampled, axis=1)  # mean of E exp(+j m phi): the charge whose field goes as exp(-j m phi)
    power = (np.abs(coeff) ** 2 * r[:, None]).sum(axis=0)
    charges = np.fft.fftfreq(ANGLES, 1 / ANGLES).astype(int)
    total = float(power.sum()) or 1.0
    return {int(m): float(p / total) for m, p in zip(charges, power)}


def vortex_metrics(field: np.ndarray, *, cell_mm: float, axis_index: tuple[int, int], wavelength_mm: float,
                   charge: int, distance_mm: float) -> VortexMetrics:
    """Return the mode purity of the exit field and, ``distance_mm`` beyond it, the ring radius and null depth."""
    spectrum = mode_spectrum(field, cell_mm, axis_index)
    asm = AngularSpectrum(field, cell_mm=cell_mm, wavelength_mm=wavelength_mm)
    plane = np.abs(asm.plane(distance_mm, padded=True)) ** 2
    centre = (axis_index[0] + asm.offset[0], axis_index[1] + asm.offset[1])
    ring_mm, peak = _ring(plane, centre, cell_mm)
    null_db = float(10 * np.log10(peak / max(float(plane[centre]), peak * 1e-12)))
    shown = {m: round(spectrum.get(m, 0.0), 6) for m in range(charge - SHOWN_CHARGES, charge + SHOWN_CHARGES + 1)}
    return VortexMetrics(spectrum.get(charge, 0.0), shown, ring_mm, null_db, float(distance_mm))


def _ring(intensity: np.ndarray, centre: tuple[int, int], cell_mm: float) -> tuple[float, float]:
    """Return the radius of the azimuthally averaged intensity's peak, and that peak."""
    ny, nx = intensity.shape
    y, x = np.ogrid[:ny, :nx]
    bins = np.rint(np.hypot(y - centre[0], x - centre[1])).astype(int)
    mean = np.bincount(bins.ravel(), intensity.ravel()) / np.maximum(np.bincount(bins.ravel()), 1)
    k = int(np.argmax(mean))
    return float(k * cell_mm), float(mean[k])


def vortex_dict(plate: SpiralPlate, designed: list[VortexMetrics], printed: list[VortexMetrics]) -> dict:
    """Return the report's ``vortex`` section, one entry per frequency in each list."""
    def side(metrics):
        return {"mode_purity": [round(m.purity, 4) for m in metrics],
                "ring_radius_mm": [round(m.ring_radius_mm, 3) for m in metrics],
                "null_depth_db": [round(m.null_depth_db, 2) for m in metrics],
                "mode_spectrum": [{str(k): v for k, v in m.spectrum.items()} for m in metrics]}

    return {
        **plate.to_dict(), "distance_mm": [round(m.distance_mm, 3) for m in printed],
        "as_printed": side(printed), "as_designed": side(designed),
        "definitions": {
            "mode_purity": "share of the transmitted beam's power in the plate's charge, from an azimuthal "
                           "decomposition of the field on the exit plane (charges are orthogonal and keep "
                           "their power in free space); a continuous ramp gives 1, N steps per turn about "
                           "sinc^2(l / N) (Beijersbergen et al. 1994, from memory)",
            "ring_radius_mm": "radius of the azimuthally averaged intensity's peak, distance_mm beyond the exit "
                              "plane (the focal length given, else the illumination's Rayleigh distance)",
            "null_depth_db": "the ring's peak over the intensity on the axis, same plane",
        },
    }
