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
        # Band limit: u_lim = 1 / (lambda sqrt((2 du z)^2 + 1)), du the padded window's frequency step.
        lim_x = 1.0 / (lam * np.sqrt((2 * z_mm / (self.padded[1] * self.cell_mm)) ** 2 + 1))
        lim_y = 1.0 / (lam * np.sqrt((2 * z_mm / (self.padded[0] * self.cell_mm)) ** 2 + 1))
        # H is taken only inside the band (at most the propagating square, a quarter of a window of cells of
        # lambda / 4), and is 0 outside it: one exp over the band, not two over the window.
        rows, cols = np.flatnonzero(np.abs(fy[:, 0]) < lim_y), np.flatnonzero(np.abs(fx[0]) < lim_x)
        h = np.zeros((fy.shape[0], fx.shape[1]), dtype=complex)
        if rows.size == 0 or cols.size == 0:
            return h
        # The band is an interval of non-negative and one of negative frequencies on each axis (fftfreq order).
        for r in _runs(rows):
            for c in _runs(cols):
                f2 = fx[0, c][None, :] ** 2 + fy[r, 0][:, None] ** 2
                if self.paraxial:
                    h[r, c] = np.exp(-2j * np.pi * z_mm / lam) * np.exp(1j * np.pi * lam * z_mm * f2)
                    continue
                arg = 1.0 / lam**2 - f2
                kz = np.sqrt(np.abs(arg))
                # Back-propagation (z < 0) drops the evanescent waves rather than growing them.
                h[r, c] = np.where(arg >= 0, np.exp(-2j * np.pi * z_mm * kz), np.exp(-2 * np.pi * abs(z_mm) * kz))
        return h

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
        magnitude = np.abs(self.spectrum)  # the weights' own: the phase factor below has modulus 1
        arg = 1.0 / self.wavelength_mm**2 - self.fx**2 - self.fy**2
        keep = (magnitude > magnitude.max() * 1e-9) & (arg >= 0)
        rows, cols = np.nonzero(keep)
        # exp(j 2 pi (k_y p_y / N_y + k_x p_x / N_x)) as the product of its two factors, taken where kept.
        phase_y = np.exp(2j * np.pi * np.arange(self.padded[0]) * py / self.padded[0])
        phase_x = np.exp(2j * np.pi * np.arange(self.padded[1]) * px / self.padded[1])
        weights = self.spectrum[keep] * phase_y[rows] * phase_x[cols] / (self.padded[0] * self.padded[1])
        fx, fy, arg = np.abs(self.fx[0, cols]), np.abs(self.fy[rows, 0]), arg[keep]
        lam = self.wavelength_mm
        with np.errstate(divide="ignore"):
            # |f| < 1 / (lambda sqrt((2 z / L)^2 + 1))  <=>  z < L/2 sqrt(1 / (lambda f)^2 - 1)
            cut_x = self.padded[1] * self.cell_mm / 2 * np.sqrt(np.maximum(1 / (lam * fx) ** 2 - 1, 0))
            cut_y = self.padded[0] * self.cell_mm / 2 * np.sqrt(np.maximum(1 / (lam * fy) ** 2 - 1, 0))
        cut = np.minimum(cut_x, cut_y)
        order = np.argsort(-cut, kind="stable")
        return weights[order], np.sqrt(arg)[order], cut[order]


def _runs(index: np.ndarray) -> list[slice]:
    """Return the ascending ``index`` as slices of consecutive values."""
    breaks = np.flatnonzero(np.diff(index) != 1) + 1
    return [slice(int(part[0]), int(part[-1]) + 1) for part in np.split(index, breaks)]
