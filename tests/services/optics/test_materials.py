"""Material RF data in frequency: interpolation, extrapolation near the data, refusal far off, the band."""

import math
import re
from dataclasses import replace

import numpy as np
import pytest

from services.catalogue import materials as starter_materials
from services.errors import UnusableInput
from services.optics.materials import design_freqs_ghz, rf_values
from services.profiles import Material, RFPoint
from tests.services.optics.helpers import material

C0_M_S = 299_792_458.0


def two_point(**kw) -> Material:
    return replace(material(), rf=(RFPoint(100.0, 2.8, 0.02, "a"), RFPoint(1000.0, 3.0, 0.06, "b")), **kw)


def test_two_points_interpolate_straight_in_log_f_and_log_log():
    """eps_r is linear in log f between two points (PCHIP through two points is the chord); tan delta a power law."""
    rf = rf_values(two_point(), [100.0, np.sqrt(1e5), 1000.0])
    assert rf.eps_r == pytest.approx([2.8, 2.9, 3.0])
    # Power law through (100, 0.02) and (1000, 0.06): tan_delta = 0.02 (f/100)^log10(3), so sqrt(3) x 0.02 halfway.
    assert rf.tan_delta == pytest.approx([0.02, 0.02 * math.sqrt(3), 0.06])
    assert not rf.outside.any()


def test_pchip_never_overshoots_between_points():
    """A monotone table gives monotone eps_r in between (Fritsch & Carlson, SIAM J. Numer. Anal. 17, 238, 1980; from memory)."""
    mat = replace(material(), rf=(RFPoint(60.0, 2.5, 0.01, "a"), RFPoint(90.0, 2.5, 0.01, "b"),
                                  RFPoint(270.0, 2.9, 0.01, "c"), RFPoint(1000.0, 2.9, 0.01, "d")))
    f = np.geomspace(60.0, 1000.0, 200)
    eps = rf_values(mat, f).eps_r
    assert np.all(np.diff(eps) >= -1e-12) and eps.min() >= 2.5 - 1e-12 and eps.max() <= 2.9 + 1e-12
    assert eps[f < 90.0] == pytest.approx(2.5)  # flat data stays flat (a cubic spline would ripple here)


def test_near_the_data_it_extrapolates_with_the_end_trend_and_flags_it():
    """Within a factor 2: eps_r held, tan delta continues the end segment's power law; flagged outside."""
    rf = rf_values(two_point(), [50.0, 2000.0])
    slope = math.log10(3)  # log(0.06 / 0.02) / log(1000 / 100)
    assert rf.eps_r == pytest.approx([2.8, 3.0])
    assert rf.tan_delta == pytest.approx([0.02 * 0.5 ** slope, 0.06 * 2 ** slope])
    assert rf.outside.tolist() == [True, True]


@pytest.mark.parametrize("freq", [49.0, 2100.0])
def test_far_outside_the_data_it_refuses_and_says_the_rule(freq):
    """Beyond a factor 2 of the data's ends the check refuses with the rule and the usable range."""
    with pytest.raises(UnusableInput) as err:
        rf_values(two_point(), [100.0, freq])
    assert err.value.code == "frequency_far_outside_data"
    assert f"{freq:g} GHz" in err.value.message and "factor 2" in err.value.message
    assert "from 50 to 2000 GHz" in err.value.message


def test_one_point_is_held_and_named_as_one_point():
    """A single RF point is used as it is near its frequency, and the refusal names the one frequency."""
    mat = replace(material(), rf=(RFPoint(100.0, 2.48, 0.0075, "a"),))
    rf = rf_values(mat, [75.0, 100.0, 110.0])
    assert rf.eps_r == pytest.approx([2.48] * 3) and rf.outside.tolist() == [True, False, True]
    with pytest.raises(UnusableInput, match=r"\(100 GHz only\)"):
        rf_values(mat, [300.0])


def test_the_frequency_comes_from_the_user_the_requirements_or_the_material_band():
    """Given frequencies win, then the requirements' band, then the material's; with none it asks."""
    mat = two_point(band_ghz=(75.0, 110.0))
    assert design_freqs_ghz(mat, (90.0,)) == ((90.0,), None)
    freqs, note = design_freqs_ghz(mat, (), required_band_ghz=(220.0, 330.0))
    assert freqs == (220.0, 275.0, 330.0) and "requirements' band" in note
    freqs, note = design_freqs_ghz(mat)
    assert freqs == (75.0, 92.5, 110.0) and "75-110 GHz" in note
    with pytest.raises(UnusableInput) as err:
        design_freqs_ghz(replace(mat, band_ghz=None))
    assert err.value.code == "no_frequency" and "Give a design frequency" in err.value.message


def test_a_band_must_be_two_increasing_frequencies():
    """Material data with a reversed band is refused with a sentence naming the band."""
    data = two_point().to_dict()
    with pytest.raises(UnusableInput, match="110-75 GHz"):
        Material.from_dict({**data, "band_ghz": [110, 75]})
    assert Material.from_dict({**data, "band_ghz": [75, 110]}).band_ghz == (75.0, 110.0)


STARTERS = {m.slug: m for m in starter_materials()}


@pytest.mark.parametrize("slug", ["standard-resin", "tough-resin", "pla", "hips"])
def test_starter_data_reach_from_50_ghz_to_1_thz(slug):
    """The resins, PLA and HIPS answer anywhere from 50 GHz to 1 THz (inside their data or within a factor 2)."""
    rf = rf_values(STARTERS[slug], np.geomspace(50.0, 1000.0, 30))
    assert np.all(rf.eps_r > 2.0) and np.all(rf.tan_delta > 0)


def test_a_w_band_window_is_inside_the_resin_data():
    """90 GHz (W band) lies inside the standard resin's data: no extrapolation, no caution."""
    rf = rf_values(STARTERS["standard-resin"], [75.0, 90.0, 110.0])
    assert not rf.outside.any() and rf.eps_r == pytest.approx([2.772] * 3)


def test_every_starter_value_is_tagged_and_every_starter_has_a_band():
    """Each RF point names a source with a reference-notes tag; every starter has a band for checks without one."""
    for m in STARTERS.values():
        assert m.band_ghz == (75.0, 110.0), m.slug
        for p in m.rf:
            assert re.search(r"\[(S|S2|M|C)\]", p.source), (m.slug, p.freq_ghz)


def test_starter_loss_tangents_from_an_absorption_coefficient_follow_the_conversion():
    """tan delta = alpha_p c0 / (2 pi f n) (optics notes section 1; Pozar 2012 low-loss form, from memory)."""
    for slug, f_ghz, alpha_per_cm in (("pla", 500.0, 5.0), ("pla", 1000.0, 20.0), ("hips", 1000.0, 2.0)):
        (p,) = [p for p in STARTERS[slug].rf if p.freq_ghz == f_ghz]
        expected = alpha_per_cm * 100 * C0_M_S / (2 * math.pi * f_ghz * 1e9 * math.sqrt(p.eps_r))
        assert p.tan_delta == pytest.approx(expected, rel=2e-3), slug
