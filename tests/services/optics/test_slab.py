"""Materials, attenuation and layered-slab transmission against published formulas and PyPI references."""

from dataclasses import replace

import numpy as np
import pytest

from services.errors import UnusableInput
from services.layers import build_layer_stack
from services.optics.cells import CellGrid
from services.optics.materials import attenuation_db_per_mm, rf_values
from services.optics.transfer import cascade, s_parameters, slab_airy
from services.optics.transmission import cell_sparams
from services.profiles import RFPoint
from tests.services.optics.helpers import box, material, part_from

FREQS = np.array([75.0, 90.0, 110.0])
# Airy / Fabry-Perot formula (Born & Wolf 7.6), computed in shared/references/optics.md section 2.3 [C]
SLAB_T = np.array([0.750801, 0.866972, 0.678039])
SLAB_R = np.array([0.158890, 0.001224, 0.193745])
SLAB_PHASE_DEG = np.array([61.617, -1.889, -82.641])  # arg S21, e^{+j omega t}


def test_attenuation_matches_pozar():
    """2.8 / 0.02 at 100 GHz loses 0.3046 dB/mm (Pozar 2012 section 1.4, exact plane-wave alpha)."""
    assert attenuation_db_per_mm(2.8, 0.02, 100.0) == pytest.approx(0.30460, abs=5e-5)
    assert attenuation_db_per_mm(2.8, 0.02, 1000.0) == pytest.approx(3.04601, abs=5e-5)
    assert attenuation_db_per_mm(11.68, 1e-4, 100.0) == pytest.approx(0.00311, abs=5e-6)


def test_airy_slab_reflection_phase_agrees_with_tmm():
    """The closed-form slab's r equals tmm's r conjugated for e^{+j omega t} (tmm.coh_tmm, Byrnes, PyPI)."""
    tmm = pytest.importorskip("tmm")
    _, r = slab_airy(2.8, 0.02, 2.0, FREQS)
    n = np.conj(np.sqrt(2.8 * (1 - 1j * 0.02)))  # tmm's e^{-i omega t}: n + i kappa
    ref = [tmm.coh_tmm("s", [1, n, 1], [np.inf, 2.0, np.inf], 0, 299.792458 / f)["r"] for f in FREQS]
    assert r == pytest.approx(np.conj(ref), abs=1e-12)


def test_airy_slab_matches_the_published_check_values():
    """The closed-form slab gives T, R and arg t of the 2 mm, 2.8 / 0.02 check case (Born & Wolf 7.6)."""
    t, r = slab_airy(2.8, 0.02, 2.0, FREQS)
    assert np.abs(t) ** 2 == pytest.approx(SLAB_T, abs=1e-6)
    assert np.abs(r) ** 2 == pytest.approx(SLAB_R, abs=1e-6)
    assert np.degrees(np.angle(t)) == pytest.approx(SLAB_PHASE_DEG, abs=1e-3)


def test_transfer_matrix_agrees_with_tmm_on_a_three_layer_stack():
    """An AR-coated slab through our ABCD cascade equals tmm.coh_tmm (Byrnes, PyPI) in T, R and phase."""
    tmm = pytest.importorskip("tmm")
    eps, tand = 2.8, 0.02
    layers_eps = [np.sqrt(eps) * (1 - 1j * tand), eps * (1 - 1j * tand), 1.9 * (1 - 1j * 0.01)]
    thick = [0.58, 3.1, 0.7]
    for f in FREQS:
        k0 = 2 * np.pi * f / 299.792458
        s11, s21, s22 = s_parameters(*cascade([(np.sqrt(e), d) for e, d in zip(layers_eps, thick)], k0))
        # tmm uses e^{-i omega t}: n + i kappa, i.e. the conjugate index; lengths in mm like ours.
        n_list = [1, *[np.conj(np.sqrt(e)) for e in layers_eps], 1]
        ref = tmm.coh_tmm("s", n_list, [np.inf, *thick, np.inf], 0, 299.792458 / f)
        assert abs(s21) ** 2 == pytest.approx(ref["T"], abs=1e-10)
        assert abs(s11) ** 2 == pytest.approx(ref["R"], abs=1e-10)
        assert np.angle(s21) == pytest.approx(-np.angle(ref["t"]), abs=1e-9)
        # The reflections in amplitude and phase (they go into the Touchstone file): tmm's r conjugated,
        # S22 being tmm's r of the stack turned round.
        assert s11 == pytest.approx(np.conj(ref["r"]), abs=1e-12)
        back = tmm.coh_tmm("s", n_list[::-1], [np.inf, *thick[::-1], np.inf], 0, 299.792458 / f)
        assert s22 == pytest.approx(np.conj(back["r"]), abs=1e-12)
        assert abs(s11 - s22) > 1e-3  # an asymmetric stack: the two ends really differ


def test_slab_agrees_with_scikit_rf_freespace_line():
    """scikit-rf's Freespace line renormalised to free space gives the same |S21|^2 and S21 (skrf, PyPI)."""
    rf = pytest.importorskip("skrf")
    from skrf.media import Freespace

    freq = rf.Frequency.from_f(FREQS, unit="GHz")
    air = Freespace(frequency=freq, ep_r=1)
    slab = Freespace(frequency=freq, ep_r=2.8, ep_loss_tan=0.02, z0_port=air.z0)
    ref = slab.line(2e-3, unit="m").s[:, 1, 0]
    t, _ = slab_airy(2.8, 0.02, 2.0, FREQS)
    assert np.abs(t) ** 2 == pytest.approx(np.abs(ref) ** 2, abs=1e-9)
    assert t == pytest.approx(ref, abs=1e-6)


def test_quarter_wave_matching_layer_cancels_reflection():
    """n_m = sqrt(n), t = lambda / (4 n_m) on a thick lossless slab gives R = 0 at 100 GHz (Pozar 2012 5.4)."""
    n = np.sqrt(2.8)
    n_m = np.sqrt(n)
    assert n_m == pytest.approx(1.29357, abs=1e-5)  # shared/references/optics.md table 2.2 [C]
    k0 = 2 * np.pi * 100.0 / 299.792458
    t_m = 299.792458 / 100.0 / (4 * n_m)
    assert t_m == pytest.approx(0.5794, abs=1e-4)
    # One matched face then a half-wave window: the only reflection left is the bare back face.
    s11, _, _ = s_parameters(*cascade([(n_m, t_m), (n, 20 * np.pi / k0 / n)], k0))
    bare = ((n - 1) / (n + 1)) ** 2
    assert abs(s11) ** 2 == pytest.approx(bare, rel=1e-6)
    s11_both, _, _ = s_parameters(*cascade([(n_m, t_m), (n, 5.0), (n_m, t_m)], k0))
    assert abs(s11_both) ** 2 < 1e-20


def test_meshed_slab_reproduces_the_airy_values_through_the_layer_stack():
    """A 2 mm box, sliced and rasterised, then averaged into cells, gives the Airy T per cell."""
    part = part_from(box(20.0, 20.0, 2.0), "slab")
    stack = build_layer_stack(part, pixel_mm=0.1, layer_height_mm=0.1)
    rf = rf_values(material(2.8, 0.02), FREQS)
    grid = CellGrid.around(axis_mm=(0.0, 0.0), half_extent_mm=(11.0, 11.0), cell_mm=0.5)
    sp = cell_sparams(stack, grid, rf)["nominal"]
    inside = np.abs(grid.x_mm) < 9.5
    block = sp.s21[:, inside][:, :, inside]
    assert np.abs(block) ** 2 == pytest.approx(np.broadcast_to(SLAB_T[:, None, None], block.shape), abs=1e-6)
    assert np.abs(sp.s11[:, 11, 11]) ** 2 == pytest.approx(SLAB_R, abs=1e-6)
    _, r = slab_airy(2.8, 0.02, 2.0, FREQS)
    assert sp.s11[:, 11, 11] == pytest.approx(r, abs=1e-6)  # amplitude and phase (Born & Wolf 7.6)
    assert sp.s22[:, 11, 11] == pytest.approx(r, abs=1e-6)  # a uniform slab reflects alike from both sides
    assert np.abs(sp.s21[:, 0, 0]) == pytest.approx(1.0, abs=1e-12)  # the void margin is air


def test_it_refuses_a_material_without_rf_data():
    """A material with no RF points cannot be analysed; the user is told to add data."""
    bare = replace(material(), name="Bare", rf=())
    with pytest.raises(UnusableInput) as err:
        rf_values(bare, [100.0])
    assert err.value.code == "no_rf_data"
