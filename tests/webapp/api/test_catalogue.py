"""Printer profiles, materials and component kinds: readable by everyone signed in."""

import pytest

from services.components import KINDS, component_parameters
from webapp.catalogue.models import Printer

pytestmark = pytest.mark.usefixtures("seeded")


def test_everyone_signed_in_reads_the_catalogue(as_alice, as_charlie):
    """alice and charlie both list the printers and materials in use, with every value."""
    for api in (as_alice, as_charlie):
        printers = {p["slug"]: p for p in api.get("printers").json()}
        materials = {m["slug"] for m in api.get("materials").json()}
        assert {"bay1-lcd-resin", "bay2-filament", "bay3-laser-resin"} <= set(printers)
        assert {"standard-resin", "pla"} <= materials
    bay1 = as_alice.get("printers/bay1-lcd-resin").json()
    assert bay1["data"]["pixel_mm"] == 0.05 and bay1["version"] >= 1
    assert as_alice.get("materials/standard-resin").json()["data"]["rf"]


def test_a_retired_or_unknown_entry_is_404(as_alice):
    """A retired printer leaves the list and answers 404, as an unknown slug does."""
    Printer.objects.filter(slug="bay2-filament").update(retired=True)
    assert "bay2-filament" not in {p["slug"] for p in as_alice.get("printers").json()}
    for path in ("printers/bay2-filament", "printers/nope", "materials/nope"):
        response = as_alice.get(path)
        assert response.status_code == 404 and response.json()["code"] == "not_found"


def test_it_says_who_is_calling(as_alice, as_bob):
    """/me names the token's owner and whether they are a lab manager."""
    assert as_alice.get("me").json() == {"username": "alice", "lab_manager": False}
    assert as_bob.get("me").json() == {"username": "bob", "lab_manager": True}


def test_it_lists_the_component_kinds(as_alice):
    """/components gives every kind with the parameters the builder takes."""
    body = as_alice.get("components").json()
    assert [c["kind"] for c in body] == list(KINDS)
    zoned = next(c for c in body if c["kind"] == "zoned")
    assert [p["name"] for p in zoned["parameters"]] == [s.name for s in component_parameters("zoned")]


def test_an_unknown_address_is_a_json_404(as_alice):
    """An address the API does not have answers 404 in the API's error shape."""
    response = as_alice.get("nothing/here")
    assert response.status_code == 404 and response.json()["code"] == "not_found"


def _new_printer(as_bob, slug="bay4-resin"):
    data = as_bob.get("printers/bay1-lcd-resin").json()["data"]
    return as_bob.post("printers", {"slug": slug, "name": "Bay 4", "data": data, "note": "second LCD printer"})


def test_a_lab_manager_adds_edits_and_retires_printers(as_bob):
    """bob adds a printer at version 1, an edit makes version 2, retiring hides it from new checks."""
    created = _new_printer(as_bob)
    assert created.status_code == 201 and created.json()["version"] == 1 and created.json()["name"] == "Bay 4"
    data = {**created.json()["data"], "pixel_mm": 0.035}
    edited = as_bob.put("printers/bay4-resin", {"data": data, "note": "new screen", "base_version": 1}).json()
    assert edited["version"] == 2 and edited["data"]["pixel_mm"] == 0.035
    stale = as_bob.put("printers/bay4-resin", {"data": {**data, "pixel_mm": 0.05}, "base_version": 1})
    assert stale.status_code == 400 and stale.json()["code"] == "invalid_entry"
    assert as_bob.post("printers/bay4-resin/retire", {"retired": True}).json()["retired"] is True
    assert {"slug": "bay4-resin", "retired": True}.items() <= as_bob.get("printers/bay4-resin").json().items()


def test_a_retired_printer_is_gone_for_designers(as_alice, as_bob):
    """A retired printer leaves alice's list and answers her 404; bob still sees it."""
    as_bob.post("printers/bay2-filament/retire", {})
    assert "bay2-filament" not in {p["slug"] for p in as_alice.get("printers").json()}
    assert as_alice.get("printers/bay2-filament").status_code == 404
    assert "bay2-filament" in {p["slug"] for p in as_bob.get("printers").json()}
    assert as_bob.post("printers/bay2-filament/retire", {"retired": False}).json()["retired"] is False


def test_the_catalogue_explains_bad_data(as_bob):
    """Data that would make checks wrong is refused with each problem named."""
    data = as_bob.get("materials/standard-resin").json()["data"]
    response = as_bob.post("materials", {"slug": "Bad Slug", "name": "x", "data": data})
    assert response.status_code == 400 and response.json()["code"] == "invalid_entry"
    assert response.json()["errors"][0]["loc"] == ["slug"]
    response = as_bob.post("materials", {"slug": "resin-2", "name": "Resin 2", "data": {**data, "density_g_cm3": -1}})
    assert response.status_code == 400 and response.json()["errors"]


def test_only_lab_managers_change_the_catalogue(as_alice, as_charlie, as_bob):
    """alice and charlie get 403 for every change, and nothing changes."""
    data = as_bob.get("printers/bay1-lcd-resin").json()["data"]
    for api in (as_alice, as_charlie):
        for response in (api.post("printers", {"slug": "bay9", "name": "x", "data": data}),
                         api.put("printers/bay1-lcd-resin", {"data": {**data, "pixel_mm": 1}}),
                         api.post("materials/pla/retire", {})):
            assert response.status_code == 403 and response.json()["code"] == "forbidden"
    assert as_bob.get("printers/bay1-lcd-resin").json()["version"] == 1
    assert not Printer.objects.filter(slug="bay9").exists()


def test_an_address_with_a_line_break_is_a_json_404_too(as_alice):
    """Even an address holding an encoded line break gets the API's JSON 404, not the site's page."""
    response = as_alice.get("checks/x%0Ay/report")
    assert response.status_code == 404 and response.json()["code"] == "not_found"
