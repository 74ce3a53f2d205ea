"""Rigorous zero-order reflection and transmission of lamellar (1-D binary) gratings at normal incidence.

A window's matching grooves are a lamellar grating: ridges of the material, ``fill`` of each period wide,
in air. Zeroth-order effective-medium theory (Rytov 1956) treats them as a uniform layer, which holds only
for periods well below the wavelength in the material; near the no-diffraction limit the grooves reflect an
order of magnitude more than it says. This module solves them by the Fourier modal method (rigorous
coupled-wave analysis, Moharam, Grann, Pommet & Gaylord, J. Opt. Soc. Am. A 12, 1068, 1995), with the
inverse rule for the field across the ridges (Li, J. Opt. Soc. Am. A 13, 1870, 1996; Lalanne & Morris,
J. Opt. Soc. Am. A 13, 779, 1996) and layers joined by scattering matrices (Rumpf, Prog. Electromagn. Res. B
35, 241, 2011), which stay stable however deep the evanescent orders decay.

Polarisation: ``"along"``, the electric field along the ridges (TE); ``"across"``, across them (TM).
Conventions: the project's e^{+j omega t}, a lossy permittivity eps' (1 - j tan delta); internally the
physics convention e^{-i omega t}, so the permittivities are conjugated going in and r, t coming out.
r and t are of the tangential electric field, both faces in air (or ``exit_eps`` behind the last layer).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from services.optics.materials import wavelength_mm

POLARISATIONS = ("along", "across")
ORDERS = 41  # diffraction orders kept (-20..20): the window's face reflectance within 1e-4 of 81 orders


@dataclass(frozen=True, slots=True)
class Grating:
    """One lamellar layer: ridges of permittivity ``eps`` (project convention), ``fill`` of each period wide."""

    eps: complex
    fill: float
    thickness_mm: float


@dataclass(frozen=True, slots=True)
class Uniform:
    """One uniform layer of permittivity ``eps`` (project convention)."""

    eps: complex
    thickness_mm: float


@dataclass(frozen=True, slots=True)
class ZeroOrder:
    """The zero order's amplitudes (project convention) and the powers reflected and transmitted in all orders."""

    r: complex
    t: complex
    reflectance: float  # every propagating reflected order (only the zeroth below the no-diffraction limit)
    transmittance: float


def zero_order(layers: Sequence[Grating | Uniform], *, period_mm: float, freq_ghz: float, polarisation: str,
               exit_eps: complex = 1.0, orders: int = ORDERS) -> ZeroOrder:
    """Return what a plane wave from air, at normal incidence, does through ``layers`` (in the order it meets
    them) into ``exit_eps`` (a half space: 1 for air)."""
    te, kx = _orders(polarisation, orders, period_mm, freq_ghz)
    k0 = 2 * np.pi / float(wavelength_mm(freq_ghz))
    entry = _uniform_modes(1.0, kx, te)
    exit_ = _uniform_modes(np.conj(complex(exit_eps)), kx, te)
    solved: dict[tuple, _Modes] = {}  # a window's two faces are one grating: its modes are solved once
    s = _reflection_side(entry)
    for layer in layers:
        fill = float(layer.fill) if isinstance(layer, Grating) else None
        key = (complex(layer.eps), fill)
        if key not in solved:
            eps = np.conj(complex(layer.eps))
            solved[key] = _uniform_modes(eps, kx, te) if fill is None else _grating_modes(eps, fill, kx, te)
        s = _star(s, _layer_s(solved[key], layer.thickness_mm * k0))
    s = _star(s, _transmission_side(exit_))
    zeroth = orders // 2
    back, through = s[0][:, zeroth], s[2][:, zeroth]
    # Power per order: the flux of each order over the incident one's (Re q for TE, Re q / eps for TM's H field).
    flux_in, flux_out = np.real(np.diag(entry.v)), np.real(np.diag(exit_.v))
    reflectance = float(np.sum(flux_in * np.abs(back) ** 2) / flux_in[zeroth])
    transmittance = float(np.sum(flux_out * np.abs(through) ** 2) / flux_in[zeroth])
    r, t = _project_r(back[zeroth], te), through[zeroth]
    if not te:  # the amplitudes are of H_y: the tangential E is H times q / eps in each half space
        t = t * exit_.q[zeroth] / np.conj(complex(exit_eps)) / entry.q[zeroth]
    return ZeroOrder(r, complex(np.conj(t)), reflectance, transmittance)


def _project_r(r_amplitude: complex, te: bool) -> complex:
    """Return the zero order's reflection of the tangential E field, project convention, from the solver's
    amplitude (of E_y for TE; of H_y for TM, whose backward wave's tangential E has the opposite sign)."""
    return complex(np.conj(r_amplitude if te else -r_amplitude))


def _orders(polarisation: str, orders: int, period_mm: float, freq_ghz: float) -> tuple[bool, np.ndarray]:
    """Return (TE?, each order's kx / k0 at normal incidence), refusing a polarisation or an order count that is not."""
    if polarisation not in POLARISATIONS:
        raise ValueError(f"polarisation must be one of {POLARISATIONS}, not {polarisation!r}")
    if orders < 1 or orders % 2 == 0:
        raise ValueError("orders must be odd (the orders -m..m)")
    m = np.arange(-(orders // 2), orders // 2 + 1)
    return polarisation == "along", m * float(wavelength_mm(freq_ghz)) / period_mm


@dataclass(frozen=True, slots=True)
class _Modes:
    w: np.ndarray  # the modes' tangential E (TE) or H (TM) in the orders' basis
    v: np.ndarray  # their tangential H (TE) or E (TM), normalised to free space
    q: np.ndarray  # forward propagation constants / k0, Im q >= 0 (e^{-i omega t})


def _forward(q2: np.ndarray) -> np.ndarray:
    """Return sqrt(q2) on the branch that propagates or decays forward (Im q >= 0, and Re q >= 0 when real)."""
    q = np.sqrt(q2.astype(complex))
    return np.where((q.imag < 0) | ((q.imag == 0) & (q.real < 0)), -q, q)


def _uniform_modes(eps: complex, kx: np.ndarray, te: bool) -> _Modes:
    q = _forward(eps - kx**2)
    v = q if te else q / eps
    return _Modes(np.eye(len(kx), dtype=complex), np.diag(v), q)


def _grating_modes(eps: complex, fill: float, kx: np.ndarray, te: bool) -> _Modes:
    """Return the eigenmodes of a lamellar layer: ridges ``eps`` centred in each period, ``fill`` wide, in air."""
    n = len(kx)
    e_hat, inv_hat = _ridge_fourier(eps, fill, n), _ridge_fourier(1 / eps, fill, n, background=1.0)
    idx = np.arange(n)
    toeplitz = idx[:, None] - idx[None, :] + (n - 1)  # m - n, shifted into the coefficient array
    e_mat, inv_mat = e_hat[toeplitz], inv_hat[toeplitz]
    kx2 = np.diag(kx**2)
    if te:
        q2, w = np.linalg.eig(e_mat - kx2)
        q = _forward(q2)
        v = w * q[None, :]
    else:
        # E_x is normal to the ridges' walls: [eps E_x] = A^-1 E_x (inverse rule); E_z is tangential and
        # [E_z] = [(1/eps) dH/dx] = E^-1 [dH/dx] (Li 1996's rules for a product of two discontinuous factors).
        a_inv = np.linalg.inv(inv_mat)
        omega2 = a_inv @ (np.eye(n) - np.diag(kx) @ np.linalg.solve(e_mat, np.diag(kx)))
        q2, w = np.linalg.eig(omega2)
        q = _forward(q2)
        v = inv_mat @ w * q[None, :]
    return _Modes(w, v, q)


def _ridge_fourier(inside: complex, fill: float, orders: int, background: complex = 1.0) -> np.ndarray:
    """Return the Fourier coefficients m = -(orders - 1) .. orders - 1 of ridges ``fill`` of the period wide, centred,
    of value ``inside`` in ``background``: f (inside - background) sinc(m f), plus the background at m = 0."""
    m = np.arange(-(orders - 1), orders)
    out = (inside - background) * fill * np.sinc(m * fill)  # np.sinc(x) = sin(pi x) / (pi x)
    out = out.astype(complex)
    out[orders - 1] += background
    return out


# Every layer's scattering matrix is taken between zero-thickness reference media (Rumpf 2011): any with invertible
# W and V will do, and W = V = I (the identity) takes the most algebra out of the formulas below.


def _layer_s(modes: _Modes, phase_thickness: float) -> tuple:
    """Return a layer's symmetric scattering matrix between two reference media."""
    a, b = _interface(modes)
    x = np.diag(np.exp(1j * modes.q * phase_thickness))
    a_inv = np.linalg.inv(a)
    xba = x @ b @ a_inv
    d = a - xba @ x @ b
    s11 = np.linalg.solve(d, xba @ x @ a - b)
    s12 = np.linalg.solve(d, x @ (a - b @ a_inv @ b))
    return s11, s12, s12, s11


def _interface(modes: _Modes) -> tuple[np.ndarray, np.ndarray]:
    """Return (A, B) = (W^-1 + V^-1, W^-1 - V^-1) of a medium against the reference medium (Rumpf's A and B with
    W0 = V0 = I); for a half space their roles give the sides below."""
    w_inv, v_inv = np.linalg.inv(modes.w), np.linalg.inv(modes.v)
    return w_inv + v_inv, w_inv - v_inv


def _half_space(modes: _Modes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (A, B, A^-1) of a half space's medium seen from the reference medium (A = W + V, B = W - V)."""
    a, b = modes.w + modes.v, modes.w - modes.v
    return a, b, np.linalg.inv(a)


def _reflection_side(modes: _Modes) -> tuple:
    a, b, a_inv = _half_space(modes)
    return -a_inv @ b, 2 * a_inv, 0.5 * (a - b @ a_inv @ b), b @ a_inv


def _transmission_side(modes: _Modes) -> tuple:
    a, b, a_inv = _half_space(modes)
    return b @ a_inv, 0.5 * (a - b @ a_inv @ b), 2 * a_inv, -a_inv @ b


def _star(first: tuple, second: tuple) -> tuple:
    """Return the Redheffer star product of two scattering matrices (S11, S12, S21, S22)."""
    a11, a12, a21, a22 = first
    b11, b12, b21, b22 = second
    eye = np.eye(a11.shape[0])
    d = a12 @ np.linalg.inv(eye - b11 @ a22)
    f = b21 @ np.linalg.inv(eye - a22 @ b11)
    return a11 + d @ b11 @ a21, d @ b12, f @ a21, b22 + f @ a22 @ b12


def equivalent_layer(eps: complex, fill: float, *, period_mm: float, freq_ghz: float, polarisation: str,
                     orders: int = ORDERS) -> tuple[complex, complex]:
    """Return (n, z) of the uniform layer that stands for a lamellar layer (project convention): n the fundamental
    mode's index (the largest Re q), z the impedance over eta0 that gives the grating's exact reflection as a half
    space from air, r = (z - 1) / (z + 1)."""
    te, kx = _orders(polarisation, orders, period_mm, freq_ghz)
    modes = _grating_modes(np.conj(complex(eps)), float(fill), kx, te)
    fundamental = modes.q[np.argmax(modes.q.real)]
    s = _star(_reflection_side(_uniform_modes(1.0, kx, te)), _transmission_side(modes))
    r = _project_r(s[0][orders // 2, orders // 2], te)
    return complex(np.conj(fundamental)), (1 + r) / (1 - r)


TABLE_FILLS = tuple(np.round(np.linspace(0.01, 0.99, 99), 4))  # fills of the equivalent-layer table, interpolated
TABLE_ORDERS = 21  # the table's n and z within 1e-4 of 41 orders' on the default window's grooves (measured)
# Measured by tests/services/optics/test_grooves.py (the whole windows of the bound below against their cells).
EQUIVALENT_LAYER_BOUND = ("equivalent layers against the whole lamellar solution of grooved resin windows (130-150 GHz, "
                          "periods 0.6-1.2 mm, p n / lambda up to 1.0, both fields, effective-medium and rigorous "
                          "designs): R within 1.0 point, T within 3.3 points, phase of t within 3.5 deg; worst near "
                          "the no-diffraction limit, where orders just cut off in the core couple the two faces")


@dataclass(frozen=True, slots=True)
class GrooveSpec:
    """What an equivalent-layer table is for: frequencies, permittivities (project convention), period, field."""

    freqs_ghz: tuple[float, ...]
    eps: tuple[complex, ...]
    period_mm: float
    polarisation: str
    fills: tuple[float, ...] = TABLE_FILLS


@dataclass(frozen=True, slots=True, eq=False)
class GrooveTable:
    """Each frequency's equivalent layer (n, z) of the grooves at every table fill, read by linear interpolation:
    what ``cell_model.CellIndex`` reads for a declared groove texture, as it reads a rigorous cell table."""

    spec: GrooveSpec
    n: np.ndarray  # (nf, fills) complex
    z: np.ndarray

    def equivalent(self, fill) -> tuple[np.ndarray, np.ndarray]:
        fill = np.asarray(fill, dtype=float)
        grid = np.asarray(self.spec.fills)

        def read(values):
            return np.array([np.interp(fill, grid, row.real) + 1j * np.interp(fill, grid, row.imag) for row in values])

        return read(self.n), read(self.z)

    def to_dict(self) -> dict:
        return {"kind": "lamellar grating (grooves), equivalent layers", "method": "Fourier modal method, Li's "
                "inverse rule", "orders": TABLE_ORDERS, "period_mm": self.spec.period_mm,
                "electric_field": f"{self.spec.polarisation} the grooves", "freqs_ghz": list(self.spec.freqs_ghz),
                "accuracy": EQUIVALENT_LAYER_BOUND}


def groove_table(spec: GrooveSpec) -> GrooveTable:
    """Return the equivalent layers of the grooves for every frequency and table fill (about 2 ms each)."""
    n = np.empty((len(spec.freqs_ghz), len(spec.fills)), dtype=complex)
    z = np.empty_like(n)
    for i, (freq, eps) in enumerate(zip(spec.freqs_ghz, spec.eps)):
        for j, fill in enumerate(spec.fills):
            n[i, j], z[i, j] = equivalent_layer(eps, fill, period_mm=spec.period_mm, freq_ghz=freq,
                                                polarisation=spec.polarisation, orders=TABLE_ORDERS)
    return GrooveTable(spec, n, z)
