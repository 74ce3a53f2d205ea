"""The pieces that make at-least-once delivery safe, without a worker: the claim, the idempotent store, the job."""

import time
from datetime import timedelta
from unittest import mock

import pytest
from django.core.files.storage import default_storage
from django.utils import timezone

from tests.reliability.helpers import assert_one_report, box_stl, stored_report_files, submit
from tests.reliability.servers import wait_until
from webapp.checks import services
from webapp.checks.models import Check

pytestmark = pytest.mark.django_db


@pytest.fixture
def queued(alice, seeded, django_capture_on_commit_callbacks):
    with django_capture_on_commit_callbacks():
        return submit(alice, box_stl(), "box.stl")


def test_each_claim_counts_an_attempt_and_the_fourth_is_refused(queued):
    """One conditional update per delivery: attempts 1, 2, 3 (each after the last went stale), then no more."""
    claims = []
    for _ in range(4):
        claims.append(services.check_claim(check_id=queued.pk))
        Check.objects.filter(pk=queued.pk).update(heartbeat_at=timezone.now() - timedelta(hours=1))
    assert claims == [True, True, True, False]
    queued.refresh_from_db()
    assert (queued.status, queued.attempts) == ("running", 3)


def test_a_live_check_is_not_claimed_twice_and_a_silent_one_is(queued, settings):
    """A second delivery while the heartbeat is fresh finds nothing to do; past the stale age it takes over."""
    assert services.check_claim(check_id=queued.pk) is True
    claimed_at = timezone.now()
    just_fresh = claimed_at + timedelta(seconds=settings.PHASEWRIGHT_STALE_AFTER_S - 1)
    just_stale = claimed_at + timedelta(seconds=settings.PHASEWRIGHT_STALE_AFTER_S + 1)
    assert services.check_claim(check_id=queued.pk, now=just_fresh) is False
    assert services.check_claim(check_id=queued.pk, now=just_stale) is True
    # The task's own retry (the database went away mid-run) takes its running check back at once.
    assert services.check_claim(check_id=queued.pk, now=just_fresh) is False
    queued.refresh_from_db()
    assert (queued.status, queued.attempts, queued.heartbeat_at) == ("running", 2, just_stale)
    assert services.check_claim(check_id=queued.pk, now=just_fresh, retry=True) is True


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
    Check.objects.filter(pk=queued.pk).update(status="running", heartbeat_at=timezone.now() - timedelta(hours=1))
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
    with mock.patch("webapp.checks.queue.send_run_check") as send, django_capture_on_commit_callbacks(execute=True):
        assert services.check_requeue_stale(now=now, stale_after_s=60) == (1, 1)
    send.assert_called_once_with(silent.pk)
    states = {c.pk: (c.status, c.error_code) for c in Check.objects.all()}
    assert states == {silent.pk: ("queued", ""), spent.pk: ("failed", "worker_lost"), busy.pk: ("running", "")}
    spent.refresh_from_db()
    assert spent.error == ("The worker was lost three times while checking this part; the part may exceed the "
                           "memory limit, so simplify the mesh or ask for a larger worker.")


def test_the_job_resends_a_queued_check_whose_worker_went_silent(alice, seeded, django_capture_on_commit_callbacks):
    """Taken by a worker that died (stale stamp): resent. Never taken: left alone until twice the soft limit, then resent once."""
    with django_capture_on_commit_callbacks():
        taken, waiting, held = (submit(alice, box_stl(), f"{n}.stl") for n in ("taken", "waiting", "held"))
    now = timezone.now()
    Check.objects.filter(pk=taken.pk).update(heartbeat_at=now - timedelta(seconds=120))
    Check.objects.filter(pk=held.pk).update(heartbeat_at=now)
    with mock.patch("webapp.checks.queue.send_run_check") as send:
        with django_capture_on_commit_callbacks(execute=True):
            assert services.check_requeue_stale(now=now, stale_after_s=60) == (1, 0)
        send.assert_called_once_with(taken.pk)
        # Much later, nobody has taken "waiting" (nor the resent one): each is resent once, not at every sweep.
        later = now + timedelta(hours=3)
        Check.objects.filter(pk=held.pk).update(heartbeat_at=later)
        with django_capture_on_commit_callbacks(execute=True):
            assert services.check_requeue_stale(now=later, stale_after_s=60) == (2, 0)
            Check.objects.filter(pk=held.pk).update(heartbeat_at=later + timedelta(hours=1))
            assert services.check_requeue_stale(now=later + timedelta(hours=1), stale_after_s=60) == (0, 0)
        assert sorted(c.args[0] for c in send.call_args_list) == sorted([taken.pk, taken.pk, waiting.pk])
    assert {c.status for c in Check.objects.all()} == {"queued"}


def test_a_lost_pool_process_requeues_its_check_and_the_third_loss_fails_it(queued):
    """The worker's handler for a dead child: back to the queue with attempts left, failed with the sentence without."""
    outcomes = []
    for _ in range(3):
        assert services.check_claim(check_id=queued.pk, now=timezone.now() + timedelta(hours=1))
        outcomes.append(services.check_release_lost(check_id=queued.pk))
        queued.refresh_from_db()
    assert outcomes == ["requeued", "requeued", "failed"]
    assert (queued.status, queued.error_code, queued.error) == ("failed", "worker_lost", services.worker_lost_sentence())
    assert services.check_release_lost(check_id=queued.pk) == ""


def test_two_pool_processes_losing_one_check_leave_the_other_running_and_stamped(alice, seeded,
                                                                                django_capture_on_commit_callbacks):
    """make run's worker runs two checks at once: a lost child requeues its own check only; the other beats on."""
    from webapp.checks.heartbeat import Heartbeat

    with django_capture_on_commit_callbacks():
        first, second = (submit(alice, box_stl(), f"{n}.stl") for n in ("first", "second"))
    heartbeat = Heartbeat()
    for check in (first, second):
        heartbeat.take(check.pk)
        assert services.check_claim(check_id=check.pk)
        heartbeat.start_running(check.pk)
    assert heartbeat.held() == (frozenset(), frozenset({first.pk, second.pk}))
    assert services.check_release_lost(check_id=first.pk) == "requeued"
    heartbeat.release(first.pk)
    later = timezone.now() + timedelta(seconds=5)
    services.check_heartbeat(queued_ids=heartbeat.held()[0], running_ids=heartbeat.held()[1], now=later)
    first.refresh_from_db()
    second.refresh_from_db()
    assert (first.status, first.heartbeat_at) == ("queued", None)
    assert (second.status, second.heartbeat_at) == ("running", later)
    assert not services.check_claim(check_id=second.pk)  # a second delivery finds it live: no double run


def test_the_heartbeat_keeps_held_checks_fresh_and_never_revives_a_stale_one(alice, seeded, settings,
                                                                         django_capture_on_commit_callbacks):
    """Queued and taken: stamped. Running and fresh: stamped. Running and already stale: left for the next claim."""
    with django_capture_on_commit_callbacks():
        taken, fresh, stale, other = (submit(alice, box_stl(), f"{n}.stl") for n in ("taken", "fresh", "stale", "other"))
    now = timezone.now()
    stale_age = timedelta(seconds=settings.PHASEWRIGHT_STALE_AFTER_S + 1)
    Check.objects.filter(pk=fresh.pk).update(status="running", heartbeat_at=now - timedelta(seconds=1))
    Check.objects.filter(pk__in=(stale.pk, other.pk)).update(status="running", heartbeat_at=now - stale_age)
    services.check_heartbeat(queued_ids={taken.pk}, running_ids={fresh.pk, stale.pk}, now=now)
    beats = dict(Check.objects.values_list("pk", "heartbeat_at"))
    assert beats == {taken.pk: now, fresh.pk: now, stale.pk: now - stale_age, other.pk: now - stale_age}


@pytest.mark.django_db(transaction=True)
def test_the_heartbeat_thread_stamps_what_the_worker_holds_until_released(alice, seeded, settings):
    """The worker's thread, on its own connection: a running check stays fresh; once released it is left alone."""
    from webapp.checks.heartbeat import Heartbeat

    check = submit(alice, box_stl(), "held.stl")  # committed: the thread reads through its own connection
    assert services.check_claim(check_id=check.pk)
    heartbeat = Heartbeat()
    heartbeat.start_running(check.pk)
    before = Check.objects.get(pk=check.pk).heartbeat_at
    heartbeat.start(every_s=0.05)
    try:
        wait_until(lambda: Check.objects.get(pk=check.pk).heartbeat_at > before, timeout_s=10, what="a beat")
        heartbeat.release(check.pk)
        time.sleep(0.2)  # any beat already under way ends
        released_at = Check.objects.get(pk=check.pk).heartbeat_at
        time.sleep(0.3)
        assert Check.objects.get(pk=check.pk).heartbeat_at == released_at
    finally:
        heartbeat.stop()
    assert heartbeat.held() == (frozenset(), frozenset())


@pytest.mark.django_db(transaction=True)
def test_a_taken_check_is_stamped_at_once_not_at_the_next_beat(alice, seeded, settings):
    """The folder broker deletes a taken message: a worker killed before the next beat must not leave it unstamped."""
    from webapp.checks.heartbeat import Heartbeat

    check = submit(alice, box_stl(), "taken.stl")  # committed: the thread reads through its own connection
    assert Check.objects.get(pk=check.pk).heartbeat_at is None
    heartbeat = Heartbeat()
    heartbeat.start(every_s=3600)  # no regular beat within the test
    try:
        heartbeat.take(check.pk)
        wait_until(lambda: Check.objects.get(pk=check.pk).heartbeat_at is not None, timeout_s=10,
                   what="the taken check being stamped")
    finally:
        heartbeat.stop()


def test_a_taken_check_that_never_starts_is_let_go_after_the_stale_age():
    """A broker reconnect drops taken, unstarted messages without ending them: the heartbeat stops stamping them."""
    from webapp.checks.heartbeat import Heartbeat

    now = [100.0]
    heartbeat = Heartbeat(hold_taken_s=45.0, clock=lambda: now[0])
    heartbeat.take(1)
    heartbeat.take(2)
    heartbeat.start_running(2)  # started at once: a running check is stamped for as long as it runs
    now[0] += 44.0
    assert heartbeat.held() == (frozenset({1}), frozenset({2}))
    now[0] += 2.0
    assert heartbeat.held() == (frozenset(), frozenset({2}))
    heartbeat.take(1)  # the resent copy, taken again: stamped again
    assert heartbeat.held() == (frozenset({1}), frozenset({2}))


def test_with_the_folder_brokers_queue_a_lost_message_is_resent_at_once_and_a_waiting_one_never(
        alice, seeded, django_capture_on_commit_callbacks):
    """Folder broker: a queued check whose message is neither in the queue folder nor freshly stamped lost it (a
    worker took the file and died before stamping): resent at the next sweep, then at most once per stale age.
    A check whose message still waits in the folder is left alone however long it waits."""
    with django_capture_on_commit_callbacks():
        lost, waiting, held = (submit(alice, box_stl(), f"{n}.stl") for n in ("lost", "waiting", "held"))
    now = timezone.now()
    Check.objects.filter(pk=held.pk).update(heartbeat_at=now)  # taken by a live worker
    with mock.patch("webapp.checks.queue.send_run_check") as send:
        with django_capture_on_commit_callbacks(execute=True):
            assert services.check_requeue_stale(now=now, stale_after_s=60, pending_ids={waiting.pk}) == (1, 0)
            assert services.check_requeue_stale(now=now + timedelta(seconds=30), stale_after_s=60,
                                                pending_ids={waiting.pk}) == (0, 0)
            Check.objects.filter(pk=held.pk).update(heartbeat_at=now + timedelta(hours=3))
            assert services.check_requeue_stale(now=now + timedelta(hours=3), stale_after_s=60,
                                                pending_ids={waiting.pk}) == (1, 0)
        assert [c.args[0] for c in send.call_args_list] == [lost.pk, lost.pk]


def test_the_sweeper_reads_the_check_ids_waiting_in_the_folder_brokers_queue(alice, seeded, tmp_path):
    """Messages written by kombu's own folder transport (not a copy of its format) are read back to their checks;
    a file of another task or a torn file is skipped; another broker gives None."""
    from tests.webapp.worker import broker
    from webapp.checks import queue
    from webapp.checks.sweeper import folder_queue_check_ids

    folders = {name: tmp_path / name for name in ("queue", "control", "processed")}
    for path in folders.values():
        path.mkdir()
    options = {"data_folder_in": str(folders["queue"]), "data_folder_out": str(folders["queue"]),
               "control_folder": str(folders["control"]), "processed_folder": str(folders["processed"]),
               "store_processed": False}
    with broker("filesystem://", options):
        queue.send_run_check(41)
        queue.send_run_check(42)
    (folders["queue"] / "0_torn.celery.msg").write_bytes(b'{"body": "e')
    assert folder_queue_check_ids("filesystem://", options) == {41, 42}
    assert folder_queue_check_ids("redis://127.0.0.1:6379/0", options) is None
