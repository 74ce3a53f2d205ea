"""Measured-material import: synthetic VNA measurements of flat samples with known eps_r and tan delta.

The measurements come from libraries outside the project: scikit-rf's Freespace medium (a slab between
free-space ports, optics notes section 2.4) and tmm (Byrnes, the physics e^{-i omega t} convention,
conjugated to Touchstone's e^{+j omega t}). Noise is complex Gaussian with a fixed seed.
"""

import numpy as np
import pytest

from services.errors import UnusableInput
from services.optics.material_fit import fit_material, phase_difference_index, read_sample
from services.optics.materials import wavelength_mm

EPS, TAND = 2.8, 0.02
N = np.sqrt(EPS)


def skrf_s2p(eps, tand, d_mm, f_ghz, noise=0.0, seed=0) -> bytes:
    """Return a .s2p of a slab between free-space ports, by scikit-rf's Freespace medium."""
    import skrf
    from skrf.media import Freespace

    freq = skrf.Frequency.from_f(np.asarray(f_ghz, dtype=float), unit="GHz")
    air = Freespace(frequency=freq, ep_r=1)
    net = Freespace(frequency=freq, ep_r=eps, ep_loss_tan=tand, z0_port=air.z0).line(d_mm * 1e-3, unit="m")
    rng = np.random.default_rng(seed)
    net.s = net.s + noise * (rng.normal(size=net.s.shape) + 1j * rng.normal(size=net.s.shape))
    net.name = "sample"
    return net.write_touchstone(return_string=True, form="ri").encode()


def tmm_s2p(eps, tand, d_mm, f_ghz, noise=0.0, seed=0) -> bytes:
    """Return a .s2p of the same slab computed by tmm (conjugated: tmm uses e^{-i omega t})."""
    import skrf
    import tmm

    n = np.sqrt(eps * (1 + 1j * tand))
    s = np.empty((len(f_ghz), 2, 2), dtype=complex)
    for i, f in enumerate(f_ghz):
        res = tmm.coh_tmm("s", [1, n, 1], [np.inf, d_mm, np.inf], 0, float(wavelength_mm(f)))
        # tmm's r for s-polarisation is the field ratio E_r / E_i; in the line picture S11 = r.
        s[i] = [[np.conj(res["r"]), np.conj(res["t"])], [np.conj(res["t"]), np.conj(res["r"])]]
    rng = np.random.default_rng(seed)
    s = s + noise * (rng.normal(size=s.shape) + 1j * rng.normal(size=s.shape))
    net = skrf.Network(frequency=skrf.Frequency.from_f(np.asarray(f_ghz, dtype=float), unit="GHz"), s=s,
                       name="sample")
    return net.write_touchstone(return_string=True, form="ri").encode()


W_BAND = np.linspace(75.0, 110.0, 36)


def within_stated_uncertainty(fit, eps, tand):
    """Return the share of frequencies where both truths lie within 2 sigma, and the worst miss in sigmas."""
    z_eps = np.abs(fit.eps_r - eps) / fit.eps_r_sigma
    z_tand = np.abs(fit.tan_delta - tand) / fit.tan_delta_sigma
    return float(np.mean((z_eps < 2) & (z_tand < 2))), float(max(z_eps.max(), z_tand.max()))


def test_two_thicknesses_recover_eps_and_tan_delta_within_the_stated_uncertainty():
    """2 mm and 5 mm samples, noise 0.003: eps_r 2.8 and tan delta 0.02 recovered within the stated 1-sigma bars."""
    samples = [read_sample("thin.s2p", skrf_s2p(EPS, TAND, 2.0, W_BAND, 0.003, 1), 2.0),
               read_sample("thick.s2p", skrf_s2p(EPS, TAND, 5.0, W_BAND, 0.003, 2), 5.0)]
    fit = fit_material(samples)
    share, worst = within_stated_uncertainty(fit, EPS, TAND)
    assert share > 0.85 and worst < 5  # a Gaussian puts 91 % of pairs within 2 sigma
    assert np.all(fit.eps_r_sigma < 0.01) and np.all(fit.tan_delta_sigma < 0.002)
    assert "phase difference" in fit.first_guess and fit.rms_misfit == pytest.approx(0.003, rel=0.3)


def test_one_tmm_sample_recovers_a_lossier_resin():
    """One 3 mm sample computed by tmm, eps 2.97 and tan delta 0.09 at 300-330 GHz, is recovered too."""
    f = np.linspace(300.0, 330.0, 16)
    fit = fit_material([read_sample("resin.s2p", tmm_s2p(2.97, 0.09, 3.0, f, 0.002, 3), 3.0)])
    share, worst = within_stated_uncertainty(fit, 2.97, 0.09)
    assert share > 0.85 and worst < 4
    assert fit.eps_r == pytest.approx(2.97, abs=0.02) and fit.tan_delta == pytest.approx(0.09, abs=0.005)


def test_the_saved_rows_carry_the_source_and_the_uncertainty():
    """At most five rows, inside the measured band, each naming who measured, the files and the 1-sigma bars."""
    fit = fit_material([read_sample("a.s2p", skrf_s2p(EPS, TAND, 2.0, W_BAND, 0.002, 4), 2.0)])
    rows = fit.rf_points("measured by Tarn Valley lab, 2026-12-03, a.s2p")
    assert len(rows) == 5 and all(75.0 <= r["freq_ghz"] <= 110.0 for r in rows)
    assert all("measured by Tarn Valley lab" in r["source"] and "1 sigma" in r["source"] for r in rows)
    assert [r["eps_r"] for r in rows] == pytest.approx([EPS] * 5, abs=0.01)


def test_the_phase_difference_gives_the_index_on_the_right_branch():
    """n = arg(S21_thin / S21_thick) / (k0 (d2 - d1)) (optics notes section 2.1 with P = exp(-j k0 n d)).

    2 mm and 7 mm at 75-110 GHz: k0 n (d2 - d1) is 16-19 rad, several turns, so the branch must come
    from a rough guess (1.5 here) and the unwrapped sweep; the Fabry-Perot ripple leaves < 2 % error.
    """
    thin = read_sample("thin.s2p", skrf_s2p(EPS, TAND, 2.0, W_BAND), 2.0)
    thick = read_sample("thick.s2p", skrf_s2p(EPS, TAND, 7.0, W_BAND), 7.0)
    n = phase_difference_index(thin, thick, n_ref=1.5)
    assert n == pytest.approx(np.full(len(W_BAND), N), rel=0.02)
    # The bare formula at 75 GHz, where the branch is the one nearest the true index.
    k0 = 2 * np.pi / wavelength_mm(75.0)
    dphi = np.angle(thin.s21[0] / thick.s21[0]) % (2 * np.pi)
    candidates = (dphi + 2 * np.pi * np.arange(5)) / (k0 * 5.0)
    assert n[0] == pytest.approx(candidates[np.argmin(np.abs(candidates - N))], abs=1e-9)


def test_a_file_that_is_not_touchstone_gets_a_sentence():
    with pytest.raises(UnusableInput) as err:
        read_sample("notes.s2p", b"this is a lab notebook page\n1 2 3\n", 2.0)
    assert err.value.code == "not_touchstone" and "option line" in err.value.message


def test_a_one_port_file_gets_a_sentence():
    with pytest.raises(UnusableInput) as err:
        read_sample("reflection.s1p", b"# GHz S RI R 50\n75 0.1 0.0\n80 0.1 0.0\n90 0.1 0.0\n", 2.0)
    assert err.value.code == "not_two_port" and "1-port" in err.value.message and ".s2p" in err.value.message


def test_files_without_a_common_band_get_a_sentence():
    a = read_sample("w.s2p", skrf_s2p(EPS, TAND, 2.0, W_BAND), 2.0)
    b = read_sample("d.s2p", skrf_s2p(EPS, TAND, 3.0, np.linspace(140.0, 220.0, 9)), 3.0)
    with pytest.raises(UnusableInput) as err:
        fit_material([a, b])
    assert err.value.code == "no_frequency_overlap" and "75-110 GHz" in err.value.message


def test_measurements_no_slab_explains_get_a_sentence():
    """Two files of very different materials given as one: the best common fit misses by far more than the noise."""
    a = read_sample("a.s2p", skrf_s2p(2.4, 0.005, 2.0, W_BAND), 2.0)
    b = read_sample("b.s2p", skrf_s2p(9.6, 0.001, 5.0, W_BAND), 5.0)
    with pytest.raises(UnusableInput) as err:
        fit_material([a, b])
    assert err.value.code == "fit_not_converged" and "thicknesses" in err.value.message


def test_a_missing_thickness_gets_a_sentence():
    with pytest.raises(UnusableInput, match="thickness"):
        read_sample("a.s2p", skrf_s2p(EPS, TAND, 2.0, W_BAND), 0.0)
