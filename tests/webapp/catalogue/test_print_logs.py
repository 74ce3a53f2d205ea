"""Print logs and the calibration they give: logged from a check, fitted per printer, used by the next check."""

import numpy as np
import pytest
from django.urls import reverse

from tests.webapp.catalogue.conftest import estimated_check, run_real_check
from webapp.catalogue import services
from webapp.catalogue.models import PrintLog
from webapp.catalogue.selectors import calibration_for
from webapp.checks.models import Check


def _log(user, check, actual_s, **kw):
    return services.print_log_create(user=user, check=check, actual_print_time_s=actual_s,
                                     succeeded=kw.pop("succeeded", True), **kw)


def test_it_logs_a_print_from_the_check(alice_client, alice, bay1, resin):
    """Alice logs 2:35 and 3.1 ml; the log keeps the report's estimate beside them and she returns to her check."""
    check = estimated_check(alice, bay1, resin, print_time_s=9000, material_ml=2.9)
    response = alice_client.post(reverse("catalogue:log_create", args=[check.public_id]), {
        "copies": 1, "actual_print_time": "2:35", "actual_material_ml": "3.1", "outcome": "ok"})
    assert response.status_code == 302 and response["Location"] == reverse("check", args=[check.public_id])
    log = PrintLog.objects.get()
    assert (log.actual_print_time_s, log.actual_material_ml, log.succeeded) == (9300, 3.1, True)
    assert (log.estimated_print_time_s, log.model_print_time_s, log.estimated_material_ml) == (9000, 9000, 2.9)
    assert log.logged_by == alice and log.time_ratio == pytest.approx(9300 / 9000)


def test_a_failed_print_needs_its_reason(alice_client, alice, bay1, resin):
    """'Failed' without a reason is refused beside the reason field; with one, it is logged but not counted."""
    check = estimated_check(alice, bay1, resin, print_time_s=3600)
    url = reverse("catalogue:log_create", args=[check.public_id])
    response = alice_client.post(url, {"copies": 1, "actual_print_time": "40", "outcome": "failed"})
    assert response.status_code == 400 and "Say why the print failed" in response.content.decode()
    alice_client.post(url, {"copies": 1, "actual_print_time": "40", "outcome": "failed",
                            "failure_reason": "peeled off the plate at layer 120"})
    assert PrintLog.objects.get().failure_reason == "peeled off the plate at layer 120"
    assert calibration_for(bay1).count == 0


def test_a_check_without_an_estimate_cannot_be_logged(alice_client, alice, bay1, resin):
    """A queued check has nothing to compare with: the page says so and a post is refused."""
    check = estimated_check(alice, bay1, resin, print_time_s=3600)
    Check.objects.filter(pk=check.pk).update(status=Check.QUEUED, report=None)
    url = reverse("catalogue:log_create", args=[check.public_id])
    assert "log the print once its report is ready" in alice_client.get(url).content.decode()
    response = alice_client.post(url, {"copies": 1, "actual_print_time": "1:00", "outcome": "ok"})
    assert response.status_code == 400 and not PrintLog.objects.exists()


def test_a_build_of_several_copies_compares_with_that_build(alice, bay3, resin):
    """Five copies in one build are compared with the report's time for a build of five, not of one."""
    rows = [{"quantity": 1, "builds": 1, "print_time_s": 1000.0}, {"quantity": 5, "builds": 1, "print_time_s": 2600.0}]
    check = estimated_check(alice, bay3, resin, print_time_s=1000, material_ml=2.0, quantities=rows)
    log = _log(alice, check, 2700, copies=5)
    assert (log.estimated_print_time_s, log.estimated_material_ml) == (2600.0, 10.0)
    with pytest.raises(services.CatalogueInvalid, match="one build of 1, 5 parts, not of 7"):
        _log(alice, check, 2700, copies=7)


def test_it_recovers_a_known_correction(alice, bay1, resin):
    """Twenty prints that really take 1.25 x the model (2 % scatter) give 1.25 within 2 %.

    Reference: numpy.linalg.lstsq for the factor of the fit through the origin, and the RMS
    relative residual computed here with numpy for the spread.
    """
    rng = np.random.default_rng(20261202)
    estimated = rng.uniform(600, 20000, size=20)
    actual = 1.25 * estimated * (1 + rng.normal(0, 0.02, size=20))
    for e, a in zip(estimated, actual):
        _log(alice, estimated_check(alice, bay1, resin, print_time_s=float(e)), float(a))
    calibration = calibration_for(bay1)
    assert calibration.count == 20
    assert calibration.factor == pytest.approx(1.25, rel=0.02)
    reference = np.linalg.lstsq(estimated[:, None], actual, rcond=None)[0][0]
    assert calibration.factor == pytest.approx(reference, rel=1e-9)
    spread = np.sqrt(np.mean((actual / (reference * estimated) - 1) ** 2))
    assert calibration.spread == pytest.approx(spread, rel=1e-9)


def test_a_calibrated_estimate_is_unwound_before_fitting(alice, bay1, resin):
    """A report already corrected by x 1.2 said 1200 s for a model time of 1000 s; an actual 1100 s fits 1.1."""
    check = estimated_check(alice, bay1, resin, print_time_s=1200, factor=1.2)
    log = _log(alice, check, 1100)
    assert log.model_print_time_s == pytest.approx(1000)
    assert calibration_for(bay1).factor == pytest.approx(1.1)


def test_a_new_time_model_starts_a_new_calibration(bob, alice, bay1, resin):
    """Prints estimated with the old constants stop counting once the lab manager changes the model."""
    _log(alice, estimated_check(alice, bay1, resin, print_time_s=1000), 1300)
    assert calibration_for(bay1).count == 1
    tm = {**bay1.data["time_model"], "exposure_s": 3.2}
    bay1 = services.printer_update(user=bob, printer=bay1, data={**bay1.data, "time_model": tm})
    assert calibration_for(bay1).count == 0
    services.printer_update(user=bob, printer=bay1, data={**bay1.data, "notes": "only words changed"})
    assert calibration_for(bay1).count == 0  # still the new model: the old log stays out


def test_calibration_is_per_printer(alice, bay1, bay3, resin):
    """Bay 3's prints do not move Bay 1's correction."""
    _log(alice, estimated_check(alice, bay3, resin, print_time_s=1000), 2000)
    assert calibration_for(bay1).count == 0 and calibration_for(bay3).factor == pytest.approx(2.0)


def test_the_next_check_uses_the_calibration(alice, bay1, resin):
    """After logs that run 1.1 x the model, a real check's estimate is calibrated and 1.1 x the uncalibrated one."""
    first = run_real_check(alice, bay1, resin)
    plain = first.report["estimate"]
    assert plain["calibrated"] is False
    for seconds in (1000.0, 5000.0, 9000.0):
        _log(alice, estimated_check(alice, bay1, resin, print_time_s=seconds), 1.1 * seconds)
    second = run_real_check(alice, bay1, resin).report["estimate"]
    assert second["calibrated"] is True
    assert second["calibration"] == {"factor": 1.1, "count": 3, "spread": 0.0}
    assert second["print_time_s"] == pytest.approx(1.1 * plain["print_time_s"], abs=0.1)


def test_the_pages_show_estimated_against_actual(bob_client, alice, bay1, resin):
    """The log list shows each print's times and ratio, and each printer's factor, count and spread."""
    for seconds, ratio in ((3600.0, 1.2), (7200.0, 1.3)):
        _log(alice, estimated_check(alice, bay1, resin, print_time_s=seconds), ratio * seconds)
    page = bob_client.get(reverse("catalogue:log_list")).content.decode()
    factor = calibration_for(bay1)
    assert "1 h 00 min" in page and "1 h 12 min" in page and "1.20" in page and "1.30" in page
    assert f"× {factor.factor:.3f}" in page and "2 prints" in page and f"{factor.spread * 100:.1f} %" in page
    detail = bob_client.get(reverse("catalogue:printer_detail", args=[bay1.slug])).content.decode()
    assert f"× {factor.factor:.3f}" in detail and "2 logged prints" in detail


def test_a_lab_manager_sees_checks_waiting_for_a_log(bob_client, alice_client, charlie_client, alice, bay1, resin):
    """Finished checks without a log are offered for logging: to bob and alice, never to charlie."""
    check = estimated_check(alice, bay1, resin, print_time_s=3600)
    link = reverse("catalogue:log_create", args=[check.public_id])
    assert link in bob_client.get(reverse("catalogue:log_list")).content.decode()
    assert link in alice_client.get(reverse("catalogue:log_list")).content.decode()
    assert link not in charlie_client.get(reverse("catalogue:log_list")).content.decode()
