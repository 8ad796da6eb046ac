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

from pacewire.analyze import analyze_folder
from pacewire.wire.messages import apply_delta
from tests.support import cdf_build as cb
from tests.support.live_server import LiveServer
from tests.support.sockets import body, stream
from tests.support.trajectories import FPS, drawn_rates, sway

IDS = cb.player_ids(3, 2)


def moving(seconds: float, seed: int = 0) -> np.ndarray:
    """Five fictional players swaying 15 x 10 m about the centre spot (m)."""
    return sway(seconds, len(IDS), (15.0, 10.0), drawn_rates(len(IDS), 0.1, 0.4, seed))


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
    """Frames stamped months away from the wall clock: the lag is not reported (its note says the
    timestamps are not wall-clock time), nothing is called late, figures are unchanged."""
    srv = LiveServer(tmp_path / "data").start()
    try:
        setup(srv)
        objs = cb.frames(moving(20), IDS, 3)  # timestamps of 2026-03-14, months from "now"

        asyncio.run(stream(f"{srv.ws}/ingest/m_test", objs, batch=5))
        live = snapshot(srv)
        h = live["health"]
        assert h["lag_s"] is None and h["lag_p95_s"] is None
        assert "behind the wall clock" in h["lag_note"]  # an offset beyond 60 s (config [health])
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

                async def wait_health(state, timeout):
                    deadline = time.monotonic() + timeout
                    while time.monotonic() < deadline:
                        m = orjson.loads(await asyncio.wait_for(live.recv(), deadline - time.monotonic()))
                        if m["type"] == "health" and m["health"]["state"] == state:
                            return time.monotonic()
                    raise AssertionError(f"no {state} health message")

                await stream(f"{srv.ws}/ingest/m_test", before)
                stopped = time.monotonic()
                assert await wait_health("stalled", 5) - stopped < 2.5
                await asyncio.sleep(30 - (time.monotonic() - stopped))
                # the provider resumes with current time: a 30 s gap in frame time
                after = cb.frames(moving(8, seed=1), IDS, 3, t0=8 + 30, frame0=len(before))
                await stream(f"{srv.ws}/ingest/m_test", after)
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


# -- subscriber storm -------------------------------------------------------------------------------------
STORM_CLIENTS = 500
STORM_WAVES = 5  # one wave every STORM_WAVE_S: 100 clients each
STORM_WAVE_S = 3.0
STORM_CONCURRENCY = 40  # storm sockets open at once: enough to churn, few enough for 2 shared cores
STEADY = 3
# A functional bound, not a speed target: the bench page shows "data is N s old" after 3 s without
# a message, so a steady client must never go 2 s without a delta (at every=0.2 s, 10 missed cadences)
# however many others come and go. Seen here (idle and loaded machine): well under 1 s.
GAP_BOUND_S = 2.0
# RSS after the storm may sit a little above the level before it: CPython and glibc keep freed arenas
# for reuse, the recording and per-second bins grow with the match (about 1 MB over this test), and up
# to 32 streams nobody follows are kept, each with the state it last sent, for `since` resumes. About
# 10 MB seen here. A stream left running for nobody grows until its 5-minute resume buffer is full
# (at one frame, ~6 KiB x 25/s x 300 s, about 45 MB each): the storm's own cadences showed +58 MB
# three seconds after it, before idle streams stopped sending. 25 MB lies between the two.
RSS_MARGIN_MB = 25.0
STORM_SUBSCRIPTIONS = ("", "?every=0.2", f"?view=team:{cb.HOME}", "?every=0.5&view=players:h1,a2", "?every=0.04")
STORM_IDS = cb.player_ids(14, 14)  # 11 a side on the pitch, 3 substitutes each never seen


def _metric(text: str, name: str, labels: str = "") -> float:
    for line in text.splitlines():
        if line.startswith(name + labels + " "):
            return float(line.rsplit(" ", 1)[1])
    raise AssertionError(f"{name}{labels} not in /metrics")


def _rss_mb(pid: int) -> float:
    for line in open(f"/proc/{pid}/status"):
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024.0
    raise AssertionError("no VmRSS")


def _storm_main(ws_base: str, seed: int, conn) -> None:
    """In its own process (so the steady subscribers' clock is not this loop's): STORM_CLIENTS
    clients in waves, each doing one of: read a little then close cleanly; never read then cut the
    TCP connection without a close frame; resume with ``since``; drop during the HTTP upgrade."""
    import random

    rng = random.Random(seed)
    conn.recv()  # "go"
    stats = {"clean": 0, "abort": 0, "resume": 0, "half_open": 0, "failed": 0}

    async def client(gate: asyncio.Semaphore, delay: float) -> None:
        await asyncio.sleep(delay)
        kind = rng.choice(("clean", "abort", "resume", "half_open"))
        hold = rng.uniform(0.0, 1.5)
        # half take a common subscription, half a cadence of their own (an integrator's choice)
        sub = rng.choice(STORM_SUBSCRIPTIONS) if rng.random() < 0.5 else f"?every={rng.uniform(0.04, 3.0):.3f}"
        url = f"{ws_base}/live/m_test{sub}"
        async with gate:
            try:
                if kind == "half_open":
                    host, port = ws_base.removeprefix("ws://").split(":")
                    reader, writer = await asyncio.open_connection(host, int(port))
                    key_header = b"Sec-WebSocket-Key: dGhlIHNhbXBsZSBub25jZQ==\r\n\r\n" if rng.random() < 0.5 else b""
                    writer.write(b"GET /live/m_test HTTP/1.1\r\nHost: x\r\nUpgrade: websocket\r\n"
                                 b"Connection: Upgrade\r\nSec-WebSocket-Version: 13\r\n" + key_header)
                    await asyncio.sleep(hold / 3)
                    writer.transport.abort()
                elif kind == "abort":
                    ws = await websockets.connect(url, open_timeout=20, max_queue=4)
                    await asyncio.sleep(hold)  # never reads
                    ws.transport.abort()
                else:
                    if kind == "resume":
                        url += ("&" if "?" in url else "?") + f"since={rng.randint(0, 40)}"
                    async with websockets.connect(url, open_timeout=20) as ws:
                        t_end = time.monotonic() + hold
                        try:
                            while time.monotonic() < t_end:
                                await asyncio.wait_for(ws.recv(), max(t_end - time.monotonic(), 0.01))
                        except TimeoutError:
                            pass  # the hold ran out while waiting for a message: a normal way to leave
            except Exception:  # refused, or no handshake within 20 s
                stats["failed"] += 1
                return
            stats[kind] += 1

    async def main() -> None:
        gate = asyncio.Semaphore(STORM_CONCURRENCY)
        per_wave = STORM_CLIENTS // STORM_WAVES
        tasks = [asyncio.create_task(client(gate, w * STORM_WAVE_S + rng.uniform(0, STORM_WAVE_S - 0.5)))
                 for w in range(STORM_WAVES) for _ in range(per_wave)]
        await asyncio.gather(*tasks)

    asyncio.run(main())
    conn.send(stats)


def test_subscriber_storm_leaves_steady_subscribers_and_memory_alone(tmp_path):
    import multiprocessing as mp

    srv = LiveServer(tmp_path / "data").start()
    ctx = mp.get_context("fork")
    parent, child = ctx.Pipe()
    storm = ctx.Process(target=_storm_main, args=(srv.ws, 9, child), daemon=True)
    storm.start()  # before this process runs an event loop: the child starts its own
    try:
        r = httpx.put(f"{srv.http}/api/matches/m_test",
                      json={"meta": cb.meta(),
                            "sheet": cb.sheet(14, 14, bench=("h12", "h13", "h14", "a12", "a13", "a14"))},
                      timeout=10)
        assert r.status_code == 201, r.text
        on = list(range(11)) + list(range(14, 25))
        rates = np.full((len(STORM_IDS), 2), np.nan)  # the substitutes' positions stay NaN: never seen
        rates[on] = drawn_rates(len(on), 0.1, 0.4, seed=4)
        objs = cb.frames(sway(60, len(STORM_IDS), (40.0, 25.0), rates), STORM_IDS, 14)
        http = httpx.Client(base_url=srv.http, timeout=10)

        def gauges() -> tuple[float, float]:
            m = http.get("/metrics").text
            return _metric(m, "pacewire_subscribers", '{match="m_test"}'), _metric(m, "pacewire_asyncio_tasks")

        async def run() -> dict:
            stop = asyncio.Event()
            send_t: dict[int, float] = {}

            async def feed() -> None:
                async with websockets.connect(f"{srv.ws}/ingest/m_test") as ws:
                    t0 = time.monotonic()
                    for k, f in enumerate(objs):
                        if stop.is_set():
                            break
                        await asyncio.sleep(max(t0 + k / FPS - time.monotonic(), 0))
                        send_t[k] = time.monotonic()
                        await ws.send(orjson.dumps(f).decode())
                    assert stop.is_set(), "the feed ran out before the test ended: lengthen it"

            async def steady(log: list) -> None:
                async with websockets.connect(f"{srv.ws}/live/m_test?every=0.2") as ws:
                    while not stop.is_set():
                        try:
                            raw = await asyncio.wait_for(ws.recv(), 0.5)
                        except TimeoutError:
                            continue
                        m = orjson.loads(raw)
                        log.append((time.monotonic(), m["type"], m["seq"], m.get("match_time_s"), m.get("resync")))

            feeder = asyncio.create_task(feed())
            logs: list[list] = [[] for _ in range(STEADY)]
            readers = [asyncio.create_task(steady(log)) for log in logs]
            await asyncio.sleep(4.0)  # warm-up: the smoothing window fills, every stream is running
            loop = asyncio.get_running_loop()
            before = [await loop.run_in_executor(None, gauges) for _ in range(3)]
            out = {"subs_before": before[0][0], "tasks_before": min(b[1] for b in before),
                   "rss_before": _rss_mb(srv.proc.pid),
                   "snapshot_kb": len(http.get("/api/matches/m_test/snapshot").content) / 1024}
            out["t_storm"] = time.monotonic()
            parent.send("go")
            out["storm"] = await loop.run_in_executor(None, lambda: parent.recv() if parent.poll(60) else None)
            out["t_calm"] = time.monotonic()
            # every storm client is gone from the client side: the server must let go of them all
            deadline = time.monotonic() + 15
            while True:
                subs, tasks = await loop.run_in_executor(None, gauges)
                if (subs == out["subs_before"] and tasks <= out["tasks_before"]) or time.monotonic() > deadline:
                    break
                await asyncio.sleep(0.5)
            out["subs_after"], out["tasks_after"] = subs, tasks
            await asyncio.sleep(3.0)  # settle: freed memory goes back to the allocator
            out["rss_after"] = _rss_mb(srv.proc.pid)
            stop.set()
            await asyncio.gather(feeder, *readers)
            out["logs"], out["send_t"] = logs, send_t
            return out

        res = asyncio.run(run())
        http.close()
        assert srv.proc.poll() is None, "the server died"
    finally:
        storm.join(5)
        if storm.is_alive():
            storm.kill()
        srv.stop()

    st = res["storm"]
    assert st is not None, "the storm did not finish in 60 s"
    assert sum(st.values()) == STORM_CLIENTS and st["failed"] == 0, st
    t_storm, t_calm = res["t_storm"], res["t_calm"]
    worst, lat = 0.0, []
    for log in res["logs"]:
        assert log[0][1] == "snapshot"
        seqs = [m[2] for m in log]
        assert seqs == list(range(seqs[0], seqs[0] + len(seqs))), "a steady subscriber's seq skipped"
        assert not any(m[4] for m in log), "a steady subscriber was resynced (its queue overflowed)"
        deltas = [(a, mt) for a, kind, _, mt, _ in log if kind == "delta"]
        arrivals = np.array([a for a, _ in deltas])
        during = arrivals[(arrivals >= t_storm - 1) & (arrivals <= t_calm + 1)]
        assert len(during) > 10 / 0.2 * 0.5, "few deltas during the storm"
        gaps = np.diff(during)
        worst = max(worst, float(gaps.max()))
        for a, mt in deltas:
            k = int(round(mt * FPS))
            if t_storm <= a <= t_calm and k in res["send_t"]:
                lat.append(a - res["send_t"][k])
    print(f"\nstorm {st}: {t_calm - t_storm:.1f} s; steady subscribers' worst delta gap {worst:.2f} s, "
          f"latency of the newest frame p50 {1e3 * np.median(lat):.0f} ms p99 {1e3 * np.percentile(lat, 99):.0f} ms; "
          f"subscribers {res['subs_before']:g} -> {res['subs_after']:g}, tasks {res['tasks_before']:g} -> "
          f"{res['tasks_after']:g}; RSS {res['rss_before']:.1f} -> {res['rss_after']:.1f} MB "
          f"(snapshot {res['snapshot_kb']:.0f} KiB)")
    assert worst < GAP_BOUND_S
    assert res["subs_after"] == res["subs_before"] == STEADY, "subscribers left behind after the storm"
    assert res["tasks_after"] <= res["tasks_before"], "asyncio tasks left behind after the storm"
    assert res["rss_after"] - res["rss_before"] <= RSS_MARGIN_MB


def test_stream_left_idle_sends_nothing_and_a_resume_catches_up(tmp_path):
    """A stream nobody follows stops sending (the storm's cadences must not keep costing), and a
    client resuming on it with ``since`` still ends with the current state, even after a stall."""
    srv = LiveServer(tmp_path / "data").start()
    try:
        setup(srv)
        objs = cb.frames(moving(10), IDS, 3)

        async def run():
            async with websockets.connect(f"{srv.ws}/live/m_test?every=0.2") as live:
                first = orjson.loads(await live.recv())
                state = {k: first[k] for k in ("players", "teams", "health")}
                await post_async(objs[:4 * FPS])
                seq = first["seq"]
                while seq < first["seq"] + 3:
                    m = orjson.loads(await asyncio.wait_for(live.recv(), 10))
                    assert m["seq"] == seq + 1
                    seq = m["seq"]
                    if m["type"] == "delta":
                        apply_delta(state, body(m))
            left_at = seq
            for i in range(4 * FPS, len(objs), 5):  # the rest of the feed at 2x, with nobody listening
                await post_async(objs[i:i + 5])
                await asyncio.sleep(0.1)
            await asyncio.sleep(3.0)  # and a stall
            async with websockets.connect(f"{srv.ws}/live/m_test?every=0.2&since={seq}") as live:
                while True:  # what was published meanwhile (the stall), then one delta that catches up
                    try:
                        m = orjson.loads(await asyncio.wait_for(live.recv(), 1.5))
                    except TimeoutError:
                        break  # the feed is stalled: nothing more is coming
                    assert m["type"] != "snapshot" and m["seq"] == seq + 1
                    seq = m["seq"]
                    if m["type"] == "delta":
                        apply_delta(state, body(m))
            # 3 s of feed went by at every=0.2 s: a stream still sending would be ~15 messages on
            assert seq - left_at <= 5, f"the stream sent {seq - left_at} messages while nobody followed it"
            return state

        async def post_async(part):
            await asyncio.to_thread(post, srv, part)

        state = asyncio.run(run())
        rest = snapshot(srv)
    finally:
        srv.stop()
    assert rest["health"]["state"] == "stalled"
    for pid in IDS:
        assert state["players"][pid]["distance_m"] == rest["players"][pid]["distance_m"]


def test_events_during_a_stall_show_at_once(tmp_path):
    """The final whistle and a red card while the feed is stalled (a stoppage) change what is shown
    straight away: the ended period's figures equal the offline pass, the player is off."""
    srv = LiveServer(tmp_path / "data").start()
    try:
        setup(srv)
        objs = cb.frames(moving(10.6), IDS, 3)  # ends within a second: the period end counts its tail
        assert post(srv, objs).status_code == 200
        time.sleep(3.0)
        assert snapshot(srv)["health"]["state"] == "stalled"
        last = objs[-1]["frame_id"]
        r = httpx.post(f"{srv.http}/api/matches/m_test/events", timeout=10,
                       json={"type": "period_end", "period": "first_half", "frame_id": last})
        assert r.status_code == 200, r.text
        ended = snapshot(srv)
        r = httpx.post(f"{srv.http}/api/matches/m_test/events", timeout=10,
                       json={"type": "card", "card": "red", "player_id": "a2", "frame_id": last})
        assert r.status_code == 200, r.text
        carded = snapshot(srv)
    finally:
        srv.stop()
    want = analyze_folder(tmp_path / "data" / "matches" / "m_test").snapshot()
    live_only = ("on_pitch", "baseline")  # live state, and the history the live service reads at the start
    for pid in IDS:  # every figure, windows too
        assert {k: v for k, v in ended["players"][pid].items() if k not in live_only} == \
               {k: v for k, v in want["players"][pid].items() if k not in live_only}, pid
    assert carded["players"]["a2"]["on_pitch"] is False
