"""pacewire's Redis roles as real ``pacewire serve --role ...`` processes over one Redis, for the scale tests."""
from __future__ import annotations

import time
from pathlib import Path

import httpx

from tests.support.live_server import LiveServer
from tests.support.redis_server import RedisServer

CONFIG = "[scale]\nlease_ms = 3000\nwant_ttl_s = 10.0\n"


class Cluster:
    """Role processes over one Redis; everything stops at the end of the test."""

    def __init__(self, tmp_path: Path, redis: RedisServer, config: str = CONFIG) -> None:
        self.tmp, self.redis, self.config = tmp_path, redis, config
        self.procs: list[LiveServer] = []

    def start(self, role: str, data: str | None = None) -> LiveServer:
        srv = LiveServer(self.tmp / (data or f"{role}-{len(self.procs)}"), "--role", role, "--redis", self.redis.url,
                         config_text=self.config)
        self.procs.append(srv)
        return srv.start(timeout=180)  # a shared CI machine can be slow to start Python processes

    def stop(self) -> None:
        for p in reversed(self.procs):
            p.stop()


def holder(aggregators: list[LiveServer], match_id: str, timeout: float = 30.0) -> LiveServer:
    """The aggregator that has claimed ``match_id`` (its /healthz lists it), waited for up to ``timeout`` s."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        for agg in aggregators:
            try:
                if match_id in httpx.get(f"{agg.http}/healthz", timeout=5).json()["matches"]:
                    return agg
            except httpx.HTTPError:
                pass  # the one just killed
        time.sleep(0.1)
    raise AssertionError("no aggregator claimed the match")
