"""Scalar angular-spectrum propagation of a sampled field (Goodman, Fourier Optics, 2005, section 3.10).

Engineering sign (e^{+j omega t}): a forward plane wave is e^{-j kz z}, so the transfer function is
H = exp(-j 2 pi z sqrt(1/lambda^2 - fx^2 - fy^2)), evanescent waves decay as exp(-2 pi z sqrt(f^2 - 1/lambda^2)).
The field is zero-padded (window at least twice the field) against circular wrap-around, and H is
band-limited as Matsushima & Shimobaba, Opt. Express 17, 19662 (2009), so long distances do not alias.
"""

from __future__ import annotations

import numpy as np
from scipy import fft as sfft


class AngularSpectrum:
    """The angular spectrum of one field, ready to be propagated to any distance along +z.

    field : (ny, nx) complex, sampled at ``cell_mm`` on a square grid
    paraxial : use the Fresnel transfer function e^{-jkz} exp(+j pi lambda z f^2) (Goodman section 4.2)
    """

    def __init__(self, field: np.ndarray, *, cell_mm: float, wavelength_mm: float, pad: float = 2.0,
                 paraxial: bool = False) -> None:
        ny, nx = field.shape
        self.shape = (ny, nx)
        self.cell_mm = float(cell_mm)
        self.wavelength_mm = float(wavelength_mm)
        self.paraxial = paraxial
        self.padded = (sfft.next_fast_len(int(np.ceil(ny * pad))), sfft.next_fast_len(int(np.ceil(nx * pad))))
        self.offset = ((self.padded[0] - ny) // 2, (self.padded[1] - nx) // 2)
        big = np.zeros(self.padded, dtype=complex)
        big[self.offset[0]:self.offset[0] + ny, self.offset[1]:self.offset[1] + nx] = field
        self.spectrum = sfft.fft2(big, workers=-1)
        self.fy = sfft.fftfreq(self.padded[0], d=cell_mm)[:, None]
        self.fx = sfft.fftfreq(self.padded[1], d=cell_mm)[None, :]

    def transfer(self, z_mm: float) -> np.ndarray:
        """Return the band-limited transfer function H(fx, fy) for distance z."""
        return self._transfer(self.fx, self.fy, z_mm)

    def _transfer(self, fx: np.ndarray, fy: np.ndarray, z_mm: float) -> np.ndarray:
        lam = self.wavelength_mm
        f2 = fx**2 + fy**2
        if self.paraxial:
            h = np.exp(-2j * np.pi * z_mm / lam) * np.exp(1j * np.pi * lam * z_mm * f2)
        else:
            arg = 1.0 / lam**2 - f2
            kz = np.sqrt(np.abs(arg))
            # Back-propagation (z < 0) drops the evanescent waves rather than growing them.
            h = np.where(arg >= 0, np.exp(-2j * np.pi * z_mm * kz), np.exp(-2 * np.pi * abs(z_mm) * kz))
        # Band limit: u_lim = 1 / (lambda sqrt((2 du z)^2 + 1)), du the padded window's frequency step.
        lim_x = 1.0 / (lam * np.sqrt((2 * z_mm / (self.padded[1] * self.cell_mm)) ** 2 + 1))
        lim_y = 1.0 / (lam * np.sqrt((2 * z_mm / (self.padded[0] * self.cell_mm)) ** 2 + 1))
        return h * ((np.abs(fx) < lim_x) & (np.abs(fy) < lim_y))

    def plane(self, z_mm: float, *, padded: bool = False) -> np.ndarray:
        """Return the field at distance z on the original (ny, nx) window, or on the padded one."""
        full = sfft.ifft2(self.spectrum * self.transfer(z_mm), workers=-1)
        if padded:
            return full
        (oy, ox), (ny, nx) = self.offset, self.shape
        return full[oy:oy + ny, ox:ox + nx]

    def on_axis(self, z_mm: np.ndarray, index: tuple[int, int]) -> np.ndarray:
        """Return the field at one sample (row, col of the original window) at evenly spaced distances.

        Each value is one inverse-DFT coefficient, sum_k A_k H_k(z) e^{j 2 pi k.p} / N, so a fine scan
        along the axis costs no FFTs: H is stepped by multiplying with H(dz), and each plane wave
        leaves the sum at the distance where the band limit drops it. Evanescent waves are left out
        (they are gone within a few wavelengths).
        """
        z = np.asarray(z_mm, dtype=float)
        w, kz, z_cut = self._axis_terms(index)
        step = z[1] - z[0] if len(z) > 1 else 0.0
        if self.paraxial or (len(z) > 2 and not np.allclose(np.diff(z), step)):
            raise ValueError("on_axis needs evenly spaced distances and the exact transfer function")
        term = w * np.exp(-2j * np.pi * z[0] * kz)
        factor = np.exp(-2j * np.pi * step * kz)
        # The terms come sorted by cut-off, longest first, so the ones still in the sum form a prefix.
        count = len(z_cut) - np.searchsorted(z_cut[::-1], z, side="right")
        out = np.empty(len(z), dtype=complex)
        for i in range(len(z)):
            out[i] = term[:count[i]].sum()
            term *= factor
        return out

    def _axis_terms(self, index: tuple[int, int]):
        """Return the weights, kz and band-limit cut-off distance of the plane waves that matter."""
        py, px = index[0] + self.offset[0], index[1] + self.offset[1]
        ky = np.arange(self.padded[0])[:, None] * py / self.padded[0]
        kx = np.arange(self.padded[1])[None, :] * px / self.padded[1]
        weights = self.spectrum * np.exp(2j * np.pi * (ky + kx)) / (self.padded[0] * self.padded[1])
        fx = np.broadcast_to(self.fx, self.padded)
        fy = np.broadcast_to(self.fy, self.padded)
        arg = 1.0 / self.wavelength_mm**2 - fx**2 - fy**2
        keep = (np.abs(weights) > np.abs(weights).max() * 1e-9) & (arg >= 0)
        fx, fy, arg = np.abs(fx[keep]), np.abs(fy[keep]), arg[keep]
        lam = self.wavelength_mm
        with np.errstate(divide="ignore"):
            # |f| < 1 / (lambda sqrt((2 z / L)^2 + 1))  <=>  z < L/2 sqrt(1 / (lambda f)^2 - 1)
            cut_x = self.padded[1] * self.cell_mm / 2 * np.sqrt(np.maximum(1 / (lam * fx) ** 2 - 1, 0))
            cut_y = self.padded[0] * self.cell_mm / 2 * np.sqrt(np.maximum(1 / (lam * fy) ** 2 - 1, 0))
        cut = np.minimum(cut_x, cut_y)
        order = np.argsort(-cut, kind="stable")
        return weights[keep][order], np.sqrt(arg)[order], cut[order]
