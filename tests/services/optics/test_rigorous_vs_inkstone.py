"""Rigorous cells against a second, independent RCWA package (inkstone, PyPI; plain Fourier factorisation).

inkstone converges slowly on high-contrast discs (it keeps Laurent's rule), so the check is that it
approaches our result as its orders grow: measured (pillars, p = lambda / 3, fill 0.5) at 51 / 101 / 201 /
401 orders it sits 4.5 / 3.4 / 2.5 / 1.6 deg from ours; at 201 orders fill 0.1-0.7 sit 1.0-4.3 deg away.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from services.optics import rigorous as rg

LAM = 299.792458 / 100.0
EPS = 2.8 * (1 - 0.02j)  # the structure of rcwa_reference.py: 2 mm cells on a 1 mm base, 100 GHz


def _inkstone(period_mm: float, radii: list[float], orders: int, kind: str) -> list[complex]:
    pytest.importorskip("inkstone")
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "RCWA_ORDERS": str(orders),
           "RCWA_KIND": kind}
    args = [sys.executable, str(Path(__file__).with_name("rcwa_reference.py")), str(period_mm), *map(str, radii)]
    done = subprocess.run(args, env=env, capture_output=True, text=True, check=True, timeout=600)
    return [complex(re, im) for _, re, im in json.loads(done.stdout)]


def _ours(period_mm: float, fills, kind: str) -> np.ndarray:
    air = rg.solve_uniform(eps=1.0, period_mm=period_mm, freq_ghz=100.0, terms=97)
    base = rg.solve_uniform(eps=EPS, period_mm=period_mm, freq_ghz=100.0, terms=97)
    lower = rg.lower_stack(air=air, base=base, base_mm=1.0)
    cells = rg.solve_layers(eps=EPS, period_mm=period_mm, fills=fills, kind=kind, freq_ghz=100.0, terms=97)
    return np.array([rg.cell_stack(air=air, lower=lower, cell=c, heights_mm=[2.0]).t[0] for c in cells])


@pytest.mark.slow
@pytest.mark.parametrize(("kind", "fills"), [("pillar", (0.1, 0.3, 0.5, 0.7)), ("hole", (0.3, 0.5, 0.7, 0.9))])
def test_inkstone_approaches_the_rigorous_cells_as_its_orders_grow(kind, fills):
    """At p = lambda / 3, inkstone at 201 orders is nearer our t than at 101, and within 5 deg and 0.01 in |t|."""
    period = LAM / 3
    radii = [rg.cell_fill_radius(kind, f, period) for f in fills]
    ours = _ours(period, fills, kind)
    coarse, fine = (np.array(_inkstone(period, radii, n, kind)) for n in (101, 201))
    d_coarse, d_fine = (np.abs(np.degrees(np.angle(ours / t))) for t in (coarse, fine))
    assert np.all(d_fine <= d_coarse + 0.05), (d_coarse, d_fine)
    assert d_fine.max() < 5.0 and np.abs(np.abs(ours) - np.abs(fine)).max() < 0.01
