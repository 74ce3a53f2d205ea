"""One pass over the layer stack's runs, shared by the rule families.

Each rule family brings a collector (``visit(view)`` per run of identical layers, then ``finish()``);
``outputs`` runs the enabled ones together so a raster is unpacked, labelled and measured once, and
keeps the last stack's outputs so each family's ``check`` can pick up its own.
"""

from __future__ import annotations

import hashlib
import math
import threading
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from functools import cached_property

import cv2
import numpy as np

from services.limits import release_free_heap
from services.rules import raster, thin

_cache = threading.local()  # per thread: two checks (or two tried changes) at once never share an entry


def outputs(stack, part, printer, families: dict[str, Callable],
            progress: Callable[[float], None] | None = None) -> dict:
    """Return {family: RuleOutput} for the families enabled on this printer, computing them once."""
    key = (_fingerprint(stack), id(part), repr(printer), tuple(families))
    if getattr(_cache, "key", None) != key:
        _cache.key, _cache.value = None, None
        _cache.value = _run(stack, part, printer, families, progress)
        _cache.key = key
    return _cache.value


def _fingerprint(stack) -> tuple:
    """Return a key that tells stacks apart without holding on to one (ids alone can be reused)."""
    digest = hashlib.blake2b(np.ascontiguousarray(stack.area_mm2).tobytes(), digest_size=16).hexdigest()
    return id(stack), stack.count, stack.shape, stack.origin_mm, stack.pixel_mm, stack.layer_height_mm, digest


def _run(stack, part, printer, families: dict[str, Callable], progress=None) -> dict:
    collectors = {name: make(stack=stack, part=part, printer=printer) for name, make in families.items()}
    active = [c for c in collectors.values() if c.active]
    frame = Frame(stack, max([2] + [c.pad_px for c in active]))
    frame.reach = max([frame.pad] + [c.reach_px for c in active])
    wants = {want for c in active for want in getattr(c, "needs", ())}
    below = BelowTop(frame) if wants else None
    frame.bounded = Bounded(frame) if "bounded" in wants else None
    shared = ("window", "enclosed", "filled", "solid_in_window")  # what every family's views start from
    ahead = tuple(dict.fromkeys((*shared, *(part for c in active for part in c.ahead))))
    prev, reported = None, 0.0
    done = _work_done(stack)
    wide = frame.ny * frame.nx >= TRIM_FROM_PX
    runs = enumerate(stack.runs())
    # The next run's labels and distance maps are made in a second thread while the families visit this one
    # (OpenCV and numpy release the GIL): a second core left idle by the optics' end is used. Only what needs
    # no previous run is made ahead, and only the main thread touches a view once it is handed over.
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="phasewright-rules") as pool:
        coming = _prepare_next(pool, frame, runs, below, ahead)
        while coming is not None:
            view = coming.result()
            coming = _prepare_next(pool, frame, runs, below, ahead)
            view.prev = prev
            for collector in active:
                collector.visit(view)
            if frame.bounded is not None:
                frame.bounded.update(view, below)
            if below is not None:
                below.update(view)
            view.forget()  # the run before is no longer read: freed now, not a run later
            view.keep_for_next()
            prev = view
            if wide:
                release_free_heap(at_least_bytes=TRIM_FREE_BYTES)
            if progress is not None and done[view.index] - reported >= 1 / 32:
                reported = float(done[view.index])
                progress(0.9 * reported)
    return {name: c.finish(frame) for name, c in collectors.items()}


TRIM_FROM_PX = 4_000_000  # frames from which the freed heap may be handed back after a run ...
TRIM_FREE_BYTES = 256 << 20  # ... when this much is held free (in the whole check: after 192 of the 2M lens's 334 runs,
# 118 of the 100 mm lens's 133, 1 of the 60 mm lens's 133; trimmed after every run, the 2M lens's rules took 40 % longer)
RUN_COST_PX = 800_000  # a run's fixed cost, in pixels of window (see _work_done)


def _work_done(stack) -> np.ndarray:
    """Return the share of the pass's work done after each run, so progress (and a tried change's pace, judged
    from it) follows time rather than layers. A run costs a fixed part plus a part per pixel of its window
    (about its solid box): measured here, 256 ms for each of the 100 mm zoned lens's 133 runs of 16 Mpx lying
    flat and 25 ms for each of its 3,999 runs of 0.86 Mpx on its edge, that is 12 ms + 15 ms per Mpx. By
    layers, the lens on its edge (narrow first and last layers, widest in the middle) showed half its true
    pace at its start."""
    cost = _run_costs(stack)
    return np.cumsum(cost) / cost.sum()


def pass_work(stack) -> float:
    """Return the pass's work on a stack in the units of ``_work_done`` (pixels of window, a run's fixed cost
    counted as RUN_COST_PX of them): seconds per unit, measured on one stack, project the pass on another."""
    return float(_run_costs(stack).sum())


def _run_costs(stack) -> np.ndarray:
    return stack.run_box_px().astype(np.float64) + RUN_COST_PX


def _prepare_next(pool: ThreadPoolExecutor, frame: Frame, runs, below, ahead: tuple[str, ...]) -> Future | None:
    """Submit the next run's view with its ``ahead`` parts made, or return None after the last run."""
    step = next(runs, None)
    if step is None:
        return None
    index, (first, last, mask) = step

    def made() -> RunView:
        view = RunView(frame, index, first, last, frame.pad_mask(mask), None, below)
        for name in ahead:
            getattr(view, name)
        return view

    return pool.submit(made)


class Frame:
    """The stack's grid with a void margin, so morphology and labels never meet the array edge."""

    def __init__(self, stack, pad: int) -> None:
        self.stack = stack
        self.pad = int(pad)
        self.ny, self.nx = stack.shape[0] + 2 * self.pad, stack.shape[1] + 2 * self.pad
        self.px = stack.pixel_mm
        self.dz = stack.layer_height_mm
        self.reach = self.pad  # a run's window reaches this far past its material (see RunView.window)
        self.pockets_below = False  # whether the last run whose void was labelled held enclosed pockets
        self.bounded: Bounded | None = None  # roofed voids, when a family asks for them

    def pad_mask(self, mask: np.ndarray) -> np.ndarray:
        out = np.zeros((self.ny, self.nx), bool)
        out[self.pad:self.ny - self.pad, self.pad:self.nx - self.pad] = mask
        return out

    def layer(self, k: int) -> np.ndarray:
        """Return layer k on the padded frame."""
        return self.pad_mask(self.stack.layer(k))

    def xy_mm(self, flat: int | np.ndarray) -> tuple:
        """Return the (x, y) pixel-centre coordinates of flat frame indices, in mm."""
        r, c = np.divmod(np.asarray(flat), self.nx)
        x = self.stack.origin_mm[0] + (c - self.pad + 0.5) * self.px
        y = self.stack.origin_mm[1] + (r - self.pad + 0.5) * self.px
        return x, y

    def z_mm(self, k: int | np.ndarray):
        """Return the height of layer k's centre in mm."""
        return self.stack.origin_mm[2] + (np.asarray(k) + 0.5) * self.dz

    def location(self, flat: int, k: int) -> tuple[float, float, float]:
        x, y = self.xy_mm(int(flat))
        return round(float(x), 4), round(float(y), 4), round(float(self.z_mm(k)), 4)


def layer_count_dtype(frame: Frame) -> np.dtype:
    """Return the smallest unsigned type that holds any layer count of the stack, with one value to spare."""
    return np.min_scalar_type(frame.stack.count + 1)


class BelowTop:
    """Per pixel column, the top of the last solid met so far going up, in layers over the stack's base (the
    layer just above that solid); 0 where none yet. Whole layers, so the map is exact in the smallest type."""

    def __init__(self, frame: Frame) -> None:
        self.top = np.zeros((frame.ny, frame.nx), layer_count_dtype(frame))

    def update(self, view: RunView) -> None:
        rs, cs = view.window
        np.copyto(self.top[rs, cs], view.last + 1, where=view.mask[rs, cs])


class Bounded:
    """Void with solid below and above it in the same pixel column: the lowest such gap's height and base.

    Kept per column (a 2-D map, in whole layers), so gaps stacked over one another in one column keep only
    the smallest: the one most likely to close.
    """

    def __init__(self, frame: Frame) -> None:
        dtype = layer_count_dtype(frame)
        self.dz = frame.dz
        self.none = np.iinfo(dtype).max  # no roofed gap in this column
        self.height = np.full((frame.ny, frame.nx), self.none, dtype)
        self.base = np.zeros((frame.ny, frame.nx), dtype)
        self._instances = None

    def update(self, view: RunView, below: BelowTop) -> None:
        if view.prev is None:
            return
        rs, cs = view.window
        roof = view.new[rs, cs] & (below.top[rs, cs] > 0)
        if not roof.any():
            return
        base = below.top[rs, cs][roof]
        gap = (view.first - base).astype(base.dtype)  # the solid below ends under this run: never negative
        rows, cols = np.nonzero(roof)
        rows, cols = rows + rs.start, cols + cs.start
        better = gap < self.height[rows, cols]
        self.height[rows[better], cols[better]] = gap[better]
        self.base[rows[better], cols[better]] = base[better]

    def instances(self) -> dict[str, np.ndarray]:
        """Return each roofed void (2-D footprint): tallest height, footprint width, where, base."""
        if self._instances is None:
            self._instances = self._measure()
        return self._instances

    def _measure(self) -> dict[str, np.ndarray]:
        footprint = self.height != self.none
        count, labels = raster.label(footprint, 8)
        height, at = raster.per_label_max(np.where(footprint, self.height, 0), labels, count, footprint)
        dist = cv2.distanceTransform(footprint.view(np.uint8), cv2.DIST_L2, 5)
        deep, _ = raster.per_label_max(dist, labels, count, footprint)
        return {"labels": labels, "height_mm": height[1:] * self.dz, "at": at[1:], "width_px": 2 * deep[1:] - 1,
                "base_mm": self.base.ravel()[at[1:]] * self.dz}


class RunView:
    """One run of identical layers on the frame, with what the rules ask of it, each computed once.

    The labellings, distance maps and morphology run in the run's ``window`` (its material's box grown
    by the frame's reach): outside it every pixel is open air, so the results are the frame's, at the
    cost of the material's box rather than the whole build plate's.
    """

    def __init__(self, frame: Frame, index: int, first: int, last: int, mask: np.ndarray,
                 prev: RunView | None, below: BelowTop | None) -> None:
        self.frame = frame
        self.index, self.first, self.last = index, first, last
        self.mask = mask
        self.prev = prev
        self.below = below
        self.z_lo = first * frame.dz
        self.z_hi = (last + 1) * frame.dz
        self._plain = frozenset((*self.__dict__, "_plain"))  # set here; all else in __dict__ is made on demand

    @property
    def layers(self) -> int:
        return self.last - self.first + 1

    # What the next run reads of this one (links, new material, pockets): kept once the families are done here.
    # The void's labelling holds the same labels as ``void``: keeping it costs its counts alone.
    KEPT_FOR_NEXT = ("window", "solid_in_window", "_void_in_window", "void", "enclosed", "void_area", "enclosed_index",
                     "enclosed_labels")

    def forget(self) -> None:
        """Drop the link to the run before (its rasters are freed once nothing else holds them)."""
        self.prev = None

    def keep_for_next(self) -> None:
        """Drop every raster made for this run that the next run does not read (distance maps, widths, framed
        copies, links to the run before): on a wide part each is a frame-sized array held one run longer."""
        for name in [n for n in self.__dict__ if n not in self._plain and n not in self.KEPT_FOR_NEXT]:
            del self.__dict__[name]

    @cached_property
    def window(self) -> tuple[slice, slice]:
        """Return the rows and columns of the frame that hold this run's material, grown by the reach.

        Both start on an even index, so every second row and column of the window are the frame's.
        Outside the window the frame holds open air only.
        """
        ny, nx = self.mask.shape
        box = raster.bbox(self.mask)
        if box is None:
            return slice(0, ny), slice(0, nx)
        reach = self.frame.reach
        r0, c0 = max(box[0] - reach, 0) & ~1, max(box[2] - reach, 0) & ~1
        return slice(r0, min(box[1] + reach, ny)), slice(c0, min(box[3] + reach, nx))

    def frame_flat(self, flat: np.ndarray, width: int, step: int = 1) -> np.ndarray:
        """Return frame flat indices of flat indices into the window (every ``step``-th pixel); -1 stays."""
        rs, cs = self.window
        rows, cols = np.divmod(np.maximum(flat, 0), width)
        return np.where(flat >= 0, (rs.start + step * rows) * self.mask.shape[1] + cs.start + step * cols, -1)

    def _framed(self, inner: np.ndarray, fill=0) -> np.ndarray:
        """Return a frame-sized array holding ``inner`` in the window and ``fill`` elsewhere (``inner`` itself when
        the window is the whole frame, as under a lens's widest layers: no copy, never written to)."""
        if inner.shape == self.mask.shape:
            return inner
        out = np.full(self.mask.shape, fill, inner.dtype) if fill else np.zeros(self.mask.shape, inner.dtype)
        out[self.window] = inner
        return out

    @cached_property
    def solid_in_window(self) -> tuple[int, np.ndarray]:
        """Return ``solid`` on the window alone: (count, labels), labels[r, c] at frame pixel (r0 + r, c0 + c)."""
        return raster.label(self.filled[self.window], 8, compact=True)

    @cached_property
    def solid(self) -> tuple[int, np.ndarray]:
        """Return (count, labels) of the layer's sections, 8-connected: material with its holes filled.

        A tube or a hollow box is one section as wide as its outline, so its walls count as walls,
        not as free-standing fins (a part standing inside another's cavity joins that section).
        """
        count, labels = self.solid_in_window
        return count, self._framed(labels)

    @cached_property
    def filled(self) -> np.ndarray:
        """Return the material with the void it encloses in this layer (the mask itself where it encloses none:
        read only, as every use of it is)."""
        return self.mask | self.enclosed if self.has_pockets else self.mask

    @property
    def has_pockets(self) -> bool:
        """Return whether the layer encloses any void (a label besides the solid's and the open air's)."""
        return self._void_in_window[0] > 2

    @cached_property
    def _dist_in_window(self) -> np.ndarray:
        """Return each window pixel's distance (px) to the nearest open-air pixel centre (holes filled)."""
        return cv2.distanceTransform(self.filled[self.window].view(np.uint8), cv2.DIST_L2, 5)

    @cached_property
    def widths(self) -> tuple[np.ndarray, np.ndarray]:
        """Return (approximate width px, flat index of its widest point) per section, from a half grid.

        The distance map of every second row and column costs a quarter of the full one; width is
        4 d - 1 (d in half-grid pixels), within about two pixels. Sections too small to be sampled get
        1.5 px. ``exact_widths`` and ``refine_width`` give more where it matters.
        """
        count, labels = self.solid_in_window
        half = np.ascontiguousarray(self.filled[self.window][::2, ::2])
        dist = cv2.distanceTransform(half.view(np.uint8), cv2.DIST_L2, 5)
        sub = labels[::2, ::2]
        deep, at = raster.per_label_max(dist, sub, count, raster.ridge(dist, half))
        at = self.frame_flat(at, half.shape[1], step=2)
        unsampled = np.flatnonzero(at[1:] < 0) + 1
        if unsampled.size:  # sections under two pixels across: point at one of their own pixels
            at[unsampled] = self.frame_flat(raster.first_pixel(labels, unsampled), labels.shape[1])
        width = np.where(np.isfinite(deep), 4 * deep - 1, 1.5)
        width[0] = 0.0
        return width, at

    @cached_property
    def exact_widths(self) -> tuple[np.ndarray, np.ndarray]:
        """Return (width px, flat index of its widest point) per section: twice the inscribed radius.

        Width = 2 d - 1 at the section's deepest pixel, d its distance to the nearest void pixel
        centre: exact for a wall an odd number of pixels wide, one pixel low for an even one
        (``refine_width`` settles those that matter).
        """
        count, labels = self.solid_in_window
        dist = self._dist_in_window
        deep, at = raster.per_label_max(dist, labels, count, raster.ridge(dist, self.filled[self.window]))
        at = self.frame_flat(at, dist.shape[1])
        width = np.where(np.isfinite(deep), 2 * deep - 1, 0.0)
        width[0] = 0.0
        return width, at

    @cached_property
    def solid_links(self) -> np.ndarray:
        """Return (k, 2) pairs (section label in the previous run, here) that overlap.

        Sampled on every second row and column: a contact narrower than two pixels may be missed, so
        a section may start a feature of its own there (islands are found pixel by pixel elsewhere).
        """
        if self.prev is None:
            return np.zeros((0, 2), np.int64)
        (a, b), (c, d) = self.window, self.prev.window  # both start even: the sampling stays the frame's
        r0, r1, c0, c1 = max(a.start, c.start), min(a.stop, c.stop), max(b.start, d.start), min(b.stop, d.stop)
        if r0 >= r1 or c0 >= c1:
            return np.zeros((0, 2), np.int64)
        here, below = self.solid_in_window[1], self.prev.solid_in_window[1]
        return raster.overlap_pairs(below[r0 - c.start:r1 - c.start, c0 - d.start:c1 - d.start],
                                    here[r0 - a.start:r1 - a.start, c0 - b.start:c1 - b.start], step=2)

    @cached_property
    def new(self) -> np.ndarray:
        """Return the solid that the layer below does not have (everything on the first layer)."""
        return self.mask & ~self.prev.mask if self.prev is not None else self.mask.copy()

    @cached_property
    def _void_in_window(self) -> tuple[int, np.ndarray, np.ndarray | None, np.ndarray | None]:
        """Return (count, labels, pixels, first row) of the void on the window, 4-connected (``void`` says more).

        The pixels and first rows of every label come with the labelling where the run below held enclosed
        pockets (counting while labelling is 7-13 ms a 2,400^2 layer dearer, cheaper than counting the pockets
        afterwards; runs follow each other's kind); else they are None and counted from the pockets if asked.
        """
        if self.frame.pockets_below:
            found = raster.label_with_areas(~self.mask[self.window], 4)
        else:
            found = (*raster.label(~self.mask[self.window], 4, compact=True), None, None)
        self.frame.pockets_below = found[0] > 2
        return found

    @cached_property
    def void(self) -> tuple[int, np.ndarray, np.ndarray]:
        """Return (count, labels, outside) of the void, 4-connected; outside[l] marks the open air.

        The labels cover the window alone: labels[r, c] at frame pixel (r0 + r, c0 + c). The window's rim is
        void all round, so the open air is the one label at its corner, and every pixel outside the window is
        open air (``void_label_at`` and ``void_labels_over`` read the labels by frame pixel). A frame-sized
        copy per run cost the 2M lens 1.1 s of CPU.
        """
        count, labels, *_ = self._void_in_window
        outside = np.zeros(count, bool)
        outside[labels[0, 0]] = True
        return count, labels, outside

    def void_label_at(self, flat: np.ndarray) -> np.ndarray:
        """Return the void label at each frame flat index ``flat`` (the open air's outside the window)."""
        labels = self.void[1]
        rs, cs = self.window
        rows, cols = np.divmod(np.asarray(flat, np.int64), self.mask.shape[1])
        rows, cols = rows - rs.start, cols - cs.start
        inside = (rows >= 0) & (rows < labels.shape[0]) & (cols >= 0) & (cols < labels.shape[1])
        out = np.full(rows.shape, labels[0, 0], labels.dtype)
        out[inside] = labels[rows[inside], cols[inside]]
        return out

    def void_labels_over(self, rows: slice, cols: slice) -> np.ndarray:
        """Return the void labels on the frame's ``rows`` and ``cols`` (slices, a step allowed), the open air's
        outside the window."""
        labels = self.void[1]
        (out_r, in_r), (out_c, in_c) = (_meeting(want, have, n) for want, have, n
                                        in zip((rows, cols), self.window, self.mask.shape))
        out = np.full((len(range(*rows.indices(self.mask.shape[0]))), len(range(*cols.indices(self.mask.shape[1])))),
                      labels[0, 0], labels.dtype)
        out[out_r, out_c] = labels[in_r, in_c]
        return out

    @cached_property
    def enclosed(self) -> np.ndarray:
        """Return the void pixels enclosed by solid in this layer (holes, cavities, grooves)."""
        count, labels, *_ = self._void_in_window
        if not self.has_pockets:
            return np.zeros_like(self.mask)
        return self._framed((labels != labels[0, 0]) & ~self.mask[self.window])

    @cached_property
    def enclosed_index(self) -> np.ndarray:
        """Return the flat indices of the enclosed void pixels (int32 below 2**31 pixels: half the memory on a
        part whose layers enclose wide grooves)."""
        index = np.flatnonzero(self.enclosed.ravel())
        return index.astype(np.int32) if self.mask.size < 2 ** 31 else index

    @cached_property
    def enclosed_labels(self) -> np.ndarray:
        """Return the void label of each enclosed pixel (in ``enclosed_index`` order: row by row in the window is
        row by row in the frame)."""
        count, labels, _ = self.void
        if count <= 2:
            return np.zeros(0, labels.dtype)
        return labels[(labels != labels[0, 0]) & ~self.mask[self.window]]

    @cached_property
    def void_area(self) -> np.ndarray:
        """Return the pixel count of each enclosed void label (0 for the open air), as the labelling counted them."""
        count, labels, pixels, _ = self._void_in_window
        if pixels is None:
            return np.bincount(self.enclosed_labels, minlength=count)
        area = pixels.copy()
        area[0] = 0  # the solid
        area[labels[0, 0]] = 0
        return area

    def void_first_pixel(self, wanted: np.ndarray) -> np.ndarray:
        """Return the frame flat index of the first pixel (row-major) of each wanted enclosed void label."""
        _, labels, _, first_row = self._void_in_window
        inner = raster.first_pixel(labels, wanted) if first_row is None else \
            raster.first_in_rows(labels, wanted, first_row[wanted])
        return self.frame_flat(inner, labels.shape[1])

    @cached_property
    def void_links(self) -> np.ndarray:
        """Return (k, 2) pairs (void label in the previous run, here) overlapping where either is enclosed.

        Sampled on every second row and column; a pocket with no pair at all is checked pixel by pixel.
        """
        if self.prev is None:
            return np.zeros((0, 2), np.int64)
        (a, b), (c, d) = self.window, self.prev.window  # enclosed void lies in either; both start even
        rs, cs = slice(min(a.start, c.start), max(a.stop, c.stop), 2), slice(min(b.start, d.start), max(b.stop, d.stop), 2)
        where = self.enclosed[rs, cs] | self.prev.enclosed[rs, cs]
        pairs = raster.overlap_pairs(self.prev.void_labels_over(rs, cs), self.void_labels_over(rs, cs), where)
        extra = [pairs]
        for side, view, other in ((1, self, self.prev), (0, self.prev, self)):
            seen = np.zeros(view.void[0], bool)
            seen[pairs[:, side]] = True
            lonely = np.flatnonzero(~seen & (view.void_area > 0))
            if lonely.size:  # pockets the sampling may have missed: check them pixel by pixel
                pick = np.isin(view.enclosed_labels, lonely)
                found = np.column_stack([other.void_label_at(view.enclosed_index[pick]),
                                         view.enclosed_labels[pick]]).astype(np.int64)
                extra.append(found[found[:, 0] > 0][:, ::-1] if side == 0 else found[found[:, 0] > 0])
        return np.unique(np.concatenate(extra), axis=0) if len(extra) > 1 else pairs


BATCH_FROM = 48  # sections to refine in one run from which one fine distance map of the window beats crops


def refine_widths(view: RunView, flats: np.ndarray, coarse_px: np.ndarray) -> np.ndarray:
    """Return ``refine_width`` of the run's filled sections at frame pixels ``flats``, many at once.

    A dense lattice asks for thousands per run: then one 2x finer distance map of the whole window
    serves them all. It holds the same values near each pixel as the crops would (a crop reaches
    past the section's own half-width by four pixels, so no crop edge is ever the nearest void there),
    and the section's area and box come from the run's own labels; the results are the same.
    """
    flats, coarse_px = np.asarray(flats, np.int64), np.asarray(coarse_px, np.float64)
    if flats.size < BATCH_FROM:
        return np.array([refine_width(view.filled, int(f), float(c)) for f, c in zip(flats, coarse_px)])
    rs, cs = view.window
    crop = view.filled[rs, cs]
    fine = np.zeros((crop.shape[0] * 2 + 2, crop.shape[1] * 2 + 2), np.uint8)
    fine[1:-1, 1:-1] = np.repeat(np.repeat(crop, 2, axis=0), 2, axis=1)
    sub = cv2.distanceTransform(fine, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    rows, cols = np.divmod(flats, view.mask.shape[1])
    r, c = rows - rs.start, cols - cs.start
    y, x = 2 * r + 1, 2 * c + 1
    inscribed = np.full(flats.size, -np.inf, np.float32)
    for dy in range(-2, 4):  # refine_width's window: two fine pixels before, three after
        for dx in range(-2, 4):
            inscribed = np.maximum(inscribed, sub[np.clip(y + dy, 0, sub.shape[0] - 1), np.clip(x + dx, 0, sub.shape[1] - 1)])
    count, labels = view.solid_in_window
    own = labels[r, c]
    lr, lc = raster.coords(labels > 0)
    lab = labels[lr, lc]
    area = np.bincount(lab, minlength=count)
    top, left = np.full(count, np.iinfo(np.int64).max), np.full(count, np.iinfo(np.int64).max)
    bottom, right = np.full(count, -1), np.full(count, -1)
    np.minimum.at(top, lab, lr)
    np.minimum.at(left, lab, lc)
    np.maximum.at(bottom, lab, lr)
    np.maximum.at(right, lab, lc)
    reach = np.ceil(coarse_px).astype(np.int64) + 4
    touches = ((top[own] <= r - reach) | (bottom[own] >= r + reach) | (left[own] <= c - reach)
               | (right[own] >= c + reach))
    inscribed = inscribed.astype(np.float64)
    equivalent = np.sqrt(4 * area[own].astype(np.float64) / math.pi)
    compact = ~touches & (equivalent <= 1.25 * inscribed + 1)
    return np.where(compact, (inscribed + equivalent) / 2, inscribed)


def refine_width(mask: np.ndarray, flat: int, coarse_px: float) -> float:
    """Return the width (px) of the section around pixel ``flat``: twice its inscribed radius, refined.

    The radius comes from a 2x finer distance map: there every wall is an even number of sub-pixels
    wide, its ridge a two-sub-pixel plateau, and the largest distance (in sub-pixels) equals the wall's
    width in pixels, exact for straight walls. A digitised round section is about a pixel narrower
    inside than drawn (its staircase cuts the rim), so for a compact section (one whose area is close
    to its inscribed disk's) the width is the mean of that and its area-equivalent diameter: within
    about half a pixel for discs and squares.
    """
    if not 0 <= int(flat) < mask.size:
        raise ValueError(f"pixel {flat} lies outside a {mask.shape[0]} x {mask.shape[1]} layer")
    r, c = divmod(int(flat), mask.shape[1])
    reach = int(math.ceil(coarse_px)) + 4
    r0, r1, c0, c1 = thin.clamp_box(mask.shape, r, c, reach, reach)
    crop = mask[r0:r1, c0:c1]
    fine = np.zeros((crop.shape[0] * 2 + 2, crop.shape[1] * 2 + 2), np.uint8)
    fine[1:-1, 1:-1] = np.repeat(np.repeat(crop, 2, axis=0), 2, axis=1)
    sub = cv2.distanceTransform(fine, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)
    y0, y1, x0, x1 = thin.clamp_box(sub.shape, 2 * (r - r0) + 1, 2 * (c - c0) + 1, 2, 3)
    inscribed = float(sub[y0:y1, x0:x1].max())  # the window is cut back at the edge, never empty
    _, labels = cv2.connectedComponents(crop.view(np.uint8), connectivity=8)
    own = labels == labels[r - r0, c - c0]
    if own[0].any() or own[-1].any() or own[:, 0].any() or own[:, -1].any():
        return inscribed  # reaches past the crop: elongated, not compact
    equivalent = math.sqrt(4 * float(own.sum()) / math.pi)
    return (inscribed + equivalent) / 2 if equivalent <= 1.25 * inscribed + 1 else inscribed


def _meeting(want: slice, window: slice, n: int) -> tuple[slice, slice]:
    """Return (where in the slice ``want`` of 0..n, where in the window) the pixels both hold lie."""
    start, stop, step = want.indices(n)
    first = max(0, -(-(window.start - start) // step))           # the slice's first index inside the window
    last = max(first, -(-(min(stop, window.stop) - start) // step))  # one past its last
    at = start + first * step - window.start
    return slice(first, last), slice(at, at + (last - first - 1) * step + 1 if last > first else at, step)
