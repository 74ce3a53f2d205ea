"""The broker restarts and the database goes away for a few seconds: no check is lost, workers recover.

Both break servers of the test's own: a private redis-server (never the machine's shared one on 6379)
and a TCP proxy on a loopback port in front of PostgreSQL, which the workers reach through it.
"""

import time

import pytest
from django.db import connection

from tests.reliability.helpers import assert_one_report, sphere_stl, submit
from tests.reliability.servers import TcpProxy, answers, wait_until
from tests.webapp.worker import worker_process
from webapp.checks.models import Check
from webapp.checks.services import check_requeue_stale

pytestmark = [pytest.mark.slow, pytest.mark.django_db(transaction=True)]


def _counts(checks) -> dict:
    ids = [c.pk for c in checks]
    statuses = list(Check.objects.filter(pk__in=ids).values_list("status", flat=True))
    return {s: statuses.count(s) for s in set(statuses)}


def _all_ended(checks, *, maintenance_stale_s: int | None = None) -> bool:
    """Return True once every check ended; meanwhile sweep as the sweeper service would."""
    if maintenance_stale_s:
        check_requeue_stale(stale_after_s=maintenance_stale_s)
    return Check.objects.filter(pk__in=[c.pk for c in checks], status__in=("queued", "running")).count() == 0


def _states(checks) -> str:
    """Return each check's status, stage, attempts and heartbeat, for a failure message."""
    rows = Check.objects.filter(pk__in=[c.pk for c in checks]).order_by("pk").values_list(
        "pk", "status", "stage", "attempts", "heartbeat_at")
    return "; ".join(f"{pk} {status}/{stage} x{attempts} beat {beat:%H:%M:%S}" if beat else
                     f"{pk} {status}/{stage} x{attempts} no beat" for pk, status, stage, attempts, beat in rows)


def test_a_redis_restart_loses_no_check(alice, seeded, redis):
    """Checks queued and running when the broker restarts all end done, each run once."""
    with worker_process(redis_url=redis.url) as a, worker_process(redis_url=redis.url) as b:
        checks = [submit(alice, sphere_stl(8.0), f"ball-{i}.stl") for i in range(8)]
        wait_until(lambda: _counts(checks).get("running", 0) >= 1 and _counts(checks).get("queued", 0) >= 3,
                   timeout_s=120, what="checks both running and queued")
        redis.restart()
        try:
            wait_until(lambda: _all_ended(checks, maintenance_stale_s=60), timeout_s=300, every_s=1,
                       what="every check ending after the restart")
        except AssertionError as exc:
            raise AssertionError(f"{exc}: {_states(checks)}") from None
        assert a.poll() is None and b.poll() is None
    for check in checks:
        assert_one_report(check)
        assert check.attempts == 1


def _postgres_only():
    if connection.vendor != "postgresql":
        pytest.skip("the test database is not PostgreSQL (run with DATABASE_URL=postgres://...)")
    if not answers(connection.settings_dict["PORT"] or 5432, connection.settings_dict["HOST"] or "127.0.0.1"):
        pytest.skip("PostgreSQL does not answer")


def test_workers_ride_out_a_database_outage(alice, seeded, redis):
    """Connections refused for 5 s while checks run: the tasks retry with backoff and every check ends done."""
    _postgres_only()
    d = connection.settings_dict
    proxy = TcpProxy((d["HOST"] or "127.0.0.1", int(d["PORT"] or 5432)))
    proxy.start()
    through_proxy = f"postgres://{d['USER']}@127.0.0.1:{proxy.port}/{d['NAME']}"
    env = {"DATABASE_URL": through_proxy, "DB_CONN_MAX_AGE": "60"}
    try:
        with worker_process(redis_url=redis.url, extra_env=env) as a, \
                worker_process(redis_url=redis.url, extra_env=env) as b:
            checks = [submit(alice, sphere_stl(8.0), f"ball-{i}.stl") for i in range(6)]
            wait_until(lambda: _counts(checks).get("running", 0) >= 1, timeout_s=120, what="a check running")
            cut = proxy.pause()
            time.sleep(5)  # the outage itself
            proxy.resume()
            wait_until(lambda: _all_ended(checks), timeout_s=300, every_s=1, what="every check ending")
            assert a.poll() is None and b.poll() is None
    finally:
        proxy.stop()
    assert cut >= 1  # a worker's open connection was cut, not merely left idle
    for check in checks:
        assert_one_report(check)
        assert check.attempts <= 2  # a check cut off mid-run is claimed once more by its retry
