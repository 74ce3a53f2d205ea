"""End to end: upload through the site -> a real worker process -> the report page.

Once through the folder broker that needs no server (the `make run` default), and once through the
Redis on 127.0.0.1:6379 that production uses (skipped when none answers).
"""

import socket

import pytest
from django.conf import settings
from django.core.files.uploadedfile import SimpleUploadedFile
from django.urls import reverse

from tests.webapp.parts import box_stl
from tests.webapp.worker import broker, wait_for, worker_process
from webapp.checks.models import Check

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]

REDIS_URL = "redis://127.0.0.1:6379/15"


def _redis_answers() -> bool:
    try:
        socket.create_connection(("127.0.0.1", 6379), timeout=1).close()
        return True
    except OSError:
        return False


def _upload_and_follow(client, data: bytes, name: str) -> Check:
    response = client.post(reverse("upload"), {
        "file": SimpleUploadedFile(name, data), "units": "mm", "printer": "bay1-lcd-resin",
        "material": "standard-resin", "orientation": "+z", "quantities": "1, 5", "freqs": "140"})
    assert response.status_code == 302, response.content.decode()[:2000]
    return wait_for(Check.objects.get(design__name=name))


def _assert_report_page(client, check: Check) -> None:
    assert check.status == "done", check.error
    page = client.get(reverse("check", args=[check.public_id])).content.decode()
    assert "verdict-banner" in page and check.design.name in page
    picture = client.get(reverse("check_file", args=[check.public_id, "thickness_map.png"]))
    assert picture.status_code == 200 and b"".join(picture.streaming_content)[:8] == b"\x89PNG\r\n\x1a\n"


def test_it_checks_an_upload_through_the_folder_broker(alice_client, seeded):
    """A real worker on the no-server broker takes the upload to a report; a bad file ends failed with its sentence."""
    with broker("filesystem://", settings.FOLDER_BROKER_OPTIONS):
        with worker_process():
            check = _upload_and_follow(alice_client, box_stl(), "box.stl")
            bad = _upload_and_follow(alice_client, b"\x00garbage" * 100, "noise.stl")
    _assert_report_page(alice_client, check)
    assert bad.status == "failed" and "noise.stl" in bad.error and bad.attempts == 1


@pytest.mark.skipif(not _redis_answers(), reason="no Redis on 127.0.0.1:6379")
def test_it_checks_an_upload_through_redis(alice_client, seeded):
    """A real worker on Redis takes the upload to a report page."""
    with broker(REDIS_URL, {"visibility_timeout": 3600}), worker_process(redis_url=REDIS_URL):
        check = _upload_and_follow(alice_client, box_stl(), "box-redis.stl")
    _assert_report_page(alice_client, check)
