"""Figures on the wire carry the precision the schema states, deltas carry only leaves that changed at it,
and the rounding is the same on every path: a real server's stream, its REST snapshot and ``pacewire
analyze`` over its recording agree to the last digit."""
from __future__ import annotations

import asyncio
import time
from typing import Any

import httpx
import numpy as np
import orjson
import websockets

from pacewire.analyze import analyze_folder
from pacewire.engine.precision import WIRE
from pacewire.wire.messages import apply_delta
from tests.support import cdf_build as cb
from tests.support.sockets import body, recv, stream
from tests.support.trajectories import FPS, drawn_rates, sway

N = 11  # a side: 22 players on the pitch
IDS = cb.player_ids(N, N)
MATCH = "m_digits"
DISTANCES = {"distance_m", "hsr_m", "sprint_m", "high_power_m"}
COUNTS = {"hsr_efforts", "sprints", "accels", "decels", "players", "jersey_number"}


def decimals(path: tuple[str, ...]) -> int | None:
    """The decimals the schema states for a leaf (pacewire.engine.precision), None for leaves it does not
    round (health's own figures, heart rate, the envelope)."""
    key = path[-1]
    if path[0] == "health" or path[0] == "alerts":
        return WIRE.share if path[:2] == ("health", "coverage") else None
    if "per_min" in path:
        return {"energy_jkg": WIRE.per_min_energy}.get(key, WIRE.per_min_count if key in COUNTS
                                                        else WIRE.per_min_distance)
    if "per_90min" in path:
        return {"energy_jkg": WIRE.energy}.get(key, WIRE.per_90_count if key in COUNTS else WIRE.distance)
    if "zones" in path or "possession" in path or key in DISTANCES:
        return WIRE.distance
    return {"energy_jkg": WIRE.energy, "metabolic_power_wkg": WIRE.power, "m_per_min": WIRE.rate,
            "minutes": WIRE.minutes, "player_minutes": WIRE.minutes, "speed_ms": WIRE.speed,
            "max_speed_ms": WIRE.speed, "coverage": WIRE.share, "span_s": WIRE.seconds, "start_s": WIRE.seconds,
            **dict.fromkeys(COUNTS, 0)}.get(key)


def leaves(obj: Any, path: tuple[str, ...] = ()) -> list[tuple[tuple[str, ...], Any]]:
    if isinstance(obj, dict):
        return [x for k, v in obj.items() for x in leaves(v, (*path, k))]
    return [(path, obj)]


def badly_rounded(obj: dict[str, Any]) -> list[str]:
    """Leaves with more digits than their precision (a whole number must come as a JSON integer)."""
    bad = []
    for path, v in leaves(obj):
        d = decimals(path)
        if d is None or v is None or isinstance(v, (bool, str, list)):
            continue
        if d <= 0:
            ok = isinstance(v, int) and v % round(10 ** -d) == 0
        else:
            ok = round(v, d) == v
        if not ok:
            bad.append(f"{'.'.join(path)}={v!r} (to {10.0 ** -d:g})")
    return bad


def trajectory(seconds: float) -> np.ndarray:
    """22 players swaying over the pitch at varied rates (fictional)."""
    n = len(IDS)
    centre = np.c_[np.tile(np.linspace(-40, 40, N), 2), np.repeat([-15.0, 15.0], N)]
    return sway(seconds, n, (12.0, 8.0), drawn_rates(n, 0.1, 0.5, 5), centre=centre)


def test_wire_precision_and_changed_leaves_only(server):
    objs = cb.frames(trajectory(60), IDS, N, match_id=MATCH, status=np.ones(60 * FPS, bool),
                     poss=np.zeros(60 * FPS, int))
    r = httpx.put(f"{server.http}/api/matches/{MATCH}",
                  json={"meta": cb.meta(MATCH), "sheet": cb.sheet(N, N)}, timeout=10)
    assert r.status_code == 201, r.text

    async def run() -> tuple[dict[str, Any], int]:
        async with websockets.connect(f"{server.ws}/live/{MATCH}?every=1&view=all", max_size=None) as live:
            first = await recv(live)
            state = body(first)
            feeder = asyncio.create_task(stream(f"{server.ws}/ingest/{MATCH}", objs, rate=100, batch=5))
            deltas, deadline = 0, time.monotonic() + 60
            while time.monotonic() < deadline:
                msg = await recv(live)
                if msg["type"] == "delta":
                    deltas += 1
                    assert badly_rounded(msg) == [], msg["seq"]
                    before = orjson.loads(orjson.dumps(state))
                    d = body(msg)
                    # a leaf comes only when it changed at its precision
                    for path, v in leaves(d):
                        old: Any = before
                        for k in path:
                            old = old.get(k) if isinstance(old, dict) else None
                        assert old != v or old is None, f"{'.'.join(path)} sent unchanged ({v!r})"
                    apply_delta(state, d)
                if msg["type"] == "health" and msg["health"]["state"] == "stalled" and feeder.done():
                    return state, deltas
            raise AssertionError("the feed did not stall after its last frame")

    state, deltas = asyncio.run(run())
    assert deltas >= 10
    rest = httpx.get(f"{server.http}/api/matches/{MATCH}/snapshot", timeout=10).json()
    assert badly_rounded(rest) == []
    offline = analyze_folder(server.data / "matches" / MATCH).snapshot()
    # the same digits on every path: the stream's state, REST, and an offline pass over the recording (the stall
    # finalised the tail, so the live figures are final); only what "now" means differs
    now_only = {"on_pitch", "speed_ms", "baseline"}  # baseline: the live service's history, not offline
    for pid in IDS:
        live_p = {k: v for k, v in rest["players"][pid].items() if k not in now_only}
        assert live_p == {k: v for k, v in offline["players"][pid].items() if k not in now_only}, pid
        assert state["players"][pid] == rest["players"][pid]
    for tid in (cb.HOME, cb.AWAY):
        assert rest["teams"][tid]["outfield"] == offline["teams"][tid]["outfield"]
        assert state["teams"][tid]["outfield"] == rest["teams"][tid]["outfield"]
