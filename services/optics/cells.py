"""Analysis cells: the layer stack averaged over a coarse square grid centred on the optical axis.

Each cell holds, per run of identical layers, the fill fraction of material and the length of
material boundary inside it (for growing or shrinking the part by an XY tolerance).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

# Cauchy-Crofton: a 4-neighbour (Manhattan) boundary count over-reads a curve of random direction
# by 4/pi on average, so pi/4 turns transition counts into boundary length (computed, common practice).
_CROFTON = np.pi / 4


@dataclass(frozen=True, slots=True)
class CellGrid:
    """Square analysis cells of side ``cell_mm``; the optical axis is the centre of cell (ny//2, nx//2)."""

    cell_mm: float
    axis_mm: tuple[float, float]
    shape: tuple[int, int]

    @classmethod
    def around(cls, *, axis_mm: tuple[float, float], half_extent_mm: tuple[float, float], cell_mm: float) -> CellGrid:
        """Return an odd-sized grid centred on the axis that covers +-half extent in x and y."""
        nx = 2 * int(np.ceil(half_extent_mm[0] / cell_mm - 0.5)) + 1
        ny = 2 * int(np.ceil(half_extent_mm[1] / cell_mm - 0.5)) + 1
        return cls(float(cell_mm), (float(axis_mm[0]), float(axis_mm[1])), (ny, nx))

    def subdivided(self, sub: int) -> CellGrid:
        """Return the grid with every cell cut into sub x sub equal cells, over the same edges."""
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

        dtype = np.int64 if a.dtype.kind in "ub" else np.float64
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
    """
    fine = grid.subdivided(sub)
    rows = _BlockSum(fine._bins(stack.y_centres_mm, fine.axis_mm[1], fine.shape[0]), fine.shape[0])
    cols = _BlockSum(fine._bins(stack.x_centres_mm, fine.axis_mm[0], fine.shape[1]), fine.shape[1])
    scale, fine_scale = (stack.pixel_mm / grid.cell_mm) ** 2, (stack.pixel_mm / fine.cell_mm) ** 2

    def length(turns):
        return turns * stack.pixel_mm * _CROFTON if with_edges else np.zeros(0)

    for first, last, mask in stack.runs():
        count = cols(rows(mask.view(np.uint8), 0), 1)
        turns = _edges(mask, rows, cols) if with_edges else None
        thickness = (last - first + 1) * stack.layer_height_mm
        if sub == 1:
            yield CellRun(first, last, thickness, np.minimum(count * scale, 1.0), length(turns))
            continue
        yield CellRun(first, last, thickness, np.minimum(_coarsen(count, sub) * scale, 1.0),
                      length(_coarsen(turns, sub) if with_edges else None),
                      np.minimum(count * fine_scale, 1.0), length(turns))


def _coarsen(a: np.ndarray, sub: int) -> np.ndarray:
    """Return the sums over sub x sub blocks (integer counts, so the sums are exact)."""
    ny, nx = a.shape[0] // sub, a.shape[1] // sub
    return a.reshape(ny, sub, nx, sub).sum(axis=(1, 3))


def _edges(mask: np.ndarray, rows: _BlockSum, cols: _BlockSum) -> np.ndarray:
    """Return 4-neighbour material/air transitions per cell (each counted in the pixel before it)."""
    t = np.zeros(mask.shape, dtype=np.uint8)
    t[:, :-1] += mask[:, 1:] != mask[:, :-1]
    t[:-1, :] += mask[1:, :] != mask[:-1, :]
    # The stack's margin is void, so its outer border adds no transition of its own.
    return cols(rows(t, 0), 1)


def cell_footprint(stack, grid: CellGrid) -> np.ndarray:
    """Return the clear aperture: cells at least half covered by the part's footprint, holes filled.

    Half coverage keeps the aperture's area equal to the footprint's, so rim cells neither add nor
    lose illumination power on average.
    """
    from scipy.ndimage import binary_fill_holes

    rows = _BlockSum(grid._bins(stack.y_centres_mm, grid.axis_mm[1], grid.shape[0]), grid.shape[0])
    cols = _BlockSum(grid._bins(stack.x_centres_mm, grid.axis_mm[0], grid.shape[1]), grid.shape[1])
    share = cols(rows(stack.footprint.view(np.uint8), 0), 1) * (stack.pixel_mm / grid.cell_mm) ** 2
    return binary_fill_holes(share >= 0.5)
