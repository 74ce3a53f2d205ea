"""The layer stack: the part as printed, sliced at the layer height and rasterised at the XY pixel.

Pipeline (measured in shared/references/geometry-bench.md, sections 2, 3 and 7): a vectorised numpy
triangle/plane slicer, a non-zero-winding scanline that turns the segments straight into pixels (no
polygon assembly, so holes and overlapping shells come out right), and a geometric test that skips
layers which provably equal the one below. Consecutive identical layers share one stored raster;
each distinct raster is bit-packed (np.packbits), cropped to its solid box and deflated (zlib level 1),
so even a 60 mm ball at 25 um (2,400 distinct layers) is held in tens of megabytes.
"""

from __future__ import annotations

import math
import numbers
import os
import threading
import zlib
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field, replace

import numpy as np

from services.errors import UnusableInput
from services.part import Part
from services.settings import ORIENTATIONS

# Proper rotations (det +1) taking the chosen build axis to +z; a mirror would turn the solid inside out.
_ROTATIONS = {
    "+z": ((1, 0, 0), (0, 1, 0), (0, 0, 1)),
    "-z": ((1, 0, 0), (0, -1, 0), (0, 0, -1)),
    "+x": ((0, 0, -1), (0, 1, 0), (1, 0, 0)),
    "-x": ((0, 0, 1), (0, 1, 0), (-1, 0, 0)),
    "+y": ((1, 0, 0), (0, 0, -1), (0, 1, 0)),
    "-y": ((1, 0, 0), (0, 0, 1), (0, -1, 0)),
}
assert set(_ROTATIONS) == set(ORIENTATIONS)

MARGIN_PX = 2                   # void pixels around the part's xy bounds
MAX_PIXELS_PER_LAYER = 1 << 26  # 8192^2: 200 mm at 25 um; keeps the int32 count map under 300 MB
MAX_LAYERS = 100_000
_MAX_PAIRS = 1_000_000          # (triangle, layer) pairs per slicing call: bounds peak memory (bench section 7)
_MAX_ACC_BYTES = 64 << 20       # int8 winding accumulator per chunk of layers
_CUT_ROUNDING_MM = 1e-9        # a cut's ends lie within a triangle's bounds to far better than this
_SPLIT_TRIANGLES = 50_000       # a soup with twice as many is prepared for slicing in two halves at once
_KEPT_WAITING = 8               # packed boxes waiting at most for the keeper's thread to deflate them
_VERTICAL_TOL_PX = 1e-3         # a face drifting less than this over its height counts as vertical
_PROGRESS_STEPS = 32
_ORIENTED_TOL_MM = 1e-6


def orient_part(part: Part, orientation: str) -> Part:
    """Return the part rotated so the chosen build axis points along +z, resting on z = 0."""
    if orientation not in _ROTATIONS:
        raise UnusableInput(
            "bad_orientation",
            f"Build orientation {orientation!r} is not one of {', '.join(ORIENTATIONS)}.",
        )
    if len(part.faces) == 0:
        raise UnusableInput("empty_part", f"{part.name} has no triangles to orient.")
    rotation = np.array(_ROTATIONS[orientation])
    axes = np.abs(rotation).argmax(axis=1)  # a signed permutation: gather and negate, no matmul needed
    vertices = np.ascontiguousarray(np.asarray(part.vertices_mm, dtype=np.float64)[:, axes])  # rows, as given
    vertices[:, rotation[np.arange(3), axes] < 0] *= -1.0
    used = np.zeros(len(vertices), dtype=bool)
    used[np.asarray(part.faces).ravel()] = True  # an unreferenced vertex must not lift the part off the plate
    vertices[:, 2] -= vertices[used, 2].min()
    return replace(part, vertices_mm=vertices)


def oriented_extent_mm(part: Part, orientation: str) -> tuple[float, float, float]:
    """Return the part's extent along x, y, z once turned to ``orientation`` (its own extents, permuted), without
    turning it: two turns whose layers can be the same, turned in the plane, have the same height and the
    same two widths."""
    axes = np.abs(np.array(_ROTATIONS[orientation])).argmax(axis=1)
    extent = part.bbox_mm
    return tuple(float(extent[a]) for a in axes)


def build_layer_stack(
    part: Part,
    *,
    pixel_mm: float,
    layer_height_mm: float,
    progress: Callable[[float], None] | None = None,
) -> LayerStack:
    """Slice an oriented part at each layer's mid-plane and rasterise every layer at pixel centres."""
    tris = _checked_triangles(part, pixel_mm, layer_height_mm)
    grid = _Grid.around(tris, pixel_mm, part.name)
    count = _layer_count(float(tris[:, :, 2].max()), layer_height_mm, part.name)
    heights = (np.arange(count) + 0.5) * layer_height_mm
    report = _Throttle(progress)
    pool = _Helpers()
    try:
        slicer = _Slicer(tris, heights, pool, grid)
        del tris  # the slicer keeps what it needs of the triangles that cross a plane
        # Any vertex of the part may start a new layer: the part's own (merged) vertices are fewer than the
        # soup's corners, and one it does not use only marks a layer for slicing that then equals the one below.
        todo = np.flatnonzero(slicer.changed_layers(part.vertices_mm[:, 2], _VERTICAL_TOL_PX * pixel_mm))
        builder = _StackBuilder((grid.ny, grid.nx), pool)
        canvas = _Canvas(grid)
        for ks in _chunks(todo, slicer.pairs_per_layer(count), grid.layers_per_chunk()):
            rasters, (r0, c0) = _winding_numbers(*slicer.cut(ks), len(ks), grid, canvas)
            for k, raster in zip(ks.tolist(), rasters):
                builder.repeat(k - builder.count)
                builder.add(raster, at=(r0, c0 // 8))
            del rasters
            report(builder.count / count)
        builder.repeat(count - builder.count)
        stack = builder.finish(pixel_mm, layer_height_mm, (grid.x0, grid.y0, 0.0))
    finally:
        pool.wait()  # on an error too: no helper outlives the call with work of it
    report(1.0)
    return stack


@dataclass(frozen=True, slots=True, eq=False)
class LayerStack:
    """The as-printed model: one bool raster per layer, stored compactly, with derived measures.

    area_mm2 : (count,) float64, solid area of each layer
    perimeter_mm : (count,) float64, 4-neighbour boundary transitions x pixel
    thickness_mm : (ny, nx) float32, solid layers in each column x layer height
    Arrays are indexed [row = y, col = x]; pixel (r, c) has its centre at
    origin + ((c + 0.5) px, (r + 0.5) px); layer k spans [k dz, (k + 1) dz].
    """

    pixel_mm: float
    layer_height_mm: float
    origin_mm: tuple[float, float, float]
    shape: tuple[int, int]
    count: int
    area_mm2: np.ndarray
    perimeter_mm: np.ndarray
    thickness_mm: np.ndarray
    _packed: tuple[bytes, ...] = field(repr=False)  # distinct rasters: packbits of their solid box, deflated
    _boxes: np.ndarray = field(repr=False)          # (distinct, 4) first row, first byte, rows, bytes per row
    _index: np.ndarray = field(repr=False)          # (count,) layer -> distinct raster

    def layer(self, k: int) -> np.ndarray:
        """Return layer k as a fresh bool (ny, nx) raster."""
        if not -self.count <= k < self.count:
            raise IndexError(f"layer {k} outside 0..{self.count - 1}")
        return self._unpack(int(self._index[k]))

    def runs(self) -> Iterator[tuple[int, int, np.ndarray]]:
        """Yield (first, last inclusive, mask) for each run of identical consecutive layers, in order."""
        for first, last, d in self._spans():
            yield first, last, self._unpack(d)

    def run_boxes(self, which: Sequence[int] | None = None) -> Iterator[tuple[int, int, tuple[int, int], np.ndarray]]:
        """Yield (first, last inclusive, (row0, col0), mask) for each run, the mask cut to the run's solid box (outside
        it the layer is empty): for work that need not touch the whole frame. ``which``: only those runs (numbered
        from 0 in build order), in the order given."""
        if which is None:
            spans = self._spans()
        else:
            every = list(self._spans())
            spans = (every[i] for i in which)
        for first, last, d in spans:
            (r0, c0), box = self._unpack_box(d)
            yield first, last, (r0, c0), box

    @property
    def run_count(self) -> int:
        """Return the number of runs of identical consecutive layers."""
        return int(np.count_nonzero(np.diff(self._index, prepend=-1)))

    def packed_run_boxes(self) -> Iterator[tuple[int, int, tuple[int, int], np.ndarray]]:
        """Yield (first, last inclusive, (row0, byte0), packed box) for each run: the run's solid box as stored,
        np.packbits along x, (rows, bytes) uint8, at that row and byte of the frame (outside it the layer is
        empty; bits past nx are 0). Nothing is unpacked: for work that reads what changed from one run to the next."""
        for first, last, d in self._spans():
            at, box = self._packed_box(d)
            yield first, last, at, box

    def run_box_px(self) -> np.ndarray:
        """Return the pixel area of each run's solid box, in run order (read from the stored boxes: nothing is
        unpacked). An empty layer's box is empty."""
        starts = np.flatnonzero(np.diff(self._index, prepend=-1))
        boxes = self._boxes[self._index[starts]].astype(np.int64)
        return boxes[:, 2] * np.minimum(8 * boxes[:, 3], self.shape[1] - 8 * boxes[:, 1])  # as _unpack_box cuts it

    def _spans(self) -> Iterator[tuple[int, int, int]]:
        """Yield (first, last inclusive, distinct raster) for each run of identical consecutive layers."""
        starts = np.flatnonzero(np.diff(self._index, prepend=-1))
        lasts = np.append(starts[1:], self.count) - 1
        for first, last in zip(starts.tolist(), lasts.tolist()):
            yield first, last, int(self._index[first])

    @property
    def distinct_count(self) -> int:
        return len(self._packed)

    @property
    def volume_mm3(self) -> float:
        return float(self.area_mm2.sum() * self.layer_height_mm)

    @property
    def x_centres_mm(self) -> np.ndarray:
        return self.origin_mm[0] + (np.arange(self.shape[1]) + 0.5) * self.pixel_mm

    @property
    def y_centres_mm(self) -> np.ndarray:
        return self.origin_mm[1] + (np.arange(self.shape[0]) + 0.5) * self.pixel_mm

    @property
    def z_centres_mm(self) -> np.ndarray:
        return self.origin_mm[2] + (np.arange(self.count) + 0.5) * self.layer_height_mm

    @property
    def footprint(self) -> np.ndarray:
        """Return the union of all layers: the columns that hold any solid."""
        return self.thickness_mm > 0

    @property
    def nbytes(self) -> int:
        """Return the bytes held by the compact raster storage."""
        return sum(len(p) for p in self._packed) + self._boxes.nbytes + self._index.nbytes

    def summary(self) -> dict:
        """Return the report's ``layers`` section."""
        return {
            "count": int(self.count),
            "layer_height_mm": float(self.layer_height_mm),
            "pixel_mm": float(self.pixel_mm),
            "shape": [int(n) for n in self.shape],
            "distinct": int(self.distinct_count),
            "volume_mm3": round(self.volume_mm3, 4),
        }

    @classmethod
    def from_masks(
        cls,
        masks: Sequence[np.ndarray],
        *,
        pixel_mm: float,
        layer_height_mm: float,
        origin_mm: tuple[float, float, float] = (0.0, 0.0, 0.0),
    ) -> LayerStack:
        """Build a stack directly from bool rasters, bottom layer first."""
        _check_grid_sizes(pixel_mm, layer_height_mm)
        arrays = [np.asarray(m) for m in masks]
        if not arrays or arrays[0].ndim != 2 or any(a.shape != arrays[0].shape for a in arrays):
            raise ValueError("masks must be a non-empty sequence of 2-D arrays of one shape")
        builder = _StackBuilder(arrays[0].shape)
        for a in arrays:
            builder.add(a if a.dtype == bool else a != 0)
        return builder.finish(pixel_mm, layer_height_mm, tuple(float(v) for v in origin_mm))

    def _unpack(self, d: int) -> np.ndarray:
        out = np.zeros(self.shape, dtype=bool)
        (r0, c0), box = self._unpack_box(d)
        out[r0:r0 + box.shape[0], c0:c0 + box.shape[1]] = box
        return out

    def _unpack_box(self, d: int) -> tuple[tuple[int, int], np.ndarray]:
        """Return ((row0, col0), bool mask) of distinct layer d's solid box."""
        (r0, b0), box = self._packed_box(d)
        c0 = 8 * b0
        width = min(8 * box.shape[1], self.shape[1] - c0)
        return (r0, c0), np.unpackbits(box, axis=1, count=width).view(bool)

    def _packed_box(self, d: int) -> tuple[tuple[int, int], np.ndarray]:
        """Return ((row0, byte0), packed bytes) of distinct layer d's solid box, as stored."""
        r0, b0, rows, row_bytes = (int(v) for v in self._boxes[d])
        return (r0, b0), np.frombuffer(zlib.decompress(self._packed[d]), dtype=np.uint8).reshape(rows, row_bytes)


# The eight ways a layer can lie on itself in the build plane (rows are y, columns x): turned by quarters, or
# mirrored. A part symmetric about its axis gives the same layers on either side (a lens or a plate on +x and +y).
_PLANE_TURNS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "as they are": lambda a: a,
    "mirrored across x": lambda a: a[::-1],
    "mirrored across y": lambda a: a[:, ::-1],
    "turned half a turn": lambda a: a[::-1, ::-1],
    "mirrored across the diagonal": lambda a: a.T,
    "mirrored across the other diagonal": lambda a: a[::-1, ::-1].T,
    "turned a quarter": lambda a: a.T[::-1],
    "turned three quarters": lambda a: a.T[:, ::-1],
}


def same_layers_turned(a: LayerStack, b: LayerStack) -> str | None:
    """Return how ``b``'s layers are ``a``'s turned or mirrored in the build plane ("turned a quarter", ...), one
    turn for every layer, or None when they are not (another grid, another layer count, other layers).

    What the printer builds from ``b`` is then what it builds from ``a`` seen from another side: the same
    sections, in the same order, each the same up to that turn. Compared pixel by pixel on the stored rasters
    (cheap checks first: grid, count, runs of identical layers, each layer's area), every run at most once per
    turn still standing, so a stack that differs is given up at its first differing run.
    """
    if (a.pixel_mm, a.layer_height_mm, a.count) != (b.pixel_mm, b.layer_height_mm, b.count):
        return None
    if sorted(a.shape) != sorted(b.shape) or not np.array_equal(a.area_mm2, b.area_mm2):
        return None
    a_runs, b_runs = list(a._spans()), list(b._spans())
    if [s[:2] for s in a_runs] != [s[:2] for s in b_runs]:
        return None
    standing = [name for name, turn in _PLANE_TURNS.items() if turn(np.empty(a.shape, dtype=bool)).shape == b.shape]
    for (_, _, da), (_, _, db) in zip(a_runs, b_runs):
        layer_a, layer_b = a._unpack(da), b._unpack(db)
        standing = [name for name in standing if np.array_equal(_PLANE_TURNS[name](layer_a), layer_b)]
        if not standing:
            return None
    return standing[0]


def turned_over(stack: LayerStack, part: Part) -> LayerStack | None:
    """Return the stack of ``part`` turned over (about x: "+z" to "-z" or back), read from its own ``stack``, or
    None where that is not exact.

    Turned over, y becomes -y and z becomes the height less z. Where the height is a whole number of layers,
    the turned part's layer mid-planes are the part's own, in reverse order, and the pixel grid, anchored at
    multiples of the pixel, is its own mirrored across x: each layer is a stored raster with its rows reversed
    (no slicing; bit for bit what slicing the turned part gives, tests/services/test_layers.py). Elsewhere the
    mid-planes fall between the part's own and the part must be sliced again.
    """
    dz = stack.layer_height_mm
    z = np.asarray(part.vertices_mm)[np.asarray(part.faces).reshape(-1), 2]  # the triangles' own corners only
    whole = float(z.max() - z.min()) / dz
    if abs(whole - round(whole)) > 1e-9 * max(1.0, whole) or round(whole) != stack.count:
        return None
    ny = stack.shape[0]
    index = stack._index[::-1]
    distinct, first_seen = np.unique(index, return_index=True)
    renumbered = np.empty(len(stack._packed), dtype=np.int64)
    renumbered[distinct] = np.argsort(np.argsort(first_seen))  # in order of first appearance, as a builder numbers
    packed: list[bytes] = [b""] * len(stack._packed)
    boxes = np.zeros_like(stack._boxes)
    for d, (r0, b0, rows, row_bytes) in enumerate(stack._boxes.tolist()):
        box = np.frombuffer(zlib.decompress(stack._packed[d]), dtype=np.uint8).reshape(rows, row_bytes)
        packed[renumbered[d]] = zlib.compress(np.ascontiguousarray(box[::-1]).tobytes(), 1)
        boxes[renumbered[d]] = (ny - r0 - rows if rows else 0, b0, rows, row_bytes)
    ox, oy, oz = stack.origin_mm
    flipped = [a[::-1].copy() for a in (stack.area_mm2, stack.perimeter_mm, stack.thickness_mm)]
    new_index = renumbered[index].astype(stack._index.dtype)
    for a in (*flipped, new_index):
        a.setflags(write=False)
    first_row = -(round(oy / stack.pixel_mm) + ny)  # the grid's corner in whole pixels, as _Grid places it
    return replace(stack, origin_mm=(ox, float(np.float64(first_row) * stack.pixel_mm), oz), area_mm2=flipped[0],
                   perimeter_mm=flipped[1], thickness_mm=flipped[2], _packed=tuple(packed), _boxes=boxes,
                   _index=new_index)


def _check_grid_sizes(pixel_mm: float, layer_height_mm: float) -> None:
    for value in (pixel_mm, layer_height_mm):
        if isinstance(value, bool) or not (isinstance(value, numbers.Real) and math.isfinite(value) and value > 0):
            raise UnusableInput("bad_grid", "Pixel size and layer height must be positive millimetre values.")


def _checked_triangles(part: Part, pixel_mm: float, layer_height_mm: float) -> np.ndarray:
    """Return the part's (m, 3, 3) float64 triangles after refusing what cannot be sliced."""
    _check_grid_sizes(pixel_mm, layer_height_mm)
    if len(part.faces) == 0:
        raise UnusableInput("empty_part", f"{part.name} has no triangles to slice.")
    tris = np.asarray(part.triangles_mm, dtype=np.float64)
    if not np.isfinite(tris).all():
        raise UnusableInput("bad_coordinates", f"{part.name} has vertices that are not finite numbers.")
    z_min = float(tris[:, :, 2].min())
    if abs(z_min) > _ORIENTED_TOL_MM:
        raise UnusableInput(
            "not_oriented",
            f"{part.name} does not rest on the build plate (lowest point at z = {z_min:.6g} mm); orient it first.",
        )
    return tris


def _layer_count(z_max_mm: float, layer_height_mm: float, name: str) -> int:
    """Return the number of layers whose mid-plane lies below the part's top (at least one)."""
    count = max(1, math.ceil(z_max_mm / layer_height_mm - 0.5))
    if count > MAX_LAYERS:
        raise UnusableInput(
            "too_many_layers",
            f"{name} needs {count:,} layers at {layer_height_mm} mm, more than {MAX_LAYERS:,}; use thicker layers.",
        )
    return count


@dataclass(frozen=True, slots=True)
class _Grid:
    """The pixel grid: lower-left corner, pixel size, and size; corners sit on multiples of the pixel."""

    x0: float
    y0: float
    px: float
    nx: int
    ny: int

    @classmethod
    def around(cls, tris: np.ndarray, px: float, name: str) -> _Grid:
        """Return the grid covering the triangles' xy bounds plus a void margin."""
        lo = np.array([tris[:, :, 0].min(), tris[:, :, 1].min()])  # per coordinate: 30x faster than axis=0
        hi = np.array([tris[:, :, 0].max(), tris[:, :, 1].max()])
        i0 = np.floor(lo / px) - MARGIN_PX
        size = np.ceil(hi / px) + MARGIN_PX - i0
        if size[0] * size[1] > MAX_PIXELS_PER_LAYER:  # checked in floats: no integer overflow on absurd sizes
            raise UnusableInput(
                "grid_too_large",
                f"{name} needs {size[0]:,.0f} x {size[1]:,.0f} pixels per layer at {px} mm, more than we can "
                "hold; use a coarser pixel or a smaller part.",
            )
        return cls(float(i0[0] * px), float(i0[1] * px), float(px), int(size[0]), int(size[1]))

    @property
    def x_centres(self) -> np.ndarray:
        return self.x0 + (np.arange(self.nx) + 0.5) * self.px

    def layers_per_chunk(self) -> int:
        return max(1, _MAX_ACC_BYTES // ((self.ny + 1) * self.nx))


def _normals(tris: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return the x, y, z components of (B - A) x (C - A), the outward normals of the file's winding."""
    e1, e2 = tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0]
    return (
        e1[:, 1] * e2[:, 2] - e1[:, 2] * e2[:, 1],
        e1[:, 2] * e2[:, 0] - e1[:, 0] * e2[:, 2],
        e1[:, 0] * e2[:, 1] - e1[:, 1] * e2[:, 0],
    )


def _chunks(todo: np.ndarray, pairs: np.ndarray, max_layers: int) -> Iterator[np.ndarray]:
    """Yield groups of layer ids, in order, whose (triangle, layer) pairs stay under _MAX_PAIRS."""
    start, total = 0, 0
    for n, k in enumerate(todo.tolist()):
        if n > start and (total + pairs[k] > _MAX_PAIRS or n - start >= max_layers):
            yield todo[start:n]
            start, total = n, 0
        total += int(pairs[k])
    if len(todo) > start:
        yield todo[start:]


class _Slicer:
    """Cut a triangle soup by horizontal planes into winding-signed segments, chunk by chunk upwards.

    Vertices are sorted by z inside each triangle (A <= B <= C): the long edge A-C crosses every plane
    the triangle spans, the short one is A-B up to B and B-C above. Each edge is interpolated from its
    lower end, so an edge shared by two triangles gives bit-identical points and the raster has no
    cracks (bench section 2, MeshSlicer2).
    """

    def __init__(self, tris: np.ndarray, heights: np.ndarray, pool: _Helpers | None = None,
                 grid: _Grid | None = None) -> None:
        # Two halves of the soup prepared side by side where there are many triangles (the steps are whole-array
        # numpy work that releases the GIL: sorts, gathers, arithmetic), each into its share of the tables.
        half = len(tris) // 2
        spans = [(0, half), (half, len(tris))] if pool is not None and half >= _SPLIT_TRIANGLES else [(0, len(tris))]
        each = pool.beside if len(spans) > 1 else (lambda fn, items: [fn(item) for item in items])
        crossing = each(lambda span: _crossing(tris, heights, *span, grid), spans)
        offsets = np.cumsum([0] + [len(keep) for keep, _, _ in crossing]).tolist()
        n = offsets[-1]
        self.first, self.stop = np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64)
        self.sign = np.empty(n, dtype=np.int8)
        self.long = np.empty((n, 5))
        self.short = np.empty((2 * n, 5))  # row 2t: A-B of triangle t, row 2t + 1: B-C
        self.b_z = np.empty(n)
        self.rise, self.run = np.empty(n), np.empty(n)  # z span x |n_z| and |n_xy|: how far a cut drifts per height
        each(lambda i: self._fill(tris, *crossing[i], offsets[i]), range(len(spans)))
        self.heights = heights
        self._order = np.argsort(self.first, kind="stable")
        self._first_sorted = self.first[self._order]
        self._next = 0
        self._active = np.zeros(0, dtype=np.int64)

    def changed_layers(self, vertex_z_mm: np.ndarray, tol_mm: float) -> np.ndarray:
        """Return a bool per layer: False where the slice provably equals the one below.

        Layer k can differ from k-1 only if a vertex lies in (z_{k-1}, z_k] or a sloped face spans both
        planes (bench section 4, dedupe); only a face that crosses a plane can span two. A face whose
        cross-section drifts less than tol_mm over its whole height counts as vertical: float32 files tilt
        vertical walls by ~1e-7, which would otherwise mark every layer as changed.
        """
        count = len(self.heights)
        changed = np.zeros(count + 1, dtype=bool)
        changed[np.searchsorted(self.heights, vertex_z_mm, "right")] = True  # a cut takes z_lo < h <= z_hi
        sloped = self.rise > tol_mm * self.run
        first, stop = self.first[sloped] + 1, self.stop[sloped]
        spans = stop > first
        edges = np.bincount(first[spans], minlength=count + 1) - np.bincount(stop[spans], minlength=count + 1)
        out = changed[:count] | (np.cumsum(edges)[:count] > 0)
        out[0] = True
        return out

    def _fill(self, tris: np.ndarray, keep: np.ndarray, first: np.ndarray, stop: np.ndarray, at: int) -> None:
        """Fill the tables' rows at..at + len(keep) - 1 from the triangles ``keep`` (ascending), which cross the
        planes first..stop - 1."""
        rows = slice(at, at + len(keep))
        self.first[rows], self.stop[rows] = first, stop
        z = tris[keep, :, 2]
        order = np.argsort(z, axis=1, kind="stable")
        # The sort's parity turns the sorted corners' normal back into the file's winding.
        parity = np.sign((order[:, 1] - order[:, 0]) * (order[:, 2] - order[:, 0]) * (order[:, 2] - order[:, 1]))
        # Each kept triangle's vertices in z order, gathered as whole rows of the flat soup: 2.4x faster than
        # np.take_along_axis on 2M triangles (0.07 against 0.17 s, measured here), the same array.
        order += 3 * keep[:, None]
        st = np.take(tris.reshape(-1, 3), order.reshape(-1), axis=0).reshape(-1, 3, 3)
        del order, z
        n_x, n_y, n_z = (n * parity for n in _normals(st))
        self.rise[rows] = (st[:, 2, 2] - st[:, 0, 2]) * np.abs(n_z)
        self.run[rows] = np.hypot(n_x, n_y)
        self.sign[rows] = _winding_sign(n_x, n_y, st)
        self.long[rows] = _edge_table(st[:, 0], st[:, 2])
        short = self.short[2 * at:2 * (at + len(keep))].reshape(-1, 2, 5)
        short[:, 0], short[:, 1] = _edge_table(st[:, 0], st[:, 1]), _edge_table(st[:, 1], st[:, 2])
        self.b_z[rows] = st[:, 1, 2]

    def pairs_per_layer(self, count: int) -> np.ndarray:
        """Return how many triangles cross each layer's plane."""
        edges = np.bincount(self.first, minlength=count + 1) - np.bincount(self.stop, minlength=count + 1)
        return np.cumsum(edges)[:count]

    def cut(self, ks: np.ndarray) -> tuple[np.ndarray, ...]:
        """Return (chunk-local layer, px, py, qx, qy, winding) of every segment on planes ks (ascending)."""
        t, j = self._pairs(ks)
        h = self.heights[ks][j]
        long = self.long[t]
        s = h - long[:, 0]
        px, py = long[:, 1] + s * long[:, 3], long[:, 2] + s * long[:, 4]
        short = self.short[2 * t + (h > self.b_z[t])]
        s = h - short[:, 0]
        qx, qy = short[:, 1] + s * short[:, 3], short[:, 2] + s * short[:, 4]
        winding = np.where(qx > px, self.sign[t], -self.sign[t])
        return j, px, py, qx, qy, winding

    def _pairs(self, ks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (triangle, chunk-local layer) for every crossing, keeping a set of live triangles."""
        end = np.searchsorted(self._first_sorted, ks[-1], "right")
        live = np.concatenate([self._active, self._order[self._next:end]])
        self._next = end
        self._active = live = live[self.stop[live] > ks[0]]
        a = np.searchsorted(ks, self.first[live], "left")
        cnt = np.searchsorted(ks, self.stop[live], "left") - a
        sel = np.flatnonzero(cnt > 0)
        cnt = cnt[sel]
        t = np.repeat(live[sel], cnt)
        j = np.repeat(a[sel] - np.cumsum(cnt) + cnt, cnt) + np.arange(t.size)
        return t, j


class _Helpers:
    """This call's share of the process's two slicing helper threads: submit work, wait for all of it.

    The threads are kept for the process's life (like the stage threads, their stacks and malloc arenas are mapped
    once: ``prepare_helpers`` before a memory bound is set) and shared by slicings running at once. A thread that
    cannot start, its stack past the memory bound, is a MemoryError like any other allocation."""

    def __init__(self) -> None:
        self.futures: list[Future] = []

    def submit(self, fn: Callable, *args) -> Future:
        try:
            future = _helper_threads().submit(fn, *args)
        except RuntimeError as exc:
            if "start new thread" not in str(exc):
                raise
            raise MemoryError("no address space left to start a slicing thread") from exc
        self.futures.append(future)
        return future

    def beside(self, fn: Callable, items) -> list:
        """Return [fn(item) for item in items]: the first in this thread, the others in helpers at the same time.

        Work done in a helper allocates from that thread's malloc arena, which keeps more of what it held once the
        work is freed: with the first share made here the helpers' arenas stay smaller (the 100 mm lens's rules, run
        after its slicing, peaked at 1,078-1,096 MB with both halves of the slicer's tables made in helpers,
        1,043-1,075 MB with one made here, 954-1,008 MB with no helper at all; two runs each, measured here)."""
        items = list(items)
        rest = [self.submit(fn, item) for item in items[1:]]
        return [fn(items[0]), *(f.result() for f in rest)] if items else []

    def wait(self) -> None:
        for future in self.futures:
            future.exception()  # waits; an error is raised where its result is read


_HELPERS: ThreadPoolExecutor | None = None
_HELPERS_LOCK = threading.Lock()


def _helper_threads() -> ThreadPoolExecutor:
    global _HELPERS
    with _HELPERS_LOCK:
        if _HELPERS is None:
            _HELPERS = ThreadPoolExecutor(max_workers=2, thread_name_prefix="phasewright-layers")
        return _HELPERS


def _forget_helper_threads() -> None:
    """In a forked child the parent's threads do not exist: start its own when it first slices."""
    global _HELPERS, _HELPERS_LOCK
    _HELPERS, _HELPERS_LOCK = None, threading.Lock()


os.register_at_fork(after_in_child=_forget_helper_threads)


def prepare_helpers() -> None:
    """Start both slicing helper threads now, so their stacks and arenas are mapped before a memory bound is set."""
    both = threading.Barrier(2)
    futures = [_helper_threads().submit(both.wait, 10) for _ in range(2)]
    for future in futures:
        future.result()


def _crossing(tris: np.ndarray, heights: np.ndarray, lo: int, hi: int,
              grid: _Grid | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (triangles, first plane, stop plane) of the triangles of lo..hi-1 that cross a layer's plane, each
    from its first plane crossed to before its stop one (a third of the 2M lens's triangles cross one) and, given
    the grid, reach across a pixel-centre column: a cut adds a winding only where it crosses one, and every cut
    of a triangle lies within its x bounds, so one lying between two columns never adds any (most of a dense
    plate's pillar facets, 20-40 um wide against a 50 um pixel)."""
    z = tris[lo:hi, :, 2]
    first = np.searchsorted(heights, np.minimum(np.minimum(z[:, 0], z[:, 1]), z[:, 2]), "right")
    stop = np.searchsorted(heights, np.maximum(np.maximum(z[:, 0], z[:, 1]), z[:, 2]), "right")
    keep = stop > first
    if grid is not None:
        x = tris[lo:hi, :, 0]
        # The rasteriser's own column test (_winding_numbers), monotone in x, at the bounds widened far past the
        # rounding of a cut's interpolated ends (1e-9 mm against ~1e-14 at 100 mm): equal means no column between.
        column = lambda v: np.ceil((v - grid.x0) / grid.px - 0.5)  # noqa: E731
        keep &= (column(np.minimum(np.minimum(x[:, 0], x[:, 1]), x[:, 2]) - _CUT_ROUNDING_MM)
                 != column(np.maximum(np.maximum(x[:, 0], x[:, 1]), x[:, 2]) + _CUT_ROUNDING_MM))
    keep = np.flatnonzero(keep)
    return keep + lo, first[keep], stop[keep]


def _edge_table(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Return (n, 5) rows z0, x0, y0, dx/dz, dy/dz for edges from their lower to their upper end."""
    dz = hi[:, 2] - lo[:, 2]
    flat = dz <= 0  # never cut: a plane strictly above the lower end never uses a flat edge
    inv = 1.0 / np.where(flat, 1.0, dz)
    slope = (hi[:, :2] - lo[:, :2]) * np.where(flat, 0.0, inv)[:, None]
    return np.column_stack([lo[:, 2], lo[:, 0], lo[:, 1], slope])


def _winding_sign(n_x: np.ndarray, n_y: np.ndarray, st: np.ndarray) -> np.ndarray:
    """Return +1 where a cut runs from the long edge towards B with the solid on its left, else -1.

    The solid lies to the left of d = z x n (n the outward normal of the file's winding). Every cut
    of one triangle is parallel to B - M, M the point of A-C at B's height, so one sign serves all.
    """
    a, b, c = st[:, 0], st[:, 1], st[:, 2]
    frac = (b[:, 2] - a[:, 2]) / (c[:, 2] - a[:, 2])
    v = b[:, :2] - (a[:, :2] + frac[:, None] * (c[:, :2] - a[:, :2]))
    along = v[:, 0] * -n_y + v[:, 1] * n_x
    return np.sign(along).astype(np.int8)


class _Canvas:
    """One int8 winding accumulator for every chunk of a slicing, zeroed where the last chunk wrote.

    A fresh 64 MB array per chunk is mapped anew and pays a page fault for every 4 kB it touches."""

    def __init__(self, grid: _Grid) -> None:
        self.plane = (grid.ny + 1) * grid.nx
        self.grid = grid
        self.flat = np.zeros(grid.layers_per_chunk() * self.plane, dtype=np.int8)
        self.dirty: tuple[int, int, int, int] | None = None  # layers, first row, first and end column

    def take(self, layers: int) -> np.ndarray:
        """Return a zeroed (layers, ny + 1, nx) view; the previous one is overwritten."""
        if self.dirty is not None:
            n, r0, c0, c1 = self.dirty
            self._view(n)[:, r0:, c0:c1] = 0
            self.dirty = None
        return self._view(layers)

    def wrote(self, layers: int, r0: int, c0: int, c1: int) -> None:
        self.dirty = (layers, r0, c0, c1)

    def _view(self, layers: int) -> np.ndarray:
        return self.flat[:layers * self.plane].reshape(layers, self.grid.ny + 1, self.grid.nx)


def _winding_numbers(j, px, py, qx, qy, winding, layers: int, grid: _Grid,
                     canvas: _Canvas) -> tuple[np.ndarray, tuple[int, int]]:
    """Return int8 (layers, rows, columns) winding numbers at the pixel centres from (row, column) on, a view of
    ``canvas`` valid until its next use, and that corner; non-zero is solid, and every layer is void outside
    the part returned (the column is a multiple of 8: a whole byte once packed).

    Each segment adds its winding at the first pixel row above where it crosses each pixel-centre
    column in [x_min, x_max) (half-open, so a shared vertex counts once); a prefix sum up the rows
    then gives the winding number (bench section 3, raster_segments).
    """
    lo = np.ceil((np.minimum(px, qx) - grid.x0) / grid.px - 0.5)
    hi = np.ceil((np.maximum(px, qx) - grid.x0) / grid.px - 0.5)
    lo = np.clip(lo, 0, grid.nx).astype(np.int64)
    cnt = np.clip(hi, 0, grid.nx).astype(np.int64) - lo
    sel = np.flatnonzero(cnt > 0)
    j, px, py, winding, lo, cnt = j[sel], px[sel], py[sel], winding[sel], lo[sel], cnt[sel]
    slope = (qy[sel] - py) / (qx[sel] - px)
    s = np.repeat(np.arange(sel.size), cnt)
    col = np.repeat(lo - np.cumsum(cnt) + cnt, cnt) + np.arange(s.size)
    y = py[s] + (grid.x_centres[col] - px[s]) * slope[s]
    row = np.clip(np.floor((y - grid.y0) / grid.px - 0.5).astype(np.int64) + 1, 0, grid.ny)
    acc = canvas.take(layers)
    np.add.at(acc.reshape(-1), (j[s] * (grid.ny + 1) + row) * grid.nx + col, winding[s])
    if not s.size:
        return acc[:, :0, :0], (0, 0)
    r0, c0, c1 = int(row.min()), int(col.min()) // 8 * 8, int(col.max()) + 1
    canvas.wrote(layers, r0, c0, c1)
    r1 = _prefix_rows(acc, r0, min(int(row.max()), grid.ny - 1), c0, c1)
    return acc[:, r0:r1, c0:c1], (r0, c0)


def _prefix_rows(acc: np.ndarray, r0: int, r1: int, c0: int, c1: int) -> int:
    """Sum acc up the rows inside the box the crossings touch; everything outside it stays as it is. Return
    the end of the rows that may hold solid (below the accumulator's extra row)."""
    box = acc[:, :, c0:c1]
    for r in range(r0 + 1, r1 + 1):  # row-by-row adds on contiguous rows beat np.cumsum 2x (bench section 3)
        np.add(box[:, r], box[:, r - 1], out=box[:, r])
    if box[:, r1].any():  # an open mesh leaves a winding above its last crossing: carry it up
        box[:, r1 + 1:] = box[:, r1:r1 + 1]
        return acc.shape[1] - 1
    return r1 + 1


class _StackBuilder:
    """Collect layers bottom-up: keep each new distinct raster bit-packed, count runs and column totals.

    A raster is stored as the deflated packed bytes of its solid box (rows r0.., bytes b0..), so small
    layers cost little. A column's solid-layer count is the sum of (layer it switches off - layer it switches
    on) over its runs, so each new raster only touches the pixels that changed from the one below.
    """

    def __init__(self, shape: tuple[int, int], keeper: _Helpers | None = None) -> None:
        self.shape = (int(shape[0]), int(shape[1]))
        self.count = 0
        self.kept: list[Future | tuple[bytes, int, int]] = []  # per distinct raster: _kept(box), or its future
        self.keeper = keeper
        self.boxes: list[tuple[int, int, int, int]] = []
        self.last: tuple[tuple[int, int], np.ndarray] | None = None  # the top raster, still unpacked
        self.run_lengths: list[int] = []
        self.columns = np.zeros(self.shape, dtype=np.int32)

    def add(self, raster: np.ndarray, at: tuple[int, int] = (0, 0)) -> None:
        """Append one layer (non-zero is solid), sharing the stored raster when it equals the layer below.

        ``raster`` may be the part of the layer from row at[0] and byte at[1] (pixel 8 at[1]) on, void
        outside it."""
        corner, box = _solid_box(np.packbits(raster, axis=1))
        if box.size:
            corner = (corner[0] + at[0], corner[1] + at[1])
        if self.last and corner == self.last[0] and np.array_equal(box, self.last[1]):
            self.repeat(1)
            return
        self._switch(corner, box)
        self.last = (corner, box)
        self.boxes.append((*corner, *box.shape))
        self.run_lengths.append(1)
        self.count += 1
        if self.keeper is None:
            self.kept.append(_kept(box))
            return
        # Deflating and counting read only the box and mostly release the GIL: the keeper's threads do them
        # while this one slices on (the column counts there too were no faster: they hold the GIL in small steps).
        # A few boxes wait at most, so memory stays bounded if the keeper falls behind.
        if len(self.kept) >= _KEPT_WAITING:
            self.kept[-_KEPT_WAITING].result()  # the helpers take boxes in order
        self.kept.append(self.keeper.submit(_kept, box))

    def repeat(self, n: int) -> None:
        """Append n more layers equal to the last one."""
        if n > 0:
            self.run_lengths[-1] += n
            self.count += n

    def finish(self, pixel_mm: float, layer_height_mm: float, origin_mm: tuple) -> LayerStack:
        kept = [k.result() if isinstance(k, Future) else k for k in self.kept]
        self._switch((0, 0), np.zeros((0, 0), dtype=np.uint8))
        packed = tuple(k[0] for k in kept)
        index = np.repeat(np.arange(len(packed), dtype=np.int32), self.run_lengths)
        area = np.asarray([k[1] for k in kept], dtype=np.float64).reshape(-1)[index] * pixel_mm**2
        perimeter = np.asarray([k[2] for k in kept], dtype=np.float64).reshape(-1)[index] * pixel_mm
        thickness = np.empty(self.shape, dtype=np.float32)  # products in float64, as cast: no full-frame temporary
        np.multiply(self.columns, layer_height_mm, out=thickness, casting="same_kind")
        for a in (area, perimeter, thickness, index):
            a.setflags(write=False)
        return LayerStack(
            pixel_mm=float(pixel_mm), layer_height_mm=float(layer_height_mm),
            origin_mm=tuple(float(v) for v in origin_mm), shape=self.shape, count=self.count,
            area_mm2=area, perimeter_mm=perimeter, thickness_mm=thickness, _packed=packed,
            _boxes=np.asarray(self.boxes, dtype=np.int32).reshape(-1, 4), _index=index,
        )

    def _switch(self, corner: tuple[int, int], box: np.ndarray) -> None:
        """Subtract this layer's index where pixels switch on and add it where they switch off."""
        old, layer = self.last or (corner, box[:0, :0]), self.count
        boxes = [(c, b) for c, b in (old, (corner, box)) if b.size]
        if not boxes:
            return
        r0, b0 = (min(c[i] for c, _ in boxes) for i in (0, 1))
        r1, b1 = (max(c[i] + b.shape[i] for c, b in boxes) for i in (0, 1))
        new = _placed(corner, box, r0, r1, b0, b1)
        flips = _placed(*old, r0, r1, b0, b1) ^ new
        width = min(8 * (b1 - b0), self.shape[1] - 8 * b0)
        block = self.columns[r0:r1, 8 * b0:8 * b0 + width]
        changed = nonzero_bytes(flips)
        if changed.size * 8 > flips.size:  # most bytes changed: one dense pass is cheaper
            flips, new = (np.unpackbits(a, axis=1, count=width).view(bool) for a in (flips, new))
            np.subtract(block, layer, out=block, where=flips & new)
            np.add(block, layer, out=block, where=flips & ~new)
            return
        hits = np.flatnonzero(np.unpackbits(flips.reshape(-1)[changed]))  # 8 bits per changed byte, high first
        flat, bit = changed[hits >> 3], (hits & 7).astype(np.uint8)
        now_on = (new.reshape(-1)[flat] >> (7 - bit)) & 1
        row, col = np.divmod(flat, new.shape[1])
        where = (row + r0) * self.shape[1] + (col + b0) * 8 + bit  # each pixel once: a flat put, no np.add.at
        columns = self.columns.reshape(-1)
        columns[where] += np.where(now_on, -layer, layer).astype(np.int32)


def _kept(box: np.ndarray) -> tuple[bytes, int, int]:
    """Return (deflated bytes, solid pixels, solid/void transitions) of a packed solid box."""
    # Level 1 deflate costs ~1 ms for a 2400^2 layer and shrinks it 8-50x (runs of equal bytes).
    return zlib.compress(box.tobytes(), 1), int(np.bitwise_count(box).sum(dtype=np.int64)), _transitions(box)


def nonzero_bytes(a: np.ndarray) -> np.ndarray:
    """Return the flat indices of a contiguous uint8 array's non-zero bytes, ascending: its 8-byte words are
    tested first, so a sparse array is read once as words (np.flatnonzero on the bytes took 2.7 ms a layer on
    a 4004^2 frame, 0.37 s of the 100 mm lens's slicing)."""
    flat = a.reshape(-1)
    whole = flat.size - flat.size % 8
    words = np.flatnonzero(flat[:whole].view(np.uint64))
    candidates = np.concatenate([(words[:, None] * 8 + np.arange(8)).reshape(-1), np.arange(whole, flat.size)])
    return candidates[flat[candidates] != 0]


def _solid_box(packed: np.ndarray) -> tuple[tuple[int, int], np.ndarray]:
    """Return ((first row, first byte), copy of the packed bytes) of the box holding every solid pixel."""
    rows = np.flatnonzero(packed.any(axis=1))
    if rows.size == 0:
        return (0, 0), np.zeros((0, 0), dtype=np.uint8)
    cols = np.flatnonzero(packed[rows[0]:rows[-1] + 1].any(axis=0))
    box = packed[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1].copy()
    return (int(rows[0]), int(cols[0])), box


def _placed(corner: tuple[int, int], box: np.ndarray, r0: int, r1: int, b0: int, b1: int) -> np.ndarray:
    """Return packed rows r0..r1-1, bytes b0..b1-1 of a raster stored as a box at corner."""
    out = np.zeros((r1 - r0, b1 - b0), dtype=np.uint8)
    out[corner[0] - r0:corner[0] - r0 + box.shape[0], corner[1] - b0:corner[1] - b0 + box.shape[1]] = box
    return out


def _transitions(box: np.ndarray) -> int:
    """Return the number of solid/void 4-neighbour pixel pairs in a packed box, everything outside void."""
    if box.size == 0:
        return 0
    count = np.bitwise_count(box[1:] ^ box[:-1]).sum(dtype=np.int64)
    count += np.bitwise_count(box[0]).sum(dtype=np.int64) + np.bitwise_count(box[-1]).sum(dtype=np.int64)
    shifted = box >> 1  # each bit next to its left neighbour; the box's first pixel meets the void
    shifted[:, 1:] |= (box[:, :-1] & 1) << 7
    count += np.bitwise_count(box ^ shifted).sum(dtype=np.int64)
    # The box's last bit has no right neighbour inside it: it meets the void (a padding bit is 0).
    count += np.count_nonzero(box[:, -1] & 1)
    return int(count)


class _Throttle:
    """Pass progress on at most once per 1/32 of the work, and 1.0 exactly once at the end."""

    def __init__(self, progress: Callable[[float], None] | None) -> None:
        self.progress = progress
        self.last = 0.0
        self.done = False

    def __call__(self, fraction: float) -> None:
        if self.progress is None or self.done:
            return
        if fraction >= 1.0:
            self.done = True
            self.progress(1.0)
        elif fraction - self.last >= 1.0 / _PROGRESS_STEPS:
            self.last = fraction
            self.progress(float(fraction))
