"""Faults from outside: a full disk, a skewed provider clock, reconnect storms, a long outage."""
from __future__ import annotations

import asyncio
import os
import subprocess
import time

import httpx
import numpy as np
import orjson
import pytest
import websockets

import cdf_build as cb
from live_server import LiveServer
from service.analyze import analyze_folder

FPS = 25
IDS = cb.player_ids(3, 2)


def moving(seconds: float, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    T = int(seconds * FPS)
    t = np.arange(T) / FPS
    xy = np.zeros((T, len(IDS), 2))
    for p in range(len(IDS)):
        f = rng.uniform(0.1, 0.4, 2)
        xy[:, p, 0] = 15 * np.sin(f[0] * t + p)
        xy[:, p, 1] = 10 * np.cos(f[1] * t + p)
    return xy


def setup(srv: LiveServer) -> None:
    r = httpx.put(f"{srv.http}/api/matches/m_test", json={"meta": cb.meta(), "sheet": cb.sheet(3, 2)}, timeout=10)
    assert r.status_code in (200, 201), r.text


def post(srv: LiveServer, objs: list[dict]) -> httpx.Response:
    return httpx.post(f"{srv.http}/api/matches/m_test/frames", content=b"\n".join(cb.lines(objs)), timeout=30)


def snapshot(srv: LiveServer) -> dict:
    return httpx.get(f"{srv.http}/api/matches/m_test/snapshot", timeout=10).json()


@pytest.fixture
def small_disk(tmp_path):
    """A 3 MiB tmpfs: a real 'no space left on device' (needs mount rights, as root in CI)."""
    mnt = tmp_path / "disk"
    mnt.mkdir()
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=3m", "tmpfs", str(mnt)], capture_output=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here ({r.stderr.decode().strip()}): disk-full test needs mount rights")
    yield mnt
    subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def test_full_disk_answers_503_degrades_and_recovers(small_disk, tmp_path):
    srv = LiveServer(small_disk / "data").start()
    try:
        setup(srv)
        objs = cb.frames(moving(60), IDS, 3)
        filler = small_disk / "filler"
        free = os.statvfs(small_disk).f_bavail * os.statvfs(small_disk).f_frsize
        filler.write_bytes(b"\0" * max(free - 40_000, 0))  # leave ~40 kB: a few hundred frames
        accepted, refused_at = 0, None
        for i in range(0, len(objs), 50):
            r = post(srv, objs[i:i + 50])
            if r.status_code == 503:
                refused_at = i
                assert r.json()["error"]["code"] == "not_stored"
                break
            assert r.status_code == 200
            accepted += r.json()["accepted"]
        assert refused_at is not None, "the disk never filled"
        snap = snapshot(srv)
        assert snap["health"]["state"] == "degraded"
        assert "recorder" in [x["code"] for x in snap["health"]["reasons"]]
        # nothing acknowledged was lost, nothing refused was applied
        rec = (small_disk / "data" / "matches" / "m_test" / "tracking.jsonl").read_bytes().splitlines()
        assert len(rec) == accepted == snap["health"]["frames"]
        filler.unlink()  # the disk recovers
        for i in range(refused_at, len(objs), 50):
            r = post(srv, objs[i:i + 50])
            assert r.status_code == 200, r.text
            assert r.json()["duplicates"] == 0  # refused frames were forgotten, so they count now
        time.sleep(3.0)
        snap = snapshot(srv)
        assert snap["health"]["frames"] == len(objs)
        assert "recorder" not in [x["code"] for x in snap["health"]["reasons"]]
    finally:
        srv.stop()
    got = snap["players"]
    want = analyze_folder(small_disk / "data" / "matches" / "m_test").snapshot()["players"]
    assert {k: v["distance_m"] for k, v in got.items()} == {k: v["distance_m"] for k, v in want.items()}


def test_skewed_provider_clock_computes_correctly(tmp_path):
    """Frames stamped a year away from the wall clock: lag is reported, figures are unchanged."""
    srv = LiveServer(tmp_path / "data").start()
    try:
        setup(srv)
        objs = cb.frames(moving(20), IDS, 3)  # timestamps of 2026-03-14, months from "now"

        async def feed():
            async with websockets.connect(f"{srv.ws}/ingest/m_test") as ws:
                for i in range(0, len(objs), 5):
                    await ws.send(orjson.dumps(objs[i:i + 5]).decode())
                    await asyncio.sleep(5 / FPS)

        asyncio.run(feed())
        live = snapshot(srv)
        assert abs(live["health"]["lag_s"]) > 86_400  # reported
        assert "late_delivery" not in [r["code"] for r in live["health"]["reasons"]]
        time.sleep(2.8)
        done = snapshot(srv)
    finally:
        srv.stop()
    want = analyze_folder(tmp_path / "data" / "matches" / "m_test").snapshot()
    assert {k: v["distance_m"] for k, v in done["players"].items()} == \
           {k: v["distance_m"] for k, v in want["players"].items()}


def test_reconnect_storm_applies_no_frame_twice(tmp_path):
    srv = LiveServer(tmp_path / "data").start()
    try:
        setup(srv)
        objs = cb.frames(moving(40), IDS, 3)

        async def storm():
            # 100 connections, each re-sending an overlapping window of frames, then dropping
            for k in range(100):
                lo = k * 10
                part = objs[max(lo - 30, 0): lo + 10]
                async with websockets.connect(f"{srv.ws}/ingest/m_test") as ws:
                    await ws.send(orjson.dumps(part).decode())
            async with websockets.connect(f"{srv.ws}/ingest/m_test") as ws:
                await ws.send(orjson.dumps(objs).decode())

        asyncio.run(storm())
        time.sleep(3.0)
        snap = snapshot(srv)
        assert snap["health"]["frames"] == len(objs)
        assert snap["health"]["duplicates"] > 0
        assert httpx.get(f"{srv.http}/api/matches", timeout=10).json()["matches"][0]["subscribers"] == 0
    finally:
        srv.stop()
    rec = (tmp_path / "data" / "matches" / "m_test" / "tracking.jsonl").read_bytes().splitlines()
    ids = [orjson.loads(x)["frame_id"] for x in rec]
    assert ids == sorted(set(ids)) and len(ids) == len(objs)


def test_thirty_second_outage_stalls_then_recovers_crediting_nothing(tmp_path):
    srv = LiveServer(tmp_path / "data").start()
    try:
        setup(srv)
        before = cb.frames(moving(8), IDS, 3)

        async def run():
            async with websockets.connect(f"{srv.ws}/live/m_test") as live:
                await live.recv()

                async def stream(objs):
                    async with websockets.connect(f"{srv.ws}/ingest/m_test") as ws:
                        for f in objs:
                            await ws.send(orjson.dumps(f).decode())
                            await asyncio.sleep(1 / FPS)

                async def wait_health(state, timeout):
                    deadline = time.monotonic() + timeout
                    while time.monotonic() < deadline:
                        m = orjson.loads(await asyncio.wait_for(live.recv(), deadline - time.monotonic()))
                        if m["type"] == "health" and m["health"]["state"] == state:
                            return time.monotonic()
                    raise AssertionError(f"no {state} health message")

                await stream(before)
                stopped = time.monotonic()
                assert await wait_health("stalled", 5) - stopped < 2.5
                await asyncio.sleep(30 - (time.monotonic() - stopped))
                # the provider resumes with current time: a 30 s gap in frame time
                after = cb.frames(moving(8, seed=1), IDS, 3, t0=8 + 30, frame0=len(before))
                await stream(after)
                await wait_health("ok", 10)

        asyncio.run(run())
        time.sleep(2.8)
        snap = snapshot(srv)
    finally:
        srv.stop()
    want = analyze_folder(tmp_path / "data" / "matches" / "m_test").snapshot()
    for pid in IDS:
        p = snap["players"][pid]
        assert p["distance_m"] == want["players"][pid]["distance_m"]
        # 16 s seen out of 46 s on the pitch: the outage lowers coverage and credits nothing
        assert p["coverage"] == pytest.approx(16 / 46, abs=0.03)
