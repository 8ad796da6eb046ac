"""Fixtures of the scale tests."""
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.support.redis_server import RedisServer


@pytest.fixture
def redis(tmp_path: Path) -> Iterator[RedisServer]:
    """A real ``redis-server`` of the test's own, on a free port, stopped after the test."""
    srv = RedisServer(tmp_path / "redis").start()
    yield srv
    srv.stop()
