"""Width across material (or void) at any angle: the local thickness that ``min_feature`` and ``min_gap`` judge.

The width at a candidate pixel is measured along the edge's own normal, not along the pixel grid:
the line from a pixel to its nearest void pixel centre takes one of a few grid directions, so on a
wall turned 25 or 60 degrees it leaves the wall through the next edge near a corner and a wide slot
or fin reads a pixel wide there. The normal comes from the gradient of the mask smoothed over a
Gaussian of 1 px at that void pixel (a digitised straight edge turned 10 degrees or more gives its
true normal within 15 degrees, 8 on average; under 10 degrees the stairs outgrow the window and it
may be 20 degrees off, so a width reads up to 6 % long). At a corner the normal turns towards the bisector, so the line runs into the
body and a right-angle corner of a wide opening is not a gap.

Convention: a width first counts the samples, one pixel apart along the normal, that fall inside
the material; where that count is within two pixels of the limit, the two edges are found to a
fraction of a pixel on the mask smoothed over 0.7 px (half level), and the width is the distance
between them. A straight wall sampled at pixel centres then reads its drawn width within half a
pixel at any angle (tests/services/rules/test_thin.py). The rules take the limit in whole pixels
(rounded down) and flag a width that, rounded to whole pixels, is under it (``is_under``): a value
exactly at the limit passes, one a pixel under it never does.
"""

from __future__ import annotations

import cv2
import numpy as np

from services.rules import raster

SIGMA_PX = 1.0  # Gaussian smoothing for the edge normal: wide enough to average a stair, narrow for thin walls
_REACH = 3  # the smoothing window's half-width, in pixels (about 3 sigma)


def clamp_box(shape: tuple[int, int], row: int, col: int, before: int, after: int) -> tuple[int, int, int, int]:
    """Return (row0, row1, col0, col1), half-open, of a window around a pixel, cut back to the array.

    Windows that reach past an edge keep the part inside, so a reduction over them is never empty.
    """
    ny, nx = shape
    r0, r1 = min(max(row - before, 0), ny - 1), max(min(row + after + 1, ny), 1)
    c0, c1 = min(max(col - before, 0), nx - 1), max(min(col + after + 1, nx), 1)
    return r0, max(r1, r0 + 1), c0, max(c1, c0 + 1)


NORMAL_TILE_PX = 512  # the gradient is filtered per tile holding points: memory bounded by a tile, not the frame


def edge_normals(mask: np.ndarray, rows: np.ndarray, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (uy, ux): the unit gradient of the Gaussian-smoothed mask at the given pixels (towards material).

    Filtered only over the tiles that hold points, each grown by the filter's reach (two separable passes);
    beyond the array is void. Where the gradient vanishes (a pixel inside a symmetric neighbourhood) both come
    back 0. A point's value reads only its own reach, so tiles give what one filter over the points' whole box
    gave, bit for bit once each tile starts a multiple of 64 columns from where the box would (OpenCV's vector
    lanes then sum in the same order; off that grid values differ by about 1e-8), with the working set of a
    tile: on a 100 mm lens at 25 um the box's float copy and two gradients took 156 MB.
    """
    if rows.size == 0:
        return np.zeros(0), np.zeros(0)
    ny, nx = mask.shape
    d = np.arange(-_REACH, _REACH + 1, dtype=np.float64)
    g = np.exp(-0.5 * (d / SIGMA_PX) ** 2)
    g /= g.sum()
    dg = d / SIGMA_PX ** 2 * g  # derivative of the Gaussian, as a correlation: a smoothed central difference
    g, dg = g.astype(np.float32), dg.astype(np.float32)
    gy, gx = np.zeros(rows.size), np.zeros(rows.size)
    tile = (rows // NORMAL_TILE_PX) * (-(-nx // NORMAL_TILE_PX)) + cols // NORMAL_TILE_PX
    order = np.argsort(tile, kind="stable")
    starts = np.flatnonzero(np.r_[True, tile[order][1:] != tile[order][:-1]])
    base = max(int(cols.min()) - _REACH, 0)  # where the whole box would start
    for group in np.split(order, starts[1:]):
        r, c = rows[group], cols[group]
        r0, r1 = max(int(r.min()) - _REACH, 0), min(int(r.max()) + _REACH + 1, ny)
        c0, c1 = base + (max(int(c.min()) - _REACH, base) - base) // 64 * 64, min(int(c.max()) + _REACH + 1, nx)
        crop = mask[r0:r1, c0:c1].astype(np.float32)
        gy[group] = cv2.sepFilter2D(crop, cv2.CV_32F, g, dg, borderType=cv2.BORDER_CONSTANT)[r - r0, c - c0]
        gx[group] = cv2.sepFilter2D(crop, cv2.CV_32F, dg, g, borderType=cv2.BORDER_CONSTANT)[r - r0, c - c0]
    norm = np.hypot(gy, gx)
    ok = norm > 1e-6
    uy, ux = np.zeros(rows.size), np.zeros(rows.size)
    uy[ok], ux[ok] = gy[ok] / norm[ok], gx[ok] / norm[ok]
    return uy, ux


def widths_across(mask: np.ndarray, rows: np.ndarray, cols: np.ndarray, near: np.ndarray, cap_px: int) -> np.ndarray:
    """Return the width (px) across ``mask`` at pixels (rows, cols), along the edge normal at their nearest void.

    ``near`` holds the flat index of each pixel's nearest void pixel. Samples one pixel apart run from
    that void pixel along its edge normal and count the material met before the next void; where the
    normal is undefined the line from the void pixel through the candidate stands in. Widths above
    ``cap_px`` come back as cap_px + 1. Measured once per void pixel: candidates share them.
    """
    uniq, inverse = np.unique(near, return_inverse=True)
    vy, vx = np.divmod(uniq, mask.shape[1])
    uy, ux = edge_normals(mask, vy, vx)
    width, entered = _measure(mask, vy, vx, uy, ux, cap_px)
    width, loose = width[inverse], ~(entered & ((uy != 0) | (ux != 0)))[inverse]
    if loose.any():  # a normal that vanishes or grazes past a one-pixel tip: the line through the candidate
        py, px = rows[loose], cols[loose]
        qy, qx = vy[inverse[loose]], vx[inverse[loose]]
        dy, dx = (py - qy).astype(np.float64), (px - qx).astype(np.float64)
        d_near = np.maximum(np.hypot(dy, dx), 1e-12)
        width[loose], _ = _measure(mask, qy, qx, dy / d_near, dx / d_near, cap_px)
    return width


def widths_at(mask: np.ndarray, rows: np.ndarray, cols: np.ndarray, cap_px: int) -> tuple[np.ndarray, np.ndarray]:
    """Return (width px across ``mask``, distance px to its nearest void) at candidate pixels, the candidates
    narrower than about ``cap_px``: thin material, or thin void with the void passed as ``mask``.

    Measured in a crop of the candidates' box grown by ``_candidate_reach``, which holds every pixel the
    distance map, the normals, the march and the edge search read from a candidate, so a crop gives what
    the whole array gives. Candidates whose crop would pass ``EDGE_CROP_MAX_PX`` (a zoned lens's rings lie
    over its whole frame) are measured in parts, split along the wider spread: the distance map and its
    labels are then a part's size, not the frame's (104 MB on a 100 mm lens at 25 um).
    """
    if rows.size == 0:
        return np.zeros(0), np.zeros(0, np.float32)
    m = _candidate_reach(cap_px)
    span_y, span_x = int(rows.max() - rows.min()), int(cols.max() - cols.min())
    crop_px = min(span_y + 2 * m + 1, mask.shape[0]) * min(span_x + 2 * m + 1, mask.shape[1])
    if crop_px > EDGE_CROP_MAX_PX and rows.size > 1:
        width, depth = np.empty(rows.size), np.empty(rows.size, np.float32)  # the distance map's type
        for part in _halves(rows, cols):
            width[part], depth[part] = widths_at(mask, rows[part], cols[part], cap_px)
        return width, depth
    r0, r1 = max(int(rows.min()) - m, 0), min(int(rows.max()) + m + 1, mask.shape[0])
    c0, c1 = max(int(cols.min()) - m, 0), min(int(cols.max()) + m + 1, mask.shape[1])
    crop = mask[r0:r1, c0:c1]
    dist, numbers = raster.nearest_void(crop)
    near = raster.void_index(crop, numbers[rows - r0, cols - c0])
    return widths_across(crop, rows - r0, cols - c0, near, cap_px), dist[rows - r0, cols - c0]


def _halves(rows: np.ndarray, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return the indices of the points' two halves, split along their wider spread (a crop around each is smaller)."""
    along = rows if np.ptp(rows) >= np.ptp(cols) else cols
    order = np.argsort(along, kind="stable")
    return order[:order.size // 2], order[order.size // 2:]


def _candidate_reach(cap_px: int) -> int:
    """Return how far (px) from a candidate its measurement reads: its nearest void within about cap_px / 2 + 1
    (it lies in something narrower than the cap), then from there the march (cap_px + 4), the edge search's
    crop (cap_px + 5) or the normal's filter (``_REACH``), and a pixel of the distance map's 5x5 mask."""
    return cap_px // 2 + 2 + max(cap_px + 5, _REACH) + 2


def _measure(mask, vy, vx, uy, ux, cap_px: int) -> tuple[np.ndarray, np.ndarray]:
    """Return (width px, whether the line met material) from void pixels along unit directions."""
    width, entered = _march(mask, vy, vx, uy, ux, cap_px)
    close = np.flatnonzero(entered & (width >= max(cap_px - 2, 2)) & (width <= cap_px))  # a 1 px line blurs below half
    if close.size:  # near the limit the whole-sample count is too coarse: find the edges to a fraction
        width[close] = _edge_to_edge(mask, vy[close], vx[close], uy[close], ux[close], cap_px)
    return width, entered


def is_under(width_px: np.ndarray, limit_px: int) -> np.ndarray:
    """Return where a width is under a whole-pixel limit: rounded to whole pixels, so one at the limit passes."""
    return np.asarray(width_px) < limit_px - 0.5


REMAP_MAX = 32_000  # OpenCV's remap takes maps and sources under 32,767 (SHRT_MAX) rows and columns
EDGE_CROP_MAX_PX = 1 << 22  # a crop's pixels at most (16 MB as float32): a ring's candidates come in parts


def _edge_to_edge(mask, vy, vx, uy, ux, cap_px: int) -> np.ndarray:
    """Return the distance (px) between the two edges met along each line, from the smoothed mask's half level.

    The mask smoothed over a Gaussian of 0.7 px crosses one half within about a quarter pixel of a
    straight edge drawn at any angle; samples a quarter pixel apart, linearly interpolated between.
    Lines whose crop would be large (many, spread wider than OpenCV's remap takes, or over more than
    ``EDGE_CROP_MAX_PX``, as a zoned lens's rings are over its whole frame) are measured in parts, split along
    the wider spread. Each part's crop reaches every pixel its samples, their interpolation and the
    smoothing read, so the widths do not depend on how the lines are split.
    """
    reach = cap_px + 5  # samples to cap_px + 1.75 along a unit line, one pixel to interpolate, two to smooth
    span_y, span_x = int(vy.max() - vy.min()), int(vx.max() - vx.min())
    crop_px = min(span_y + 2 * reach + 1, mask.shape[0]) * min(span_x + 2 * reach + 1, mask.shape[1])
    if vy.size > REMAP_MAX or max(span_y, span_x) + 2 * reach + 1 >= REMAP_MAX or (crop_px > EDGE_CROP_MAX_PX
                                                                                   and vy.size > 1):
        out = np.empty(vy.size)
        for part in _halves(vy, vx):
            out[part] = _edge_to_edge(mask, vy[part], vx[part], uy[part], ux[part], cap_px)
        return out
    r0, r1 = int(max(vy.min() - reach, 0)), int(min(vy.max() + reach + 1, mask.shape[0]))
    c0, c1 = int(max(vx.min() - reach, 0)), int(min(vx.max() + reach + 1, mask.shape[1]))
    level = cv2.GaussianBlur(mask[r0:r1, c0:c1].astype(np.float32), (5, 5), 0.7, borderType=cv2.BORDER_CONSTANT)
    t = np.arange(-1.0, cap_px + 2.0, 0.25, dtype=np.float32)
    y = ((vy - r0)[:, None] + t[None, :] * uy[:, None]).astype(np.float32)
    x = ((vx - c0)[:, None] + t[None, :] * ux[:, None]).astype(np.float32)
    level_at = cv2.remap(level, x, y, cv2.INTER_LINEAR, borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    f = level_at >= 0.5
    into = np.argmax(f, axis=1)
    after = ~f & (np.arange(t.size)[None, :] > into[:, None])
    out = np.where(after.any(axis=1), np.argmax(after, axis=1), t.size)
    rows = np.arange(vy.size)
    t_in = _crossing(t, level_at, rows, into)
    t_out = np.where(out < t.size, _crossing(t, level_at, rows, np.minimum(out, t.size - 1)), np.inf)
    return np.minimum(t_out - t_in, cap_px + 1.0)


def _crossing(t, level, rows, i) -> np.ndarray:
    """Return where the level crosses one half between samples i - 1 and i (linear interpolation)."""
    i = np.maximum(i, 1)
    a, b = level[rows, i - 1].astype(np.float64), level[rows, i].astype(np.float64)
    frac = np.clip((0.5 - a) / np.where(b != a, b - a, 1.0), 0.0, 1.0)
    return t[i - 1] + frac * (t[i] - t[i - 1])


def _march(mask, vy, vx, uy, ux, cap_px: int) -> tuple[np.ndarray, np.ndarray]:
    """Return (material samples met before the next void, capped at cap_px + 1; whether any was met)."""
    ny, nx = mask.shape
    width = np.full(vy.size, float(cap_px + 1))
    entered = np.zeros(vy.size, bool)
    count = np.zeros(vy.size)
    going = np.arange(vy.size)
    for t in range(1, 2 * cap_px + 4):
        ry = np.rint(vy[going] + t * uy[going]).astype(np.int64)
        rx = np.rint(vx[going] + t * ux[going]).astype(np.int64)
        inside = (ry >= 0) & (ry < ny) & (rx >= 0) & (rx < nx)
        solid = np.zeros(going.size, bool)
        solid[inside] = mask[ry[inside], rx[inside]]
        count[going] += solid
        left = entered[going] & ~solid
        width[going[left]] = count[going[left]]
        entered[going] |= solid
        going = going[~left & (count[going] <= cap_px) & (entered[going] | (t < 3))]
        if going.size == 0:
            break
    return np.minimum(width, cap_px + 1.0), entered
