"""Validation that explains itself: each refusal names the value, says why, and sits beside its field."""

import json
import re

import pytest
from django.urls import reverse

from tests.webapp.catalogue.conftest import posted
from webapp.catalogue import services
from webapp.catalogue.forms import MaterialForm, PrinterForm


def _edit(client, entry, form_cls, kind, **changes):
    body = posted(form_cls(base=entry.data, creating=False), **changes)
    return client.post(reverse(f"catalogue:{kind}_edit", args=[entry.slug]), body)


def _error_beside(page: str, field_id: str) -> str:
    """Return the error text in the field block that holds the input with this id."""
    block = re.search(r'<div class="field has-error[^"]*">((?:(?!<div class="field).)*?id="%s".*?)</div>' % field_id, page, re.S)
    assert block, f"no error beside {field_id}"
    return " ".join(re.findall(r'<span class="error" role="alert">(.*?)</span>', block.group(1)))


def test_a_layer_height_the_printer_does_not_offer(bob_client, bay3):
    """Bay 3 offers 0.025, 0.05 and 0.1 mm; 0.07 mm is refused beside the layer-height field and nothing is saved."""
    response = _edit(bob_client, bay3, PrinterForm, "printer", layer_height_mm="0.07")
    assert response.status_code == 400
    message = _error_beside(response.content.decode(), "id_layer_height_mm")
    assert "0.07 mm is not one this printer offers (0.025, 0.05, 0.1 mm)" in message
    bay3.refresh_from_db()
    assert bay3.version == 1 and bay3.data["layer_height_mm"] == 0.05


def test_a_minimum_gap_smaller_than_the_pixel(bob_client, bay1):
    """A 0.03 mm gap limit on a 0.05 mm pixel cannot be honoured: the sentence says so and asks for one pixel."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", rules__min_gap__xy_mm="0.03")
    message = _error_beside(response.content.decode(), "id_rules__min_gap__xy_mm")
    assert response.status_code == 400
    assert "minimum gap in XY (0.03 mm) is smaller than one pixel (0.05 mm)" in message
    assert "at least 0.05 mm" in message


def test_a_z_gap_smaller_than_the_layer(bob_client, bay1):
    """Along Z the grid is the layer: a 0.02 mm gap under 0.05 mm layers is refused."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", rules__min_gap__z_mm="0.02")
    assert "smaller than one layer (0.05 mm)" in _error_beside(response.content.decode(), "id_rules__min_gap__z_mm")


def test_a_negative_price(bob_client, resin):
    """A negative material price is refused beside the price field, with what to enter instead."""
    response = _edit(bob_client, resin, MaterialForm, "material", price="-5")
    assert response.status_code == 400
    message = _error_beside(response.content.decode(), "id_price")
    assert "cannot be negative (-5 given)" in message and "enter 0" in message
    resin.refresh_from_db()
    assert resin.data["price"] == 45.0 and resin.version == 1


def test_a_negative_machine_rate(bob_client, bay1):
    """Printer prices are prices too: a negative machine rate is refused beside its field."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", cost__machine_rate_per_h="-3")
    assert "cannot be negative (-3 given)" in _error_beside(response.content.decode(), "id_cost__machine_rate_per_h")


def test_a_failure_probability_of_one(bob_client, bay1):
    """p_fail = 1 would divide by zero in the failure allowance C / (1 - p_fail); it is refused with the range."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", cost__p_fail="1")
    assert "from 0 to below 1" in _error_beside(response.content.decode(), "id_cost__p_fail")


def test_a_missing_time_model_constant(bob_client, bay1):
    """The masked-vat model needs the exposure time: a blank one is asked for by name."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", time_model__masked_vat__exposure_s="")
    assert "Enter the exposure, s." in _error_beside(response.content.decode(), "id_time_model__masked_vat__exposure_s")


def test_an_rf_row_without_a_source(bob_client, resin):
    """Every RF value says where it comes from: a row without a source is refused in that row."""
    response = _edit(bob_client, resin, MaterialForm, "material", rf__2__freq_ghz="140", rf__2__eps_r="2.7",
                     rf__2__tan_delta="0.03", rf__2__source="")
    page = response.content.decode()
    assert response.status_code == 400 and "Say where the values at 140 GHz come from" in page


def test_a_permittivity_below_vacuum(bob_client, resin):
    """eps_r < 1 is refused with the reason (vacuum is 1)."""
    response = _edit(bob_client, resin, MaterialForm, "material", rf__0__eps_r="0.5")
    assert "must be 1 or more (vacuum is 1)" in response.content.decode()


def test_a_currency_the_materials_do_not_use(bob_client, bay1):
    """The resins are priced in EUR: a profile charging in USD could not be quoted with them."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", cost__currency="USD")
    message = _error_beside(response.content.decode(), "id_cost__currency")
    assert "are priced in EUR" in message and "cannot mix currencies" in message


def test_bad_advanced_json_says_where(bob_client, bay1):
    """Broken JSON in the advanced box names the line and column."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", advanced='{"sources": {')
    assert "not valid JSON (line 1" in _error_beside(response.content.decode(), "id_advanced")


def test_the_snapshot_type_stays_the_final_gate(bob_client, bay1):
    """An unknown top-level field in the advanced JSON is refused by PrinterProfile.from_dict, above the form."""
    advanced = json.dumps({"sources": {}, "colour": "blue"})
    response = _edit(bob_client, bay1, PrinterForm, "printer", advanced=advanced)
    assert response.status_code == 400 and "unknown fields: colour" in response.content.decode()


def test_a_process_and_technology_that_do_not_match(bob_client, bay1):
    """A filament technology on a vat process is refused beside the technology field."""
    response = _edit(bob_client, bay1, PrinterForm, "printer", technology="filament")
    assert "is not a kind of vat photopolymerisation" in _error_beside(response.content.decode(), "id_technology")


def test_a_time_that_cannot_be_read(alice_client, alice, bay1, resin):
    """The print log reads 2:35 or 155 (minutes); anything else is explained beside the field."""
    from tests.webapp.catalogue.conftest import estimated_check

    check = estimated_check(alice, bay1, resin, print_time_s=3600)
    response = alice_client.post(reverse("catalogue:log_create", args=[check.public_id]),
                                 {"copies": 1, "actual_print_time": "about an hour", "outcome": "ok"})
    assert response.status_code == 400
    assert "hours:minutes (2:35) or as minutes (155)" in _error_beside(response.content.decode(), "id_actual_print_time")


def test_the_service_reports_every_problem_with_its_path(bob, bay1):
    """The service refuses with all problems at once, each tied to the value's path."""
    data = {**bay1.data, "layer_height_mm": 0.07, "cost": {**bay1.data["cost"], "margin": -0.1}}
    with pytest.raises(services.CatalogueInvalid) as exc:
        services.printer_update(user=bob, printer=bay1, data=data)
    paths = [path for path, _ in exc.value.problems]
    assert "layer_height_mm" in paths and "cost.margin" in paths


def test_a_technology_without_a_time_model(bob, bay1):
    """Material jetting has no print-time model yet: a profile for it could never be estimated, so it is refused."""
    data = {**bay1.data, "process": "material_jetting", "technology": "jetting"}
    with pytest.raises(services.CatalogueInvalid, match="no print-time model for jetting"):
        services.printer_update(user=bob, printer=bay1, data=data)


def test_a_taken_short_name(bob, bay1):
    """A new profile cannot take a short name in use (reports refer to it)."""
    with pytest.raises(services.CatalogueInvalid, match="is taken already"):
        services.printer_create(user=bob, slug=bay1.slug, name="Another", data=bay1.data)
