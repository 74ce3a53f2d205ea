"""Raster tools shared by the rule families: exact disk morphology, widths, labels and overlaps.

The disk morphology is the shifted boolean AND/OR of shared/references/geometry-bench.md (section 4 and
the appendix), generalised to every whole-pixel diameter: an odd diameter N is the set of pixel centres
within N/2 of a pixel centre, an even one the set within N/2 of a pixel corner, so a straight wall N
pixels wide is exactly the widest wall a disk of diameter N fits in.
"""

from __future__ import annotations

import math
from functools import lru_cache

import cv2
import numpy as np


@lru_cache(maxsize=64)
def disk_rows(diameter_px: int) -> tuple[tuple[int, int, int], ...]:
    """Return the disk of a whole-pixel diameter as rows (dy, first dx, last dx)."""
    n = int(diameter_px)
    if n < 1:
        raise ValueError("a disk needs a diameter of at least one pixel")
    radius = n / 2
    centre = 0.0 if n % 2 else 0.5  # odd: a pixel centre; even: the corner up and right of pixel 0
    reach = int(math.ceil(radius + 1))
    rows = []
    for dy in range(-reach, reach + 1):
        h2 = radius * radius - (dy - centre) ** 2
        if h2 < -1e-9:
            continue
        w = math.sqrt(max(h2, 0.0)) + 1e-9
        a, b = math.ceil(centre - w), math.floor(centre + w)
        if a <= b:
            rows.append((dy, a, b))
    return tuple(rows)


def _shift_x(words: np.ndarray, m: int, out: np.ndarray | None = None) -> np.ndarray:
    """Return packed rows shifted so that pixel x of the result is pixel x + m of the input (zeros in)."""
    if out is None:
        out = np.empty_like(words)
    if m == 0:
        np.copyto(out, words)
        return out
    q, b = divmod(abs(m), 64)
    n = words.shape[1]
    if m > 0:
        np.right_shift(words[:, q:], np.uint64(b), out=out[:, :n - q])
        if b:
            out[:, :n - q - 1] |= words[:, q + 1:] << np.uint64(64 - b)
        out[:, n - q:] = 0
    else:
        np.left_shift(words[:, :n - q], np.uint64(b), out=out[:, q:])
        if b:
            out[:, q + 1:] |= words[:, :n - q - 1] >> np.uint64(64 - b)
        out[:, :q] = 0
    return out


def _pack(mask: np.ndarray, pad: int, fill: bool) -> np.ndarray:
    """Return the mask padded by ``pad`` pixels of ``fill`` and packed 64 pixels to a word along x."""
    ny, nx = mask.shape
    width = -(-(nx + 2 * pad) // 64) * 64
    work = np.full((ny + 2 * pad, width), fill, dtype=bool)
    work[pad:pad + ny, pad:pad + nx] = mask
    return np.packbits(work, axis=1, bitorder="little").view(np.uint64)


def _unpack(words: np.ndarray, shape: tuple[int, int], pad: int) -> np.ndarray:
    bits = np.unpackbits(words.view(np.uint8), axis=1, bitorder="little", count=pad + shape[1]).view(bool)
    return bits[pad:pad + shape[0], pad:]


def _rows_into(out: np.ndarray, src: np.ndarray, dy: int, op) -> None:
    """Apply out[y] = op(out[y], src[y + dy]) where y + dy lies inside (the padding absorbs the rest)."""
    n = out.shape[0]
    if dy >= 0:
        op(out[:n - dy], src[dy:], out=out[:n - dy])
    else:
        op(out[-dy:], src[:n + dy], out=out[-dy:])


def erode_disk(mask: np.ndarray, diameter_px: int, *, outside: bool = False) -> np.ndarray:
    """Return the pixels p where the disk placed at p lies wholly inside ``mask``.

    ``outside`` is the value assumed beyond the array (False for solid, True for void). Works on
    rows packed 64 pixels to a word: each shift-and touches an eighth of the bytes of a bool image.
    """
    rows = disk_rows(diameter_px)
    pad = _reach(rows)
    return _unpack(_erode_words(_pack(mask, pad, outside), rows), mask.shape, pad)


def dilate_disk(mask: np.ndarray, diameter_px: int) -> np.ndarray:
    """Return the union of the disks placed at every pixel of ``mask`` (Minkowski sum)."""
    rows = disk_rows(diameter_px)
    pad = _reach(rows)
    return _unpack(_dilate_words(_pack(mask, pad, False), rows), mask.shape, pad)


# Under this many pixels a layer is opened with OpenCV's erode and dilate and the disk as a kernel: the packed
# words' dozens of shifts cost more in calls than in pixels there (a plate on its side, 604 x 84 pixels a layer:
# 80-120 against 120-230 us a call, 0.35 -> 0.23 s over its 1,162 calls in a profile). Both give the same pixels
# (tests/services/rules/test_raster.py).
SMALL_LAYER_PX = 1 << 18


def open_disk(mask: np.ndarray, diameter_px: int, *, outside: bool = False) -> np.ndarray:
    """Return the union of every disk of the diameter that fits inside ``mask`` (beyond it: ``outside``)."""
    rows = disk_rows(diameter_px)
    pad = 2 * _reach(rows)  # the dilation reads erosions up to one reach into the padding
    if mask.size <= SMALL_LAYER_PX:
        return _open_with_kernel(mask, rows, pad, outside)
    words = _erode_words(_pack(mask, pad, outside), rows)
    return _unpack(_dilate_words(words, rows), mask.shape, pad)


def _open_with_kernel(mask: np.ndarray, rows, pad: int, outside: bool) -> np.ndarray:
    """``open_disk`` by OpenCV: erode with the disk's offsets, dilate with them reflected (a Minkowski sum), on
    the mask padded with ``outside`` as far as the words' way pads it."""
    reach = _reach(rows) - 1
    kernel, reflected = _disk_kernels(rows)
    solid = mask.view(np.uint8) if mask.dtype == bool else (mask != 0).view(np.uint8)  # 0 / 1, as the result
    work = cv2.copyMakeBorder(solid, pad, pad, pad, pad, cv2.BORDER_CONSTANT, value=int(outside))
    eroded = cv2.erode(work, kernel, anchor=(reach, reach), borderType=cv2.BORDER_CONSTANT, borderValue=int(outside))
    opened = cv2.dilate(eroded, reflected, anchor=(reach, reach), borderType=cv2.BORDER_CONSTANT, borderValue=0)
    return opened[pad:pad + mask.shape[0], pad:pad + mask.shape[1]].view(bool)


@lru_cache(maxsize=64)
def _disk_kernels(rows: tuple[tuple[int, int, int], ...]) -> tuple[np.ndarray, np.ndarray]:
    """Return the disk (``disk_rows``) as an OpenCV kernel centred on its reach, and the kernel reflected."""
    reach = _reach(rows) - 1
    kernel = np.zeros((2 * reach + 1, 2 * reach + 1), np.uint8)
    for dy, a, b in rows:
        kernel[reach + dy, reach + a:reach + b + 1] = 1
    reflected = np.ascontiguousarray(kernel[::-1, ::-1])
    for k in (kernel, reflected):
        k.setflags(write=False)  # cached: shared by every call
    return kernel, reflected


def _erode_words(words: np.ndarray, rows) -> np.ndarray:
    runs = _runs(words, {b - a + 1 for _, a, b in rows}, np.bitwise_and, 1)
    out = np.full_like(words, np.uint64(0xFFFFFFFFFFFFFFFF))
    tmp = np.empty_like(words)
    for (a, b), dys in _same_span(rows).items():
        shifted = _shift_x(runs[b - a + 1], a, tmp)
        for dy in dys:
            _rows_into(out, shifted, dy, np.bitwise_and)
    return out


def _dilate_words(words: np.ndarray, rows) -> np.ndarray:
    runs = _runs(words, {b - a + 1 for _, a, b in rows}, np.bitwise_or, -1)
    out = np.zeros_like(words)
    tmp = np.empty_like(words)
    for (a, b), dys in _same_span(rows).items():
        shifted = _shift_x(runs[b - a + 1], -a, tmp)
        for dy in dys:
            _rows_into(out, shifted, -dy, np.bitwise_or)
    return out


def _same_span(rows) -> dict[tuple[int, int], list[int]]:
    """Return {(a, b): the rows dy spanning a .. b}: a disk's rows above and below its centre share a span, so
    each span is shifted once (an and, or an or, of the rows gives the same in any order)."""
    spans: dict[tuple[int, int], list[int]] = {}
    for dy, a, b in rows:
        spans.setdefault((a, b), []).append(dy)
    return spans


def _reach(rows) -> int:
    return 1 + max(max(abs(dy), abs(a), abs(b)) for dy, a, b in rows)


def _runs(words: np.ndarray, lengths: set[int], op, sign: int) -> dict[int, np.ndarray]:
    """Return {n: op of the pixels x .. x + n - 1 (sign 1) or x - n + 1 .. x (sign -1)}.

    Runs of 1, 2, 4, ... pixels by doubling, then each length as two overlapping runs of the largest power
    of two under it (op is an and or an or: a pixel read twice changes nothing): one shift per doubling and per
    length, where growing pixel by pixel took one per pixel of the longest run (a disk 24 px across: 11 shifts
    against 23, besides the 24 that place its rows).
    """
    tmp = np.empty_like(words)
    powers = {1: words}
    p = 1
    while 2 * p <= max(lengths):
        powers[2 * p] = op(powers[p], _shift_x(powers[p], sign * p, tmp))
        p *= 2
    out = {}
    for n in lengths:
        q = 1 << (n.bit_length() - 1)
        out[n] = powers[q] if q == n else op(powers[q], _shift_x(powers[q], sign * (n - q), tmp))
    return out


def limit_px(limit_mm: float, pixel_mm: float) -> int:
    """Return a limit as a whole-pixel diameter, rounded down: the grid cannot tell finer widths apart."""
    return max(1, int(math.floor(limit_mm / pixel_mm + 1e-6)))


def nearest_void(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (distance to the nearest void pixel centre, OpenCV's number of that void pixel).

    Void beyond the array edge does not count: pad the mask with void first. ``void_index`` turns
    the numbers of the pixels you need into flat indices.
    """
    dist, labels = cv2.distanceTransformWithLabels(
        mask.view(np.uint8), cv2.DIST_L2, 5, labelType=cv2.DIST_LABEL_PIXEL)
    return dist, labels


VOID_INDEX_ROWS = 256  # rows listed at a time: the list of every void pixel of a wide crop took 0.1 GB


def void_index(mask: np.ndarray, numbers: np.ndarray) -> np.ndarray:
    """Return the flat indices of void pixels from OpenCV's numbers (it counts them in row-major order, from 1).

    The void pixels are listed a band of rows at a time, each band serving the numbers that fall in it.
    """
    numbers = np.asarray(numbers)
    nx = mask.shape[1]
    before = np.r_[0, np.cumsum(nx - np.count_nonzero(mask, axis=1))]  # void pixels above each row
    out = np.empty(numbers.shape, np.int64)
    wanted = numbers.ravel() - 1
    band = np.searchsorted(before, wanted, side="right") - 1  # the row of each number...
    band //= VOID_INDEX_ROWS  # ...and its band
    flat_out = out.ravel()
    for b in np.unique(band).tolist():
        r0 = b * VOID_INDEX_ROWS
        here = band == b
        listed = np.flatnonzero(~mask[r0:r0 + VOID_INDEX_ROWS].ravel())
        flat_out[here] = listed[wanted[here] - before[r0]] + r0 * nx
    return out


def label(mask: np.ndarray, connectivity: int = 8, *, compact: bool = False) -> tuple[int, np.ndarray]:
    """Return (number of labels including background 0, labels): int32, or with ``compact`` uint16 where the
    labelling fits (half the memory of a label map kept per run, and faster; OpenCV refuses a labelling whose
    provisional labels pass 65,535, and then it is done again in int32). Callers index with the labels and never
    do arithmetic on them, so either type serves."""
    algorithm = cv2.CCL_BOLELLI if connectivity == 8 else cv2.CCL_SAUF  # the fastest measured here
    image = mask.view(np.uint8)
    if compact:
        try:
            count, labels = cv2.connectedComponentsWithAlgorithm(image, connectivity, cv2.CV_16U, algorithm)
            return int(count), labels
        except cv2.error:
            pass  # too many sections for 16 bits
    count, labels = cv2.connectedComponentsWithAlgorithm(image, connectivity, cv2.CV_32S, algorithm)
    return int(count), labels


def label_with_areas(mask: np.ndarray, connectivity: int = 8) -> tuple[int, np.ndarray, np.ndarray, np.ndarray]:
    """Return (count, labels, pixel count of each label, first row of each label) in one pass: labels as
    ``label(compact=True)`` gives them (uint16 where they fit), counts int64, rows int64.

    OpenCV counts while it labels (21 against 14 ms for the labels alone of a 2,400^2 layer; a bincount of the
    labels afterwards took 31 ms); it writes 32-bit labels then, which are narrowed to 16 bits when they fit."""
    algorithm = cv2.CCL_BOLELLI if connectivity == 8 else cv2.CCL_SAUF
    count, labels, stats, _ = cv2.connectedComponentsWithStatsWithAlgorithm(mask.view(np.uint8), connectivity,
                                                                            cv2.CV_32S, algorithm)
    if count <= np.iinfo(np.uint16).max + 1:
        labels = labels.astype(np.uint16)
    return (int(count), labels, stats[:, cv2.CC_STAT_AREA].astype(np.int64),
            stats[:, cv2.CC_STAT_TOP].astype(np.int64))


def first_in_rows(labels: np.ndarray, wanted: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """Return the flat index of the first pixel (row-major) of each wanted label, given the first row each lies in
    (``label_with_areas``): the first column holding it in that row. A block of labels at a time, so a plate of
    thousands of holes holds a few MB of comparisons at once."""
    out = np.empty(len(wanted), np.int64)
    width = labels.shape[1]
    for start in range(0, len(wanted), FIRST_IN_ROWS_BLOCK):
        part = slice(start, start + FIRST_IN_ROWS_BLOCK)
        cols = np.argmax(labels[rows[part]] == np.asarray(wanted[part], labels.dtype)[:, None], axis=1)
        out[part] = rows[part] * width + cols
    return out


FIRST_IN_ROWS_BLOCK = 256


def first_pixel(labels: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """Return the flat index of the first pixel (row-major) of each wanted label; -1 for a label not present."""
    pick = np.zeros(int(labels.max()) + 1, bool)
    pick[wanted] = True
    idx = np.flatnonzero(pick[labels.ravel()])
    first = np.full(pick.size, -1, np.int64)
    first[labels.ravel()[idx][::-1]] = idx[::-1]  # reversed so that the first pixel wins
    return first[wanted]


def per_label_max(values: np.ndarray, labels: np.ndarray, count: int, where: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (max of values, flat index of a pixel holding it) per label over the pixels ``where``."""
    idx = np.flatnonzero(where.ravel())
    lab = labels.ravel()[idx]
    val = values.ravel()[idx]
    best = np.full(count, -np.inf)
    np.maximum.at(best, lab.astype(np.intp), val.astype(np.float64))  # matching dtypes: numpy's fast path
    at = np.full(count, -1, np.int64)
    top = idx[val >= best[lab]]
    at[labels.ravel()[top][::-1]] = top[::-1]  # reversed so that the first such pixel wins
    return best, at


def ridge(dist: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Return the pixels of ``mask`` whose distance is a local maximum (3 x 3): where maxima live."""
    grown = cv2.dilate(dist, np.ones((3, 3), np.uint8))
    return mask & (dist >= grown)


def overlap_pairs(a: np.ndarray, b: np.ndarray, where: np.ndarray | None = None, step: int = 1) -> np.ndarray:
    """Return the distinct (label in a, label in b) pairs of pixels where both are non-zero, as (k, 2).

    ``step`` > 1 samples every step-th row and column: overlaps narrower than that may be missed.
    """
    if step > 1:  # copied, not viewed: compared along contiguous rows, 7.3 -> 5.9 ms a call with the copy (2400^2, step 2)
        a, b = np.ascontiguousarray(a[::step, ::step]), np.ascontiguousarray(b[::step, ::step])
        where = np.ascontiguousarray(where[::step, ::step]) if where is not None else None
    # Only where a row run of equal (a, b) starts can a new pair appear: look at those pixels alone.
    start = np.ones(a.shape, bool)
    start[:, 1:] = (a[:, 1:] != a[:, :-1]) | (b[:, 1:] != b[:, :-1])
    if where is not None:
        start[:, 1:] |= where[:, 1:] != where[:, :-1]
    rows, cols = coords(start)
    av, bv = a[rows, cols], b[rows, cols]
    keep = (av > 0) & (bv > 0)
    if where is not None:
        keep &= where[rows, cols]
    if not keep.any():
        return np.zeros((0, 2), np.int64)
    keys = np.unique(av[keep].astype(np.int64) << 32 | bv[keep])
    return np.column_stack([keys >> 32, keys & 0xFFFFFFFF])


def pixel_labels(rows: np.ndarray, cols: np.ndarray, shape: tuple[int, int]) -> tuple[int, np.ndarray, tuple[int, int]]:
    """Label pixels given as coordinates (8-connected) in their bounding box.

    Return (count including 0, label of each pixel, (row0, col0) of the box).
    """
    r0, c0 = int(rows.min()), int(cols.min())
    box = np.zeros((int(rows.max()) - r0 + 1, int(cols.max()) - c0 + 1), bool)
    box[rows - r0, cols - c0] = True
    count, labels = label(box, 8)
    return count, labels[rows - r0, cols - c0], (r0, c0)


def coords(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (rows, cols) of the true pixels (flatnonzero is several times faster than nonzero in 2-D)."""
    return np.divmod(np.flatnonzero(mask.ravel()), mask.shape[1])


def bbox(mask: np.ndarray) -> tuple[int, int, int, int] | None:
    """Return (row0, row1, col0, col1), half-open, of the true pixels, or None."""
    rows = np.flatnonzero(mask.any(axis=1))
    if rows.size == 0:
        return None
    cols = np.flatnonzero(mask[rows[0]:rows[-1] + 1].any(axis=0))
    return int(rows[0]), int(rows[-1]) + 1, int(cols[0]), int(cols[-1]) + 1


def holes_filled(mask: np.ndarray) -> np.ndarray:
    """Return the mask with every void not 4-connected to the array's border filled: scipy's
    ``binary_fill_holes`` with its default structure, by one OpenCV labelling (0.19 s -> about 0.04 s on a
    4,004^2 footprint)."""
    count, labels = label(~mask, 4, compact=True)
    open_air = np.zeros(count, bool)
    open_air[0] = True  # label 0 is the material itself
    for edge in (labels[0], labels[-1], labels[:, 0], labels[:, -1]):
        open_air[edge] = True
    return mask | ~open_air[labels]


def inner_edge(mask: np.ndarray) -> np.ndarray:
    """Return the pixels of the mask with a 4-neighbour outside it (beyond the array counts as outside): scipy's
    ``mask & ~binary_erosion(mask)`` with its default structure, by OpenCV's erosion."""
    cross = cv2.getStructuringElement(cv2.MORPH_CROSS, (3, 3))
    eroded = cv2.erode(mask.view(np.uint8), cross, borderType=cv2.BORDER_CONSTANT, borderValue=0)
    return mask & ~eroded.view(bool)
