"""A private Redis per test, with this process's producer pointed at it."""

import pytest

from tests.reliability.servers import redis_server
from tests.webapp.worker import broker


@pytest.fixture
def redis(tmp_path):
    """Start a redis-server of our own on a free loopback port and send this process's checks to it."""
    with redis_server(tmp_path) as server, broker(server.url, {"visibility_timeout": 3600}):
        yield server
