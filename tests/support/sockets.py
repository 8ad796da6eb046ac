"""WebSocket helpers of the end-to-end tests: frames out on an ingest socket, messages in from a
live socket, and the state a client builds from them."""
from __future__ import annotations

import asyncio
import time
from collections.abc import Callable
from typing import Any

import orjson
import websockets

from pacewire.wire.messages import apply_delta
from tests.support.trajectories import FPS

BODY = ("players", "teams", "health", "match_status")  # the parts of a snapshot a delta updates


async def recv(ws: Any, timeout: float = 10.0) -> dict[str, Any]:
    """The next message, parsed."""
    return orjson.loads(await asyncio.wait_for(ws.recv(), timeout))


async def recv_until(ws: Any, pred: Callable[[dict[str, Any]], bool], timeout: float = 10.0) -> dict[str, Any]:
    """The first message for which ``pred`` holds; fails when none came within ``timeout`` s."""
    deadline = time.monotonic() + timeout
    while True:
        left = deadline - time.monotonic()
        if left <= 0:
            raise AssertionError("expected message did not arrive")
        msg = await recv(ws, left)
        if pred(msg):
            return msg


async def stream(ws_url: str, objs: list[dict[str, Any]], rate: float | None = FPS, batch: int = 1) -> None:
    """Send frames on one ingest socket, ``batch`` per message (a lone frame as an object, more as an
    array), at ``rate`` frames per second (None: as fast as the socket takes them)."""
    async with websockets.connect(ws_url) as ws:
        for i in range(0, len(objs), batch):
            part = objs[i:i + batch]
            await ws.send(orjson.dumps(part if batch > 1 else part[0]).decode())
            if rate:
                await asyncio.sleep(batch / rate)


async def collect(url: str, out: list[str], until: Callable[[dict[str, Any]], bool], timeout: float = 60.0) -> None:
    """Raw message texts from one subscriber into ``out`` until ``until(msg)`` (or the time is up)."""
    async with websockets.connect(url) as ws:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            text = await asyncio.wait_for(ws.recv(), deadline - time.monotonic())
            out.append(text)
            if until(orjson.loads(text)):
                return
    raise AssertionError(f"{url}: the expected message did not arrive")


def body(msg: dict[str, Any]) -> dict[str, Any]:
    """The parts of a snapshot or delta message that make up a client's state."""
    return {k: msg[k] for k in BODY if k in msg}


def replay_state(texts: list[str]) -> tuple[dict[str, Any], list[int]]:
    """A client's view: opening snapshot, deltas applied; checks the seq never skips."""
    msgs = [orjson.loads(t) for t in texts]
    assert msgs[0]["type"] == "snapshot"
    state = {k: msgs[0][k] for k in BODY if k in msgs[0]}
    seqs = [msgs[0]["seq"]]
    for m in msgs[1:]:
        if m["type"] == "snapshot":
            assert m.get("resync") is True, "a snapshot after the first is a resync"
            state = {k: m[k] for k in BODY if k in m}
        else:
            assert m["seq"] == seqs[-1] + 1, f"seq gap: {seqs[-1]} -> {m['seq']}"
        if m["type"] == "delta":
            apply_delta(state, body(m))
        seqs.append(m["seq"])
    return state, seqs
