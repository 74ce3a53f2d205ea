"""Transmission of one subwavelength cell: a layer model of the patterned layer and a transfer matrix.

A cell is a patterned layer (a pillar in air, or a hole in the material) over a solid base. The
patterned layer becomes a uniform layer: the check's cell model (``optics.cell_model.CellIndex``:
a rigorous table's equivalent layer, or the zeroth-order effective medium), and the two layers are
cascaded at normal incidence. Both steps come from ``services.optics``, so a plate is designed with
the same model the optics section later judges it by.
"""

from __future__ import annotations

import numpy as np

from services.optics.cell_model import CellIndex
from services.optics.effective_medium import DEFAULT_MODEL
from services.optics.materials import complex_index, wavelength_mm
from services.optics.transfer import cascade_abcd, s_parameters

LATTICES = ("square", "hex")
CELLS = ("pillar", "hole")


def cell_area_mm2(period_mm: float, lattice: str) -> float:
    """Return the area of one unit cell: period^2 (square) or sqrt(3)/2 period^2 (hexagonal)."""
    return period_mm**2 * (np.sqrt(3.0) / 2.0 if lattice == "hex" else 1.0)


def material_fill(diameter_mm, period_mm: float, lattice: str, cell: str):
    """Return the fraction of the cell's area that is material, for round pillars or round holes."""
    disc = np.pi * np.asarray(diameter_mm, dtype=float) ** 2 / 4.0 / cell_area_mm2(period_mm, lattice)
    return disc if cell == "pillar" else 1.0 - disc


def cell_transmission(fill, *, eps_r: float, tan_delta: float, height_mm: float, base_mm: float,
                      freq_ghz: float, model: str = DEFAULT_MODEL):
    """Return the complex S21 of cells of material fill ``fill`` (any shape) by the effective medium ``model``."""
    eps = complex_index(eps_r, tan_delta) ** 2
    return cell_s21(fill, index=CellIndex(np.array([eps]), model), eps=eps, height_mm=height_mm, base_mm=base_mm,
                    freq_ghz=freq_ghz)


def cell_s21(fill, *, index: CellIndex, eps: complex, height_mm: float, base_mm: float, freq_ghz: float):
    """Return the complex S21 of cells of material fill ``fill``, e^{+j omega t} convention.

    The wave crosses the patterned layer (height_mm, the layer ``index`` gives for one frequency) and
    the solid base (base_mm, permittivity ``eps``); air lies on both sides. The order does not change
    S21 of a reciprocal stack.
    """
    n, z = index(np.atleast_1d(np.asarray(fill, dtype=float)))
    layers = [(n[0], z[0], height_mm)]
    if base_mm > 0:
        # The principal root of an eps with Im eps <= 0 has Im n <= 0: a decaying wave in this convention.
        n_base = np.sqrt(complex(eps))
        layers.append((n_base, 1 / n_base, base_mm))
    return s_parameters(*cascade_abcd(layers, 2 * np.pi / wavelength_mm(freq_ghz)))[1]


def delay_rad(s21) -> np.ndarray:
    """Return the phase delay -arg(S21), unwrapped along the last axis (more material, more delay)."""
    return np.unwrap(-np.angle(s21), axis=-1)
