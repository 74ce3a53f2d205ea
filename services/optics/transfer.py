"""Coherent 2x2 transfer matrices of stacked dielectric layers at normal incidence.

Engineering sign convention (e^{+j omega t}, Pozar): a lossy index has Im n < 0 and a forward wave
goes as e^{-j k0 n z}. Every function broadcasts, so one call handles every analysis cell and
frequency at once; only the loop over layers stays in Python.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from services.optics.materials import complex_index, wavelength_mm


def layer_abcd(n, thickness_mm, k0_per_mm, z=None):
    """Return the ABCD matrix of one layer normalised to free space (Pozar 2012, Table 4.1).

    A = D = cos(k0 n d), B = j z sin(k0 n d), C = j sin(k0 n d) / z: a line of impedance z eta0,
    z = 1 / n for a uniform material (an equivalent layer of a periodic cell brings its own z).
    """
    delta = k0_per_mm * n * thickness_mm
    cos, sin = np.cos(delta), np.sin(delta)
    z = 1 / n if z is None else z
    return cos, 1j * z * sin, 1j * sin / z, cos


def cascade(layers: Iterable[tuple[np.ndarray, float]], k0_per_mm):
    """Multiply the ABCD matrices of (index, thickness_mm) layers in the order the wave meets them."""
    a = b = c = d = None
    for n, thickness_mm in layers:
        la, lb, lc, ld = layer_abcd(n, thickness_mm, k0_per_mm)
        if a is None:
            a, b, c, d = la, lb, lc, ld
            continue
        a, b, c, d = a * la + b * lc, a * lb + b * ld, c * la + d * lc, c * lb + d * ld
    if a is None:
        one = np.ones_like(np.asarray(k0_per_mm), dtype=complex)
        return one, 0 * one, 0 * one, one
    return a, b, c, d


def cascade_abcd(layers: Iterable[tuple[np.ndarray, np.ndarray, float]], k0_per_mm):
    """Multiply the ABCD matrices of (index, impedance over eta0, thickness_mm) layers, first met first."""
    a = b = c = d = None
    for n, z, thickness_mm in layers:
        la, lb, lc, ld = layer_abcd(n, thickness_mm, k0_per_mm, z)
        if a is None:
            a, b, c, d = la, lb, lc, ld
            continue
        a, b, c, d = a * la + b * lc, a * lb + b * ld, c * la + d * lc, c * lb + d * ld
    return a, b, c, d


def s_parameters(a, b, c, d):
    """Return (S11, S21, S22) of a normalised ABCD matrix between free-space ports (Pozar Table 4.2)."""
    den = a + b + c + d
    return (a + b - c - d) / den, 2.0 / den, (-a + b - c + d) / den


def slab_airy(eps_r, tan_delta, thickness_mm, freq_ghz):
    """Return (t, r) of a uniform slab in air from the Airy sum (Born & Wolf section 7.6).

    r0 = (1 - n) / (1 + n), P = exp(-j k0 n d), t = (1 - r0^2) P / (1 - r0^2 P^2),
    r = r0 (1 - P^2) / (1 - r0^2 P^2).
    """
    n = complex_index(eps_r, tan_delta)
    r0 = (1 - n) / (1 + n)
    p = np.exp(-2j * np.pi / wavelength_mm(freq_ghz) * n * thickness_mm)
    den = 1 - r0**2 * p**2
    return (1 - r0**2) * p / den, r0 * (1 - p**2) / den
