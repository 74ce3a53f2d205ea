"""The pieces that make at-least-once delivery safe, without a worker: the claim, the idempotent store, the job."""

from datetime import timedelta
from unittest import mock

import pytest
from django.core.files.storage import default_storage
from django.utils import timezone

from tests.reliability.helpers import assert_one_report, box_stl, stored_report_files, submit
from webapp.checks import services
from webapp.checks.models import Check

pytestmark = pytest.mark.django_db


@pytest.fixture
def queued(alice, seeded, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks():
        return submit(alice, box_stl(), "box.stl")


def test_each_claim_counts_an_attempt_and_the_fourth_is_refused(queued):
    """One conditional update per delivery: attempts 1, 2, 3, then no more (a poison part cannot loop)."""
    assert [services.check_claim(check_id=queued.pk) for _ in range(4)] == [True, True, True, False]
    queued.refresh_from_db()
    assert (queued.status, queued.attempts) == ("running", 3)


def test_a_finished_check_is_never_claimed_again(queued):
    """A late duplicate of a done check's message finds nothing to do."""
    services.check_run(check_id=queued.pk)
    assert services.check_claim(check_id=queued.pk) is False
    queued.refresh_from_db()
    assert (queued.status, queued.attempts) == ("done", 1)


def test_storing_a_report_twice_rewrites_the_same_files(queued):
    """A second run of the same check leaves one report and one copy of each file."""
    services.check_run(check_id=queued.pk)
    queued.refresh_from_db()
    first = {name: default_storage.open(queued.files_prefix() + name).read() for name in stored_report_files(queued)}
    Check.objects.filter(pk=queued.pk).update(status="running")
    services.check_run(check_id=queued.pk)
    assert_one_report(queued)
    assert stored_report_files(queued) == sorted(first) and queued.attempts == 2


def test_the_job_requeues_a_silent_check_and_fails_one_out_of_attempts(alice, seeded, django_capture_on_commit_callbacks):
    """Stale heartbeat: requeued (and sent again) with attempts left, failed with the sentence without; fresh: untouched."""
    with django_capture_on_commit_callbacks():
        silent, spent, busy = (submit(alice, box_stl(), f"{n}.stl") for n in ("silent", "spent", "busy"))
    now = timezone.now()
    old = now - timedelta(hours=1)
    Check.objects.filter(pk=silent.pk).update(status="running", attempts=1, heartbeat_at=old)
    Check.objects.filter(pk=spent.pk).update(status="running", attempts=3, heartbeat_at=old)
    Check.objects.filter(pk=busy.pk).update(status="running", attempts=1, heartbeat_at=now)
    with mock.patch("webapp.checks.tasks.run_check.delay") as send, django_capture_on_commit_callbacks(execute=True):
        assert services.check_requeue_stale(now=now, stale_after_s=60) == (1, 1)
    send.assert_called_once_with(silent.pk)
    states = {c.pk: (c.status, c.error_code) for c in Check.objects.all()}
    assert states == {silent.pk: ("queued", ""), spent.pk: ("failed", "worker_lost"), busy.pk: ("running", "")}
    spent.refresh_from_db()
    assert spent.error == ("The worker was lost three times while checking this part; the part may exceed the "
                           "memory limit, so simplify the mesh or ask for a larger worker.")
