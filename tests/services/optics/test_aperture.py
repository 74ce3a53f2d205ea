"""The clear aperture: given, the generator's, detected or the outline; fractional rim cells; a flange changes nothing."""

import numpy as np
import pytest
from scipy.special import erf

from services import catalogue
from services.components import build_component
from services.layers import build_layer_stack
from services.optics import optics_report
from services.optics.aperture import clear_aperture
from services.settings import OpticsSettings
from tests.services.optics.helpers import box, hyperbolic_sag_mm, material, part_from, printer, revolve

N = float(np.sqrt(2.8))


def lens(radius_mm: float, focal_mm: float, base_mm: float, flange_mm: float = 0.0, flange_thickness_mm=None):
    """Return a plano-hyperbolic lens (Silver 1949), with a flat flange ring of the given width around its rim."""
    r = np.linspace(0.0, radius_mm, 400)
    sag = hyperbolic_sag_mm(r, N, focal_mm)
    top = base_mm + sag[-1] - sag
    if flange_mm:
        r = np.append(r, [radius_mm + 1e-3, radius_mm + flange_mm])
        top = np.append(top, [flange_thickness_mm, flange_thickness_mm])
    return part_from(revolve(r, top, 256), "lens")


def aperture_of(part, **kwargs):
    stack = build_layer_stack(part, pixel_mm=0.1, layer_height_mm=0.1)
    return clear_aperture(stack, axis_mm=(0.0, 0.0), parameters=part.parameters, **kwargs)


def test_a_flange_is_found_and_left_out():
    """A 40 mm lens on a 5 mm flange as thick as its rim: the aperture is the lens, within a pixel or two."""
    zone = aperture_of(lens(20.0, 40.0, 1.0, 5.0, 1.0))
    assert zone.how == "detected"
    assert zone.rim_radius_mm == pytest.approx(20.0, abs=0.2)
    assert zone.area_mm2 == pytest.approx(np.pi * 20.0**2, rel=0.02)


def test_a_lens_without_a_flange_uses_its_outline_and_a_given_diameter_wins():
    """No flat rim: the outline. A diameter given with the check is used as given, centred on the axis."""
    part = lens(20.0, 40.0, 1.0)
    assert aperture_of(part).how == "outline"
    given = aperture_of(part, given_mm=30.0)
    assert given.how == "given" and given.rim_radius_mm == pytest.approx(15.0, abs=0.1)
    assert given.area_mm2 == pytest.approx(np.pi * 15.0**2, rel=0.01)


def test_a_generated_lens_declares_its_aperture():
    """The generator's diameter_mm is the aperture of a part it built with a flange."""
    resin = catalogue.material("standard-resin")
    part = build_component("plano-convex", {"diameter_mm": 30, "focal_length_mm": 40, "freq_ghz": 140,
                                            "flange_width_mm": 4}, material=resin).part
    zone = aperture_of(part)
    assert zone.how == "generator" and zone.rim_radius_mm == pytest.approx(15.0, abs=0.1)


def test_rim_cells_count_by_their_covered_share():
    """A 30 mm square under a 15 mm Gaussian: area 900 mm2 and spillover 1 - erf(sqrt(2) a / w)^2 (the Gaussian
    power exp(-2 r^2 / w^2) is separable in x and y; Goldsmith 1998 ch. 2 for the beam). Counting half-covered
    cells as inside read 906 mm2 and a spillover 1.7 % low; the cells sample the beam at their centres, so
    0.5 % is left for the rim cells."""
    part = part_from(box(30.0, 30.0, 1.0), "square")
    stack = build_layer_stack(part, pixel_mm=0.1, layer_height_mm=0.1)
    d = optics_report(part=part, printed=stack, material=material(), printer=printer(0.1, 0.1),
                      settings=OpticsSettings(freqs_ghz=(100.0,), beam_waist_mm=15.0)).to_dict()
    assert d["illumination"]["clear_aperture_mm2"] == pytest.approx(900.0, abs=0.5)
    spill = 1 - erf(np.sqrt(2) * 15.0 / 15.0) ** 2
    assert d["illumination"]["spillover_fraction"] == pytest.approx(spill, rel=0.005)
    assert d["clear_aperture"]["how"] == "outline"


def test_a_flange_leaves_every_optics_number_within_one_percent():
    """The same f/1 lens at 150 GHz, 10 dB edge taper, with and without a 5 mm flange: the beam, the losses and
    the focus agree within 1 % (before the clear aperture the flange widened the beam by 25 % and cut the
    Strehl ratio from 0.93 to 0.51)."""
    bay = printer(0.1, 0.1)
    settings = OpticsSettings(freqs_ghz=(150.0,), focal_length_mm=40.0, edge_taper_db=10.0)

    def report(part):
        stack = build_layer_stack(part, pixel_mm=0.1, layer_height_mm=0.1)
        return optics_report(part=part, printed=stack, material=material(), printer=bay, settings=settings).to_dict()

    bare, flanged = report(lens(20.0, 40.0, 1.0)), report(lens(20.0, 40.0, 1.0, 5.0, 1.0))
    assert flanged["clear_aperture"]["how"] == "detected"
    assert flanged["illumination"]["beam_radius_mm"] == pytest.approx(bare["illumination"]["beam_radius_mm"], rel=0.01)
    assert flanged["illumination"]["spillover_fraction"] == pytest.approx(
        bare["illumination"]["spillover_fraction"], rel=0.01)
    assert flanged["power_transmission"] == pytest.approx(bare["power_transmission"], rel=0.01)
    for key in ("best_focus_mm", "wavefront_focus_mm", "strehl", "focusing_efficiency"):
        assert flanged["focus"][key] == pytest.approx(bare["focus"][key], rel=0.01), key
    assert np.ravel(flanged["focus"]["fwhm_mm"]) == pytest.approx(np.ravel(bare["focus"]["fwhm_mm"]), rel=0.01)


def test_a_rib_is_no_optical_zone():
    """A 2 mm rib across a flat 30 mm plate changes the thickness on a strip only: the outline stays the aperture."""
    import manifold3d as m3d

    plate = box(30.0, 30.0, 1.0)
    rib = m3d.Manifold.cube((2.0, 30.0, 2.0)).translate((-1.0, -15.0, 0.0))
    zone = aperture_of(part_from(plate + rib, "ribbed plate"))
    assert zone.how == "outline" and zone.area_mm2 == pytest.approx(900.0, rel=0.01)


def test_the_aperture_tested_a_band_of_rows_at_a_time_is_the_whole_frames(monkeypatch):
    """The radius and thickness tests run a band of rows at a time (no frame-sized float maps): the detected,
    given and round apertures are pixel for pixel those of one test over the whole frame."""
    from services.optics import aperture

    flanged, plain = lens(20.0, 40.0, 1.0, 5.0, 1.0), lens(20.0, 40.0, 1.0)
    cases = [(flanged, {}), (plain, {"given_mm": 30.0})]
    monkeypatch.setattr(aperture, "BAND_ROWS", 10**6)
    whole = [aperture_of(part, **kwargs) for part, kwargs in cases]
    monkeypatch.setattr(aperture, "BAND_ROWS", 7)
    banded = [aperture_of(part, **kwargs) for part, kwargs in cases]
    assert [z.how for z in banded] == ["detected", "given"]
    for a, b in zip(whole, banded):
        np.testing.assert_array_equal(a.mask, b.mask)
        assert (a.rim_radius_mm, a.area_mm2) == (b.rim_radius_mm, b.area_mm2)
