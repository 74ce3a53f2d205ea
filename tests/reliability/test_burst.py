"""Fifty checks submitted at once to two workers: all done, none run twice, in order of submission per user."""

import pytest

from tests.reliability.helpers import assert_one_report, box_stl, submit
from tests.reliability.servers import wait_until
from tests.webapp.worker import worker_process
from webapp.checks.models import Check

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]

WORKER_SLOTS = 2  # two workers, one check at a time each (prefetch 1: nothing waits reserved behind a check)


def test_fifty_checks_at_once_end_done_once_each_in_order(alice, charlie, seeded, redis, settings):
    """Two users' 25 checks each, interleaved: every one done once; per user, none starts ahead of its turn."""
    settings.PHASEWRIGHT_MAX_ACTIVE_CHECKS = 50
    owners = [alice, charlie] * 25
    checks = [submit(owner, box_stl(10.0 + i % 7, 8.0, 3.0), f"box-{i}.stl") for i, owner in enumerate(owners)]
    with worker_process(redis_url=redis.url) as a, worker_process(redis_url=redis.url) as b:
        wait_until(lambda: not Check.objects.filter(status__in=("queued", "running")).exists(), timeout_s=600,
                   every_s=1, what="all 50 checks ending")
        assert a.poll() is None and b.poll() is None
    for check in checks:
        assert_one_report(check)
        assert check.attempts == 1
    for owner in (alice, charlie):
        started = list(Check.objects.filter(owner=owner).order_by("created_at", "pk").values_list("started_at", flat=True))
        # The queue is first in, first out and each worker holds one message, so a check can start at most
        # WORKER_SLOTS - 1 places ahead of one submitted before it, never further.
        for i, later in enumerate(started):
            assert all(earlier <= later for earlier in started[:max(0, i - WORKER_SLOTS + 1)]), i
