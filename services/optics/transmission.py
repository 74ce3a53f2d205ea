"""Per-cell complex transmission and reflection of a layer stack at each design frequency.

Each analysis cell's per-layer fill fraction becomes an effective permittivity (zeroth-order
effective medium; exact for solid or empty), and the layers are cascaded as coherent 2x2 transfer
matrices along the axis, so Fabry-Perot ripple and matching layers come out right. Cells and
frequencies are numpy axes; only the runs of layers are a Python loop. Several variants of the
same stack (grown, shrunk, Z-scaled for the tolerance band) share one pass over the rasters.

Given a beam, the same pass also marches the field up through the part on sub-cells
(``multislice``: the thick-element model of where the part focuses). The march is forward only,
so each cell's exit field is then multiplied by S21 / exp(-j k0 sum n d): the cell's transfer
matrix over its own single straight pass, which is the two faces' transmission and the
Fabry-Perot ripple between them. For a slab the exit field is then S21 exactly.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from services.optics.cells import CellGrid, cell_runs
from services.optics.effective_medium import DEFAULT_MODEL, effective_permittivity
from services.optics.materials import RFValues, wavelength_mm
from services.optics.multislice import Beam, March, Window
from services.optics.transfer import layer_abcd, s_parameters


@dataclass(frozen=True, slots=True)
class Variant:
    """A perturbed copy of the stack: material grown by ``grow_mm`` at every boundary, heights scaled."""

    name: str
    grow_mm: float = 0.0
    z_scale: float = 1.0


NOMINAL = (Variant("nominal"),)


@dataclass(frozen=True, slots=True, eq=False)
class CellSParams:
    """S-parameters of every cell between free-space ports at the stack's bottom and top planes.

    s11, s21, s22 : (nf, ny, nx) complex, e^{+j omega t} convention
    top_mm : height of the exit plane (the stack's top) above the build plate
    exit_field : (nf, ny, nx) complex, the beam's field on the exit plane (multi-slice), or None
    """

    s11: np.ndarray
    s21: np.ndarray
    s22: np.ndarray
    top_mm: float
    exit_field: np.ndarray | None = None


def cell_sparams(stack, grid: CellGrid, rf: RFValues, *, variants: Sequence[Variant] = NOMINAL,
                 model: str = DEFAULT_MODEL, progress: Callable[[float], None] | None = None,
                 beam: Beam | None = None) -> dict[str, CellSParams]:
    """Return each variant's per-cell S-parameters at every frequency of ``rf`` (and exit field, given a beam)."""
    k0 = (2 * np.pi / wavelength_mm(rf.freqs_ghz))[:, None]
    eps = (rf.eps_r * (1 - 1j * rf.tan_delta))[:, None]
    grows = any(v.grow_mm for v in variants)
    cascades = {v.name: _CellCascade(grid.shape[0] * grid.shape[1], k0, eps, model) for v in variants}
    marches = _marches(stack, beam, variants, k0[:, 0], eps[:, 0], model) if beam is not None else {}
    fine_cell = grid.cell_mm / (beam.sub if beam is not None else 1)
    for run in cell_runs(stack, grid, with_edges=grows, sub=beam.sub if beam is not None else 1):
        for v in variants:
            cascades[v.name].add(_grown(run.fill, run.edge_mm, v, grid.cell_mm).ravel(), run.thickness_mm * v.z_scale)
            if v.name in marches:
                fine = run.fill if run.fine_fill is None else run.fine_fill
                edge = run.edge_mm if run.fine_edge_mm is None else run.fine_edge_mm
                marches[v.name].add(run.first, run.last, _grown(fine, edge, v, fine_cell))
        if progress:
            progress((run.last + 1) / stack.count)
    top = stack.count * stack.layer_height_mm
    out = {}
    for v in variants:
        cascade = cascades[v.name]
        a, b, c, d = (m.reshape((-1, *grid.shape)) for m in cascade.finish())
        s11, s21, s22 = s_parameters(a, b, c, d)
        field = None
        if v.name in marches:
            single_pass = np.exp(-1j * k0 * cascade.path).reshape(s21.shape)
            field = marches[v.name].window.cells(marches[v.name].finish()) * (s21 / single_pass)
        out[v.name] = CellSParams(s11, s21, s22, top * v.z_scale, field)
    return out


def _grown(fill: np.ndarray, edge_mm: np.ndarray, v: Variant, cell_mm: float) -> np.ndarray:
    """Return the fill with the material grown by v.grow_mm along its boundary (clipped to [0, 1])."""
    return fill if not v.grow_mm else np.clip(fill + v.grow_mm * edge_mm / cell_mm**2, 0, 1)


def _marches(stack, beam: Beam, variants: Sequence[Variant], k0: np.ndarray, eps: np.ndarray,
             model: str) -> dict[str, March]:
    """Return one multi-slice march per variant; variants of the same height share the window's kernels."""
    window = Window(beam, k0)
    per_slice = max(1, int(np.floor(beam.slice_mm / stack.layer_height_mm + 1e-9)))
    return {v.name: March(window, beam, eps=eps, model=model, layer_mm=stack.layer_height_mm * v.z_scale,
                          layers_per_slice=per_slice, count=stack.count) for v in variants}


class _CellCascade:
    """Per-cell ABCD products, built lazily: a cell's layers merge while its fill stays the same.

    A run of layers only costs a comparison per cell; the matrix work happens where a cell's fill
    changes (a lens cell changes once or twice in its whole height), so the work follows the part's
    surfaces rather than its volume.
    """

    def __init__(self, cells: int, k0: np.ndarray, eps: np.ndarray, model: str) -> None:
        one = np.ones((len(k0), cells), dtype=complex)
        self.m = [one, np.zeros_like(one), np.zeros_like(one), one.copy()]
        self.fill = np.zeros(cells)
        self.depth_mm = np.zeros(cells)
        self.path = np.zeros((len(k0), cells), dtype=complex)  # sum of n d along each cell: its single straight pass
        self.k0, self.eps, self.model = k0, eps, model

    def add(self, fill: np.ndarray, thickness_mm: float) -> None:
        changed = fill != self.fill
        self._flush(np.flatnonzero(changed & (self.depth_mm > 0)))
        self.fill[changed] = fill[changed]
        self.depth_mm[changed] = 0.0
        self.depth_mm += thickness_mm

    def finish(self) -> list[np.ndarray]:
        self._flush(np.flatnonzero(self.depth_mm > 0))
        self.depth_mm[:] = 0.0
        return self.m

    def _flush(self, idx: np.ndarray) -> None:
        """Multiply the pending (fill, depth) layer of cells ``idx`` into their matrices."""
        if len(idx) == 0:
            return
        n = np.sqrt(effective_permittivity(self.fill[idx][None], self.eps, self.model))
        self.path[:, idx] += n * self.depth_mm[idx][None]
        la, lb, lc, ld = layer_abcd(n, self.depth_mm[idx][None], self.k0)
        a, b, c, d = (m[:, idx] for m in self.m)
        self.m[0][:, idx], self.m[1][:, idx] = a * la + b * lc, a * lb + b * ld
        self.m[2][:, idx], self.m[3][:, idx] = c * la + d * lc, c * lb + d * ld
