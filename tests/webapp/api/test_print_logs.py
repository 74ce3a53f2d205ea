"""Print logs through the API: what a print really took, logged against a finished check."""

import pytest

from webapp.catalogue.models import PrintLog

pytestmark = pytest.mark.usefixtures("seeded")


def _log(check_id, **extra):
    return {"check": check_id, "actual_print_time_s": 1400.0, "succeeded": True, "actual_material_ml": 0.2, **extra}


def test_the_owner_logs_a_print_and_a_lab_manager_sees_it(as_alice, as_bob, done_check, plate_report):
    """alice logs her print (201, beside the estimate); bob sees every log; the ratio is actual over estimated."""
    response = as_alice.post("print-logs", _log(done_check["id"]))
    body = response.json()
    estimated = plate_report.estimate["print_time_s"]
    assert response.status_code == 201 and body["check"] == done_check["id"] and body["logged_by"] == "alice"
    assert body["estimated_print_time_s"] == estimated and body["time_ratio"] == pytest.approx(1400.0 / estimated)
    assert [log["id"] for log in as_bob.get("print-logs").json()["items"]] == [body["id"]]
    assert as_bob.get(f"print-logs/{body['id']}").json()["design_name"] == "box.stl"


def test_charlie_sees_and_logs_nothing_of_alices(as_alice, as_charlie, done_check):
    """charlie gets 404 for alice's log and for logging her check, and an empty list."""
    log = as_alice.post("print-logs", _log(done_check["id"])).json()
    assert as_charlie.get(f"print-logs/{log['id']}").status_code == 404
    assert as_charlie.delete(f"print-logs/{log['id']}").status_code == 404
    assert as_charlie.post("print-logs", _log(done_check["id"])).status_code == 404
    assert as_charlie.get("print-logs").json()["count"] == 0 and PrintLog.objects.count() == 1


def test_a_log_explains_what_is_missing(as_alice, alice_check, done_check):
    """A failed print needs its reason; a check without a report cannot be logged yet."""
    response = as_alice.post("print-logs", _log(done_check["id"], succeeded=False))
    assert response.status_code == 400 and response.json()["errors"][0]["loc"] == ["failure_reason"]
    queued = as_alice.post("checks", {**_check_like(done_check), "quantities": [7]}).json()
    response = as_alice.post("print-logs", _log(queued["id"]))
    assert response.status_code == 400 and "report" in response.json()["message"]


def _check_like(check):
    return {"design": check["design"], "printer": check["printer"], "material": check["material"]}


def test_a_log_entered_by_mistake_is_deleted(as_alice, done_check):
    """Deleting a log answers 204 and it is gone."""
    log = as_alice.post("print-logs", _log(done_check["id"])).json()
    assert as_alice.delete(f"print-logs/{log['id']}").status_code == 204
    assert as_alice.get(f"print-logs/{log['id']}").status_code == 404
