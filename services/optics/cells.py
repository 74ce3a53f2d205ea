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

    @property
    def axis_index(self) -> tuple[int, int]:
        return self.shape[0] // 2, self.shape[1] // 2

    @property
    def x_mm(self) -> np.ndarray:
        """Return the cell centres' x, relative to the axis."""
        return (np.arange(self.shape[1]) - self.shape[1] // 2) * self.cell_mm

    @property
    def y_mm(self) -> np.ndarray:
        """Return the cell centres' y, relative to the axis."""
        return (np.arange(self.shape[0]) - self.shape[0] // 2) * self.cell_mm

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
    """One run of identical layers seen through the analysis cells."""

    first: int            # first and last (inclusive) layer of the run
    last: int
    thickness_mm: float
    fill: np.ndarray      # (ny, nx) float64 in [0, 1]
    edge_mm: np.ndarray   # (ny, nx) float64, material boundary length inside each cell


class _BlockSum:
    """Sum stack pixels into analysis cells along one axis with ``np.add.reduceat`` (bins are monotone)."""

    def __init__(self, bins: np.ndarray, n: int) -> None:
        inside = (bins >= 0) & (bins < n)
        self.take = np.flatnonzero(inside)
        b = bins[self.take]
        self.starts = np.flatnonzero(np.diff(b, prepend=-1)) if len(b) else np.zeros(0, dtype=np.int64)
        self.targets = b[self.starts] if len(b) else np.zeros(0, dtype=np.int64)
        self.n = n

    def __call__(self, a: np.ndarray, axis: int) -> np.ndarray:
        shape = list(a.shape)
        shape[axis] = self.n
        out = np.zeros(shape, dtype=np.float64)
        if len(self.take) == 0:
            return out
        part = np.add.reduceat(np.take(a, self.take, axis=axis), self.starts, axis=axis, dtype=np.float64)
        index = [slice(None)] * a.ndim
        index[axis] = self.targets
        out[tuple(index)] = part
        return out


def cell_runs(stack, grid: CellGrid, *, with_edges: bool = False) -> Iterator[CellRun]:
    """Yield each run of the stack's layers averaged over the analysis cells, bottom first.

    fill = solid pixel centres in the cell x pixel area / cell area; exact where the cell side is a
    whole number of pixels (any grid offset), and pixels outside the stack count as air.
    """
    rows = _BlockSum(grid._bins(stack.y_centres_mm, grid.axis_mm[1], grid.shape[0]), grid.shape[0])
    cols = _BlockSum(grid._bins(stack.x_centres_mm, grid.axis_mm[0], grid.shape[1]), grid.shape[1])
    scale = (stack.pixel_mm / grid.cell_mm) ** 2
    for first, last, mask in stack.runs():
        fill = np.minimum(cols(rows(mask.view(np.uint8), 0), 1) * scale, 1.0)
        edge = _edges(mask, rows, cols) * stack.pixel_mm * _CROFTON if with_edges else np.zeros(0)
        yield CellRun(first, last, (last - first + 1) * stack.layer_height_mm, fill, edge)


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
