"""optics_report end to end: the report contract, as designed vs as printed, figures, Touchstone."""

from dataclasses import replace

import numpy as np
import pytest

from services.errors import UnusableInput
from services.layers import build_layer_stack
from services.optics import optics_report
from services.optics.transfer import slab_airy
from services.settings import OpticsSettings
from tests.services.optics.helpers import box, material, part_from, printer, revolve, zoned_lens

N = float(np.sqrt(2.8))
FREQS = (280.0, 300.0, 320.0)
KEYS = ("transmission_loss_db", "absorption_db", "reflection_db", "spillover_db")


@pytest.fixture(scope="module")
def zoned():
    """A 30 mm zoned plate for 300 GHz, f = 30 mm (Fresnel number 7.5), printed on a 50 um / 50 um grid."""
    part = zoned_lens(15.0, N, 30.0, 299.792458 / 300.0, base_mm=1.0, segments=192)
    bay = printer(pixel_mm=0.05, layer_mm=0.05)
    stack = build_layer_stack(part, pixel_mm=bay.pixel_mm, layer_height_mm=bay.layer_height_mm)
    calls = []
    result = optics_report(part=part, printed=stack, material=material(), printer=bay,
                           settings=OpticsSettings(freqs_ghz=FREQS, focal_length_mm=30.0, edge_taper_db=10.0),
                           progress=calls.append)
    return result, calls


def test_it_fills_the_report_contract(zoned):
    """Every per-frequency array is aligned with frequencies_ghz, and as_designed carries the same keys."""
    result, _ = zoned
    d = result.to_dict()
    assert d["frequencies_ghz"] == list(FREQS)
    for key in ("eps_r", "tan_delta", *KEYS):
        assert len(d[key]) == 3
    for key in KEYS:
        assert len(d["as_designed"][key]) == 3
    for key in ("intended_mm", "best_focus_mm", "fwhm_mm", "diffraction_limited_fwhm_mm", "strehl", "focusing_efficiency"):
        assert key in d["focus"] and key in d["as_designed"]["focus"]
    assert np.array(d["focus"]["fwhm_mm"]).shape == (3, 2)
    assert "far extreme" in d["distances_from"]
    assert d["illumination"]["edge_taper_db"] == pytest.approx(10.0)
    for key in KEYS[1:3]:
        assert all(v >= 0 for v in d[key])
    # absorption + reflection add up to the transmission loss (dB), by construction of the split
    assert np.add(d["absorption_db"], d["reflection_db"]) == pytest.approx(d["transmission_loss_db"], abs=2e-4)


def test_the_zoned_plate_focuses_near_its_design_distance(zoned):
    """The section 8 zoned plate at Fresnel number 7.5: its wavefront converges within 5 % of f, the intensity peak
    short of that (Li & Wolf 1981), and its focus scales with frequency like a zone plate's, f ~ nu (Goldsmith
    1998 ch. 5; Hristov 2000). The plate's zone faces are cut for a thin element (optics.md section 8), so under
    the thick model they bend the wave more than designed and it focuses a few per cent short (Snell at the face).
    """
    focus = zoned[0].to_dict()["focus"]
    assert focus["wavefront_focus_mm"][1] == pytest.approx(30.0, rel=0.05)
    assert focus["best_focus_mm"][1] < focus["wavefront_focus_mm"][1]
    ratio = focus["wavefront_focus_mm"][2] / focus["wavefront_focus_mm"][0]
    assert ratio == pytest.approx(320.0 / 280.0, rel=0.03)
    assert 0.8 < focus["strehl"][1] <= 1.05
    assert 0.95 < focus["fwhm_ratio"][1] < 1.1
    assert 0.3 < focus["focusing_efficiency"][1] < 1.0


def test_as_printed_stays_close_to_as_designed_on_a_fine_printer(zoned):
    """50 um layers at 300 GHz cost little: as-printed loss and Strehl follow the design closely."""
    d = zoned[0].to_dict()
    assert d["transmission_loss_db"] == pytest.approx(d["as_designed"]["transmission_loss_db"], abs=0.1)
    assert d["focus"]["strehl"] == pytest.approx(d["as_designed"]["focus"]["strehl"], abs=0.05)
    assert min(d["phase_error"]["strehl"]) > 0.9
    band = d["tolerance"]["band"]
    for key in ("transmission_loss_db", "best_focus_mm", "strehl"):
        nominal = d["focus"][key] if key in d["focus"] else d[key]
        assert np.all(np.array(band[key]["min"]) <= np.array(nominal) + 1e-9)
        assert np.all(np.array(band[key]["max"]) >= np.array(nominal) - 1e-9)


def test_it_draws_the_figures_and_writes_a_touchstone_file(zoned, tmp_path):
    """PNG figures are present; scikit-rf reads the .s2p back with |S21|^2 = the weighted transmission."""
    import skrf

    result, _ = zoned
    for name in ("optics_loss.png", "optics_focal_plane.png", "optics_phase_map.png", "optics_fwhm.png"):
        assert result.figures[name][:8] == b"\x89PNG\r\n\x1a\n"
    path = tmp_path / "part.s2p"
    path.write_text(result.touchstone)
    net = skrf.Network(str(path))
    assert net.f == pytest.approx(np.array(FREQS) * 1e9)
    assert np.abs(net.s[:, 1, 0]) ** 2 == pytest.approx(result.to_dict()["power_transmission"], abs=1e-5)
    assert net.z0[0, 0].real == pytest.approx(376.7303, abs=1e-3)


def test_it_reports_progress_up_to_one(zoned):
    """Progress calls never go backwards and end at 1."""
    calls = zoned[1]
    assert calls and calls[-1] == 1.0 and all(b >= a for a, b in zip(calls, calls[1:]))


def _read_s2p(text: str, tmp_path):
    """Return the scikit-rf Network of a Touchstone text (scikit-rf, PyPI, reads the file)."""
    import skrf

    path = tmp_path / "part.s2p"
    path.write_text(text)
    return skrf.Network(str(path))


@pytest.mark.parametrize("focal_mm", [None, 100.0])
def test_a_meshed_slab_reproduces_the_airy_values_through_the_whole_pipeline(focal_mm, tmp_path):
    """A 40 mm box, 2 mm thick, 2.8 / 0.02 under a 30 dB taper: T = 0.750801, 0.866972, 0.678039 (Airy, Born & Wolf
    7.6), whether or not a focal length sets the multi-slice march going (it changes the focus, never the losses)."""
    part = part_from(box(40.0, 40.0, 2.0), "slab")
    bay = printer(pixel_mm=0.05, layer_mm=0.05)
    stack = build_layer_stack(part, pixel_mm=0.05, layer_height_mm=0.05)
    result = optics_report(part=part, printed=stack, material=material(), printer=bay,
                           settings=OpticsSettings(freqs_ghz=(75.0, 90.0, 110.0), edge_taper_db=30.0,
                                                   focal_length_mm=focal_mm))
    d = result.to_dict()
    assert d["power_transmission"] == pytest.approx([0.750801, 0.866972, 0.678039], abs=2e-4)
    t, r = slab_airy(2.8, 0.02, 2.0, np.array([75.0, 90.0, 110.0]))
    assert d["power_reflection"] == pytest.approx(np.abs(r) ** 2, abs=2e-4)
    net = _read_s2p(result.touchstone, tmp_path)  # amplitude and phase, both reflections (e^{+j omega t})
    assert net.s[:, 0, 0] == pytest.approx(r, abs=2e-4) and net.s[:, 1, 1] == pytest.approx(r, abs=2e-4)
    assert net.s[:, 1, 0] == pytest.approx(t, abs=2e-4)
    assert d["transmission_loss_db"] == pytest.approx(-10 * np.log10(np.abs(t) ** 2), abs=2e-3)
    assert (d["focus"] is None) == (focal_mm is None)
    assert (d["analysis"]["multislice"] is None) == (focal_mm is None)


def test_spillover_of_a_disc_follows_the_edge_taper():
    """A 10 dB edge taper spills exp(-2 a^2 / w^2) = 10 % past the rim (Goldsmith 1998 ch. 2)."""
    disc = part_from(revolve(np.array([0.0, 20.0]), np.array([1.0, 1.0]), segments=256), "disc")
    stack = build_layer_stack(disc, pixel_mm=0.1, layer_height_mm=0.1)
    result = optics_report(part=disc, printed=stack, material=material(), printer=printer(0.1, 0.1),
                           settings=OpticsSettings(freqs_ghz=(100.0,), edge_taper_db=10.0))
    d = result.to_dict()
    # One frequency: the phase map, and no curve against frequency (the table holds its few numbers).
    assert set(result.figures) == {"optics_phase_map.png"}
    assert d["illumination"]["spillover_fraction"] == pytest.approx(0.1, abs=0.01)
    assert d["spillover_db"][0] == pytest.approx(-10 * np.log10(0.9), abs=0.05)


def test_it_chooses_frequencies_and_cautions_outside_the_table():
    """No frequency: the material's band (ends and centre) is used and said so; near the table is a caution."""
    part = part_from(box(10.0, 10.0, 1.0), "plate")
    stack = build_layer_stack(part, pixel_mm=0.1, layer_height_mm=0.1)
    mat = replace(material(band_ghz=(95.0, 105.0)), band_ghz=(96.0, 104.0))
    d = optics_report(part=part, printed=stack, material=mat, printer=printer(0.1, 0.1),
                      settings=OpticsSettings()).to_dict()
    assert d["frequencies_ghz"] == pytest.approx([96.0, 100.0, 104.0]) and "96-104 GHz" in d["frequency_note"]
    with pytest.raises(UnusableInput) as err:
        optics_report(part=part, printed=stack, material=replace(mat, band_ghz=None), printer=printer(0.1, 0.1),
                      settings=OpticsSettings())
    assert err.value.code == "no_frequency"
    result = optics_report(part=part, printed=stack, material=mat, printer=printer(0.1, 0.1),
                           settings=OpticsSettings(freqs_ghz=(100.0, 140.0)))
    (found,) = [f for f in result.findings if f.rule == "rf_table"]
    assert found.severity == "caution" and "140 GHz: eps_r 2.800" in found.message and "factor 2" in found.message
    assert result.to_dict()["outside_rf_table"] == [False, True]
