"""Pack identical rectangular footprints on a build plate, for the quantity table.

Two-block guillotine layouts (manufacturing.md §5, after the guillotine family surveyed by Jylänki
2010): k rows (or columns) of the footprint one way round, then the rest of the plate filled with
a grid the other way round, for every k and both orientations. For identical rectangles this finds
the plain grid optimum and the common mixed layouts; the best count wins.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

_EPS_MM = 1e-9


@dataclass(frozen=True, slots=True)
class Placement:
    """One footprint on the plate: lower-left corner, size, and whether it is turned 90 degrees."""

    x_mm: float
    y_mm: float
    width_mm: float
    depth_mm: float
    turned: bool

    def to_list(self) -> list[float]:
        """Return [x_mm, y_mm, width_mm, depth_mm]: compact, as a full plate can hold a thousand parts."""
        return [round(self.x_mm, 2), round(self.y_mm, 2), round(self.width_mm, 2), round(self.depth_mm, 2)]


def pack_rectangles(*, width_mm: float, depth_mm: float, plate_mm: tuple[float, float],
                    spacing_mm: float) -> tuple[Placement, ...]:
    """Return the placements of as many width x depth footprints as fit, spacing_mm apart."""
    best: tuple[int, tuple] = (0, ())
    for size, other, turned in (((width_mm, depth_mm), (depth_mm, width_mm), False),
                                ((depth_mm, width_mm), (width_mm, depth_mm), True)):
        for along_y in (True, False):
            most = _fits(plate_mm[1] if along_y else plate_mm[0], size[1] if along_y else size[0], spacing_mm)
            for k in range(most, -1, -1):  # most rows first: on a tie the unturned grid wins
                layout = (size, other, turned, along_y, k)
                count = _count(layout, plate_mm, spacing_mm)
                if count > best[0]:
                    best = (count, layout)
    return _place(best[1], plate_mm, spacing_mm) if best[0] else ()


def _fits(length_mm: float, item_mm: float, spacing_mm: float) -> int:
    """Return how many items fit along a length, spacing_mm apart (none at the edges)."""
    if item_mm > length_mm + _EPS_MM:
        return 0
    return math.floor((length_mm + spacing_mm) / (item_mm + spacing_mm) + _EPS_MM)


def _blocks(layout: tuple, plate_mm: tuple[float, float], spacing_mm: float) -> list[tuple]:
    """Return the layout's two grids as (x0, y0, region w, region d, item w, item d, turned)."""
    size, other, turned, along_y, k = layout
    step = (size[1] if along_y else size[0]) + spacing_mm
    used = k * step
    if along_y:
        return [(0.0, 0.0, plate_mm[0], used - spacing_mm, *size, turned),
                (0.0, used, plate_mm[0], plate_mm[1] - used, *other, not turned)]
    return [(0.0, 0.0, used - spacing_mm, plate_mm[1], *size, turned),
            (used, 0.0, plate_mm[0] - used, plate_mm[1], *other, not turned)]


def _count(layout: tuple, plate_mm: tuple[float, float], spacing_mm: float) -> int:
    return sum(_fits(w, iw, spacing_mm) * _fits(d, id_, spacing_mm)
               for _, _, w, d, iw, id_, _ in _blocks(layout, plate_mm, spacing_mm) if w > 0 and d > 0)


def _place(layout: tuple, plate_mm: tuple[float, float], spacing_mm: float) -> tuple[Placement, ...]:
    out = []
    for x0, y0, w, d, iw, id_, turned in _blocks(layout, plate_mm, spacing_mm):
        if w <= 0 or d <= 0:
            continue
        for i in range(_fits(w, iw, spacing_mm)):
            for j in range(_fits(d, id_, spacing_mm)):
                out.append(Placement(x0 + i * (iw + spacing_mm), y0 + j * (id_ + spacing_mm), iw, id_, turned))
    return tuple(out)
