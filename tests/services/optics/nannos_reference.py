"""Zero-order t and r of disc cells on a base from a second RCWA package (nannos, PyPI), run as a child process.

    python nannos_reference.py JOBS_JSON  -> JSON, one answer per job

Jobs: ["cell", kind, period_mm, radius_mm, height_mm, harmonics, base_mm] -> [re t, im t, re r, im r];
["lines", t_x, t_y, harmonics] -> the two fundamental Bloch indices [[re, im], [re, im]] of a
lamellar grating with that constant tangent field (see below).

A cell's stack is the project's: air | base | cell layer (height) | air, light arriving through the
base; eps 2.8, tan delta 0.03, 300 GHz, normal incidence, E along x. Kind pillar: discs of material
in air; hole: discs of air in the material. One process for all jobs: importing nannos takes 4 s of
CPU (12 s wall here), mostly its plotting dependencies.

nannos (2.6.5; Fourier modal method, GPLv3) solves each layer in its 'tangent' formulation, the
normal-vector method (Schuster et al. 2007; Liu 2012, both from memory): the field along a boundary
takes Laurent's rule, the field across it the inverse rule (Li 1996, from memory). Its own code
throughout: the permittivity is a 1024 x 1024 raster (pixel centres, 0/1 per pixel, FFT
coefficients, no exact disc transform), its eigen-solve, its S-matrix and its field read-out.

The tangent field is the disc's azimuthal direction (-y, x) / r, passed in the component order
(t_y, t_x). Measured here: nannos 2.6.5 builds its projector blocks so that a field given as
(t_x, t_y) applies the inverse rule to the component along the boundary. On lines along y (p / lambda
= 0.3, fill 0.4) its own tangent field and (t_x, t_y) = (0, 1) miss Rytov's exact Bloch indices by
0.025 / 0.012 at 49 / 121 harmonics (its plain Laurent formulation: 0.015 / 0.008); (1, 0) meets them
within 2e-4 / 3e-5. `test_rigorous_vs_nannos.py` checks this orientation first, so a nannos that
changes it fails there, not silently in the comparison.

A child process so OPENBLAS_NUM_THREADS=1 takes effect before numpy loads (threaded BLAS on small
matrices ran 10-30x slower on the 2-core machine: shared/references/optics.md section 12).
"""

from __future__ import annotations

import json
import sys
import warnings

import numpy as np

FREQ_GHZ = 300.0
LAM = 299.792458 / FREQ_GHZ
EPS = 2.8 * (1 + 0.03j)  # nannos: e^{-i omega t}, loss is +Im eps (its propagation is exp(+i q z), Im q >= 0)
PIXELS = 1024


def disc_layer_grid(kind: str, period_mm: float, radius_mm: float, pixels: int = PIXELS):
    """Return (eps grid, tangent field as nannos reads it) of a centred disc on a pixel-centred raster."""
    u = (np.arange(pixels) + 0.5) / pixels * period_mm - period_mm / 2
    x, y = np.meshgrid(u, u, indexing="ij")  # array axis 0 is x: nannos pairs it with its first harmonic index
    r = np.hypot(x, y)
    inside = r < radius_mm
    inner, outer = (EPS, 1.0) if kind == "pillar" else (1.0, EPS)
    grid = np.where(inside, inner, outer).astype(complex)
    return grid, [x / r, -y / r]  # (t_y, t_x) of the tangent (-y, x) / r; no sample sits at r = 0


def zero_order(kind: str, period_mm: float, radius_mm: float, height_mm: float, harmonics: int,
               base_mm: float = 1.0) -> tuple[complex, complex]:
    """Return (t, r) of the zeroth order in the project's e^{+j omega t}, faces of the stack as reference planes."""
    import nannos as nn

    lattice = nn.Lattice(((period_mm, 0), (0, period_mm)), discretization=PIXELS)
    grid, tangent = disc_layer_grid(kind, period_mm, radius_mm)
    layers = [lattice.Layer("Superstrate", epsilon=1)]
    if base_mm > 0:
        layers.append(lattice.Layer("base", thickness=base_mm, epsilon=EPS))
    layers += [lattice.Layer("cell", thickness=height_mm, epsilon=grid, tangent_field=tangent),
               lattice.Layer("Substrate", epsilon=1)]
    sim = nn.Simulation(layers, nn.PlaneWave(wavelength=LAM, angles=(0, 0, 0)), nh=harmonics, formulation="tangent")
    # complex=True: the zeroth order's transmitted E at the exit face and reflected E at the entry face,
    # per unit incident E (psi = 0: E along x, component 0).
    r, t = sim.diffraction_efficiencies(orders=True, complex=True)
    i0 = sim.index_zeroth_order
    return complex(np.conj(t[0, i0])), complex(np.conj(r[0, i0]))


def bloch_indices_of_lines(tangent_xy: tuple[float, float], harmonics: int, pixels: int = 400) -> np.ndarray:
    """Return the two fundamental Bloch indices (e^{+j omega t}) of lines along y, p / lambda = 0.3, fill 0.4,
    with the constant tangent field passed to nannos as given."""
    import nannos as nn

    p, fill = 0.3 * LAM, 0.4
    grid = np.repeat(np.where(np.arange(pixels) < fill * pixels, EPS, 1.0 + 0j)[:, None], pixels, axis=1)
    lattice = nn.Lattice(((p, 0), (0, p)), discretization=pixels)
    field = [np.full((pixels, pixels), float(c)) for c in tangent_xy]
    layers = [lattice.Layer("Superstrate", epsilon=1), lattice.Layer("g", thickness=1.0, epsilon=grid,
                                                                     tangent_field=field),
              lattice.Layer("Substrate", epsilon=1)]
    sim = nn.Simulation(layers, nn.PlaneWave(wavelength=LAM, angles=(0, 0, 0)), nh=harmonics, formulation="tangent")
    sim.solve()
    q = np.asarray(sim.layers[1].eigenvalues)
    q = q[np.argsort(-(q.real - 1e3 * q.imag))[:2]]
    return np.sort_complex(np.conj(q * LAM / (2 * np.pi)))


if __name__ == "__main__":
    warnings.simplefilter("ignore")  # nannos and its plotting imports warn on load
    answers = []
    for job in json.loads(sys.argv[1]):
        if job[0] == "lines":
            n = bloch_indices_of_lines((float(job[1]), float(job[2])), int(job[3]))
            answers.append([[v.real, v.imag] for v in n])
        else:
            _, kind, period, radius, height, harmonics, base = job
            t, r = zero_order(kind, float(period), float(radius), float(height), int(harmonics), float(base))
            answers.append([t.real, t.imag, r.real, r.imag])
    print(json.dumps(answers))
