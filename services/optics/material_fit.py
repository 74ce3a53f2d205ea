"""A lab's own permittivity and loss tangent, fitted to free-space two-port measurements of flat samples.

Method: Nicolson-Ross-Weir (Nicolson & Ross, IEEE Trans. IM 19, 377, 1970; Weir, Proc. IEEE 62, 33,
1974; from memory) for a first guess; the 2 pi ambiguity of the transmission phase resolved from the
phase difference between two thicknesses, arg(S21_thin / S21_thick) ~ k0 n (d_thick - d_thin); then, at
every frequency, one least-squares fit of the Airy slab model (optics notes section 2.1) to S21 and S11 of
all samples together. Uncertainties are the square roots of the diagonal of s^2 (J^T J)^-1, s^2 the
residual variance pooled over the sweep (the usual least-squares covariance).

The reference planes are the sample's faces, in the e^{+j omega t} convention of Touchstone files.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import PurePath

import numpy as np

from services.errors import UnusableInput
from services.optics.materials import wavelength_mm
from services.optics.transfer import slab_airy

MAX_RMS_MISFIT = 0.1  # |S| units: a slab model that cannot come within 10 % of the incident wave does not fit
MIN_POINTS = 3
MAX_SAVED_POINTS = 5


@dataclass(frozen=True, slots=True, eq=False)
class Sample:
    """One flat sample's measurement: S11 and S21 at each frequency, its file name and thickness."""

    name: str
    thickness_mm: float
    freqs_ghz: np.ndarray
    s11: np.ndarray
    s21: np.ndarray


@dataclass(frozen=True, slots=True, eq=False)
class MaterialFit:
    """eps_r and tan delta at each common frequency, with 1-sigma uncertainties and the model's S-parameters."""

    samples: tuple[Sample, ...]
    freqs_ghz: np.ndarray
    eps_r: np.ndarray
    eps_r_sigma: np.ndarray
    tan_delta: np.ndarray
    tan_delta_sigma: np.ndarray
    rms_misfit: float
    first_guess: str

    def model(self, sample: Sample) -> tuple[np.ndarray, np.ndarray]:
        """Return the fitted (S11, S21) of a sample at the common frequencies."""
        t, r = slab_airy(self.eps_r, self.tan_delta, sample.thickness_mm, self.freqs_ghz)
        return r, t

    def rf_points(self, source: str) -> list[dict]:
        """Return up to five RF rows: inverse-variance means over equal log-frequency bins, uncertainty in the source."""
        edges = np.geomspace(self.freqs_ghz[0], self.freqs_ghz[-1] * (1 + 1e-12), min(MAX_SAVED_POINTS, len(self.freqs_ghz)) + 1)
        rows = []
        for lo, hi in zip(edges[:-1], edges[1:]):
            inside = (self.freqs_ghz >= lo) & (self.freqs_ghz < hi)
            if not inside.any():
                continue
            eps, eps_u = _weighted(self.eps_r[inside], self.eps_r_sigma[inside])
            tand, tand_u = _weighted(self.tan_delta[inside], self.tan_delta_sigma[inside])
            f = float(np.exp(np.log(self.freqs_ghz[inside]).mean()))
            rows.append({"freq_ghz": round(f, 3), "eps_r": round(eps, 4), "tan_delta": float(f"{tand:.4g}"),
                         "source": f"{source}; mean of {int(inside.sum())} fitted frequencies from {lo:.4g} to "
                                   f"{min(hi, self.freqs_ghz[-1]):.4g} GHz, eps_r +- {eps_u:.2g}, "
                                   f"tan_delta +- {tand_u:.2g} (1 sigma from the fit residuals)"})
        return rows

    def to_dict(self) -> dict:
        return {
            "samples": [{"name": s.name, "thickness_mm": s.thickness_mm} for s in self.samples],
            "freqs_ghz": self.freqs_ghz.tolist(), "eps_r": self.eps_r.tolist(), "eps_r_sigma": self.eps_r_sigma.tolist(),
            "tan_delta": self.tan_delta.tolist(), "tan_delta_sigma": self.tan_delta_sigma.tolist(),
            "rms_misfit": self.rms_misfit, "first_guess": self.first_guess,
        }


def _weighted(values: np.ndarray, sigmas: np.ndarray) -> tuple[float, float]:
    w = 1.0 / np.maximum(sigmas, 1e-12) ** 2
    mean = float(np.sum(w * values) / np.sum(w))
    # The larger of the propagated error and the scatter: a bin whose values disagree is not more certain.
    scatter = float(np.std(values) / np.sqrt(len(values))) if len(values) > 1 else 0.0
    return mean, max(float(1 / np.sqrt(np.sum(w))), scatter)


def read_sample(name: str, data: bytes, thickness_mm: float) -> Sample:
    """Read a two-port Touchstone file (.s2p) with scikit-rf; refuse what is not one with a sentence."""
    import skrf

    if not thickness_mm or thickness_mm <= 0:
        raise UnusableInput("bad_thickness", f"{name}: give the sample's thickness in mm (more than 0).")
    suffix = PurePath(name).suffix.lower()
    if suffix != ".s2p":
        ports = suffix[2:-1] if len(suffix) >= 4 and suffix[1] == "s" and suffix.endswith("p") else ""
        what = f"a {ports}-port file" if ports.isdigit() else "not a Touchstone two-port file (.s2p)"
        raise UnusableInput("not_two_port", f"{name} is {what}; export the sample's measurement as a two-port "
                            ".s2p file (S11, S21, S12, S22).")
    try:
        fid = io.StringIO(data.decode("utf-8", errors="strict"))
        fid.name = "sample.s2p"  # Touchstone 1.0 takes the port count from the extension
        # read_touchstone, not Network(file=...): the latter tries pickle.load first, unsafe on an upload.
        net = skrf.Network()
        net.read_touchstone(fid)
    except Exception:  # scikit-rf raises many kinds on bad text; all mean the same to the user
        raise UnusableInput("not_touchstone", f"{name} could not be read as a Touchstone file; it needs an option "
                            "line such as '# GHz S RI R 50' and one line of numbers per frequency.") from None
    if net.s.shape[1:] != (2, 2):
        raise UnusableInput("not_two_port", f"{name} holds a {net.s.shape[1]}-port measurement; the fit needs "
                            "transmission through the sample, a two-port (.s2p) file.")
    if len(net.f) < MIN_POINTS:
        raise UnusableInput("too_few_points", f"{name} has {len(net.f)} frequencies; the fit needs at least {MIN_POINTS}.")
    return Sample(name, float(thickness_mm), net.f / 1e9, net.s[:, 0, 0].copy(), net.s[:, 1, 0].copy())


def common_frequencies(samples: list[Sample]) -> list[Sample]:
    """Return the samples on the first one's frequencies inside the range every sample covers."""
    lo = max(s.freqs_ghz.min() for s in samples)
    hi = min(s.freqs_ghz.max() for s in samples)
    f = samples[0].freqs_ghz
    f = f[(f >= lo * (1 - 1e-12)) & (f <= hi * (1 + 1e-12))]
    if len(f) < MIN_POINTS:
        ranges = "; ".join(f"{s.name} {s.freqs_ghz.min():g}-{s.freqs_ghz.max():g} GHz" for s in samples)
        raise UnusableInput("no_frequency_overlap", f"The files share no common frequency range ({ranges}); "
                            "measure every sample over the same band.")

    def on(s: Sample, values):
        return np.interp(f, s.freqs_ghz, values.real) + 1j * np.interp(f, s.freqs_ghz, values.imag)

    return [Sample(s.name, s.thickness_mm, f, on(s, s.s11), on(s, s.s21)) for s in samples]


def nrw_index(s11, s21):
    """Return (n from the face reflection, transmission T through the sample) by Nicolson-Ross-Weir (mu = 1)."""
    s11 = np.where(np.abs(s11) < 1e-9, 1e-9, s11)
    x = (s11**2 - s21**2 + 1) / (2 * s11)
    root = np.sqrt(x**2 - 1 + 0j)
    gamma = np.where(np.abs(x + root) <= 1, x + root, x - root)
    t = (s11 + s21 - gamma) / (1 - (s11 + s21) * gamma)
    return (1 - gamma) / (1 + gamma), t


def index_from_transmission(t, k0_per_mm, thickness_mm: float, n_ref):
    """Return n from T = exp(-j k0 n d) on the 2 pi branch nearest a reference real index."""
    phase = -np.angle(t)
    m = np.round((np.real(n_ref) * k0_per_mm * thickness_mm - phase) / (2 * np.pi))
    return ((phase + 2 * np.pi * m) + 1j * np.log(np.abs(t))) / (k0_per_mm * thickness_mm)


def phase_difference_index(thin: Sample, thick: Sample, n_ref: float) -> np.ndarray:
    """Return n from arg(S21_thin / S21_thick) = k0 n (d_thick - d_thin), on the branch nearest n_ref.

    The difference of two thicknesses has far fewer wavelengths in it than either sample, so its branch
    is unambiguous from a rough NRW guess; multiple reflections enter both samples alike and mostly cancel.
    """
    k0 = 2 * np.pi / wavelength_mm(thin.freqs_ghz)
    dd = thick.thickness_mm - thin.thickness_mm
    phase = np.unwrap(np.angle(thin.s21 / thick.s21))
    # One 2 pi offset for the whole sweep: the unwrapped phase is continuous in frequency.
    m = np.round(np.median((n_ref * k0 * dd - phase) / (2 * np.pi)))
    return (phase + 2 * np.pi * m) / (k0 * dd)


def fit_material(samples: list[Sample]) -> MaterialFit:
    """Fit eps_r(f) and tan delta(f) to every sample's S11 and S21 at once; refuse a fit that does not converge."""
    from scipy.optimize import least_squares

    if not samples:
        raise UnusableInput("no_files", "Upload at least one .s2p file of a flat sample with its thickness.")
    samples = common_frequencies(samples)
    f = samples[0].freqs_ghz
    k0 = 2 * np.pi / wavelength_mm(f)
    n_guess, how = _first_guess(samples, k0)
    eps0 = np.real(n_guess**2)
    tand0 = np.clip(-np.imag(n_guess**2) / np.maximum(eps0, 1.0), 1e-5, 0.5)
    eps, tand, misfit = (np.empty(len(f)) for _ in range(3))
    inv_jtj, ssr, dof = [], 0.0, 0
    for i in range(len(f)):
        def residual(p, i=i):
            out = []
            for s in samples:
                t, r = slab_airy(p[0], p[1], s.thickness_mm, f[i])
                out += [t.real - s.s21[i].real, t.imag - s.s21[i].imag, r.real - s.s11[i].real, r.imag - s.s11[i].imag]
            return np.array(out)

        res = least_squares(residual, [max(eps0[i], 1.01), tand0[i]], bounds=([1.0, 0.0], [40.0, 2.0]),
                            x_scale=[1.0, 0.01], xtol=1e-12, ftol=1e-12)
        if not res.success:
            raise UnusableInput("fit_not_converged", f"The fit did not converge at {f[i]:.4g} GHz ({res.message}); "
                                "check the thicknesses and that every file measures the same material.")
        eps[i], tand[i] = res.x
        misfit[i] = np.sqrt(np.mean(res.fun**2))
        inv_jtj.append(np.diag(np.linalg.pinv(res.jac.T @ res.jac)))
        ssr, dof = ssr + 2 * res.cost, dof + len(res.fun) - 2
    # One residual variance for the sweep: the instrument's noise is the same at every frequency, and
    # a variance from a single frequency's few residuals would make some error bars absurdly small.
    sigma = np.sqrt(np.maximum(np.array(inv_jtj), 0.0) * ssr / max(dof, 1))
    eps_u, tand_u = sigma[:, 0], sigma[:, 1]
    rms = float(np.sqrt(np.mean(misfit**2)))
    if rms > MAX_RMS_MISFIT:
        worst = float(f[int(np.argmax(misfit))])
        raise UnusableInput("fit_not_converged", f"No uniform slab explains the measurements: the best fit misses "
                            f"them by {rms:.2f} rms (of the incident wave; worst at {worst:.4g} GHz, limit "
                            f"{MAX_RMS_MISFIT:g}). Check the thicknesses, that the reference planes are the sample's "
                            "faces, and that every file measures the same material.")
    return MaterialFit(tuple(samples), f, eps, eps_u, tand, tand_u, rms, how)


def _first_guess(samples: list[Sample], k0: np.ndarray) -> tuple[np.ndarray, str]:
    """Return a complex index per frequency: NRW, its branch resolved by the thickness difference when there is one."""
    by_thickness = sorted(samples, key=lambda s: s.thickness_mm)
    n_gamma = np.concatenate([nrw_index(s.s11, s.s21)[0] for s in samples])
    # Polymers barely disperse: the median of the face-reflection index is a safe branch reference.
    n_ref = float(np.clip(np.median(np.real(n_gamma)), 1.0, 6.0))
    thin, thick = by_thickness[0], by_thickness[-1]
    how = "Nicolson-Ross-Weir"
    if thick.thickness_mm - thin.thickness_mm > 1e-6:
        n_ref = phase_difference_index(thin, thick, n_ref)
        how += f", branch from the phase difference of {thin.name} and {thick.name}"
    _, t = nrw_index(thick.s11, thick.s21)
    return index_from_transmission(t, k0, thick.thickness_mm, n_ref), how


def merge_measured(existing_rows: list[dict], measured_rows: list[dict], band_ghz: tuple[float, float]) -> list[dict]:
    """Return the RF table with the measured rows in place of every earlier row inside the measured band."""
    lo, hi = band_ghz
    kept = [r for r in existing_rows if not lo <= float(r["freq_ghz"]) <= hi]
    return sorted(kept + list(measured_rows), key=lambda r: float(r["freq_ghz"]))
