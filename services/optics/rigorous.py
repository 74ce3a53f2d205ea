"""Rigorous (Fourier modal) zeroth-order transmission of periodic pillar, hole and ring cells at normal incidence,
on the square or the hexagonal lattice.

A uniform-in-z patterned layer is solved once per fill and frequency for its eigenmodes: the
normal-vector (tangent-field) formulation of the Fourier modal method (Liu 2012, eq. 28 and 51;
Schuster et al. 2007) on fmmax's expansion and uniform-layer modes, with the discs' Fourier
coefficients exact and the circle's own tangent field. Any height then follows from those modes: the layer's own propagation is diagonal, so the stack
air | base | layer(h) | air needs one eigen-solve and, per height, only a small solve over the
modes that still carry power across h. The interface S-matrices follow Whittaker & Culshaw 1999,
section 5 (the recipe fmmax uses), written here in numpy.

fmmax uses e^{-i omega t} (loss is +Im eps); results are conjugated into the project's e^{+j omega t}.
fmmax (and with it jax) is imported only when a table is built, so a forked worker never inherits jax's threads.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from services.optics.materials import wavelength_mm

KINDS = ("pillar", "hole")
LATTICES = ("square", "hex")
# Primitive lattice vectors at unit period (rows u, v): the hexagonal lattice's nearest neighbours are one
# period apart, its rows sqrt(3)/2 apart and shifted by half a period (as the graded-index generator lays it).
_UNIT_VECTORS = {"square": np.array([[1.0, 0.0], [0.0, 1.0]]),
                 "hex": np.array([[1.0, 0.0], [0.5, np.sqrt(3.0) / 2]])}
# Modes decaying below this amplitude across a layer no longer couple its two faces.
_NEGLIGIBLE = 1e-13


@dataclass(frozen=True, slots=True, eq=False)
class LayerModes:
    """Eigenmodes of one uniform-in-z layer (fmmax conventions, e^{-i omega t}).

    q : (2N,) complex propagation constants per mm, Im q >= 0
    phi : (2N, 2N) eigenvectors; omega_k : (2N, 2N) the omega-script-k matrix (Liu 2012, eq. 26)
    """

    q: np.ndarray
    phi: np.ndarray
    omega_k: np.ndarray

    def bloch_index(self, wavelength: float) -> complex:
        """Return the fundamental (least evanescent) mode's index, e^{+j omega t} sign (Im n <= 0)."""
        q = self.q[np.argmax(self.q.real - 1e3 * self.q.imag)]
        return complex(np.conj(q * wavelength / (2 * np.pi)))


@dataclass(frozen=True, slots=True, eq=False)
class CellStack:
    """Zeroth-order t and r of air | base | cell layer (h) | air for each height h (e^{+j omega t}).

    t : (nh,) transmission; r_in : (nh,) reflection seen from the base side; r_out : from the top
    """

    heights_mm: np.ndarray
    t: np.ndarray
    r_in: np.ndarray
    r_out: np.ndarray


def cell_area(lattice: str) -> float:
    """Return the unit cell's area at unit period: 1 (square) or sqrt(3) / 2 (hexagonal)."""
    return float(abs(np.linalg.det(_unit_vectors(lattice))))


def _unit_vectors(lattice: str) -> np.ndarray:
    if lattice not in LATTICES:
        raise ValueError(f"unknown lattice {lattice!r}; use one of {', '.join(LATTICES)}")
    return _UNIT_VECTORS[lattice]


def diffraction_limit(lattice: str) -> float:
    """Return p n / lambda above which the first order propagates in the material (|G_min| = k n): |G_min| / 2 pi
    at unit period, 1 (square) or 2 / sqrt 3 (hexagonal, p the nearest-neighbour spacing)."""
    b = 2 * np.pi * np.linalg.inv(_unit_vectors(lattice)).T
    shortest = min(np.hypot(*g) for g in (b[0], b[1], b[0] + b[1], b[0] - b[1]))
    return float(shortest / (2 * np.pi))


def touching_fill(lattice: str) -> float:
    """Return the disc fill at which neighbouring discs touch: pi / 4 (square), pi / (2 sqrt 3) (hexagonal)."""
    return float(np.pi / 4 / cell_area(lattice))


def cell_fill_radius(kind: str, fill: float, period_mm: float, lattice: str = "square",
                     core_ratio: float = 0.0) -> float:
    """Return the disc radius that gives material fill ``fill`` in its cell (disc clipped at the cell's edges).

    core_ratio : a ring's coaxial core radius over the disc's (a pillar with a hole, a hole with a post).
    """
    if kind not in KINDS:
        raise ValueError(f"unknown cell kind {kind!r}; use one of {', '.join(KINDS)}")
    if not 0.0 <= core_ratio < 1.0:
        raise ValueError(f"a ring's core ratio must be at least 0 and below 1, not {core_ratio:g}")
    disc = fill if kind == "pillar" else 1.0 - fill
    # The Wigner-Seitz cell's corner: half the square's diagonal, the hexagon's circumradius p / sqrt 3.
    lo, hi = 0.0, period_mm / (np.sqrt(2) if lattice == "square" else np.sqrt(3))
    for _ in range(60):
        mid = (lo + hi) / 2
        ring = _disc_in_cell(mid, period_mm, lattice) - _disc_in_cell(core_ratio * mid, period_mm, lattice)
        lo, hi = (mid, hi) if ring < disc else (lo, mid)
    return (lo + hi) / 2


def _disc_in_cell(radius: float, period: float, lattice: str) -> float:
    """Return the area fraction of a centred disc inside its Wigner-Seitz cell (a square or a hexagon of
    inradius p / 2): the circular segments beyond each of its 4 or 6 edges are cut off."""
    area, d = np.pi * radius**2, period / 2
    if radius > d:
        edges = 4 if lattice == "square" else 6
        area -= edges * (radius**2 * np.arccos(d / radius) - d * np.sqrt(radius**2 - d**2))
    return float(area / (period**2 * cell_area(lattice)))


@functools.lru_cache(maxsize=8)
def _orders(terms: int, lattice: str = "square") -> np.ndarray:
    """Return fmmax's circular expansion of about ``terms`` orders (m, n) on the lattice, (N, 2) int, (0, 0) first."""
    import jax

    jax.config.update("jax_enable_x64", True)
    import fmmax

    u, v = _unit_vectors(lattice)  # a lattice's orders do not depend on its period, only on its shape
    vectors = fmmax.LatticeVectors(u=jax.numpy.asarray(u), v=jax.numpy.asarray(v))
    expansion = fmmax.generate_expansion(primitive_lattice_vectors=vectors, approximate_num_terms=terms,
                                         truncation=fmmax.Truncation.CIRCULAR)
    return np.asarray(expansion.basis_coefficients)


def expansion_size(terms: int, lattice: str) -> int:
    """Return how many orders the circular expansion asked for ``terms`` holds (whole shells: 91 for 97 on hex)."""
    return len(_orders(terms, lattice))


def _reciprocal(orders: np.ndarray, lattice: str) -> np.ndarray:
    """Return the reciprocal lattice vectors G = m b1 + n b2 of orders (..., 2) at unit period, b_i . a_j = 2 pi
    delta_ij (fmmax's transverse wavevectors)."""
    return orders @ (2 * np.pi * np.linalg.inv(_unit_vectors(lattice)).T)


def solve_layers(*, eps: complex, period_mm: float, fills, kind: str, freq_ghz: float,
                 terms: int, lattice: str = "square", core_ratio: float = 0.0) -> list[LayerModes]:
    """Return the eigenmodes of a disc-cell layer at each fill (eps in the e^{+j omega t} sign, Im eps <= 0).

    The discs' Fourier coefficients are exact (a disc's transform is an Airy pattern, 2 J1(x) / x, at the
    lattice's reciprocal vectors, over the cell's area), for eps and for 1 / eps; a pixel raster put
    0.2-0.4 deg of error into t even at 512 x 512. A ring (``core_ratio`` > 0: the pillar keeps a coaxial
    hole, the hole a coaxial post) is the disc minus its core, coefficient by coefficient; its boundaries
    are concentric circles, so the azimuthal tangent field holds for it too.
    """
    e = np.conj(complex(eps))
    inner, outer = (e, 1.0 + 0j) if kind == "pillar" else (1.0 + 0j, e)
    radii = [cell_fill_radius(kind, float(f), period_mm, lattice, core_ratio) for f in fills]
    if max(radii) > period_mm / 2 + 1e-12:
        touch = touching_fill(lattice) * (1 - core_ratio**2)
        raise ValueError(f"discs wider than the cell (pillars above fill {touch:.4f}, holes below {1 - touch:.4f} "
                         f"on a {lattice} lattice) are not isolated discs; the rigorous tables stop at touching")
    orders = _orders(terms, lattice)
    diff = orders[:, None, :] - orders[None, :, :]

    def ring(radius, a, b):
        """Return the matrix of a ring of value a in b: the disc's series minus its core's (both centred)."""
        core = _disc_convolution(diff, core_ratio * radius / period_mm, a, b, lattice) - b * np.all(diff == 0, -1)
        return _disc_convolution(diff, radius / period_mm, a, b, lattice) - core

    eps_hat = np.stack([ring(r, inner, outer) for r in radii])
    eta_hat = np.stack([ring(r, 1 / inner, 1 / outer) for r in radii])
    return solve_fourier(eps_hat, eta_hat, _tangent_blocks(terms, lattice), period_mm=period_mm, freq_ghz=freq_ghz,
                         terms=terms, lattice=lattice)


def _disc_convolution(diff: np.ndarray, radius_over_period: float, inner: complex, outer: complex,
                      lattice: str = "square") -> np.ndarray:
    """Return the Toeplitz matrix of a centred disc's Fourier coefficients at order differences ``diff``:
    (inner - outer) (pi r^2 / A) 2 J1(|G| r) / (|G| r), plus ``outer`` at G = 0 (A the cell's area)."""
    from scipy.special import j1

    g = _reciprocal(diff, lattice)
    x = np.hypot(g[..., 0], g[..., 1]) * radius_over_period
    shape = np.where(x == 0, 1.0, 2 * j1(x) / np.where(x == 0, 1.0, x))
    hat = (inner - outer) * np.pi * radius_over_period**2 / cell_area(lattice) * shape
    return hat + outer * np.all(diff == 0, axis=-1)


@functools.lru_cache(maxsize=8)
def _tangent_blocks(terms: int, lattice: str = "square", n: int = 512) -> np.ndarray:
    """Return the Fourier matrices of the circle tangent's projectors [[Pyy, Pyx], [Pxy, Pxx]] (Liu 2012, eq. 50).

    The field is azimuthal about the nearest disc centre (within each Wigner-Seitz cell), sampled on the
    cell's own parallelogram grid, so its FFT gives the coefficients of exp(i G . r). They depend on
    angle only, so one set serves every radius and period.
    """
    orders = _orders(terms, lattice)
    diff = orders[:, None, :] - orders[None, :, :]
    a = ((np.arange(n) + n // 2) % n - n // 2) / n  # the disc's centre at sample (0, 0), as in _disc_convolution
    frac = np.stack(np.meshgrid(a, a, indexing="ij"), axis=-1)
    shifts = np.array([(0, 0)] + [(i, j) for i in (-1, 0, 1) for j in (-1, 0, 1) if (i, j) != (0, 0)])
    xy = (frac[None] - shifts[:, None, None, :]) @ _unit_vectors(lattice)
    r2 = np.sum(xy**2, axis=-1)
    x, y = np.take_along_axis(xy, np.argmin(r2, axis=0)[None, ..., None], axis=0)[0].transpose(2, 0, 1)
    r = np.hypot(x, y)
    r[0, 0] = 1.0
    tx, ty = -y / r, x / r
    tx[0, 0] = ty[0, 0] = np.sqrt(0.5)         # the centre has no direction: split evenly, the cross term cancels
    projectors = [tx * tx, tx * ty, tx * ty, ty * ty]     # Pyy, Pyx, Pxy, Pxx for a real field
    projectors[1][0, 0] = projectors[2][0, 0] = 0.0
    m = [(np.fft.fft2(t) / n**2)[diff[..., 0] % n, diff[..., 1] % n] for t in projectors]
    return np.block([[m[0], m[1]], [m[2], m[3]]])


def solve_fourier(eps_hat: np.ndarray, eta_hat: np.ndarray, tangent_blocks: np.ndarray, *, period_mm: float,
                  freq_ghz: float, terms: int, lattice: str = "square") -> list[LayerModes]:
    """Return the layer modes from Fourier matrices (m, N, N): the normal-vector eigenproblem (Liu 2012, eq. 28, 51).

    eps_hat, eta_hat : Toeplitz matrices of eps and 1 / eps (fmmax's sign); tangent_blocks : (2N, 2N) the
    tangent projectors' matrices [[Pyy, Pyx], [Pxy, Pxx]] in the expansion's order.
    """
    zeros = np.zeros_like(eps_hat)
    delta = eps_hat - np.linalg.inv(eta_hat)
    e2 = (np.block([[eps_hat, zeros], [zeros, eps_hat]])
          - np.block([[delta, zeros], [zeros, delta]]) @ tangent_blocks[None])
    kx, ky = _wavevectors(period_mm, terms, lattice)
    omega = 2 * np.pi / float(wavelength_mm(freq_ghz))
    # script-k and k matrices of Liu 2012, eq. 19 and 23 (as fmmax.fmm_matrices builds them), mu = 1
    inv_kx, inv_ky = np.linalg.solve(eps_hat, np.diag(kx)), np.linalg.solve(eps_hat, np.diag(ky))
    script_k = np.block([[ky[:, None] * inv_ky, -ky[:, None] * inv_kx], [-kx[:, None] * inv_ky, kx[:, None] * inv_kx]])
    ok = omega**2 * np.eye(2 * len(kx)) - script_k
    k_matrix = np.block([[np.diag(kx * kx), np.diag(kx * ky)], [np.diag(ky * kx), np.diag(ky * ky)]])
    q2, phi = np.linalg.eig(e2 @ ok - k_matrix)
    q = np.sqrt(q2)
    return [LayerModes(_forward(q[i]), phi[i], ok[i]) for i in range(len(eps_hat))]


def solve_uniform(*, eps: complex, period_mm: float, freq_ghz: float, terms: int,
                  lattice: str = "square") -> LayerModes:
    """Return the plane-wave modes of a uniform layer (air or the bulk material) in the same expansion.

    As fmmax's uniform solve (Liu 2012, eq. 19 and 26), in numpy: jax's first dispatch of each small
    operation costs seconds, which a table would pay for two matrices it can write down.
    """
    kx, ky = _wavevectors(period_mm, terms, lattice)
    e, omega = np.conj(complex(eps)), 2 * np.pi / float(wavelength_mm(freq_ghz))
    q = _forward(np.tile(np.sqrt(e * omega**2 - kx**2 - ky**2 + 0j), 2))
    script_k = np.block([[np.diag(ky * ky / e), np.diag(-ky * kx / e)], [np.diag(-kx * ky / e), np.diag(kx * kx / e)]])
    return LayerModes(q, np.eye(2 * len(kx), dtype=complex), omega**2 * np.eye(2 * len(kx)) - script_k)


def _wavevectors(period_mm: float, terms: int, lattice: str = "square") -> tuple[np.ndarray, np.ndarray]:
    """Return k + G of every term at normal incidence: the lattice's reciprocal vectors over the period."""
    g = _reciprocal(_orders(terms, lattice).astype(float), lattice) / period_mm
    return g[:, 0], g[:, 1]


def _forward(q: np.ndarray) -> np.ndarray:
    """Return q with the forward sign: decaying (Im q > 0), or Re q > 0 where the loss is round-off."""
    q = np.sqrt(q * q)
    tiny = np.abs(q.imag) <= 1e-12 * np.maximum(np.abs(q), 1e-30)
    return np.where(tiny, np.abs(q.real) + 0j, np.where(q.imag < 0, -q, q))


def _interface(a: LayerModes, b: LayerModes):
    """Return Whittaker's interface matrices (i11, i12) from layer a to layer b (1999, eq. 5.3)."""
    lhs = a.omega_k @ a.phi
    term1 = a.q[:, None] * np.linalg.solve(lhs, b.omega_k @ b.phi / b.q[None, :])
    term2 = np.linalg.solve(lhs, a.omega_k @ b.phi)
    return 0.5 * (term1 + term2), 0.5 * (term2 - term1)


def _extend(s, layer: LayerModes, thickness: float, nxt: LayerModes, next_thickness: float):
    """Return the S-matrix blocks with ``nxt`` appended (Whittaker 1999, eq. 5.4).

    Whittaker's blocks: a_end = s11 a_start + s12 b_end, b_start = s21 a_start + s22 b_end, with
    forward amplitudes taken at a layer's start and backward ones at its end.
    """
    s11, s12, s21, s22 = s
    i11, i12 = _interface(layer, nxt)
    fd, fd_next = np.exp(1j * layer.q * thickness), np.exp(1j * nxt.q * next_thickness)
    term3 = i11 - fd[:, None] * s12 @ i12
    s11n = np.linalg.solve(term3, fd[:, None] * s11)
    s12n = np.linalg.solve(term3, (fd[:, None] * s12 @ i11 - i12) * fd_next[None, :])
    return s11n, s12n, s22 @ i12 @ s11n + s21, s22 @ i12 @ s12n + s22 @ i11 * fd_next[None, :]


def _stack(layers: list[tuple[LayerModes, float]]):
    """Return the S-matrix blocks of layers (modes, thickness); the outer two are zero thickness."""
    eye = np.eye(len(layers[0][0].q), dtype=complex)
    s = (eye, np.zeros_like(eye), np.zeros_like(eye), eye)
    for (layer, thickness), (nxt, next_thickness) in zip(layers[:-1], layers[1:]):
        s = _extend(s, layer, thickness, nxt, next_thickness)
    return s


def lower_stack(*, air: LayerModes, base: LayerModes | None, base_mm: float):
    """Return the S-matrix of air | base (the part every cell of a table shares), ending in the base."""
    if base is None or base_mm <= 0:
        return None
    return _stack([(air, 0.0), (base, base_mm)]), base, base_mm


def cell_stack(*, air: LayerModes, lower, cell: LayerModes, heights_mm) -> CellStack:
    """Return t and r of air | base | cell layer | air for every height, from one set of layer modes.

    ``lower`` is ``lower_stack(...)`` (None: no base). The layer's propagation diag(D) sits between
    two fixed S-matrices A = [air, base, layer] and B = [layer, air]; only the modes with |D| above
    round-off couple the faces, so the star product reduces (Woodbury) to a k x k solve over those
    k modes per height.
    """
    if lower is None:
        a11, a12, a21, a22 = _stack([(air, 0.0), (cell, 0.0)])
    else:
        s, base, base_mm = lower
        a11, a12, a21, a22 = _extend(s, base, base_mm, cell, 0.0)
    b11, b12, b21, b22 = _stack([(cell, 0.0), (air, 0.0)])
    j0 = 0  # the (0, 0) order is the expansion's first term, in the first polarisation block
    heights = np.asarray(heights_mm, dtype=float)
    t, r_in, r_out = (np.zeros(len(heights), dtype=complex) for _ in range(3))
    for i, h in enumerate(heights):
        d = np.exp(1j * cell.q * h)
        k = np.flatnonzero(np.abs(d) > _NEGLIGIBLE)
        dk, a12k, b21k = d[k], a12[np.ix_(k, k)], b21[np.ix_(k, k)]
        loop = np.eye(len(k)) - dk[:, None] * b21k * dk[None, :] @ a12k

        def through(v):
            """Return (1 - A12 B21')^-1 v on the k modes: the field after every round trip in the layer."""
            return v + a12k @ np.linalg.solve(loop, dk * (b21k @ (dk * v)))

        x = through(a11[k, j0])
        t[i] = b11[j0, k] @ (dk * x)
        r_in[i] = a21[j0, j0] + a22[j0, k] @ (dk * (b21k @ (dk * x)))
        r_out[i] = b12[j0, j0] + b11[j0, k] @ (dk * through(a12k @ (dk * b22[k, j0])))
    # fmmax's amplitudes reflect as the magnetic field does: minus the electric field's reflection.
    return CellStack(heights, np.conj(t), -np.conj(r_in), -np.conj(r_out))


def semi_infinite_reflection(air: LayerModes, cell: LayerModes) -> complex:
    """Return the zeroth-order reflection of air on a half-space of the cell layer (e^{+j omega t})."""
    _, _, a21, _ = _stack([(air, 0.0), (cell, 0.0)])
    return complex(-np.conj(a21[0, 0]))
