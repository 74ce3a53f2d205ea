"""Upload limits in Django and per user, and uploads kept outside any web root under generated names."""

import re
from pathlib import Path

import pytest
from django.conf import settings
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from tests.security.urlsweep import routes
from tests.webapp.parts import box_stl
from webapp.checks.models import Check, Design

pytestmark = pytest.mark.django_db


def _form(data: bytes, name: str = "box.stl") -> dict:
    return {"file": SimpleUploadedFile(name, data), "units": "mm", "printer": "bay1-lcd-resin",
            "material": "standard-resin", "orientation": "+z", "quantities": "1", "freqs": "140"}


def _post(client, form: dict, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks():  # queue nothing: no worker in these tests
        return client.post(reverse("upload"), form)


def test_a_request_over_the_limit_is_refused_before_it_is_read(alice_client):
    """A Content-Length over PHASEWRIGHT_MAX_REQUEST_BYTES gets 413 and a sentence, whatever the URL."""
    too_big = settings.PHASEWRIGHT_MAX_REQUEST_BYTES + 1
    for path in (reverse("upload"), "/api/v1/designs", reverse("login")):
        response = alice_client.post(path, b"", content_type="application/octet-stream", CONTENT_LENGTH=str(too_big))
        assert response.status_code == 413
        assert response.content.decode().startswith("The upload is ") and "limit" in response.content.decode()
    assert not Design.objects.exists()


def test_the_proxy_and_django_allow_the_same_size():
    """Django's whole-request cap is the file cap plus 1 MiB of form, the figure nginx's config carries."""
    assert settings.PHASEWRIGHT_MAX_REQUEST_BYTES == settings.PHASEWRIGHT_MAX_UPLOAD_BYTES + 2**20


def test_a_file_over_the_limit_is_refused_with_a_sentence(alice_client, seeded, settings,
                                                          django_capture_on_commit_callbacks):
    """A file one byte over PHASEWRIGHT_MAX_UPLOAD_BYTES is refused beside the field; nothing is stored."""
    data = box_stl()
    settings.PHASEWRIGHT_MAX_UPLOAD_BYTES = len(data) - 1
    response = _post(alice_client, _form(data), django_capture_on_commit_callbacks)
    assert response.status_code == 400
    assert "over the" in response.content.decode() and "limit" in response.content.decode()
    assert not Design.objects.exists() and not Check.objects.exists()


def test_each_user_has_a_limit_of_waiting_checks(alice_client, charlie_client, seeded, settings,
                                                 django_capture_on_commit_callbacks):
    """Past PHASEWRIGHT_MAX_ACTIVE_CHECKS queued or running checks, alice's next upload is refused; charlie's is not."""
    settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS = 2
    for _ in range(2):
        assert _post(alice_client, _form(box_stl()), django_capture_on_commit_callbacks).status_code == 302
    refused = _post(alice_client, _form(box_stl()), django_capture_on_commit_callbacks)
    assert refused.status_code == 400 and "checks waiting or running" in refused.content.decode()
    assert _post(charlie_client, _form(box_stl()), django_capture_on_commit_callbacks).status_code == 302
    assert Check.objects.filter(owner__username="alice").count() == 2


def test_an_upload_is_stored_outside_any_web_root_under_a_generated_name(alice_client, seeded,
                                                                         django_capture_on_commit_callbacks):
    """A path-traversal file name is kept for display only; the bytes sit in private storage as designs/<hex>.bin."""
    response = _post(alice_client, _form(box_stl(), name="../../static/evil.stl"), django_capture_on_commit_callbacks)
    assert response.status_code == 302
    design = Design.objects.get()
    assert design.name == "evil.stl"
    assert re.fullmatch(r"designs/[0-9a-f]{32}\.bin", design.stored_name)
    stored = Path(settings.STORAGE_DIR) / design.stored_name
    assert stored.read_bytes() == box_stl()
    web_roots = [Path(settings.STATIC_ROOT).resolve(), *(Path(d).resolve() for d in settings.STATICFILES_DIRS)]
    assert not any(stored.resolve().is_relative_to(root) for root in web_roots)
    # No URL serves files from disk (django.views.static.serve), so the folder has no address.
    assert not [r for r in routes() if r.module == "django.views.static"]
    for guess in (f"/{design.stored_name}", f"/static/{design.stored_name}", f"/private/{design.stored_name}",
                  f"/media/{design.stored_name}", f"/static/../private/{design.stored_name}"):
        assert alice_client.get(guess).status_code == 404, guess


def test_a_report_file_is_downloaded_only_through_the_owner_checked_view(alice_client, charlie_client, seeded,
                                                                         django_capture_on_commit_callbacks):
    """The picture comes from the view with nosniff; charlie gets 404 for the same URL."""
    from webapp.checks import services

    _post(alice_client, _form(box_stl()), django_capture_on_commit_callbacks)
    check = Check.objects.get()
    services.check_run(check_id=check.pk)
    check.refresh_from_db()
    name = check.report["figures"][0]
    url = reverse("check_file", args=[check.public_id, name])
    mine = alice_client.get(url)
    assert mine.status_code == 200 and mine["X-Content-Type-Options"] == "nosniff"
    assert charlie_client.get(url).status_code == 404


def _many(client, names: list[str], django_capture_on_commit_callbacks):
    form = {**_form(box_stl()), "file": [SimpleUploadedFile(name, box_stl()) for name in names]}
    return _post(client, form, django_capture_on_commit_callbacks)


def test_a_batch_over_the_active_cap_stores_only_what_it_queues(alice_client, seeded, settings,
                                                                django_capture_on_commit_callbacks):
    """Four files with room for two checks: two designs stored and queued, the other two named and not stored."""
    settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS = 2
    folder = Path(settings.STORAGE_DIR) / "designs"
    before = set(folder.iterdir()) if folder.exists() else set()
    response = _many(alice_client, ["a.stl", "b.stl", "c.stl", "d.stl"], django_capture_on_commit_callbacks)
    page = response.content.decode()
    assert response.status_code == 400
    assert "c.stl: not stored; you have 2 checks waiting or running" in page and "d.stl: not stored" in page
    assert "2 of the files were stored and queued" in page
    assert Design.objects.count() == Check.objects.count() == 2
    assert sorted(Design.objects.values_list("name", flat=True)) == ["a.stl", "b.stl"]
    assert set(folder.iterdir()) - before == {folder / Path(d.stored_name).name for d in Design.objects.all()}


def test_each_user_has_a_storage_quota(alice_client, charlie_client, seeded, settings,
                                       django_capture_on_commit_callbacks):
    """With room for two files, the third of a batch is refused by name with the sizes; charlie's own quota is untouched."""
    size = len(box_stl())
    settings.PHASEWRIGHT_STORAGE_QUOTA_BYTES = 2 * size + size // 2
    response = _many(alice_client, ["a.stl", "b.stl", "c.stl"], django_capture_on_commit_callbacks)
    page = response.content.decode()
    assert response.status_code == 400 and "c.stl: not stored; your designs take" in page
    assert "over the" in page and "storage quota" in page
    assert Design.objects.filter(owner__username="alice").count() == Check.objects.count() == 2
    assert _post(charlie_client, _form(box_stl()), django_capture_on_commit_callbacks).status_code == 302


def test_the_storage_quota_is_two_gib_unless_set():
    """The effective default, not the line: 2 GiB."""
    assert settings.PHASEWRIGHT_STORAGE_QUOTA_BYTES == 2 * 2**30


def test_a_size_over_the_limit_is_said_with_real_sizes(alice_client, seeded, settings,
                                                       django_capture_on_commit_callbacks):
    """One byte over: the sentence gives both sizes exactly, never 'N MB is over the N MB limit'."""
    data = box_stl()
    settings.PHASEWRIGHT_MAX_UPLOAD_BYTES = len(data) - 1
    page = _post(alice_client, _form(data), django_capture_on_commit_callbacks).content.decode()
    assert f"box.stl: {len(data):,} bytes is over the {len(data) - 1:,}-byte limit." in page


def test_a_design_whose_check_is_refused_at_the_last_moment_is_not_kept(alice, seeded, settings):
    """When queueing fails after the file was stored (another upload took the last slot), row and file both go."""
    from unittest import mock

    from services.settings import CheckSettings
    from webapp.catalogue.models import Material, Printer
    from webapp.checks import services

    upload = SimpleUploadedFile("late.stl", box_stl())
    refusal = services.ApplicationError("too_many_checks", "You have 20 checks waiting or running.", status=429)
    folder = Path(settings.STORAGE_DIR) / "designs"
    before = set(folder.iterdir()) if folder.exists() else set()
    with mock.patch.object(services, "check_create", side_effect=refusal):
        created, refused = services.uploads_check_create(
            owner=alice, uploads=[upload], printer=Printer.objects.get(slug="bay1-lcd-resin"),
            material=Material.objects.get(slug="standard-resin"), check_settings=CheckSettings())
    assert created == [] and refused == ["You have 20 checks waiting or running."]
    assert not Design.objects.exists() and set(folder.iterdir()) == before


def test_the_api_refuses_an_upload_over_the_quota(alice, settings):
    """The API answers 413 with the code over_quota and stores nothing."""
    from webapp.api.services import api_token_create

    settings.PHASEWRIGHT_STORAGE_QUOTA_BYTES = len(box_stl()) - 1
    token = api_token_create(user=alice, name="script")[1]
    from django.test import Client

    response = Client().post("/api/v1/designs", {"file": SimpleUploadedFile("box.stl", box_stl()), "units": "mm"},
                             headers={"Authorization": f"Bearer {token}"})
    assert response.status_code == 413 and response.json()["code"] == "over_quota"
    assert "storage quota" in response.json()["message"] and not Design.objects.exists()
