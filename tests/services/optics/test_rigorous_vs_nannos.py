"""Rigorous cells against a second, independent RCWA package: nannos (PyPI, 2.6.5; Fourier modal method).

nannos runs the normal-vector ('tangent') formulation (Schuster et al. 2007; Liu 2012; the inverse rule
of Li 1996; all from memory) in its own code: raster permittivity (1024 x 1024, FFT coefficients),
its eigen-solver, S-matrices and field read-out (`nannos_reference.py`, a child process). Measured here
on 20 pillar and hole cells (eps 2.8, tan delta 0.03, 300 GHz, 1 mm base, p n / lambda 0.3-0.85,
fills across the isolated-disc range, heights 1-4 mm; docs/rigorous-cells.md): nannos at 197
harmonics and ours at 193 terms agree within 0.06 deg and 6e-5 in |t| (r within 1.2e-4); the tables'
own 97 terms sit within 0.36 deg and 5e-4 in |t| of nannos at 197. This test runs the 6 hardest of
the 20 (tallest, near-touching, largest p n / lambda) in about 50 s.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from services.optics import rigorous as rg
from tests.services.optics.test_rigorous import _rytov_root  # the exact lamellar modes (Rytov 1956)

FREQ_GHZ = 300.0
LAM = 299.792458 / FREQ_GHZ
EPS = 2.8 * (1 - 0.03j)  # the project's e^{+j omega t} sign
N_MATERIAL = np.sqrt(2.8)
HARMONICS = 200  # nannos keeps 197 in its circular truncation
# (kind, p n / lambda, fill, height mm): the 20 cells of docs/rigorous-cells.md, measured at 197 harmonics
MEASURED_CELLS = [
    ("pillar", 0.3, 0.2, 1.0), ("pillar", 0.3, 0.5, 4.0), ("pillar", 0.5, 0.1, 2.0), ("pillar", 0.5, 0.4, 3.0),
    ("pillar", 0.5, 0.7, 4.0), ("pillar", 0.7, 0.3, 2.0), ("pillar", 0.7, 0.6, 3.0), ("pillar", 0.85, 0.15, 4.0),
    ("pillar", 0.85, 0.45, 1.0), ("pillar", 0.85, 0.75, 3.0),
    ("hole", 0.3, 0.3, 4.0), ("hole", 0.3, 0.8, 2.0), ("hole", 0.5, 0.25, 1.0), ("hole", 0.5, 0.6, 3.0),
    ("hole", 0.5, 0.9, 4.0), ("hole", 0.7, 0.4, 2.0), ("hole", 0.7, 0.7, 4.0), ("hole", 0.85, 0.25, 3.0),
    ("hole", 0.85, 0.55, 2.0), ("hole", 0.85, 0.85, 1.0)]
# The test runs the 6 whose t moved most between 97 and 197 harmonics (nannos takes about 5 s a cell).
CELLS = [MEASURED_CELLS[i] for i in (4, 6, 7, 10, 13, 17)]


def _airy(eps: complex, d_mm: float) -> tuple[complex, complex]:
    """Return (t, r) of a uniform slab in air at normal incidence, e^{+j omega t}.

    The Airy sum (Born & Wolf, 7.6; from memory).
    """
    n, k = np.sqrt(eps), 2 * np.pi / LAM
    r12, r23, ph = (1 - n) / (1 + n), (n - 1) / (n + 1), np.exp(-1j * k * n * d_mm)
    den = 1 + r12 * r23 * ph**2
    return (1 + r12) * (1 + r23) * ph / den, (r12 + r23 * ph**2) / den


def _single_threaded(args: list[str]) -> subprocess.Popen:
    """Start a child with OPENBLAS_NUM_THREADS=1 set before numpy loads (threaded BLAS on these small matrices
    ran 19.6 s instead of 1.1 s for 8 cells on the shared 2-core machine)."""
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MPLBACKEND": "Agg"}
    return subprocess.Popen([sys.executable, *args], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            cwd=Path(__file__).parents[3])


def _answer(child: subprocess.Popen):
    out, err = child.communicate(timeout=600)
    assert child.returncode == 0, err[-2000:]
    return json.loads(out.strip().splitlines()[-1])


def _periods_and_radii():
    for kind, pn, fill, height in CELLS:
        period = pn * LAM / N_MATERIAL
        yield kind, period, fill, rg.cell_fill_radius(kind, fill, period), height


def ours_for_cells() -> list[list[float]]:
    """Return the tables' t and r (97 terms, the default) for CELLS, [re t, im t, re r_in, im r_in] each."""
    answers = []
    for kind, period, fill, _, height in _periods_and_radii():
        air = rg.solve_uniform(eps=1.0, period_mm=period, freq_ghz=FREQ_GHZ, terms=97)
        base = rg.solve_uniform(eps=EPS, period_mm=period, freq_ghz=FREQ_GHZ, terms=97)
        lower = rg.lower_stack(air=air, base=base, base_mm=1.0)
        (cell,) = rg.solve_layers(eps=EPS, period_mm=period, fills=[fill], kind=kind, freq_ghz=FREQ_GHZ, terms=97)
        s = rg.cell_stack(air=air, lower=lower, cell=cell, heights_mm=[height])
        answers.append([s.t[0].real, s.t[0].imag, s.r_in[0].real, s.r_in[0].imag])
    return answers


@pytest.fixture(scope="module")
def answers():
    """Return (nannos' answers to every job, ours for CELLS), the two computed side by side in child processes."""
    pytest.importorskip("nannos")
    jobs = [["lines", 0, 1, 49], ["lines", 1, 0, 49], ["cell", "hole", 0.5, 0.0, 2.0, HARMONICS, 1.0]]
    jobs += [["cell", kind, period, radius, height, HARMONICS, 1.0]
             for kind, period, _, radius, height in _periods_and_radii()]
    theirs = _single_threaded([str(Path(__file__).with_name("nannos_reference.py")), json.dumps(jobs)])
    ours = _single_threaded(["-c", "import json; from tests.services.optics.test_rigorous_vs_nannos import "
                                   "ours_for_cells; print(json.dumps(ours_for_cells()))"])
    return _answer(theirs), _answer(ours)


@pytest.mark.slow
def test_nannos_conventions_on_a_slab_and_a_lamellar_grating(answers):
    """nannos as driven here: its uniform slab is the Airy sum (signs, reference planes), and the tangent field
    in the order (t_y, t_x) gives Rytov's exact lamellar modes while (t_x, t_y) does not (see nannos_reference.py)."""
    along, across, slab = answers[0][:3]
    t_airy, r_airy = _airy(EPS, 3.0)  # a hole of radius 0: 2 mm of material on the 1 mm base
    assert abs(complex(*slab[:2]) - t_airy) < 1e-9 and abs(complex(*slab[2:]) - r_airy) < 1e-9
    fill, p_over_lambda = 0.4, 0.3
    exact = np.sort_complex(np.array([
        _rytov_root(EPS, 1.0, fill, p_over_lambda, True, np.sqrt(fill * EPS + 1 - fill)),
        _rytov_root(EPS, 1.0, fill, p_over_lambda, False, np.sqrt(1 / (fill / EPS + 1 - fill)))]))
    err_swapped = np.abs(np.array([complex(*v) for v in across]) - exact).max()
    err_as_named = np.abs(np.array([complex(*v) for v in along]) - exact).max()
    assert err_swapped < 5e-4, "nannos' tangent-field order changed: review nannos_reference.py"  # measured 2e-4
    assert err_as_named > 5e-3  # measured 0.025 at 49 harmonics


@pytest.mark.slow
def test_tables_agree_with_nannos_within_the_issue_criterion(answers):
    """The tables' t (97 terms) within 1 deg and 0.01 in |t| of nannos at 197 harmonics, on pillars and holes
    (issue 12); measured 0.36 deg and 5e-4 at most over 20 cells, so 0.5 deg and 0.002 are asserted. r too."""
    theirs, ours = answers
    theirs = np.array([[complex(*a[:2]), complex(*a[2:])] for a in theirs[3:]])
    ours = np.array([[complex(*a[:2]), complex(*a[2:])] for a in ours])
    phase = np.abs(np.degrees(np.angle(ours[:, 0] / theirs[:, 0])))
    magnitude = np.abs(np.abs(ours[:, 0]) - np.abs(theirs[:, 0]))
    assert len(ours) == len(CELLS) and phase.max() < 0.5 and magnitude.max() < 0.002, (phase, magnitude)
    assert np.abs(ours[:, 1] - theirs[:, 1]).max() < 0.002, ours[:, 1] - theirs[:, 1]
