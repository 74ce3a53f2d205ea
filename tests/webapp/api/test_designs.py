"""Designs through the API: upload, content-hash dedupe, parametric parts, lists, revisions, and charlie."""

import hashlib

import pytest

from tests.webapp.parts import box_stl, finned_plate_stl
from webapp.checks.models import Design


def test_it_uploads_a_mesh(as_alice, alice):
    """A multipart upload answers 201 with the design, its sha256 and units."""
    response = as_alice.upload(box_stl(), units="mm")
    body = response.json()
    assert response.status_code == 201
    assert body["sha256"] == hashlib.sha256(box_stl()).hexdigest() and body["units"] == "mm"
    assert body["name"] == "box.stl" and body["parametric"] is False and body["size_bytes"] == len(box_stl())
    assert Design.objects.get(public_id=body["id"]).owner == alice


def test_the_same_bytes_give_the_same_design(as_alice):
    """Uploading the same bytes again answers 200 with the first design and stores nothing new."""
    first = as_alice.upload(box_stl(), units="mm").json()
    again = as_alice.upload(box_stl(), name="renamed.stl", units="mm")
    assert again.status_code == 200 and again.json()["id"] == first["id"]
    assert Design.objects.count() == 1


def test_other_units_make_another_design(as_alice):
    """The same bytes stated in other units are another part, so another design."""
    mm = as_alice.upload(box_stl(), units="mm").json()
    inch = as_alice.upload(box_stl(), units="inch")
    assert inch.status_code == 201 and inch.json()["id"] != mm["id"]


def test_the_same_bytes_of_two_users_stay_apart(as_alice, as_charlie):
    """charlie uploading alice's bytes gets his own design, not hers."""
    hers = as_alice.upload(box_stl(), units="mm").json()
    his = as_charlie.upload(box_stl(), units="mm")
    assert his.status_code == 201 and his.json()["id"] != hers["id"]


def test_it_refuses_an_empty_file_with_a_sentence(as_alice):
    """An empty upload answers 400 with a stable code and a sentence naming the file."""
    response = as_alice.upload(b"", name="empty.stl")
    assert response.status_code == 400
    assert response.json()["code"] == "empty_file" and "empty.stl" in response.json()["message"]


def test_it_refuses_an_upload_over_the_limit(as_alice, settings):
    """An upload over the size limit answers 413 before anything is stored."""
    settings.PHASEWRIGHT_MAX_UPLOAD_BYTES = len(box_stl()) - 1
    response = as_alice.upload(box_stl())
    assert response.status_code == 413 and response.json()["code"] == "too_large"
    assert not Design.objects.exists()


def test_it_refuses_unknown_units(as_alice):
    """Units outside the list answer 422 naming the field."""
    response = as_alice.upload(box_stl(), units="furlong")
    assert response.status_code == 422
    assert response.json()["code"] == "invalid_request" and "units" in response.json()["message"]


def test_it_lists_designs_a_page_at_a_time(as_alice):
    """The list pages with limit and offset and gives the total count, newest first."""
    ids = [as_alice.upload(box_stl(x_mm=5 + i), name=f"box{i}.stl", units="mm").json()["id"] for i in range(3)]
    page = as_alice.get("designs", {"limit": 2}).json()
    rest = as_alice.get("designs", {"limit": 2, "offset": 2}).json()
    assert page["count"] == 3 and [d["id"] for d in page["items"] + rest["items"]] == ids[::-1]


def test_it_filters_designs(as_alice):
    """Filters by name, by sha256 and by parametric-or-not select the right designs."""
    as_alice.upload(box_stl(), name="lens-a.stl", units="mm")
    plate = as_alice.upload(finned_plate_stl(), name="plate.stl", units="mm").json()
    assert [d["name"] for d in as_alice.get("designs", {"q": "LENS"}).json()["items"]] == ["lens-a.stl"]
    assert [d["id"] for d in as_alice.get("designs", {"sha256": plate["sha256"]}).json()["items"]] == [plate["id"]]
    assert as_alice.get("designs", {"parametric": True}).json()["count"] == 0
    assert as_alice.get("designs", {"sha256": "xyz"}).status_code == 422


def test_charlie_sees_nothing_of_alices_designs(as_alice, as_charlie, alice_design):
    """charlie gets 404 for alice's design and its revisions, and an empty list."""
    for path in (f"designs/{alice_design['id']}", f"designs/{alice_design['id']}/revisions"):
        response = as_charlie.get(path)
        assert response.status_code == 404 and response.json()["code"] == "not_found"
    assert as_charlie.get("designs").json()["count"] == 0
    assert as_alice.get(f"designs/{alice_design['id']}").json()["name"] == "box.stl"


def test_it_keeps_revisions_together(as_alice, as_charlie, alice_design):
    """A design uploaded as a revision of another lists with it, oldest first; charlie cannot branch from hers."""
    second = as_alice.upload(box_stl(x_mm=12), name="box-v2.stl", units="mm", revision_of=alice_design["id"]).json()
    third = as_alice.upload(box_stl(x_mm=14), name="box-v3.stl", units="mm", revision_of=second["id"]).json()
    assert second["revision_of"] == alice_design["id"]
    assert [alice_design["revision"], second["revision"], third["revision"]] == [1, 2, 3]
    assert second["family"] == third["family"] == alice_design["family"]
    for design in (alice_design, second, third):
        family = as_alice.get(f"designs/{design['id']}/revisions").json()
        assert [d["id"] for d in family] == [alice_design["id"], second["id"], third["id"]]
    stolen = as_charlie.upload(box_stl(x_mm=20), units="mm", revision_of=alice_design["id"])
    assert stolen.status_code == 404


@pytest.mark.usefixtures("seeded")
def test_it_builds_a_parametric_design_once(as_alice):
    """Component parameters build a part stored as a design; the same parameters again give the same design."""
    request = {"kind": "window", "parameters": {"diameter_mm": 30, "freq_min_ghz": 130, "freq_max_ghz": 150},
               "printer": "bay1-lcd-resin", "material": "standard-resin"}
    first = as_alice.post("designs/parametric", request)
    again = as_alice.post("designs/parametric", request)
    body = first.json()
    assert first.status_code == 201 and again.status_code == 200 and again.json()["id"] == body["id"]
    assert body["parametric"] and body["kind"] == "window" and body["units"] == "mm"
    assert body["parameters"]["diameter_mm"] == 30 and body["name"].endswith(".stl")
    assert [d["id"] for d in as_alice.get("designs", {"kind": "window"}).json()["items"]] == [body["id"]]


@pytest.mark.usefixtures("seeded")
def test_a_field_the_request_does_not_have_is_refused_by_name(as_alice):
    """Targets sent with a parametric design (they belong to a check) were dropped without a word; now 422 names
    the field, and nothing is stored. A check's misspelt target is refused the same way."""
    request = {"kind": "window", "parameters": {"diameter_mm": 30}, "printer": "bay1-lcd-resin",
               "material": "standard-resin", "requirements": {"focal_length_mm": 100}}
    response = as_alice.post("designs/parametric", request)
    body = response.json()
    assert response.status_code == 422 and body["code"] == "invalid_request"
    assert body["message"].startswith("requirements: this request has no such field")
    assert as_alice.get("designs").json()["items"] == []
    design = as_alice.post("designs/parametric", {k: v for k, v in request.items() if k != "requirements"}).json()
    check = as_alice.post("checks", {"design": design["id"], "printer": "bay1-lcd-resin", "material": "standard-resin",
                                     "requirements": {"max_loss_db": 2}})
    assert check.status_code == 422 and check.json()["message"].startswith("requirements.max_loss_db: this request")
    assert as_alice.get("checks").json()["items"] == []


@pytest.mark.usefixtures("seeded")
def test_it_explains_a_bad_parameter(as_alice):
    """A parameter out of range answers 400 with the component's own sentence; an unknown printer too."""
    request = {"kind": "window", "parameters": {"diameter_mm": -3}, "printer": "bay1-lcd-resin",
               "material": "standard-resin"}
    response = as_alice.post("designs/parametric", request)
    assert response.status_code == 400 and response.json()["code"] == "bad_parameter"
    assert "The diameter must be greater than 0 mm" in response.json()["message"]
    response = as_alice.post("designs/parametric", {**request, "parameters": {}, "printer": "bay9"})
    assert response.status_code == 400 and response.json()["code"] == "unknown_printer"
    assert "bay1-lcd-resin" in response.json()["message"]


def test_it_filters_by_dates_with_any_offset(as_alice):
    """A date filter with an offset PostgreSQL would refuse (-17:26) is read as its UTC moment, not a 500."""
    as_alice.upload(box_stl(), units="mm")
    response = as_alice.get("designs", {"created_after": "0478-06-14T09:20:38-17:26"})
    assert response.status_code == 200 and len(response.json()["items"]) == 1


def test_a_nul_character_in_text_is_refused_with_a_sentence_never_a_500(as_alice, alice_design):
    """PostgreSQL text and jsonb cannot hold NUL (0x00) (PostgreSQL manual, "Character Types"; Django's form
    fields refuse it for the same reason): the API's schema says so for its free text, and a NUL that reaches
    the database anyway (a path) answers as not found. Found by the fuzzing test on PostgreSQL."""
    listed = as_alice.get("designs", params={"q": "\x00lens"})
    assert listed.status_code == 422 and listed.json()["code"] == "invalid_request"
    uploaded = as_alice.upload(finned_plate_stl(), units="mm", note="first\x00cut")
    assert uploaded.status_code == 422
    logs = as_alice.get("print-logs", params={"printer": "bay\x00"})
    assert logs.status_code == 422
    checked = as_alice.post("checks", {"design": alice_design["id"], "printer": "bay1\x00", "material": "x"})
    assert checked.status_code == 422
    odd_key = as_alice.post("designs/parametric", {"kind": "window", "parameters": {"diameter\x00_mm": 20.0},
                                                   "printer": "bay1-lcd-resin", "material": "standard-resin"})
    assert odd_key.status_code == 400, odd_key.content
    missing = as_alice.get("printers/bay\x001")
    assert missing.status_code == 404 and missing.json()["code"] == "not_found"
