"""Checks through the API: queue, dedupe, quota, status, cancel, report, pictures, PDF, and charlie."""

import pytest
from django.db.models import F

from tests.webapp.api.conftest import check_request
from webapp.catalogue.models import Printer
from webapp.checks import services as checks
from webapp.checks.models import Check

pytestmark = pytest.mark.usefixtures("seeded")


def test_it_queues_a_check(as_alice, alice_design, no_worker, django_capture_on_commit_callbacks):
    """A check request answers 201 with a queued check, sent to a worker once committed."""
    with django_capture_on_commit_callbacks(execute=True):
        response = as_alice.post("checks", check_request(alice_design["id"]))
    body = response.json()
    assert response.status_code == 201 and body["status"] == "queued" and body["progress"] == 0
    assert body["printer"] == "bay1-lcd-resin" and body["settings"]["quantities"] == [1, 5]
    assert body["settings"]["optics"]["freqs_ghz"] == [140.0] and body["summary"] is None
    assert no_worker.call_count == 1 and body["links"]["page"] == f"/checks/{body['id']}/"


def test_the_same_request_returns_the_same_check(as_alice, alice_design, no_worker, django_capture_on_commit_callbacks):
    """Asking again with the same settings answers 200 with the first check and queues nothing more."""
    with django_capture_on_commit_callbacks(execute=True):
        first = as_alice.post("checks", check_request(alice_design["id"])).json()
        again = as_alice.post("checks", check_request(alice_design["id"]))
    assert again.status_code == 200 and again.json()["id"] == first["id"]
    assert no_worker.call_count == 1 and Check.objects.count() == 1


def test_other_settings_or_a_failed_check_queue_anew(as_alice, alice_check, no_worker):
    """Other quantities, a failed earlier check, or a newer printer profile each give a new check."""
    other = as_alice.post("checks", check_request(alice_check["design"], quantities=[10]))
    assert other.status_code == 201 and other.json()["id"] != alice_check["id"]
    checks.check_fail(check_id=Check.objects.get(public_id=alice_check["id"]).pk, code="internal_error", message="x")
    retried = as_alice.post("checks", check_request(alice_check["design"]))
    assert retried.status_code == 201 and retried.json()["id"] != alice_check["id"]
    Printer.objects.filter(slug="bay1-lcd-resin").update(version=F("version") + 1)
    edited = as_alice.post("checks", check_request(alice_check["design"]))
    assert edited.status_code == 201 and edited.json()["id"] != retried.json()["id"]


def test_it_limits_queued_checks_with_retry_after(as_alice, alice_check, settings):
    """Past the per-user limit a new check answers 429 with Retry-After and a sentence."""
    settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS = 1
    response = as_alice.post("checks", check_request(alice_check["design"], quantities=[2]))
    assert response.status_code == 429 and int(response["Retry-After"]) > 0
    assert response.json()["code"] == "too_many_checks" and "wait" in response.json()["message"]


def test_it_refuses_a_material_the_printer_cannot_print(as_alice, alice_design, no_worker):
    """A filament on a resin printer answers 400 at once, before anything is queued."""
    response = as_alice.post("checks", check_request(alice_design["id"], material="pla"))
    assert response.status_code == 400 and response.json()["code"] in ("material_not_printable", "material_mismatch")
    assert not Check.objects.exists() and not no_worker.called


def test_it_validates_settings(as_alice, alice_design, no_worker):
    """Bad quantities, frequencies, orientations and slugs are refused with the field named."""
    for change, code in (({"quantities": [0]}, "invalid_request"), ({"optics": {"freqs_ghz": [-1]}}, "invalid_request"),
                         ({"orientation": "up"}, "invalid_request"), ({"printer": "nope"}, "unknown_printer"),
                         ({"material": "nope"}, "unknown_material"),
                         ({"optics": {"edge_taper_db": 10, "beam_waist_mm": 5}}, "bad_illumination")):
        response = as_alice.post("checks", check_request(alice_design["id"], **change))
        assert response.json()["code"] == code, change
    assert not Check.objects.exists()


def test_it_keeps_a_given_clear_aperture(as_alice, alice_design, no_worker):
    """The optical zone's diameter is stored with the check's settings; a non-positive one is refused."""
    response = as_alice.post("checks", check_request(alice_design["id"], optics={"freqs_ghz": [140.0],
                                                                               "clear_aperture_mm": 30.0}))
    assert response.status_code == 201
    assert Check.objects.get().settings["optics"]["clear_aperture_mm"] == 30.0
    response = as_alice.post("checks", check_request(alice_design["id"], optics={"clear_aperture_mm": 0}))
    assert response.json()["code"] == "invalid_request"


def test_it_reports_status_stage_and_progress(as_alice, alice_check):
    """A running check shows its stage and progress."""
    Check.objects.filter(public_id=alice_check["id"]).update(status="running", stage="slicing", progress=0.25)
    body = as_alice.get(f"checks/{alice_check['id']}").json()
    assert (body["status"], body["stage"], body["progress"]) == ("running", "slicing", 0.25)


def test_it_cancels_a_queued_check(as_alice, alice_check):
    """Cancelling a queued check marks it cancelled, again changes nothing, and no worker will run it."""
    response = as_alice.post(f"checks/{alice_check['id']}/cancel")
    assert response.status_code == 200 and response.json()["status"] == "cancelled"
    assert as_alice.post(f"checks/{alice_check['id']}/cancel").json()["status"] == "cancelled"
    assert checks.check_claim(check_id=Check.objects.get(public_id=alice_check["id"]).pk) is False


def test_it_will_not_cancel_a_finished_check(as_alice, done_check):
    """A done check answers 409 to cancel."""
    response = as_alice.post(f"checks/{done_check['id']}/cancel")
    assert response.status_code == 409 and response.json()["code"] == "not_active"


def test_it_serves_the_report_when_done(as_alice, alice_check, done_check, plate_report):
    """Before done the report answers 404 report_not_ready; after, the stored JSON and a summary of it."""
    check = as_alice.get(f"checks/{done_check['id']}").json()
    report = as_alice.get(f"checks/{done_check['id']}/report").json()
    assert report == plate_report.to_dict() | {"figures": sorted(plate_report.figures)}
    severities = [f["severity"] for f in report["findings"]]
    assert check["status"] == "done" and check["summary"]["verdict"] == report["verdict"] == "not_printable"
    assert check["summary"]["blockers"] == severities.count("blocker") > 0
    assert check["summary"]["material_ml"] == report["estimate"]["material_ml"]
    assert [q["quantity"] for q in check["summary"]["quote"]] == [1, 5]


def test_the_report_is_not_ready_before_done(as_alice, alice_check):
    response = as_alice.get(f"checks/{alice_check['id']}/report")
    assert response.status_code == 404 and response.json()["code"] == "report_not_ready"


def test_it_serves_the_pictures_and_the_pdf(as_alice, done_check, plate_report):
    """Each listed picture comes back as PNG; an unlisted name is a JSON 404; the PDF is a PDF."""
    name = sorted(plate_report.figures)[0]
    picture = as_alice.get(f"checks/{done_check['id']}/files/{name}")
    assert picture["Content-Type"] == "image/png" and b"".join(picture.streaming_content) == plate_report.figures[name]
    missing = as_alice.get(f"checks/{done_check['id']}/files/secrets.txt")
    assert missing.status_code == 404 and missing.json()["code"] == "no_such_file"
    pdf = as_alice.get(f"checks/{done_check['id']}/report.pdf")
    assert pdf.status_code == 200 and pdf.content.startswith(b"%PDF-")


def test_it_lists_and_filters_checks(as_alice, alice_check, done_check, no_worker):
    """The list filters by design, status and verdict."""
    other = as_alice.post("checks", check_request(alice_check["design"], quantities=[3])).json()
    assert as_alice.get("checks").json()["count"] == 2
    assert [c["id"] for c in as_alice.get("checks", {"status": "queued"}).json()["items"]] == [other["id"]]
    assert [c["id"] for c in as_alice.get("checks", {"verdict": "not_printable"}).json()["items"]] == [done_check["id"]]
    assert as_alice.get("checks", {"design": alice_check["design"]}).json()["count"] == 2


def test_charlie_gets_404_for_everything_of_alices(as_charlie, done_check, no_worker):
    """charlie cannot see, cancel, read, download or check alice's things: 404 every time, and an empty list."""
    cid = done_check["id"]
    for path in (f"checks/{cid}", f"checks/{cid}/report", f"checks/{cid}/report.pdf",
                 f"checks/{cid}/files/thickness_map.png"):
        response = as_charlie.get(path)
        assert response.status_code == 404 and response.json()["code"] == "not_found", path
    assert as_charlie.post(f"checks/{cid}/cancel").status_code == 404
    assert as_charlie.post("checks", check_request(done_check["design"])).status_code == 404
    assert as_charlie.get("checks").json()["count"] == 0
    assert Check.objects.get(public_id=cid).status == "done"


def test_requirements_are_checked_and_answered_beside_the_verdict(as_alice, alice_design, no_worker):
    """The 10 x 8 x 2 mm box against a 1.5 mm thickness target: meets_requirements no, the verdict untouched."""
    targets = {"max_thickness_mm": 1.5, "max_diameter_mm": 20}
    body = as_alice.post("checks", check_request(alice_design["id"], requirements=targets)).json()
    assert body["settings"]["requirements"]["max_thickness_mm"] == 1.5 and body["meets_requirements"] is None
    checks.check_run(check_id=Check.objects.get(public_id=body["id"]).pk)
    done = as_alice.get(f"checks/{body['id']}").json()
    assert done["meets_requirements"] == done["summary"]["meets_requirements"] == "no"
    report = as_alice.get(f"checks/{body['id']}/report").json()
    found = [f for f in report["findings"] if f["rule"] == "requirement"]
    assert {f["severity"] for f in found} == {"blocker", "note"} and report["verdict"] == done["verdict"]
    plain = as_alice.post("checks", check_request(alice_design["id"])).json()
    assert "requirements" not in plain["settings"]


def test_it_refuses_requirements_that_make_no_sense(as_alice, alice_design, no_worker):
    """A percentage for a fraction, or a focal length without its tolerance, is a 400 with the sentence."""
    for targets, words in (({"min_strehl": 80}, "fraction"), ({"focal_length_mm": 72}, "tolerance")):
        response = as_alice.post("checks", check_request(alice_design["id"], requirements=targets))
        assert response.status_code == 400 and response.json()["code"] == "bad_requirement"
        assert words in response.json()["message"]
    assert not Check.objects.exists()
