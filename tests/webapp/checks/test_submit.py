"""Submitting designs: many files at once, parametric parts, errors beside their fields."""

import json
import re
from unittest import mock

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from tests.webapp.parts import box_stl, finned_plate_stl
from webapp.checks.forms import UploadForm
from webapp.checks.models import Check, Design

OPTIONS = {"printer": "bay1-lcd-resin", "material": "standard-resin", "orientation": "+z", "quantities": "1, 5"}


def _post(client, url, data):
    with mock.patch("webapp.checks.queue.send_run_check") as delay:
        return client.post(url, data), delay


def test_each_dropped_file_becomes_a_design_and_a_check(alice_client, seeded, django_capture_on_commit_callbacks):
    """Two files in one upload give two designs and two queued checks, and the list to follow them."""
    files = [SimpleUploadedFile("a.stl", box_stl()), SimpleUploadedFile("b.stl", finned_plate_stl())]
    with mock.patch("webapp.checks.queue.send_run_check") as delay, django_capture_on_commit_callbacks(execute=True):
        response = alice_client.post(reverse("upload"), {"file": files, "units": "mm", **OPTIONS})
    assert response.status_code == 302 and response["Location"] == reverse("designs")
    assert sorted(Design.objects.values_list("name", flat=True)) == ["a.stl", "b.stl"]
    assert Check.objects.filter(status="queued").count() == 2 and delay.call_count == 2
    page = alice_client.get(reverse("designs")).content.decode()
    assert "2 checks queued" in page and page.count('class="mini-progress"') == 2


def test_an_empty_file_among_several_is_named(alice_client, seeded):
    """An empty file is refused beside the file field with its name; nothing is queued for it."""
    files = [SimpleUploadedFile("good.stl", box_stl()), SimpleUploadedFile("empty.stl", b"")]
    response, _ = _post(alice_client, reverse("upload"), {"file": files, "units": "mm", **OPTIONS})
    assert response.status_code == 400
    assert "empty" in response.content.decode() and not Check.objects.exists()


def test_it_generates_a_lens_and_checks_it_at_its_own_frequency_and_focus(alice_client, seeded):
    """A zoned lens from the form is stored as a design of that kind, checked at its design frequency and focus."""
    data = {"part_diameter_mm": "60", "part_focal_length_mm": "72", "part_freq_ghz": "140",
            "part_min_thickness_mm": "1", "part_flange_width_mm": "0", "part_flange_thickness_mm": "2", **OPTIONS}
    response, delay = _post(alice_client, reverse("generate", args=["zoned"]), data)
    assert response.status_code == 302, response.content.decode()[:3000]
    check = Check.objects.select_related("design").get()
    assert check.design.kind == "zoned" and check.design.parameters["diameter_mm"] == 60.0
    assert check.design.name == "zoned-60mm-140GHz.stl" and check.design.units == "mm"
    assert check.settings["optics"]["freqs_ghz"] == [140.0] and check.settings["optics"]["focal_length_mm"] == 72.0


def test_a_refusal_of_the_builder_stands_beside_its_parameter(alice_client, seeded):
    """A focal length too short for the aperture is explained next to the focal length field."""
    data = {"part_diameter_mm": "60", "part_focal_length_mm": "10", "part_freq_ghz": "140",
            "part_min_thickness_mm": "1", "part_flange_width_mm": "0", "part_flange_thickness_mm": "2", **OPTIONS}
    response, delay = _post(alice_client, reverse("generate", args=["zoned"]), data)
    page = response.content.decode()
    assert response.status_code == 400 and not delay.called and not Design.objects.exists()
    error = re.search(r'<p class="error" id="id_part_focal_length_mm_error">([^<]*)</p>', page)
    assert error and "f/D of at least 0.5" in error.group(1)


@pytest.mark.parametrize("kind", ["plano-convex", "zoned", "multilevel", "graded-index", "spiral", "window"])
def test_every_kind_has_a_form_from_its_parameters(alice_client, seeded, kind):
    """The form of a kind has one labelled field per parameter of services.components."""
    from services.components import component_parameters

    page = alice_client.get(reverse("generate", args=[kind])).content.decode()
    for spec in component_parameters(kind):
        assert f'<label for="id_part_{spec.name}">' in page


def test_an_unknown_kind_is_not_found(alice_client, seeded):
    assert alice_client.get(reverse("generate", args=["teapot"])).status_code == 404


def test_the_printer_limits_stand_beside_the_choice(alice_client, seeded):
    """The page carries each printer's key limits, and which materials it takes, for the panel beside the choice."""
    page = alice_client.get(reverse("upload")).content.decode()
    facts = json.loads(re.search(r'<script id="catalogue-facts" type="application/json">(.*?)</script>', page, re.S).group(1))
    from services import catalogue

    bay1 = dict(facts["printer"]["bay1-lcd-resin"])
    limits = {p.slug: p for p in catalogue.printers()}["bay1-lcd-resin"].rules["min_feature"]
    assert bay1["Smallest feature"] == f"{limits['supported_mm']:g} mm supported, {limits['unsupported_mm']:g} mm free-standing"
    assert bay1["Build volume"] == "130 × 80 × 160 mm"  # the demo scenario's Bay 1
    assert "standard-resin" in facts["compatible"]["bay1-lcd-resin"] and "pla" not in facts["compatible"]["bay1-lcd-resin"]
    # The default material is one the default printer can print, so the untouched form is valid.
    selected = re.search(r'<option value="([^"]+)" selected>', page[page.index('id="id_material"'):]).group(1)
    assert selected in facts["compatible"][re.search(r'<option value="([^"]+)" selected>', page).group(1)]


def test_a_field_error_is_tied_to_its_field(alice_client, seeded):
    """A bad quantity is marked invalid on the input and described by the sentence next to it."""
    response, _ = _post(alice_client, reverse("upload"), {"file": SimpleUploadedFile("a.stl", box_stl()),
                                                         "units": "mm", **OPTIONS, "quantities": "one, two"})
    page = response.content.decode()
    field = re.search(r'<input[^>]*name="quantities"[^>]*>', page).group(0)
    assert 'aria-invalid="true"' in field and "id_quantities_error" in field
    assert 'id="id_quantities_error">Give whole numbers' in page


def test_changed_parameters_make_a_new_revision(alice_client, seeded):
    """The form opened from a generated design starts from its parameters and saves revision 2 of it."""
    data = {"part_diameter_mm": "60", "part_focal_length_mm": "72", "part_freq_ghz": "140",
            "part_min_thickness_mm": "1", "part_flange_width_mm": "0", "part_flange_thickness_mm": "2", **OPTIONS}
    _post(alice_client, reverse("generate", args=["zoned"]), data)
    first = Design.objects.get()
    page = alice_client.get(reverse("generate", args=["zoned"]), {"revision_of": first.public_id}).content.decode()
    assert f"New revision of {first.name}" in page and 'name="part_focal_length_mm" value="72.0"' in page
    response, _ = _post(alice_client, reverse("generate", args=["zoned"]),
                        {**data, "part_focal_length_mm": "80", "note": "longer focus", "revision_of": first.public_id})
    second = Design.objects.exclude(pk=first.pk).get()
    assert response.status_code == 302 and second.family == first.family and second.revision == 2
    assert second.parameters["focal_length_mm"] == 80.0 and second.note == "longer focus"


def test_the_upload_form_asks_for_the_unit_of_a_unitless_file(alice_client, seeded):
    """No unit chosen, or "as the file states" for an STL: refused beside the units field; nothing is stored."""
    for units, words in (("", "Choose the unit the file was drawn in"), ("file", "carries no unit of its own")):
        response, delay = _post(alice_client, reverse("upload"), {"file": SimpleUploadedFile("a.stl", box_stl()),
                                                                  "units": units, **OPTIONS})
        error = re.search(r'<p class="error" id="id_units_error">([^<]*)</p>', response.content.decode())
        assert response.status_code == 400 and error and words in error.group(1)
    assert not Design.objects.exists()


def test_requirements_from_the_upload_form_reach_the_check(alice_client, seeded):
    """Stated targets are stored with the check's settings; a percentage for a fraction is refused beside it."""
    data = {"file": SimpleUploadedFile("a.stl", box_stl()), "units": "mm", **OPTIONS,
            "req_band": "130:150", "req_max_thickness_mm": "1.5", "req_loss_basis": "each_frequency"}
    response, _ = _post(alice_client, reverse("upload"), data)
    assert response.status_code == 302
    stated = Check.objects.get().settings["requirements"]
    assert stated["band_ghz"] == [130.0, 150.0] and stated["max_thickness_mm"] == 1.5 and stated["source"] == "designer"
    bad = {**data, "file": SimpleUploadedFile("b.stl", box_stl()), "req_min_strehl": "80"}
    response, _ = _post(alice_client, reverse("upload"), bad)
    error = re.search(r'<p class="error" id="id_req_min_strehl_error">([^<]*)</p>', response.content.decode())
    assert response.status_code == 400 and error and "fraction between 0 and 1" in error.group(1)


def test_every_requirement_field_of_the_form_reaches_the_check(alice_client, seeded):
    """Each target the form offers is stored as typed: a focal length with its tolerance was refused as having none
    (the tolerance's field was never read), so no focal-length target could be set in the browser."""
    typed = {"max_insertion_loss_db": "2", "max_spot_fwhm_ratio": "1.3", "min_focusing_efficiency": "0.4",
             "min_strehl": "0.7", "focal_length_mm": "72", "focal_tolerance_mm": "3", "max_thickness_mm": "9",
             "max_diameter_mm": "70", "f_number_min": "0.8", "f_number_max": "2", "min_mode_purity": "0.6"}
    offered = {name.removeprefix("req_") for name in UploadForm().fields if name.startswith("req_")}
    assert offered == set(typed) | {"band", "loss_basis"}
    data = {"file": SimpleUploadedFile("a.stl", box_stl()), "units": "mm", **OPTIONS, "req_band": "130:150",
            "req_loss_basis": "band_average", **{f"req_{name}": value for name, value in typed.items()}}
    response, _ = _post(alice_client, reverse("upload"), data)
    assert response.status_code == 302, response.content.decode()[:3000]
    stated = Check.objects.get().settings["requirements"]
    assert {name: stated[name] for name in typed} == {name: float(value) for name, value in typed.items()}
    assert stated["loss_basis"] == "band_average" and stated["band_ghz"] == [130.0, 150.0]


def test_a_generated_lens_can_start_from_the_demo_labs_targets(alice_client, seeded):
    """Ticked, the demo defaults follow the part's own frequency and focus; a stated target wins over its default."""
    data = {"part_diameter_mm": "60", "part_focal_length_mm": "72", "part_freq_ghz": "140",
            "part_min_thickness_mm": "1", "part_flange_width_mm": "0", "part_flange_thickness_mm": "2", **OPTIONS,
            "demo_requirements": "on", "req_min_strehl": "0.9"}
    response, _ = _post(alice_client, reverse("generate", args=["zoned"]), data)
    assert response.status_code == 302, response.content.decode()[:2000]
    stated = Check.objects.get().settings["requirements"]
    assert "invented" in stated["source"] and stated["band_ghz"] == [133.0, 147.0]
    assert stated["focal_length_mm"] == 72.0 and stated["min_strehl"] == 0.9
