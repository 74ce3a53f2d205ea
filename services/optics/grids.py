"""How finely to look: the analysis cells and the fine as-designed raster, from wavelength and part size."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from services.optics.cells import CellGrid
from services.part import Part

CELL_PER_WAVELENGTH = 4       # cells of lambda/4 or smaller resolve every propagating angle (Goodman: dx <= lambda/2)
MAX_CELLS_ACROSS = 1024       # the FFT window is twice this: 2048^2 complex128 is 64 MB per array
MARGIN_CELLS = 2              # void cells around the part so its rim is not the window's edge
# The as-designed raster is the coarsest whose numbers stay within a stated error of rasters 2-4 times finer
# (computed on 60 mm lenses, 24-30 mm plates and a 20 mm lens; benchmarks/README.md, "As-designed raster:
# coarsest within a stated error"): loss 0.01 dB, wavefront and best focus 0.15 mm, FWHM 0.5 %, Strehl 0.005,
# focusing efficiency 0.002, phase-error Strehl 0.01. Cells of 8-18 printer pixels met it on the printer's own
# pixel (largest errors 0.003 dB, 0.11 mm, 0.0045 in phase-error Strehl); cells of 4 and 6 did not (a pillar
# plate's intensity peak moved 0.25 mm, a graded plate's Strehl 0.008) and met it at half the pixel. A layer
# delaying the phase by 2 pi / 56 met it as it is, 2 pi / 28 only just on lenses (loss 0.009-0.010 dB; plates
# 0.001-0.003 dB), 2 pi / 14 not (loss 0.015-0.030 dB, FWHM 1.1 %): hence 2 pi / 32, with a little margin.
DESIGN_PIXELS_PER_CELL = 8    # a cell holds at least 8 design pixels across (its fill to 1/64)
DESIGN_MAX_PIXELS_ACROSS = 4096   # 16.8 Mpixel per layer: the fine raster stays near 2 MB packed per distinct layer
DESIGN_LAYER_PHASE_STEPS = 32     # a design layer delays the phase by at most 2 pi / 32 (uniform error 0.06 rad rms)
DESIGN_MAX_LAYERS = 800           # bounds the transfer-matrix loop (one pass per distinct run of layers)
# The multi-slice field runs on sub-cells of about lambda/8: a cell straddling a zone wall mixes two
# paths a full wave apart, and the smaller the sub-cell the thinner the ring where that mix cancels
# (computed on 60 mm zoned lenses: lambda/13 sub-cells add 0.005-0.012 to the Strehl ratio of lambda/4
# cells, and lambda/39 only 0.002 more; benchmarks/README.md).
FIELD_CELLS_PER_WAVELENGTH = 8
MAX_FIELD_CELLS_ACROSS = 1024     # bounds the multi-slice FFT window like MAX_CELLS_ACROSS bounds the cells
SLICES_PER_WAVELENGTH = 3         # multi-slice steps per wavelength in the material (focus within 0.1 mm of 8 steps)


@dataclass(frozen=True, slots=True)
class DesignGrid:
    """The pixel and layer height of the as-designed raster, and why they were chosen."""

    pixel_mm: float
    layer_height_mm: float
    note: str

    def to_dict(self) -> dict:
        return {"pixel_mm": self.pixel_mm, "layer_height_mm": self.layer_height_mm, "why": self.note}


def part_axis_mm(part: Part) -> tuple[float, float]:
    """Return the optical axis: the centre of the part's xy bounds."""
    lo, hi = part.bounds_mm
    return float((lo[0] + hi[0]) / 2), float((lo[1] + hi[1]) / 2)


def rim_radius_mm(part: Part) -> float:
    """Return the rim radius: half the smaller xy side (a disc's radius, a square's half side)."""
    lo, hi = part.bounds_mm
    return float(min(hi[0] - lo[0], hi[1] - lo[1]) / 2)


def analysis_grid(part: Part, printer_pixel_mm: float, wavelength_min_mm: float,
                  period_mm: float | None = None, aperture_half_mm: tuple[float, float] | None = None,
                  wavelength_max_mm: float | None = None, lattice: str | None = None) -> CellGrid:
    """Return cells of a whole number of printer pixels, about lambda/4 or smaller (or one pixel).

    A whole number of pixels per cell makes the fill fractions exact at any grid offset. A
    subwavelength lattice (period between lambda/4 and lambda) gets one period per cell instead:
    a window of one period averages a periodic pattern exactly wherever it sits, while a smaller
    cell would alias the lattice into a false phase pattern. Those cells read the unit cell of their
    nearest lattice site (``cells.CellGrid.lattice``; an undeclared lattice is read as square), so a
    period that is no whole number of pixels, or a hexagonal lattice, still reads one site exactly.
    Very large parts (over
    MAX_CELLS_ACROSS cells) get coarser cells rather than an unbounded FFT.
    Given the clear aperture's half extents, the window covers them plus the part's height and a
    wavelength (light leaving the rim spreads about as far sideways before the exit plane), so a
    mounting flange outside it neither widens nor narrows the window; else the part's bounds.
    """
    lo, hi = part.bounds_mm
    extent = float(max(hi[0] - lo[0], hi[1] - lo[1]))
    m = max(1, math.floor(wavelength_min_mm / CELL_PER_WAVELENGTH / printer_pixel_mm + 1e-9))
    if m > 3 and all(m % d for d in range(2, math.isqrt(m) + 1)):
        m -= 1  # a prime pixel count leaves the multi-slice sub-cells no whole-pixel split (field_subdivision)
    per_period = period_mm is not None and m * printer_pixel_mm < period_mm <= wavelength_min_mm
    if per_period:
        m = max(1, round(period_mm / printer_pixel_mm))
    coarsest = math.ceil(extent / (MAX_CELLS_ACROSS * printer_pixel_mm))
    sites = (lattice if lattice in ("square", "hex") else "square", float(period_mm)) if per_period and m >= coarsest \
        else None
    m = max(m, coarsest)
    cell = m * printer_pixel_mm
    if aperture_half_mm is None:
        half = ((hi[0] - lo[0]) / 2 + MARGIN_CELLS * cell, (hi[1] - lo[1]) / 2 + MARGIN_CELLS * cell)
    else:
        spread = float(hi[2] - lo[2]) + (wavelength_max_mm or wavelength_min_mm) + MARGIN_CELLS * cell
        half = (aperture_half_mm[0] + spread, aperture_half_mm[1] + spread)
    return CellGrid.around(axis_mm=part_axis_mm(part), half_extent_mm=half, cell_mm=cell, lattice=sites)


def field_subdivision(grid: CellGrid, printer_pixel_mm: float, wavelength_min_mm: float,
                      period_mm: float | None = None) -> int:
    """Return how many sub-cells per cell side the multi-slice field uses (1: the cells themselves).

    A sub-cell is a whole number of printer pixels (so its fill fractions stay exact) and about
    lambda / FIELD_CELLS_PER_WAVELENGTH or smaller, within MAX_FIELD_CELLS_ACROSS. A lattice keeps
    one period per cell: resolving a subwavelength lattice would undo its effective medium.
    """
    if period_mm is not None:
        return 1
    pixels = max(1, round(grid.cell_mm / printer_pixel_mm))
    cap = max(1, MAX_FIELD_CELLS_ACROSS // max(grid.shape))
    options = [d for d in range(1, pixels + 1) if pixels % d == 0 and d <= cap]
    want = grid.cell_mm * FIELD_CELLS_PER_WAVELENGTH / wavelength_min_mm
    enough = [d for d in options if d >= want - 1e-9]
    return min(enough) if enough else max(options)


def slice_mm(wavelength_min_mm: float, n_max: float) -> float:
    """Return the longest multi-slice step: SLICES_PER_WAVELENGTH steps per wavelength in the material."""
    return wavelength_min_mm / (SLICES_PER_WAVELENGTH * max(n_max, 1.0))


def design_grid(part: Part, *, printer_pixel_mm: float, printer_layer_mm: float, cell_mm: float,
                wavelength_min_mm: float, n_max: float) -> DesignGrid:
    """Return the coarsest raster whose as-designed numbers stay within a stated error of a much finer one.

    The pixel is the printer's divided by the smallest whole number that puts DESIGN_PIXELS_PER_CELL
    pixels across a cell (1 where the printer's pixel already does), so cells hold whole pixels in both
    models. The layer is the printer's divided by the smallest whole number that keeps one layer's
    phase delay within 2 pi / DESIGN_LAYER_PHASE_STEPS (1 where the printer's layer already does).
    Both stop at the memory and layer-count bounds. Where both divisors are 1 the raster is the
    printer's own, and the optics uses the printed stack as the design (``plan.frequency_plans``).
    """
    lo, hi = part.bounds_mm
    extent = float(max(hi[0] - lo[0], hi[1] - lo[1])) + 4 * printer_pixel_mm
    j_want = max(1, math.ceil(DESIGN_PIXELS_PER_CELL * printer_pixel_mm / cell_mm - 1e-9))
    j_cap = max(1, math.floor(DESIGN_MAX_PIXELS_ACROSS * printer_pixel_mm / extent))
    j = min(j_want, j_cap)
    step_mm = wavelength_min_mm / (DESIGN_LAYER_PHASE_STEPS * max(n_max - 1, 1e-3))
    i_want = max(1, math.ceil(printer_layer_mm / step_mm - 1e-9))
    i_cap = max(1, math.floor(DESIGN_MAX_LAYERS * printer_layer_mm / max(float(hi[2]), printer_layer_mm)))
    i = min(i_want, i_cap)
    return DesignGrid(printer_pixel_mm / j, printer_layer_mm / i, _design_note(j, j_want, i, i_want))


def _design_note(j: int, j_want: int, i: int, i_want: int) -> str:
    """Return why the as-designed raster is what it is, in words."""
    cell = f"{DESIGN_PIXELS_PER_CELL} pixels across a cell"
    phase = f"a layer's phase delay within 2 pi / {DESIGN_LAYER_PHASE_STEPS}"
    pixel = (f"printer pixel / {j}, capped by the memory bound" if j < j_want
             else f"printer pixel / {j} to put {cell}" if j > 1
             else f"the printer's pixel (it already puts at least {cell})")
    layer = (f"layer / {i}, capped by the layer-count bound" if i < i_want
             else f"layer / {i} to keep {phase}" if i > 1 else f"the printer's layer (it already keeps {phase})")
    same = ("; that is the printer's own raster, so the printed stack serves as the design: its staircase costs "
            "less than the rule's bound (phase-error Strehl within 0.01 of 1) and is not measured separately"
            ) if j == i == 1 else ""
    return f"{pixel}; {layer}{same}."


def max_index(eps_r: np.ndarray) -> float:
    """Return the largest real refractive index over the design frequencies."""
    return float(np.sqrt(np.max(eps_r)))
