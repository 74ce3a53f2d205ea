"""Effective-medium cell transmission against RCWA (inkstone, PyPI) on a pillar lattice over fill fractions.

Recorded errors (zeroth-order Bruggeman 2-D vs inkstone 0.3.15 at 101 orders; 2 mm pillars on a 1 mm
base, eps 2.8 / tan delta 0.02, 100 GHz, normal incidence, s-polarised):
    p / lambda = 0.33: fill 0.1 / 0.3 / 0.5 / 0.7 -> dT = +0.003 / +0.006 / +0.007 / +0.019, d(arg t) = +2.0 / +5.8 / +5.8 / +6.9 deg
    p / lambda = 0.20: fill 0.1 / 0.3 / 0.5 / 0.7 -> dT = +0.002 / +0.003 / +0.002 / +0.011, d(arg t) = +1.3 / +3.2 / +2.1 / +4.0 deg
The error shrinks with the period, as zeroth-order effective-medium theory expects (Raguin & Morris 1993).
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from services.layers import LayerStack
from services.optics.cells import CellGrid
from services.optics.materials import rf_values
from services.optics.transmission import cell_sparams
from tests.services.optics.helpers import material

LAM = 299.792458 / 100.0
FILLS = (0.1, 0.3, 0.5, 0.7)


def _rcwa(period_mm: float, radii_mm: list[float]) -> list[tuple[float, complex]]:
    """Return RCWA (T, t) for each radius, from a child process with single-threaded BLAS."""
    pytest.importorskip("inkstone")
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    args = [sys.executable, str(Path(__file__).with_name("rcwa_reference.py")), str(period_mm), *map(str, radii_mm)]
    done = subprocess.run(args, env=env, capture_output=True, text=True, check=True, timeout=300)
    return [(T, complex(re, im)) for T, re, im in json.loads(done.stdout)]


def _ours(period_mm: float, radius_mm: float) -> complex:
    """Return the centre cell's S21 of a 5 x 5 pillar lattice rasterised at period / 50, one cell per period."""
    px = period_mm / 50
    u = (np.arange(250) + 0.5) * px % period_mm - period_mm / 2
    pillar = (u[None, :] ** 2 + u[:, None] ** 2) <= radius_mm**2
    base = np.ones_like(pillar)
    stack = LayerStack.from_masks([base] * 2 + [pillar] * 4, pixel_mm=px, layer_height_mm=0.5)
    grid = CellGrid(cell_mm=period_mm, axis_mm=(2.5 * period_mm, 2.5 * period_mm), shape=(5, 5))
    return complex(cell_sparams(stack, grid, rf_values(material(2.8, 0.02), [100.0]))["nominal"].s21[0, 2, 2])


@pytest.mark.slow
@pytest.mark.parametrize(("period_over_lambda", "max_dt", "max_dphi_deg"), [(1 / 3, 0.025, 8.0), (0.2, 0.015, 5.0)])
def test_effective_medium_cells_track_rcwa(period_over_lambda, max_dt, max_dphi_deg):
    """Over fill fractions 0.1-0.7 the cell model stays within the recorded error bounds of RCWA."""
    period = period_over_lambda * LAM
    radii = [float(np.sqrt(fill / np.pi) * period) for fill in FILLS]
    for fill, radius, (T, t) in zip(FILLS, radii, _rcwa(period, radii)):
        ours = _ours(period, radius)
        assert abs(abs(ours) ** 2 - T) <= max_dt, fill
        assert abs(np.degrees(np.angle(ours / t))) <= max_dphi_deg, fill
