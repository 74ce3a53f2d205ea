"""The clear aperture: the optical zone the beam is meant to cross, not the part's outer bounds.

A mounting flange, a tab or a solid rim around a lens must not widen the illumination or the
window of the optics: the aperture is, in order of preference, the diameter the user gives, the
one the generator declares (``diameter_mm`` of a part built with a flange), the region detected
from the part (where its thickness differs from that of its outer rim: a lens's curved face or a
plate's cells), or else the whole outline.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from services.rules import raster

# A detected zone reaching this close to the outline is the outline (a lens without a flange,
# whose rim only thins to the rim thickness within a layer or two of the edge).
OUTLINE_SHARE = 0.97
# A zone smaller than this share of the outline is a feature (a rib, a fin, a label), not the optic.
MIN_ZONE_SHARE = 0.2
ROUND_AREA_SHARE = 0.9  # a footprint filling less of its bounding box than this is round (a disc fills pi / 4)


@dataclass(frozen=True, slots=True, eq=False)
class ClearAperture:
    """The clear aperture on the stack's pixels and how it was found.

    mask : (ny, nx) bool on the layer stack's pixels
    how : "given" | "generator" | "detected" | "outline"
    rim_radius_mm : half the smaller side of its xy extent (a disc's radius, a square's half side)
    """

    mask: np.ndarray
    how: str
    note: str
    rim_radius_mm: float
    area_mm2: float
    half_extent_mm: tuple[float, float]

    def to_dict(self) -> dict:
        return {"how": self.how, "note": self.note, "rim_radius_mm": round(self.rim_radius_mm, 4),
                "area_mm2": round(self.area_mm2, 3)}


def clear_aperture(stack, *, axis_mm: tuple[float, float], given_mm: float | None = None,
                   parameters: dict | None = None) -> ClearAperture:
    """Return the clear aperture: given, else the generator's, else detected, else the outline."""
    outline = raster.holes_filled(stack.footprint)
    if not outline.any():
        return _aperture(stack, outline, "outline", "The part has no footprint.", axis_mm)
    x, y = stack.x_centres_mm[None, :] - axis_mm[0], stack.y_centres_mm[:, None] - axis_mm[1]
    x2, y2 = x * x, y * y  # squared distances: a sum per pixel, where np.hypot took 4 ms a band of 256 rows

    def within(radius_mm: float) -> np.ndarray:
        return _by_rows(outline.shape, lambda rows: x2 + y2[rows] <= radius_mm * radius_mm)

    if given_mm is not None:
        return _aperture(stack, outline & within(given_mm / 2), "given",
                         f"The {given_mm:g} mm diameter given with the check, centred on the optical axis.", axis_mm)
    declared = _declared_diameter_mm(parameters, stack, outline)
    if declared is not None:
        return _aperture(stack, outline & within(declared / 2), "generator",
                         f"The {declared:g} mm aperture diameter the generator built, inside its flange.", axis_mm)
    zone = _varying(stack, outline)
    if zone.any():
        half = stack.pixel_mm / 2
        if outline.sum() < ROUND_AREA_SHARE * _box_area(outline):
            r0, r1, _, _ = raster.bbox(zone)
            widest = np.sqrt(max(float(np.max(x2 + y2[r:r + BAND_ROWS], where=zone[r:r + BAND_ROWS], initial=0.0))
                                 for r in range(r0, r1, BAND_ROWS)))
            inside = within(widest + half)
        else:
            r0, r1, c0, c1 = raster.bbox(zone)  # |x| is largest at one of the zone's end columns (rows alike)
            inside = ((np.abs(x) <= np.abs(x[0, [c0, c1 - 1]]).max() + half)
                      & (np.abs(y) <= np.abs(y[[r0, r1 - 1], 0]).max() + half))
        mask = outline & inside
        if MIN_ZONE_SHARE * outline.sum() <= mask.sum() < OUTLINE_SHARE * outline.sum():
            return _aperture(stack, mask, "detected",
                             "The region where the part's thickness differs from its outer rim's "
                             "(a curved face or cells), inside a flat rim taken as a mount.", axis_mm)
    return _aperture(stack, outline, "outline", "The part's whole outline (holes filled): no flat mounting rim "
                                                "was found and no aperture was given.", axis_mm)


def _declared_diameter_mm(parameters: dict | None, stack, outline: np.ndarray) -> float | None:
    """Return a generated part's aperture diameter when it has a flange and lies flat as built."""
    p = parameters or {}
    if not p.get("flange_width_mm") or not p.get("diameter_mm"):
        return None
    r0, r1, c0, c1 = raster.bbox(outline)
    across = min(r1 - r0, c1 - c0) * stack.pixel_mm
    width = float(p["diameter_mm"]) + 2 * float(p["flange_width_mm"])
    # Built on its side the declared diameter is not in the xy plane: detect instead.
    return float(p["diameter_mm"]) if abs(across - width) <= 0.05 * width else None


def _varying(stack, outline: np.ndarray) -> np.ndarray:
    """Return the pixels whose thickness differs by a layer or more from the outer rim's (its median)."""
    edge = raster.inner_edge(outline)
    rim = float(np.median(stack.thickness_mm[edge]))
    thickness, step = stack.thickness_mm, 0.5 * stack.layer_height_mm
    return outline & _by_rows(outline.shape, lambda rows: np.abs(thickness[rows] - rim) > step)


BAND_ROWS = 256  # rows per band of a per-pixel test: its float intermediates a band's size, not the frame's


def _by_rows(shape: tuple[int, int], test) -> np.ndarray:
    """Return a frame of ``test(rows)`` computed a band of rows at a time: the same values as one test over the
    frame, without its float64 intermediates (the radius map alone was 128 MB on a 100 mm lens at 25 um)."""
    out = np.empty(shape, bool)
    for r in range(0, shape[0], BAND_ROWS):
        out[r:r + BAND_ROWS] = test(slice(r, r + BAND_ROWS))
    return out


def _box_area(mask: np.ndarray) -> float:
    r0, r1, c0, c1 = raster.bbox(mask)
    return float((r1 - r0) * (c1 - c0))


def _aperture(stack, mask: np.ndarray, how: str, note: str, axis_mm: tuple[float, float]) -> ClearAperture:
    area_px = int(np.count_nonzero(mask))
    if area_px == 0:
        return ClearAperture(mask, how, note, 0.0, 0.0, (0.0, 0.0))
    r0, r1, c0, c1 = raster.bbox(mask)  # the box, not per-pixel coordinates (0.2 GB on a 100 mm part at 25 um)
    rim = min(r1 - r0, c1 - c0) * stack.pixel_mm / 2
    half = stack.pixel_mm / 2
    # |x - axis| is largest at one of the box's end columns (rows alike).
    x = stack.x_centres_mm[[c0, c1 - 1]] - axis_mm[0]
    y = stack.y_centres_mm[[r0, r1 - 1]] - axis_mm[1]
    return ClearAperture(mask, how, note, float(rim), float(area_px * stack.pixel_mm**2),
                         (float(np.abs(x).max() + half), float(np.abs(y).max() + half)))
