"""The designer's pages: upload, progress, report, and nothing of alice's for charlie."""

import re
from unittest import mock

import pytest
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from tests.webapp.parts import box_stl
from webapp.checks import services
from webapp.checks.models import Check, Design


def _upload(client, data=None, name="box.stl", **extra):
    form = {"file": SimpleUploadedFile(name, box_stl() if data is None else data), "units": "mm",
            "printer": "bay1-lcd-resin", "material": "standard-resin", "orientation": "+z",
            "quantities": "1, 5", "freqs": "140", **extra}
    with mock.patch("webapp.checks.queue.send_run_check") as delay:
        response = client.post(reverse("upload"), form)
    return response, delay


@pytest.fixture
def alice_check(alice, seeded, django_capture_on_commit_callbacks):
    from webapp.catalogue.models import Material, Printer
    from services.settings import CheckSettings

    design = services.design_create(owner=alice, name="box.stl", data=box_stl(), units="mm")
    with mock.patch("webapp.checks.queue.send_run_check"):
        return services.check_create(owner=alice, design=design, printer=Printer.objects.get(slug="bay1-lcd-resin"),
                                     material=Material.objects.get(slug="standard-resin"), check_settings=CheckSettings())


def test_it_requires_login(client, db):
    """An anonymous visitor is sent to the sign-in page."""
    response = client.get(reverse("designs"))
    assert response.status_code == 302 and reverse("login") in response["Location"]


def test_it_queues_a_check_after_commit(alice_client, seeded, django_capture_on_commit_callbacks):
    """An upload stores the design, creates a queued check and enqueues it only once committed."""
    with mock.patch("webapp.checks.queue.send_run_check") as delay:
        with django_capture_on_commit_callbacks(execute=True) as callbacks:
            response, _ = _upload(alice_client)
    check = Check.objects.get()
    assert response.status_code == 302 and response["Location"] == reverse("check", args=[check.public_id])
    assert check.status == "queued" and check.printer_snapshot["slug"] == "bay1-lcd-resin"
    assert len(callbacks) == 1 and delay.call_args.args == (check.pk,)


def test_it_explains_a_bad_frequency_next_to_the_field(alice_client, seeded):
    """A frequency the form cannot read comes back as an error beside that field, and nothing is queued."""
    response, delay = _upload(alice_client, freqs="abc")
    assert response.status_code == 400
    assert "Cannot read frequencies" in response.content.decode()
    assert not Design.objects.exists() and not delay.called


def test_with_no_frequency_it_asks_for_one_when_the_material_has_no_band(alice_client, seeded):
    """No frequency and a material without a design band: the form asks for a frequency; with the band it queues."""
    from webapp.catalogue.models import Material

    resin = Material.objects.get(slug="standard-resin")
    resin.data = {**resin.data, "band_ghz": None}
    resin.save()
    response, delay = _upload(alice_client, freqs="")
    assert response.status_code == 400 and "Give a design frequency" in response.content.decode()
    assert not delay.called
    resin.data = {**resin.data, "band_ghz": [75.0, 110.0]}
    resin.save()
    response, _ = _upload(alice_client, freqs="")
    assert response.status_code == 302


def test_it_refuses_an_empty_file(alice_client, seeded):
    """An empty upload is refused with a sentence naming the file."""
    response, _ = _upload(alice_client, data=b"", name="empty.stl")
    assert response.status_code == 400
    assert not Check.objects.exists()


def test_it_shows_progress_until_done(alice_client, alice_check):
    """The check page shows a progress bar and its status endpoint answers JSON."""
    page = alice_client.get(reverse("check", args=[alice_check.public_id]))
    assert page.status_code == 200
    html = page.content.decode()
    (bar,) = re.findall(r'<div[^>]*role="progressbar"[^>]*>', html)
    assert 'aria-valuenow="0"' in bar and 'aria-valuemax="100"' in bar  # a queued check: 0 %
    status = alice_client.get(reverse("check_status", args=[alice_check.public_id])).json()
    assert status["status"] == "queued" and status["progress"] == 0


def test_it_limits_active_checks_per_user(alice, seeded, settings):
    """Past the per-user limit of waiting checks, a new one is refused with a sentence."""
    from webapp.catalogue.models import Material, Printer
    from services.settings import CheckSettings

    settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS = 1
    design = services.design_create(owner=alice, name="box.stl", data=box_stl())
    kwargs = dict(owner=alice, design=design, printer=Printer.objects.first(), material=Material.objects.first(),
                  check_settings=CheckSettings())
    with mock.patch("webapp.checks.queue.send_run_check"):
        services.check_create(**kwargs)
        with pytest.raises(services.ApplicationError) as exc:
            services.check_create(**kwargs)
    assert exc.value.status == 429


@pytest.mark.parametrize("name", ["check", "check_status", "check_report_json"])
def test_it_hides_alices_check_from_charlie(charlie_client, alice_check, name):
    """A stranger gets 404 for alice's check, its status and its report: he learns nothing."""
    assert charlie_client.get(reverse(name, args=[alice_check.public_id])).status_code == 404


def test_it_hides_alices_design_and_files_from_charlie(charlie_client, alice_check):
    """A stranger gets 404 for alice's design page and report pictures."""
    assert charlie_client.get(reverse("design", args=[alice_check.design.public_id])).status_code == 404
    assert charlie_client.get(reverse("check_file", args=[alice_check.public_id, "thickness_map.png"])).status_code == 404


def test_it_keeps_uploads_under_generated_names(alice, seeded):
    """The stored file name is generated; a hostile display name never becomes a path."""
    design = services.design_create(owner=alice, name="../../etc/passwd\x00.stl", data=box_stl())
    assert design.stored_name.startswith("designs/") and ".." not in design.stored_name
    assert design.name == "passwd.stl"


def test_it_refuses_a_filament_on_a_resin_printer(alice_client, seeded):
    """A material the printer's process cannot print is an error beside the material field."""
    response, delay = _upload(alice_client, material="pla")
    assert response.status_code == 400 and "not made for vat photopolymerisation" in response.content.decode()
    assert not delay.called


def test_a_check_cancelled_while_running_stays_cancelled(alice_check):
    """A worker that finishes or fails after the user cancelled does not overwrite the cancellation."""
    from webapp.checks.models import Check

    Check.objects.filter(pk=alice_check.pk).update(status=Check.CANCELLED)
    services.check_fail(check_id=alice_check.pk, code="x", message="y")
    alice_check.refresh_from_db()
    assert alice_check.status == Check.CANCELLED
