"""A short fictional match played to full time without a single event: the tests of the match status
(single process and Redis) share it.

Each period lasts one minute nominally (``[periods]``) and the feed sends a little more than that, then
goes silent; with ``reports.period_timeout_s`` of a few seconds the match moves live -> break -> live
-> ended on its own.
"""
from __future__ import annotations

import asyncio
import time
from collections.abc import Callable
from typing import Any

import httpx
import jsonschema
import orjson
import websockets

from pacewire.wire.schema import json_schemas, strict
from tests.support import live_match
from tests.support.trajectories import FPS

TIMEOUT_S = 3.0
CONFIG = f"""
[periods]
first_half = 1
second_half = 1
[reports]
period_timeout_s = {TIMEOUT_S}
"""
HALF_S = 62  # of play per half: just past the nominal minute
BREAK_S = 900.0  # frame time between the halves


def half(period: str, match_id: str, seed: int = 0) -> list[dict[str, Any]]:
    """One half's frames (the second half's ids and timestamps follow the first's)."""
    k = ("first_half", "second_half").index(period)
    n = HALF_S * FPS
    return live_match.frames(HALF_S, seed=seed, match_id=match_id, period=period, t0=k * (HALF_S + BREAK_S),
                             frame0=k * n)


def post_frames(http: str, match_id: str, objs: list[dict[str, Any]]) -> httpx.Response:
    return httpx.post(f"{http}/api/matches/{match_id}/frames", content=b"\n".join(orjson.dumps(o) for o in objs),
                      timeout=60)


def post_event(http: str, match_id: str, ev: dict[str, Any]) -> httpx.Response:
    return httpx.post(f"{http}/api/matches/{match_id}/events", json=ev, timeout=30)


class Follower:
    """A subscriber that records every message of a match, in a task of the test's event loop."""

    def __init__(self, url: str) -> None:
        self.url = url
        self.msgs: list[dict[str, Any]] = []
        self.task: asyncio.Task[None] | None = None

    async def __aenter__(self) -> Follower:
        self.task = asyncio.create_task(self._run())
        await self.until(lambda m: m["type"] == "snapshot", 30)
        return self

    async def __aexit__(self, *exc: Any) -> None:
        assert self.task is not None
        self.task.cancel()
        try:
            await self.task
        except asyncio.CancelledError:
            pass

    async def _run(self) -> None:
        async with websockets.connect(self.url, max_size=None) as ws:
            async for text in ws:
                self.msgs.append(orjson.loads(text))

    async def until(self, pred: Callable[[dict[str, Any]], bool], timeout: float = 60.0, after: int = 0
                    ) -> dict[str, Any]:
        """The first message from index ``after`` on for which ``pred`` holds (waiting up to ``timeout`` s)."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            for m in self.msgs[after:]:
                if pred(m):
                    return m
            if self.task is not None and self.task.done():
                self.task.result()  # the socket failed: say why
            await asyncio.sleep(0.05)
        raise AssertionError(f"no such message within {timeout} s; got {[m['type'] for m in self.msgs[after:]]}")

    def statuses(self) -> list[tuple[str, str | None]]:
        return [(m["match_status"], m["cause"]) for m in self.msgs if m["type"] == "status"]


def status_is(value: str) -> Callable[[dict[str, Any]], bool]:
    return lambda m: m["type"] == "status" and m["match_status"] == value


_CHECKS: dict[str, jsonschema.Draft202012Validator] = {}


def schema_problems(msg: dict[str, Any]) -> list[str]:
    """What the published schema of the message's type (closed: no undescribed field) finds wrong."""
    if not _CHECKS:
        for kind, schema in json_schemas().items():
            _CHECKS[kind] = jsonschema.Draft202012Validator(strict(schema))
    return [f"{'/'.join(map(str, e.absolute_path))}: {e.message[:200]}" for e in _CHECKS[msg["type"]].iter_errors(msg)]
