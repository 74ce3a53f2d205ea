"""Requirements: reading them from JSON, refusing nonsense with a sentence, the demo lab's defaults."""

import pytest

from services.errors import UnusableInput
from services.requirements import DEMO_LAB, Requirements, default_requirements
from services.settings import CheckSettings, OpticsSettings


def test_it_reads_and_writes_json():
    """A round trip through to_dict and from_dict keeps every target; the band gives three frequencies."""
    req = Requirements.from_dict({"band_ghz": [130, 150], "max_insertion_loss_db": "1.5", "min_strehl": 0.8,
                                  "focal_length_mm": 72, "focal_tolerance_mm": 2})
    assert req.band_ghz == (130.0, 150.0) and req.max_insertion_loss_db == 1.5
    assert Requirements.from_dict(req.to_dict()) == req
    assert req.band_freqs_ghz() == (130.0, 140.0, 150.0)
    assert req.stated and not Requirements(band_ghz=(130, 150)).stated


@pytest.mark.parametrize(("data", "words"), [
    ({"min_strehl": 80}, "fraction between 0 and 1"),
    ({"band_ghz": [150, 130]}, "low first"),
    ({"band_ghz": 140}, "two frequencies"),
    ({"focal_length_mm": 72}, "tolerance"),
    ({"f_number_min": 2, "f_number_max": 1}, "must not exceed"),
    ({"max_insertion_loss_db": "low"}, "must be a number"),
    ({"max_los_db": 1}, "Unknown requirement 'max_los_db'"),
])
def test_it_refuses_nonsense_with_a_sentence(data, words):
    with pytest.raises(UnusableInput) as exc:
        Requirements.from_dict(data)
    assert exc.value.code == "bad_requirement" and words in exc.value.message


def test_the_band_and_focal_length_fill_empty_optics_settings():
    """A check with no frequencies evaluates the required band; given frequencies win."""
    req = Requirements(band_ghz=(130, 150), focal_length_mm=72, focal_tolerance_mm=2, min_strehl=0.8)
    optics = CheckSettings(requirements=req).effective_optics()
    assert optics.freqs_ghz == (130.0, 140.0, 150.0) and optics.focal_length_mm == 72
    given = CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,), focal_length_mm=70), requirements=req)
    assert given.effective_optics().freqs_ghz == (140.0,) and given.effective_optics().focal_length_mm == 70


def test_a_parametric_parts_own_design_fills_empty_optics_settings_before_the_requirements():
    """A generated part's own frequency (or five across its band) and focal length fill what the settings leave
    empty, before the requirements' band: a design checked through the API, or uploaded again as the same bytes,
    gets the optics the site's form gives it. Given values still win; an uploaded mesh has no design of its own."""
    req = Requirements(band_ghz=(130, 150), focal_length_mm=72, focal_tolerance_mm=2)
    spiral = {"kind": "spiral", "freq_ghz": 150.0, "charge": 1}
    zoned = {"kind": "zoned", "freq_ghz": 140.0, "focal_length_mm": 72.0}
    window = {"kind": "window", "freq_min_ghz": 130.0, "freq_max_ghz": 150.0}
    plain = CheckSettings()
    assert plain.effective_optics(spiral).freqs_ghz == (150.0,) and plain.effective_optics(spiral).focal_length_mm is None
    assert plain.effective_optics(zoned).focal_length_mm == 72.0
    assert plain.effective_optics(window).freqs_ghz == (130.0, 135.0, 140.0, 145.0, 150.0)
    assert plain.effective_optics(None).freqs_ghz == ()
    assert CheckSettings(requirements=req).effective_optics(spiral).freqs_ghz == (150.0,)
    assert CheckSettings(requirements=req).effective_optics(spiral).focal_length_mm == 72
    given = CheckSettings(optics=OpticsSettings(freqs_ghz=(140.0,), focal_length_mm=70))
    assert given.effective_optics(zoned).freqs_ghz == (140.0,) and given.effective_optics(zoned).focal_length_mm == 70


def test_a_generated_part_checked_with_empty_settings_is_seen_at_its_own_frequency():
    """build_report (every way in: site, API, command line) reads a spiral plate for 150 GHz at 150 GHz, not at
    the material's band (75-110 GHz for the starter resin, where the plate is a half-turn vortex)."""
    from services import catalogue
    from services.components import build_component
    from services.report import build_report

    resin, bay1 = catalogue.material("standard-resin"), catalogue.printer("bay1-lcd-resin")
    part = build_component("spiral", {"diameter_mm": 12.0}, material=resin, printer=bay1).part
    report = build_report(part=part, printer=bay1, material=resin, settings=CheckSettings()).to_dict()
    assert report["optics"]["frequencies_ghz"] == [150.0]
    assert report["optics"]["vortex"]["as_printed"]["mode_purity"][0] > 0.85


def test_settings_without_requirements_serialise_as_before():
    """Stored settings from before requirements existed still compare equal (the API reuses matching checks)."""
    assert "requirements" not in CheckSettings().to_dict()
    settings = CheckSettings(requirements=Requirements(min_strehl=0.8))
    assert CheckSettings.from_dict(settings.to_dict()) == settings


def test_the_demo_lab_defaults_are_labelled_and_follow_the_part():
    """The defaults say they are invented; a lens's focal tolerance is 5 % of its focal length."""
    lens = default_requirements("zoned", {"freq_ghz": 140, "focal_length_mm": 72, "diameter_mm": 60})
    assert lens.source == DEMO_LAB and "invented" in lens.source
    assert lens.band_ghz == (133.0, 147.0) and lens.focal_tolerance_mm == pytest.approx(3.6)
    window = default_requirements("window", {"freq_min_ghz": 110, "freq_max_ghz": 170})
    assert window.band_ghz == (110.0, 170.0) and window.max_spot_fwhm_ratio is None
    assert default_requirements("spiral", {"freq_ghz": 150}).min_mode_purity is not None
