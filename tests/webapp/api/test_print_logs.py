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


@pytest.mark.parametrize("seconds", [float("inf"), float("nan"), 3_600_000.0])
def test_an_infinite_or_absurd_time_is_refused(as_alice, done_check, seconds):
    """JSON Infinity, NaN and 1000 h against a minutes-long estimate answer 400 with the field; nothing is stored."""
    response = as_alice.post("print-logs", _log(done_check["id"], actual_print_time_s=seconds))
    assert response.status_code == 400 and response.json()["errors"][0]["loc"] == ["actual_print_time_s"]
    assert not PrintLog.objects.exists()


def test_a_lab_manager_accepts_a_designers_log(as_alice, as_bob, as_charlie, done_check):
    """alice's log waits (accepted_at null); she gets 403 accepting it, charlie 404; bob accepts it (200)."""
    log = as_alice.post("print-logs", _log(done_check["id"])).json()
    assert log["accepted_at"] is None and log["accepted_by"] is None
    assert as_alice.post(f"print-logs/{log['id']}/accept").status_code == 403
    assert as_charlie.post(f"print-logs/{log['id']}/accept").status_code == 404
    accepted = as_bob.post(f"print-logs/{log['id']}/accept")
    assert accepted.status_code == 200 and accepted.json()["accepted_by"] == "bob"
    assert PrintLog.objects.get().accepted_at is not None


def test_a_lab_managers_own_log_counts_at_once(as_bob, done_check):
    """bob's log is accepted as it is made."""
    log = as_bob.post("print-logs", _log(done_check["id"])).json()
    assert log["accepted_by"] == "bob" and log["accepted_at"] is not None


def test_a_stored_infinite_row_is_listed_without_a_number(as_alice, as_bob, done_check):
    """A row stored before times were checked lists with a null time and ratio, not an error."""
    log = as_alice.post("print-logs", _log(done_check["id"])).json()
    PrintLog.objects.update(actual_print_time_s=float("inf"))
    row = as_bob.get("print-logs").json()["items"][0]
    assert row["id"] == log["id"] and row["actual_print_time_s"] is None and row["time_ratio"] is None
