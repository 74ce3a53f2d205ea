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
