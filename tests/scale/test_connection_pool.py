"""Bursts of concurrent Redis commands in the scale roles, on a real ``redis-server``.

redis-py's default asyncio pool holds at most 100 connections since redis-py 6
and fails the 101st concurrent command ("Too many connections"); the bench
with 500 subscribers hit it on a gateway (each connecting subscriber reads the
match set-up from Redis). ``keys.connect`` uses a bounded pool that waits.
"""
from __future__ import annotations

import asyncio

import httpx
import orjson
import websockets

from pacewire.scale import keys
from tests.support.live_match import setup_body
from tests.support.live_server import LiveServer
from tests.support.redis_server import require_redis

require_redis("scale tests")


async def test_a_burst_waits_for_a_connection_instead_of_failing(redis):
    r = keys.connect(redis.url, 2.0, max_connections=4)
    await r.set("k", b"v")
    try:
        # 300 commands in flight at once on 4 connections: all answered, none refused
        got = await asyncio.gather(*[r.get("k") for _ in range(300)])
        assert got == [b"v"] * 300
        # the pool stayed within its bound (CLIENT LIST: one line per connection, ours included)
        assert len(await r.client_list()) <= 4
    finally:
        await r.aclose()


async def test_the_default_pool_takes_more_than_redis_py_default(redis):
    r = keys.connect(redis.url, 2.0)  # 300 > redis-py's default 100: this burst failed before
    try:
        got = await asyncio.gather(*[r.incr("n") for _ in range(300)])
        assert sorted(got) == list(range(1, 301))
    finally:
        await r.aclose()


async def test_hundreds_of_subscribers_connecting_at_once_all_get_a_snapshot(tmp_path, redis):
    mid, n = "m_burst", 300
    cfg = "[scale]\nlease_ms = 3000\n"
    procs = [LiveServer(tmp_path / role, "--role", role, "--redis", redis.url, config_text=cfg)
             for role in ("ingest", "aggregator", "gateway")]
    try:
        for p in procs:
            p.start(timeout=180)
        ing, _, gw = procs
        body = setup_body(mid)
        async with httpx.AsyncClient() as c:
            r = await c.put(f"{ing.http}/api/matches/{mid}", json=body, timeout=30)
            assert r.status_code in (200, 201), r.text

        async def first(i: int) -> str:
            async with websockets.connect(f"{gw.ws}/live/{mid}?every=1.0", max_size=None, open_timeout=60) as ws:
                m = orjson.loads(await asyncio.wait_for(ws.recv(), 60))
                return m["type"] if m["type"] != "error" else f"error {m['code']}: {m['message']}"

        kinds = await asyncio.gather(*[first(i) for i in range(n)])
        refused = [k for k in kinds if k != "snapshot"]
        assert not refused, f"{len(refused)} of {n} refused, e.g. {refused[0]}"
    finally:
        for p in reversed(procs):
            p.stop()
