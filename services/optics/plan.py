"""Which grids each design frequency is computed on.

The grids follow a fixed rule of the part, the printer and one frequency alone, so a frequency's
numbers do not depend on which other frequencies share the run: checked at one frequency or at
seven, a lens focuses at the same distance. The rule takes the top of the frequency's quarter-octave
band (and its index rounded up to 0.05), so neighbouring frequencies get the same grids and share one
pass over the layers; the cells are still a quarter of the frequency's own wavelength or finer.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from services.layers import LayerStack, build_layer_stack
from services.optics import grids
from services.optics.aperture import ClearAperture, clear_aperture
from services.optics.cells import CellGrid
from services.optics.materials import RFValues, wavelength_mm
from services.optics.multislice import ABSORBER_WAVELENGTHS
from services.part import Part
from services.profiles import PrinterProfile

BANDS_PER_OCTAVE = 4
INDEX_STEP = 0.05


@dataclass(frozen=True, slots=True, eq=False)
class Plan:
    """One pass: the frequencies (positions in the run) that share its grids, and those grids.

    sub : sub-cells per cell side for the multi-slice field; slice_mm : the longest slice;
    pad_mm : the absorbing margin of the multi-slice window
    """

    index: np.ndarray
    grid: CellGrid
    dgrid: grids.DesignGrid
    designed: LayerStack
    zone: ClearAperture
    sub: int
    slice_mm: float
    pad_mm: float

    def subset(self, rf: RFValues) -> RFValues:
        """Return the RF values of this pass's frequencies."""
        i = self.index
        return RFValues(rf.freqs_ghz[i], rf.eps_r[i], rf.tan_delta[i], rf.outside[i], rf.table_range_ghz)

    def to_dict(self, rf: RFValues) -> dict:
        return {"frequencies_ghz": [float(f) for f in rf.freqs_ghz[self.index]], "cell_mm": self.grid.cell_mm,
                "cells": list(self.grid.shape), "sub_cell_mm": self.grid.cell_mm / self.sub,
                "cells_read": _cells_read(self.grid),
                "longest_slice_mm": self.slice_mm, "absorbing_margin_mm": self.pad_mm,
                "as_designed_grid": self.dgrid.to_dict()}


def _cells_read(grid) -> str:
    """Return how each analysis cell reads the stack, in words."""
    if grid.lattice is None:
        return "the fill inside each cell"
    kind, period = grid.lattice
    return (f"the sites of the {'hexagonal' if kind == 'hex' else 'square'} lattice (period {period:g} mm) each cell "
            "overlaps, each site through the cell model, interpolated to the cell's centre")


def frequency_plans(*, part: Part, printer: PrinterProfile, printed: LayerStack, rf: RFValues,
                    period_mm: float | None, clear_aperture_mm: float | None, lattice: str | None = None,
                    progress: Callable[[float], None] | None = None) -> list[Plan]:
    """Return the passes of a run, each frequency on the grids its own rule gives, lowest frequency first.

    Where the as-designed raster is the printer's own (``grids.design_grid``), the printed stack is
    the design's too: slicing the same part on the same raster again would give the same layers.
    """
    stacks: dict[tuple[float, float], tuple[LayerStack, ClearAperture]] = {}
    groups: dict[tuple, list[tuple[int, float, float]]] = {}
    for i in np.argsort(rf.freqs_ghz, kind="stable"):
        lam, n = _rule_wavelength_mm(float(rf.freqs_ghz[i])), _rule_index(float(rf.eps_r[i]))
        cell_mm = grids.analysis_grid(part, printer.pixel_mm, lam, period_mm).cell_mm
        dgrid = grids.design_grid(part, printer_pixel_mm=printer.pixel_mm, printer_layer_mm=printer.layer_height_mm,
                                  cell_mm=cell_mm, wavelength_min_mm=lam, n_max=n)
        raster = (dgrid.pixel_mm, dgrid.layer_height_mm)
        if raster not in stacks:
            designed = printed if raster == (printed.pixel_mm, printed.layer_height_mm) else build_layer_stack(
                part, pixel_mm=dgrid.pixel_mm, layer_height_mm=dgrid.layer_height_mm,
                progress=None if stacks else progress)
            stacks[raster] = designed, clear_aperture(designed, axis_mm=grids.part_axis_mm(part),
                                                      given_mm=clear_aperture_mm, parameters=part.parameters)
        zone = stacks[raster][1]
        grid = grids.analysis_grid(part, printer.pixel_mm, lam, period_mm, zone.half_extent_mm, lam, lattice)
        sub = grids.field_subdivision(grid, printer.pixel_mm, lam, period_mm)
        slice_mm = grids.slice_mm(lam, n)
        # What the passes actually use: the grids, layers per multi-slice step in each stack, the band.
        key = (grid, dgrid, sub, _per_slice(slice_mm, dgrid.layer_height_mm),
               _per_slice(slice_mm, printed.layer_height_mm), lam)
        groups.setdefault(key, []).append((int(i), slice_mm, lam * 2 ** (1 / BANDS_PER_OCTAVE)))
    return [Plan(np.array([i for i, _, _ in members]), key[0], key[1], *stacks[(key[1].pixel_mm, key[1].layer_height_mm)],
                 key[2], min(s for _, s, _ in members), ABSORBER_WAVELENGTHS * max(lam for _, _, lam in members))
            for key, members in groups.items()]


def _rule_wavelength_mm(freq_ghz: float) -> float:
    """Return the wavelength at the top of the frequency's quarter-octave band (bands start at 1 GHz)."""
    band = math.ceil(BANDS_PER_OCTAVE * math.log2(freq_ghz) - 1e-9)
    return float(wavelength_mm(2.0 ** (band / BANDS_PER_OCTAVE)))


def _rule_index(eps_r: float) -> float:
    """Return the refractive index rounded up to INDEX_STEP."""
    return math.ceil(np.sqrt(max(eps_r, 1.0)) / INDEX_STEP - 1e-9) * INDEX_STEP


def _per_slice(slice_mm: float, layer_mm: float) -> int:
    """Return the layers per multi-slice step, as ``transmission`` counts them."""
    return max(1, int(np.floor(slice_mm / layer_mm + 1e-9)))
