"""Analysis cells: the layer stack averaged over a coarse square grid centred on the optical axis.

Each cell holds, per run of identical layers, the fill fraction of material and the length of
material boundary inside it (for growing or shrinking the part by an XY tolerance).

A lattice plate's cells, one period across, read the lattice's own sites (``CellGrid.lattice``): each
site owns a rectangle one period wide and one row high (p x p on a square lattice, p x sqrt(3) p / 2 on
a hexagonal one, whose rows run along x); the rectangles tile the plane and each holds one site's
material. A window of one unit cell centred on a cell overlaps four of them; the cell keeps each
one's fill and its share, and its S-parameters are the four sites' own interpolated by share
(``transmission``): the local field is the sum of the unit cells' fields. A square cell one period
across read as one fill sees a uniform hexagonal lattice at fill 0.5 as anything from 0.43 to 0.57,
and at a graded plate's 2 pi seam, where neighbouring sites jump from the largest size to the
smallest, a mixed fill reads as half a turn of false phase.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from services.layers import nonzero_bytes

# Cauchy-Crofton: a 4-neighbour (Manhattan) boundary count over-reads a curve of random direction
# by 4/pi on average, so pi/4 turns transition counts into boundary length (computed, common practice).
_CROFTON = np.pi / 4


@dataclass(frozen=True, slots=True)
class CellGrid:
    """Square analysis cells of side ``cell_mm``; the optical axis is the centre of cell (ny//2, nx//2)."""

    cell_mm: float
    axis_mm: tuple[float, float]
    shape: tuple[int, int]
    # (kind, period_mm) of a lattice with a site on the axis: each cell reads the four sites its unit window overlaps.
    lattice: tuple[str, float] | None = None

    @classmethod
    def around(cls, *, axis_mm: tuple[float, float], half_extent_mm: tuple[float, float], cell_mm: float,
               lattice: tuple[str, float] | None = None) -> CellGrid:
        """Return an odd-sized grid centred on the axis that covers +-half extent in x and y."""
        nx = 2 * int(np.ceil(half_extent_mm[0] / cell_mm - 0.5)) + 1
        ny = 2 * int(np.ceil(half_extent_mm[1] / cell_mm - 0.5)) + 1
        sites = None if lattice is None else (str(lattice[0]), float(lattice[1]))
        return cls(float(cell_mm), (float(axis_mm[0]), float(axis_mm[1])), (ny, nx), sites)

    def subdivided(self, sub: int) -> CellGrid:
        """Return the grid with every cell cut into sub x sub equal cells, over the same edges (no lattice)."""
        return CellGrid(self.cell_mm / sub, self.axis_mm, (self.shape[0] * sub, self.shape[1] * sub))

    @property
    def axis_index(self) -> tuple[int, int]:
        return self.shape[0] // 2, self.shape[1] // 2

    @property
    def x_mm(self) -> np.ndarray:
        """Return the cell centres' x, relative to the axis (the grid's middle, also for an even count)."""
        return (np.arange(self.shape[1]) - (self.shape[1] - 1) / 2) * self.cell_mm

    @property
    def y_mm(self) -> np.ndarray:
        """Return the cell centres' y, relative to the axis (the grid's middle, also for an even count)."""
        return (np.arange(self.shape[0]) - (self.shape[0] - 1) / 2) * self.cell_mm

    def radius_mm(self) -> np.ndarray:
        """Return each cell centre's distance from the axis, (ny, nx)."""
        return np.hypot(self.x_mm[None, :], self.y_mm[:, None])

    def _bins(self, centres_mm: np.ndarray, axis_mm: float, n: int) -> np.ndarray:
        edge0 = axis_mm - n / 2 * self.cell_mm
        # Pixel centres often sit exactly on cell edges; a bias far below one pixel breaks every such
        # tie the same way, so each cell gets the same whole number of pixels.
        return np.floor((centres_mm - edge0) / self.cell_mm + 1e-6).astype(np.int64)


@dataclass(frozen=True, slots=True, eq=False)
class CellRun:
    """One run of identical layers seen through the analysis cells (and through their sub-cells)."""

    first: int            # first and last (inclusive) layer of the run
    last: int
    thickness_mm: float
    fill: np.ndarray      # (ny, nx) float64 in [0, 1]
    edge_mm: np.ndarray   # (ny, nx) float64, material boundary length inside each cell
    fine_fill: np.ndarray | None = None     # (ny * sub, nx * sub), the same on the subdivided grid
    fine_edge_mm: np.ndarray | None = None
    # On a lattice grid: the fills and edges of the four sites each cell overlaps, (4, ny, nx), and the shares;
    # ``fill`` and ``edge_mm`` are then the nearest site's (the largest share), which the multi-slice march takes.
    site_fill: np.ndarray | None = None
    site_edge_mm: np.ndarray | None = None
    site_weight: np.ndarray | None = None


class _BlockSum:
    """Sum stack pixels into analysis cells along one axis (bins are monotone).

    Cells hold a whole number of pixels, so inside the grid the pixels normally fall in
    consecutive equal blocks (the first and last may be cut by the stack's edge): those are summed
    as a reshaped array, integer counts, several times faster than ``np.add.reduceat``, which
    stays for anything irregular.
    """

    def __init__(self, bins: np.ndarray, n: int) -> None:
        inside = (bins >= 0) & (bins < n)
        self.take = np.flatnonzero(inside)
        b = bins[self.take]
        self.starts = np.flatnonzero(np.diff(b, prepend=-1)) if len(b) else np.zeros(0, dtype=np.int64)
        self.targets = b[self.starts] if len(b) else np.zeros(0, dtype=np.int64)
        self.n = n
        self.step = _regular_step(self.take, self.starts, self.targets)

    def __call__(self, a: np.ndarray, axis: int) -> np.ndarray:
        shape = list(a.shape)
        shape[axis] = self.n
        out = np.zeros(shape, dtype=np.float64)
        if len(self.take) == 0:
            return out
        if self.step:
            self._blocks(a, axis, out)
            return out
        part = np.add.reduceat(np.take(a, self.take, axis=axis), self.starts, axis=axis, dtype=np.float64)
        index = [slice(None)] * a.ndim
        index[axis] = self.targets
        out[tuple(index)] = part
        return out

    def _blocks(self, a: np.ndarray, axis: int, out: np.ndarray) -> None:
        """Sum the inner blocks by reshaping, and the (possibly partial) first and last one by slices."""
        def at(array, index):
            return array[(slice(None),) * axis + (index,)]

        dtype = _sum_type(a.dtype, self.step)
        ends = np.append(self.starts[1:], len(self.take)) + self.take[0]
        starts = self.starts + self.take[0]
        for k in {0, len(starts) - 1}:
            at(out, self.targets[k])[...] = at(a, slice(starts[k], ends[k])).sum(axis=axis, dtype=dtype)
        inner = len(starts) - 2
        if inner > 0:
            part = at(a, slice(starts[1], ends[-2]))
            part = part.reshape(part.shape[:axis] + (inner, self.step) + part.shape[axis + 1:])
            total = np.zeros(part.shape[:axis + 1] + part.shape[axis + 2:], dtype=dtype)
            for k in range(self.step):  # strided adds: faster than a reduction over a short axis
                total += part[(slice(None),) * (axis + 1) + (k,)]
            at(out, slice(self.targets[1], self.targets[-1]))[...] = total


def _sum_type(dtype: np.dtype, step: int) -> np.dtype:
    """Return the type to sum blocks of ``step`` values in, exactly: bytes in 16 bits while the sum cannot pass
    65,535 (a quarter of the memory traffic of 64 bits over a full-frame mask), other unsigned in 64, else float."""
    if dtype.kind in "ub" and dtype.itemsize == 1 and step * 255 <= np.iinfo(np.uint16).max:
        return np.dtype(np.uint16)
    return np.dtype(np.int64) if dtype.kind in "ub" else np.dtype(np.float64)


def _regular_step(take: np.ndarray, starts: np.ndarray, targets: np.ndarray) -> int:
    """Return the inner block length if the pixels are contiguous, in consecutive bins of one length (the
    first and last no longer than it); else 0."""
    if len(take) == 0 or take[-1] - take[0] != len(take) - 1 or np.any(np.diff(targets) != 1):
        return 0
    lengths = np.diff(np.append(starts, len(take)))
    step = int(lengths[1]) if len(lengths) > 2 else int(lengths.max())
    if np.any(lengths[1:-1] != step) or lengths[0] > step or lengths[-1] > step:
        return 0
    return step


def cell_runs(stack, grid: CellGrid, *, with_edges: bool = False, sub: int = 1) -> Iterator[CellRun]:
    """Yield each run of the stack's layers averaged over the analysis cells, bottom first.

    fill = solid pixel centres in the cell x pixel area / cell area; exact where the cell side is a
    whole number of pixels (any grid offset), and pixels outside the stack count as air. With
    ``sub`` > 1 the pixels are counted on the subdivided grid (``grid.subdivided(sub)``) and summed
    into the cells, so the cells' values are the same as without it, and the sub-cells' come along.
    A grid with a lattice reads the sites each cell overlaps instead (``sub`` must then be 1).
    """
    if grid.lattice is not None:
        if sub != 1:
            raise ValueError("a grid that reads lattice sites has no sub-cells")
        yield from _site_runs(stack, grid, with_edges=with_edges)
        return
    fine = grid.subdivided(sub)
    scale, fine_scale = (stack.pixel_mm / grid.cell_mm) ** 2, (stack.pixel_mm / fine.cell_mm) ** 2
    counter = _ChangeCounter(stack, fine)

    def length(turns):
        return turns * stack.pixel_mm * _CROFTON if with_edges else np.zeros(0)

    # Each run is counted from the one below it: only the bytes of the packed layer that changed (and, for the
    # edges, their left and lower neighbours) are read, so the work follows the part's surfaces. Counts are
    # whole numbers of pixels, so they are the same as counting every run's pixels afresh.
    for first, last, at, box in stack.packed_run_boxes():
        count, turns = counter.step(at, box, with_edges)
        thickness = (last - first + 1) * stack.layer_height_mm
        if sub == 1:
            yield CellRun(first, last, thickness, np.minimum(count * scale, 1.0), length(turns))
            continue
        yield CellRun(first, last, thickness, np.minimum(_coarsen(count, sub) * scale, 1.0),
                      length(_coarsen(turns, sub) if with_edges else None),
                      np.minimum(count * fine_scale, 1.0), length(turns))


class _ChangeCounter:
    """Solid pixel centres and 4-neighbour transitions per (sub-)cell, kept up to date from packed layers.

    A layer is np.packbits along x (the stack's packed runs). From one layer to the next, a cell's count
    changes by the pixels that switch on less those that switch off; a transition (counted in the pixel
    before it: to the right, and to the row above) can change only in a changed byte, the byte left of it
    or the byte below it, so only those are read. Pixels outside the grid are not counted; the frame's own
    edges have no transition past them.
    """

    def __init__(self, stack, fine: CellGrid) -> None:
        self.ny, self.nx = stack.shape
        self.row_bytes = (self.nx + 7) // 8
        rows = fine._bins(stack.y_centres_mm, fine.axis_mm[1], fine.shape[0])
        cols = np.full(8 * self.row_bytes, -1, dtype=np.int64)
        cols[:self.nx] = fine._bins(stack.x_centres_mm, fine.axis_mm[0], fine.shape[1])
        self.cells = fine.shape[0] * fine.shape[1]
        # Each pixel's flat cell is its row's plus its column's, -1 outside the grid. A byte's eight pixels fall
        # in a few cells (one or two where cells are 8 pixels wide or more): per byte column, the cell of each
        # stretch of its bits and their mask, so a byte is counted with a popcount per stretch, not bit by bit.
        self.row_cell = np.where((rows >= 0) & (rows < fine.shape[0]), rows * fine.shape[1], -1)
        col_cell = np.where((cols >= 0) & (cols < fine.shape[1]), cols, -1).reshape(self.row_bytes, 8)
        stretch = np.cumsum(np.diff(col_cell, axis=1, prepend=col_cell[:, :1]) != 0, axis=1)
        self.stretches = int(stretch.max()) + 1
        self.stretch_cell = np.full((self.stretches, self.row_bytes), -1, dtype=np.int64)
        self.stretch_mask = np.zeros((self.stretches, self.row_bytes), dtype=np.uint8)
        byte_col = np.broadcast_to(np.arange(self.row_bytes)[:, None], col_cell.shape)
        self.stretch_cell[stretch, byte_col] = col_cell
        np.bitwise_or.at(self.stretch_mask, (stretch, byte_col), (0x80 >> np.arange(8)).astype(np.uint8)[None, :])
        self.shape = fine.shape
        # Bits of pixels that have a right neighbour in the frame (the last pixel and the padding have none).
        right = np.zeros(8 * self.row_bytes, dtype=np.uint8)
        right[:self.nx - 1] = 1
        self.has_right = np.packbits(right)
        # The layer below and a spare frame, swapped each step; each holds solid only in its rows [lo, hi).
        self.below = np.zeros((self.ny, self.row_bytes), dtype=np.uint8)
        self.spare = np.zeros_like(self.below)
        self.below_rows, self.spare_rows = (0, 0), (0, 0)
        self.count = np.zeros(self.cells, dtype=np.int64)
        self.turns = np.zeros(self.cells, dtype=np.int64)

    def step(self, at: tuple[int, int], box: np.ndarray, with_edges: bool) -> tuple[np.ndarray, np.ndarray | None]:
        """Move to the next layer, its packed solid ``box`` at (row, byte) ``at`` of the frame; return its (count,
        turns or None), each (ny, nx) of the grid, int64."""
        new, rows = self._placed(at, box)
        lo, hi = min(self.below_rows[0], rows[0]), max(self.below_rows[1], rows[1])
        flat_new, flat_old = new.reshape(-1), self.below.reshape(-1)
        # Only rows either layer holds solid in can differ.
        changed = nonzero_bytes(new[lo:hi] ^ self.below[lo:hi]) + lo * self.row_bytes if hi > lo else np.zeros(0, int)
        if changed.size:
            # Bits set in both layers cancel: the net count per stretch is the new byte's bits less the old's.
            self._add(self.count, changed, on=[flat_new[changed]], off=[flat_old[changed]])
            if with_edges:
                near = self._near(changed)
                self._add(self.turns, near, on=list(self._transitions(flat_new, near)),
                          off=list(self._transitions(flat_old, near)))
        self.below, self.spare = new, self.below
        self.below_rows, self.spare_rows = rows, self.below_rows
        return self.count.reshape(self.shape).copy(), self.turns.reshape(self.shape).copy() if with_edges else None

    def _placed(self, at: tuple[int, int], box: np.ndarray) -> tuple[np.ndarray, tuple[int, int]]:
        """Return the spare frame cleared and holding ``box`` at ``at``, and the rows it holds solid in."""
        frame = self.spare
        frame[self.spare_rows[0]:self.spare_rows[1]] = 0
        (r0, b0), (h, w) = at, box.shape
        frame[r0:r0 + h, b0:b0 + w] = box
        return frame, ((r0, r0 + h) if h and w else (0, 0))

    def _near(self, changed: np.ndarray) -> np.ndarray:
        """Return, ascending, the flat bytes whose transitions a change can move: the changed bytes, the bytes left
        of them and the bytes below them."""
        near = np.zeros(self.below.size, dtype=bool)
        near[changed] = True
        near[changed[changed >= 1] - 1] = True
        near[changed[changed >= self.row_bytes] - self.row_bytes] = True
        return nonzero_bytes(near.view(np.uint8))

    def _transitions(self, flat: np.ndarray, at: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return the packed transitions of the bytes ``at``: to each pixel's right, and to the row above."""
        x = flat[at]
        byte = at % self.row_bytes
        after = np.where(byte + 1 < self.row_bytes, flat[np.minimum(at + 1, flat.size - 1)], 0)
        right = (x ^ ((x << 1) | (after >> 7))) & self.has_right[byte]
        # The top row has no row above it: no transition is counted there (the frame's edge is not a surface).
        above = np.where(at + self.row_bytes < flat.size, flat[np.minimum(at + self.row_bytes, flat.size - 1)], x)
        return right, x ^ above

    def _add(self, into: np.ndarray, at: np.ndarray, *, on: list[np.ndarray], off: list[np.ndarray]) -> None:
        """Add to the cell of every bit set in the bytes ``on`` (found at the flat byte indices ``at``) one, and
        subtract one for every bit set in the bytes ``off``.

        A band of ``ADD_BYTES`` at a time: a run that changes the whole frame (a lens's base disc) would otherwise
        hold a dozen int64 copies of every byte's index at once (about 200 MB on a 100 mm lens at 25 um)."""
        for start in range(0, at.size, ADD_BYTES):
            band = slice(start, start + ADD_BYTES)
            self._add_band(into, at[band], [bits[band] for bits in on], [bits[band] for bits in off])

    def _add_band(self, into: np.ndarray, at: np.ndarray, on: list[np.ndarray], off: list[np.ndarray]) -> None:
        row, col = np.divmod(at, self.row_bytes)
        row_cell = self.row_cell[row]
        inside = row_cell >= 0
        cells, pixels = [], []
        for k in range(self.stretches):
            # One net count per byte and stretch (at most 16 bits on, 16 off: int16 holds it), one pass each.
            mask = self.stretch_mask[k, col]
            net = np.zeros(at.size, dtype=np.int16)
            for bits in on:
                net += np.bitwise_count(bits & mask)
            for bits in off:
                net -= np.bitwise_count(bits & mask)
            cell = self.stretch_cell[k, col]
            counted = np.flatnonzero((net != 0) & inside & (cell >= 0))
            cells.append(row_cell[counted] + cell[counted])
            pixels.append(net[counted])
        # One count per call; the weights are whole numbers, so their float sums are exact.
        into += np.bincount(np.concatenate(cells), weights=np.concatenate(pixels), minlength=self.cells).astype(np.int64)


ADD_BYTES = 1 << 20  # changed bytes counted at once: their int64 working copies 8 MB each, not the frame's. Bands
# of 1 << 18 held the 2M lens's peak 60-100 MB higher (smaller blocks stay in the thread's malloc arena once freed)


def _coarsen(a: np.ndarray, sub: int) -> np.ndarray:
    """Return the sums over sub x sub blocks (integer counts, so the sums are exact)."""
    out = np.zeros((a.shape[0] // sub, a.shape[1] // sub), dtype=a.dtype)
    for i in range(sub):  # strided adds: 0.07 against 0.65 ms for a reduction over two short axes (342^2, sub 2)
        for j in range(sub):
            out += a[i:out.shape[0] * sub:sub, j:out.shape[1] * sub:sub]
    return out


def _transitions(mask: np.ndarray) -> np.ndarray:
    """Return each pixel's 4-neighbour material/air transitions to its right and upper neighbours."""
    t = np.zeros(mask.shape, dtype=np.uint8)
    t[:, :-1] += mask[:, 1:] != mask[:, :-1]
    t[:-1, :] += mask[1:, :] != mask[:-1, :]
    # The stack's margin is void, so its outer border adds no transition of its own.
    return t


class _WindowSum:
    """Sum stack pixels along one axis over a window of any length centred on given points.

    A running sum read at the window's two ends, interpolated linearly inside a pixel, counts the
    pixels the window covers in part by the share it covers: exact for pixels of uniform value.
    Pixels outside the stack count as empty.
    """

    def __init__(self, centres_mm: np.ndarray, pixel_mm: float, points_mm: np.ndarray, window_mm: float) -> None:
        first_edge = centres_mm[0] - pixel_mm / 2
        n = len(centres_mm)
        self.lo = np.clip((points_mm - window_mm / 2 - first_edge) / pixel_mm, 0.0, n)
        self.hi = np.clip((points_mm + window_mm / 2 - first_edge) / pixel_mm, 0.0, n)

    def __call__(self, running: np.ndarray, axis: int) -> np.ndarray:
        """Return the window sums from ``running`` (``running_sum`` of the pixels along ``axis``)."""
        return self._at(running, self.hi, axis) - self._at(running, self.lo, axis)

    @staticmethod
    def _at(running: np.ndarray, where: np.ndarray, axis: int) -> np.ndarray:
        below = np.minimum(np.floor(where).astype(np.int64), running.shape[axis] - 2)
        share = (where - below).reshape([-1 if k == axis else 1 for k in range(running.ndim)])
        low, high = np.take(running, below, axis=axis), np.take(running, below + 1, axis=axis)
        return low + share * (high - low)


class _RowStrips:
    """Sum stack pixel rows over strips that tile y: one strip per lattice row, with fractional edge rows.

    A strip's sum is its whole rows (summed block by block along the contiguous axis: a cumulative sum
    down the rows of a full frame costs about 50 times more) plus the covered share of the pixel row
    cut by each of its edges. Pixels outside the stack count as empty.
    """

    def __init__(self, centres_mm: np.ndarray, pixel_mm: float, edges_mm: np.ndarray) -> None:
        n = len(centres_mm)
        edges = np.clip((edges_mm - (centres_mm[0] - pixel_mm / 2)) / pixel_mm, 0.0, n)
        self.whole = np.floor(edges).astype(np.int64)
        self.share = edges - self.whole        # 0 where an edge lies on a pixel boundary or at the frame's end
        self.rows = n

    def __call__(self, a: np.ndarray) -> np.ndarray:
        """Return the strips' sums of ``a`` (rows, w), (strips, w) float64."""
        dtype = np.uint16 if a.dtype.kind in "ub" and a.shape[0] < 2**15 else np.float64
        blocks = np.zeros((len(self.whole) - 1, a.shape[1]), dtype=dtype)
        for k, (lo, hi) in enumerate(zip(self.whole[:-1], self.whole[1:])):
            if hi > lo:
                np.sum(a[lo:hi], axis=0, dtype=dtype, out=blocks[k])
        out = blocks.astype(np.float64)
        cut = np.flatnonzero(self.share > 0)
        if len(cut):
            rows = a[np.minimum(self.whole[cut], self.rows - 1)].astype(np.float64) * self.share[cut][:, None]
            # The pixel row an edge cuts: its share above the edge's whole part belongs to the strip ending there,
            # and the block sums counted that share in the strip starting there.
            above, below = cut, cut - 1
            keep = above < len(out)
            out[above[keep]] -= rows[keep]
            keep = below >= 0
            out[below[keep]] += rows[keep]
        return out


def running_sum(a: np.ndarray, axis: int) -> np.ndarray:
    """Return the cumulative sum along ``axis`` with a leading zero (integer pixels stay integer)."""
    running = np.cumsum(a, axis=axis, dtype=np.int32 if a.dtype.kind in "ub" else np.float64)
    zero = np.zeros_like(np.take(running, [0], axis=axis))
    return np.concatenate([zero, running], axis=axis)


def unit_cell_mm(kind: str, period_mm: float) -> tuple[float, float]:
    """Return the (x, y) sides of the rectangle one lattice site owns: one period wide, one row high."""
    return float(period_mm), float(period_mm) * (np.sqrt(3.0) / 2.0 if kind == "hex" else 1.0)


@dataclass(frozen=True, slots=True, eq=False)
class SiteReads:
    """The four lattice sites a cell's window overlaps (relative to the axis) and its share of each.

    row_y : (2, ny) the rows below and above each cell row's centre; x : (2, 2, nx) by row parity
    (even, odd) and side (left, right); weight : (4, ny, nx) in the order (row, side), summing to 1.
    """

    row_y: np.ndarray
    x: np.ndarray
    weight: np.ndarray
    odd: np.ndarray         # (2, ny) bool, whether each of the two rows is an odd row


def site_reads(grid: CellGrid) -> SiteReads:
    """Return the sites each cell reads: a window of one unit cell centred on the cell overlaps four site
    rectangles, two rows by two sites, by bilinear shares (the rectangles tile the plane)."""
    kind, period = grid.lattice
    wx, wy = unit_cell_mm(kind, period)
    t = grid.y_mm / wy
    j0 = np.floor(t)
    rows = np.stack([j0, j0 + 1])                             # (2, ny)
    share_y = np.stack([1 - (t - j0), t - j0])               # (2, ny)
    odd = (rows.astype(np.int64) % 2 == 1) & (kind == "hex")
    xs, share_x = [], []
    for shift in (0.0, period / 2):
        u = (grid.x_mm - shift) / period
        i0 = np.floor(u)
        xs.append(np.stack([i0 * period + shift, (i0 + 1) * period + shift]))
        share_x.append(np.stack([1 - (u - i0), u - i0]))
    xs, share_x = np.stack(xs), np.stack(share_x)              # (parity, side, nx)
    weight = np.stack([share_y[r][:, None] * np.where(odd[r][:, None], share_x[1, side][None, :],
                                                       share_x[0, side][None, :])
                       for r in range(2) for side in range(2)])
    return SiteReads(rows * wy, xs, weight, odd)


def _site_runs(stack, grid: CellGrid, *, with_edges: bool) -> Iterator[CellRun]:
    """Yield each run of layers with every cell's four overlapped sites' fills, and the nearest one's as its own."""
    wx, wy = unit_cell_mm(*grid.lattice)
    reads = site_reads(grid)
    first = int(np.rint(reads.row_y.min() / wy))
    count = int(np.rint(reads.row_y.max() / wy)) - first + 1
    strips = _RowStrips(stack.y_centres_mm, stack.pixel_mm, grid.axis_mm[1] + (first - 0.5 + np.arange(count + 1)) * wy)
    strip_of = [np.rint(reads.row_y[r] / wy).astype(np.int64) - first for r in range(2)]
    cols = [[_WindowSum(stack.x_centres_mm, stack.pixel_mm, grid.axis_mm[0] + reads.x[parity, side], wx)
             for side in range(2)] for parity in range(2)]
    scale = stack.pixel_mm**2 / (wx * wy)
    nearest = np.argmax(reads.weight, axis=0)[None]

    def read(a: np.ndarray) -> np.ndarray:
        """Return the four sites' sums of ``a``, (4, ny, nx)."""
        running = running_sum(strips(a), 1)  # once over the strips: each cell row reads two of them
        out = []
        for r in range(2):
            across = running[strip_of[r]]
            odd = np.flatnonzero(reads.odd[r])
            for side in range(2):
                # Each cell row reads its own parity's sites: the odd rows (a hexagonal lattice's) apart.
                sums = cols[0][side](across, 1)
                if odd.size:
                    sums[odd] = cols[1][side](across[odd], 1)
                out.append(sums)
        return np.stack(out)

    for first, last, mask in stack.runs():
        sites = np.clip(read(mask.view(np.uint8)) * scale, 0.0, 1.0)
        # Each site's boundary length per area, over the cell's own area.
        edges = (read(_transitions(mask)) * stack.pixel_mm * _CROFTON * grid.cell_mm**2 / (wx * wy)
                 if with_edges else None)
        yield CellRun(first, last, (last - first + 1) * stack.layer_height_mm,
                      np.take_along_axis(sites, nearest, axis=0)[0],
                      np.take_along_axis(edges, nearest, axis=0)[0] if with_edges else np.zeros(0),
                      site_fill=sites, site_edge_mm=edges, site_weight=reads.weight)


def cell_coverage(mask: np.ndarray, stack, grid: CellGrid) -> np.ndarray:
    """Return the share of each cell covered by ``mask`` (a bool raster on the stack's pixels), (ny, nx) float.

    Fractional rim cells keep the aperture's area and the power it passes exact, where counting a
    half-covered cell as inside over-reads a square's area (its corners) and its spillover.
    """
    rows = _BlockSum(grid._bins(stack.y_centres_mm, grid.axis_mm[1], grid.shape[0]), grid.shape[0])
    cols = _BlockSum(grid._bins(stack.x_centres_mm, grid.axis_mm[0], grid.shape[1]), grid.shape[1])
    return np.minimum(cols(rows(mask.view(np.uint8), 0), 1) * (stack.pixel_mm / grid.cell_mm) ** 2, 1.0)
