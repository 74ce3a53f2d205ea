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

from services.optics.cells import CellGrid, cell_runs, site_reads
from services.optics.cell_model import CellIndex
from services.optics.effective_medium import DEFAULT_MODEL
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
    surface_mm : (ny, nx) height of each cell's exit surface (the top of its highest layer holding any
    material; 0 where none does), or None
    """

    s11: np.ndarray
    s21: np.ndarray
    s22: np.ndarray
    top_mm: float
    exit_field: np.ndarray | None = None
    surface_mm: np.ndarray | None = None


def cell_sparams(stack, grid: CellGrid, rf: RFValues, *, variants: Sequence[Variant] = NOMINAL,
                 model: str = DEFAULT_MODEL, progress: Callable[[float], None] | None = None,
                 beam: Beam | None = None, cells: CellIndex | None = None) -> dict[str, CellSParams]:
    """Return each variant's per-cell S-parameters at every frequency of ``rf`` (and exit field, given a beam).

    ``cells`` maps a partly filled cell to its layer (a rigorous table); by default the effective medium ``model``.
    """
    k0 = (2 * np.pi / wavelength_mm(rf.freqs_ghz))[:, None]
    eps = rf.eps[:, None]
    index = cells if cells is not None else CellIndex(eps[:, 0], model)
    grows = any(v.grow_mm for v in variants)
    # A lattice grid cascades its cells' own fills (for the single-pass path under the march) and then the
    # four sites each cell overlaps, whose S-parameters it averages by share (``cells.site_reads``).
    blocks = 5 if grid.lattice is not None else 1
    # One cascade holds every variant's cells side by side (a variant's block of columns each), so a run costs
    # the same few array operations however many variants there are.
    per_variant = blocks * grid.shape[0] * grid.shape[1]
    cascade = _CellCascade(len(variants) * per_variant, k0, index)
    z_scale = np.repeat([v.z_scale for v in variants], per_variant)
    marches = _marches(stack, beam, variants, k0[:, 0], eps[:, 0], index) if beam is not None else {}
    fine_cell = grid.cell_mm / (beam.sub if beam is not None else 1)
    surface = np.zeros(grid.shape)
    for run in cell_runs(stack, grid, with_edges=grows, sub=beam.sub if beam is not None else 1):
        surface[run.fill > 0] = (run.last + 1) * stack.layer_height_mm
        fills = []
        for v in variants:
            fills.append(_grown(run.fill, run.edge_mm, v, grid.cell_mm).ravel())
            if run.site_fill is not None:
                fills.append(_grown(run.site_fill, run.site_edge_mm, v, grid.cell_mm).ravel())
        cascade.add(np.concatenate(fills), run.thickness_mm * z_scale)
        for v in variants:
            if v.name in marches:
                fine = run.fill if run.fine_fill is None else run.fine_fill
                edge = run.edge_mm if run.fine_edge_mm is None else run.fine_edge_mm
                grown = _grown(fine, edge, v, fine_cell)
                marches[v.name].add(run.first, run.last, grown if beam.zone is None else grown * beam.zone)
        if progress:
            progress((run.last + 1) / stack.count)
    top = stack.count * stack.layer_height_mm
    out = {}
    matrices = [m.reshape((-1, len(variants), blocks, *grid.shape)) for m in cascade.finish()]
    paths = cascade.path.reshape((-1, len(variants), blocks, *grid.shape))[:, :, 0]
    for i, v in enumerate(variants):
        s11, s21, s22 = s_parameters(*(m[:, i] for m in matrices))
        path = paths[:, i]
        if blocks == 1:
            s11, s21, s22 = s11[:, 0], s21[:, 0], s22[:, 0]
        else:
            share = site_reads(grid).weight
            s11, s21, s22 = (_between_sites(s[:, 1:], share) for s in (s11, s21, s22))
        field = None
        if v.name in marches:
            faces = s21 / np.exp(-1j * k0[:, :, None] * path)
            if beam.zone is not None:  # the march crossed only air outside the clear aperture
                faces = np.where(_coarse_any(beam.zone, beam.sub), faces, 1.0)
            field = marches[v.name].window.cells(marches[v.name].finish()) * faces
        out[v.name] = CellSParams(s11, s21, s22, top * v.z_scale, field, surface * v.z_scale)
    return out


def _between_sites(values: np.ndarray, share: np.ndarray) -> np.ndarray:
    """Return the sites' S-parameter at the cell centre: the share-weighted amplitude, and the phase of the
    share-weighted sum (``values`` (nf, 4, ny, nx), ``share`` (4, ny, nx)).

    The field is known at the sites; between them it is interpolated. Interpolating the complex values
    would dim a tilted wavefront (two sites 0.8 rad apart, halfway, to cos 0.4 = 0.92 of its amplitude) and
    so the focus; the phase of the sum interpolates a linear phase within 0.01 rad there, and across a
    graded plate's 2 pi seam it keeps the common phase, where interpolating fills would not.
    """
    total = (values * share[None]).sum(axis=1)
    amplitude = (np.abs(values) * share[None]).sum(axis=1)
    return amplitude * np.exp(1j * np.angle(total))


def _coarse_any(fine: np.ndarray, sub: int) -> np.ndarray:
    """Return the cells holding any true sub-cell."""
    ny, nx = fine.shape[0] // sub, fine.shape[1] // sub
    return fine.reshape(ny, sub, nx, sub).any(axis=(1, 3))


def _grown(fill: np.ndarray, edge_mm: np.ndarray, v: Variant, cell_mm: float) -> np.ndarray:
    """Return the fill with the material grown by v.grow_mm along its boundary (clipped to [0, 1])."""
    return fill if not v.grow_mm else np.clip(fill + v.grow_mm * edge_mm / cell_mm**2, 0, 1)


def _marches(stack, beam: Beam, variants: Sequence[Variant], k0: np.ndarray, eps: np.ndarray,
             index: CellIndex) -> dict[str, March]:
    """Return one multi-slice march per variant; variants of the same height share the window's kernels."""
    window = Window(beam, k0)
    per_slice = max(1, int(np.floor(beam.slice_mm / stack.layer_height_mm + 1e-9)))
    return {v.name: March(window, beam, eps=eps, index=index, layer_mm=stack.layer_height_mm * v.z_scale,
                          layers_per_slice=per_slice, count=stack.count) for v in variants}


class _CellCascade:
    """Per-cell ABCD products, built lazily: a cell's layers merge while its fill stays the same.

    A run of layers only costs a comparison per cell; the matrix work happens where a cell's fill
    changes (a lens cell changes once or twice in its whole height), so the work follows the part's
    surfaces rather than its volume.
    """

    def __init__(self, cells: int, k0: np.ndarray, index: CellIndex) -> None:
        one = np.ones((len(k0), cells), dtype=complex)
        self.m = [one, np.zeros_like(one), np.zeros_like(one), one.copy()]
        self.fill = np.zeros(cells)
        self.depth_mm = np.zeros(cells)
        self.path = np.zeros((len(k0), cells), dtype=complex)  # sum of n d along each cell: its single straight pass
        self.k0, self.index = k0, index

    def add(self, fill: np.ndarray, thickness_mm: np.ndarray) -> None:
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
        n, z = self.index(self.fill[idx])
        self.path[:, idx] += n * self.depth_mm[idx][None]
        la, lb, lc, ld = layer_abcd(n, self.depth_mm[idx][None], self.k0, z)
        a, b, c, d = (m[:, idx] for m in self.m)
        self.m[0][:, idx], self.m[1][:, idx] = a * la + b * lc, a * lb + b * ld
        self.m[2][:, idx], self.m[3][:, idx] = c * la + d * lc, c * lb + d * ld
