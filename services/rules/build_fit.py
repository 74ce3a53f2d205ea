"""Rule ``build_fit``: does the part fit the build volume, at which turn about z, how many per plate."""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial import ConvexHull, QhullError

from services.findings import Finding
from services.part import Part
from services.profiles import PrinterProfile


def footprint_at_best_turn(xy_mm: np.ndarray, plate_mm: tuple[float, float]) -> tuple[float, float, float]:
    """Return (angle_deg, width_mm, depth_mm) of the turn about z that fits the plate best.

    The part's xy points are turned in 1 degree steps; a turn that fits wins, 0 then 90 degrees
    first, then the smallest angle; otherwise the turn that overshoots least.
    """
    hull = _hull(xy_mm)
    # Square turns first: a part placed square to the plate is easier to fixture and pack.
    angles = np.deg2rad(np.r_[0.0, 90.0, np.setdiff1d(np.arange(0.0, 180.0, 1.0), [0.0, 90.0])])
    c, s = np.cos(angles)[:, None], np.sin(angles)[:, None]
    xr = hull[:, 0] * c - hull[:, 1] * s
    yr = hull[:, 0] * s + hull[:, 1] * c
    w = xr.max(axis=1) - xr.min(axis=1)
    d = yr.max(axis=1) - yr.min(axis=1)
    overshoot = np.maximum(w - plate_mm[0], 0) + np.maximum(d - plate_mm[1], 0)
    fits = np.nonzero(overshoot <= 1e-9)[0]
    i = int(fits[0]) if fits.size else int(np.argmin(overshoot))
    return float(np.rad2deg(angles[i])), float(w[i]), float(d[i])


def copies_per_plate(width_mm: float, depth_mm: float, plate_mm: tuple[float, float], spacing_mm: float) -> int:
    """Return how many footprints fit on the plate in a grid, the better of both orientations."""
    def grid(w: float, d: float) -> int:
        nx = math.floor((plate_mm[0] + spacing_mm) / (w + spacing_mm)) if w <= plate_mm[0] else 0
        ny = math.floor((plate_mm[1] + spacing_mm) / (d + spacing_mm)) if d <= plate_mm[1] else 0
        return nx * ny
    return max(grid(width_mm, depth_mm), grid(depth_mm, width_mm))


def check_build_fit(part: Part, printer: PrinterProfile) -> tuple[list[Finding], dict]:
    """Return the build_fit findings and a summary (best turn, footprint, copies per plate)."""
    limits = printer.rule("build_fit")
    if limits is None:
        return [], {}
    spacing_mm = float(limits.get("spacing_mm", 5.0))
    bx, by, bz = printer.build_volume_mm
    angle, w, d = footprint_at_best_turn(part.vertices_mm[:, :2], (bx, by))
    height = part.bbox_mm[2]
    copies = copies_per_plate(w, d, (bx, by), spacing_mm) if height <= bz else 0
    summary = {"turn_deg": angle, "footprint_mm": [round(w, 3), round(d, 3)], "height_mm": round(height, 3),
               "copies_per_plate": copies, "spacing_mm": spacing_mm}
    findings = []
    if height > bz:
        findings.append(Finding("build_fit", "blocker", f"The part is {height:.1f} mm tall but {printer.name} builds at most {bz:.0f} mm; choose another build axis or printer.",
                                measured=round(height, 3), limit=bz, unit="mm"))
    if w > bx + 1e-9 or d > by + 1e-9:
        findings.append(Finding("build_fit", "blocker", f"The footprint {w:.1f} x {d:.1f} mm does not fit the {bx:.0f} x {by:.0f} mm plate at any turn about z; split the part or choose a larger printer.",
                                **_side_that_fails((w, d), (bx, by))))
    elif angle != 0.0 and not findings:
        findings.append(Finding("build_fit", "note", f"Fits when turned {angle:.0f} deg about z ({w:.1f} x {d:.1f} mm on the {bx:.0f} x {by:.0f} mm plate); {copies} per build.",
                                measured=angle, unit="deg", count=copies))
    return findings, summary


def _hull(xy: np.ndarray) -> np.ndarray:
    """Return the convex hull's points of 2-D points: fewer points to turn, same extents."""
    pts = np.asarray(xy, float)
    if len(pts) >= 3:
        try:  # Qhull takes repeated points as they are (seven times faster than removing them first)
            return pts[ConvexHull(pts).vertices]
        except QhullError:
            pass
    return np.unique(pts, axis=0)  # fewer than three distinct or collinear points: they carry the extents


def _side_that_fails(footprint_mm: tuple[float, float], plate_mm: tuple[float, float]) -> dict:
    """Return the measured side and its limit of a footprint that does not fit: the longer sides compared when the
    longer is too long, else the shorter (100 x 100 mm on a 130 x 80 mm plate: 100 mm against 80, not 130)."""
    (short, long_), (plate_short, plate_long) = sorted(footprint_mm), sorted(plate_mm)
    if long_ > plate_long + 1e-9:
        return {"measured": round(long_, 3), "limit": plate_long, "unit": "mm"}
    return {"measured": round(short, 3), "limit": plate_short, "unit": "mm"}
