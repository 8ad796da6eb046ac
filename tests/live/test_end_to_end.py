"""The live service end to end: a real uvicorn server, real websockets, real frames."""
from __future__ import annotations

import asyncio
import time

import httpx
import numpy as np
import orjson
import pytest
import websockets
from websockets.exceptions import ConnectionClosed

from pacewire.analyze import analyze_folder
from pacewire.wire.messages import apply_delta
from tests.support import cdf_build as cb
from tests.support.live_match import IDS, frames, setup_body
from tests.support.live_server import LiveServer
from tests.support.sockets import body, recv, recv_until, stream
from tests.support.trajectories import FPS


def put_match(srv: LiveServer, match_id: str = "m_live", **kw) -> httpx.Response:
    return httpx.put(f"{srv.http}/api/matches/{match_id}", json=setup_body(match_id), timeout=10, **kw)


def post_frames(srv: LiveServer, objs: list[dict], match_id: str = "m_live", **kw) -> httpx.Response:
    return httpx.post(f"{srv.http}/api/matches/{match_id}/frames", content=b"\n".join(cb.lines(objs)), timeout=30, **kw)


def test_setup_validates_and_refuses_path_like_ids(server):
    assert put_match(server).status_code == 201
    assert put_match(server).status_code == 200  # the same set-up again is fine
    for bad in ("..", "a b", "x" * 65, "m%2F..%2Fetc"):
        r = httpx.put(f"{server.http}/api/matches/{bad}", json=setup_body(), timeout=10)
        assert r.status_code in (404, 422), (bad, r.status_code)
    r = httpx.put(f"{server.http}/api/matches/m_other", json={"meta": {}, "sheet": {}}, timeout=10)
    assert r.status_code == 422 and "meta" in r.json()["error"]["message"]
    r = httpx.put(f"{server.http}/api/matches/m_other", content=b"{nope", timeout=10)
    assert r.status_code == 400
    assert not (server.data / "matches" / "..").resolve().joinpath("meta.json").exists()


def test_http_batch_answers_counts_and_errors(server):
    put_match(server)
    objs = frames(4)
    lines = cb.lines(objs)
    lines.insert(3, b"{broken")
    lines.insert(7, orjson.dumps({**objs[0], "frame_id": 0}))  # a duplicate
    r = httpx.post(f"{server.http}/api/matches/m_live/frames", content=b"\n".join(lines), timeout=30)
    body = r.json()
    assert r.status_code == 200
    assert body["accepted"] == len(objs) and body["rejected"] == 1 and body["duplicates"] == 1
    assert body["errors"][0]["code"] == "bad_json" and body["errors"][0]["line"] == 4
    # acknowledged means recorded: the lines are in the recording already
    rec = (server.data / "matches" / "m_live" / "tracking.jsonl").read_bytes().splitlines()
    assert len(rec) == len(objs)
    assert httpx.post(f"{server.http}/api/matches/m_nobody/frames", content=b"{}", timeout=10).status_code == 404


def test_snapshot_then_deltas_and_figures_equal_analyze(server):
    put_match(server)
    objs = frames(12)

    async def run():
        async with websockets.connect(f"{server.ws}/live/m_live?every=0.2") as live:
            first = await recv(live)
            assert first["type"] == "snapshot" and first["v"] == 1
            state = {k: first[k] for k in ("players", "teams", "health")}
            feeder = asyncio.create_task(stream(f"{server.ws}/ingest/m_live", objs, rate=100, batch=5))
            seq = first["seq"]
            kinds = set()
            deadline = time.monotonic() + 30
            while time.monotonic() < deadline:
                msg = await recv(live)
                assert msg["seq"] == seq + 1, "seq increases by one per message"
                seq = msg["seq"]
                kinds.add(msg["type"])
                if msg["type"] == "delta":
                    apply_delta(state, body(msg))
                if msg["type"] == "health" and msg["health"]["state"] == "stalled" and feeder.done():
                    break
            await feeder
            assert {"delta", "period", "health"} <= kinds
            return state

    state = asyncio.run(run())
    rest = httpx.get(f"{server.http}/api/matches/m_live/snapshot", timeout=10).json()
    offline = analyze_folder(server.data / "matches" / "m_live").snapshot()
    for pid in IDS:
        # the stall flushed the tail, so live figures are final and equal the offline pass
        assert rest["players"][pid]["distance_m"] == pytest.approx(offline["players"][pid]["distance_m"], abs=0.05)
        assert rest["players"][pid]["hsr_m"] == offline["players"][pid]["hsr_m"]
        assert rest["players"][pid]["accels"] == offline["players"][pid]["accels"]
        assert state["players"][pid]["distance_m"] == rest["players"][pid]["distance_m"]
    assert rest["teams"][cb.HOME]["outfield"]["distance_m"] == pytest.approx(
        offline["teams"][cb.HOME]["outfield"]["distance_m"], abs=0.2)


def test_stalled_within_3s_and_ok_after_resume(server):
    put_match(server)
    objs = frames(6)

    async def run():
        async with websockets.connect(f"{server.ws}/live/m_live") as live:
            await recv(live)
            await stream(f"{server.ws}/ingest/m_live", objs)
            stopped = time.monotonic()
            msg = await recv_until(live, lambda m: m["type"] == "health" and m["health"]["state"] == "stalled")
            assert time.monotonic() - stopped < 3.0
            # a live provider resumes with the current time: the outage is a gap in frame time too
            outage = time.monotonic() - stopped
            more = frames(10, t0=6 + outage, frame0=len(objs))
            await stream(f"{server.ws}/ingest/m_live", more)
            msg = await recv_until(live, lambda m: m["type"] == "health" and m["health"]["state"] == "ok", timeout=12)
            assert msg["health"]["reasons"] == []

    asyncio.run(run())


def test_resume_with_since_and_resync_when_gone(tmp_path):
    srv = LiveServer(tmp_path / "data", config_text="[server]\nresume_buffer_s = 3.0\n").start()
    try:
        put_match(srv)
        objs = frames(14)

        async def run():
            async with websockets.connect(f"{srv.ws}/live/m_live?every=0.2") as live:
                await recv(live)
                feeder = asyncio.create_task(stream(f"{srv.ws}/ingest/m_live", objs[: 8 * FPS]))
                got = [await recv(live) for _ in range(5)]
            last = got[-1]["seq"]
            await asyncio.sleep(1.0)  # miss some messages
            async with websockets.connect(f"{srv.ws}/live/m_live?every=0.2&since={last}") as live:
                first = await recv(live)
                assert first["type"] != "snapshot" and first["seq"] == last + 1
                second = await recv(live)
                assert second["seq"] == last + 2
            await feeder
            await asyncio.sleep(4.5)  # the 3-second buffer has moved past `last`
            await stream(f"{srv.ws}/ingest/m_live", objs[8 * FPS:], rate=200)
            async with websockets.connect(f"{srv.ws}/live/m_live?every=0.2&since={last}") as live:
                first = await recv(live)
                assert first["type"] == "snapshot" and first["resync"] is True
                assert set(first["players"]) == set(IDS)

        asyncio.run(run())
    finally:
        srv.stop()


def test_slow_subscriber_does_not_delay_a_fast_one(server):
    put_match(server)
    objs = frames(10)

    async def run():
        # the slow one never reads: its socket buffers fill, its queue overflows
        slow = await websockets.connect(f"{server.ws}/live/m_live?every=0.04", max_queue=1)
        async with websockets.connect(f"{server.ws}/live/m_live?every=0.04") as fast:
            await recv(fast)
            t_send: dict[int, float] = {}
            arrivals = []

            async def feed():
                async with websockets.connect(f"{server.ws}/ingest/m_live") as ing:
                    for f in objs:
                        t_send[f["frame_id"]] = time.monotonic()
                        await ing.send(orjson.dumps(f).decode())
                        await asyncio.sleep(1 / FPS)

            task = asyncio.create_task(feed())
            while not task.done() or len(arrivals) < 50:
                msg = await recv(fast, 5)
                if msg["type"] == "delta":
                    arrivals.append(time.monotonic())
                if len(arrivals) > 150:
                    break
            await task
            gaps = np.diff(arrivals)
            # deltas keep flowing at the frame cadence: no stall waiting for the slow reader
            assert len(arrivals) >= 100
            assert np.percentile(gaps, 99) < 0.5
        await slow.close()
        m = httpx.get(f"{server.http}/metrics", timeout=10).text
        assert "pacewire_dropped_backlogs_total" in m

    asyncio.run(run())


def test_bad_frames_get_error_messages_and_the_stream_goes_on(server):
    put_match(server)
    objs = frames(2)

    async def run():
        async with websockets.connect(f"{server.ws}/ingest/m_live") as ing:
            await ing.send(orjson.dumps(objs[0]).decode())
            await ing.send("{nope")
            err = await recv(ing)
            assert err["type"] == "error" and err["code"] == "bad_json"
            bad = dict(objs[1], teams={"home": {"id": "t_nobody", "players": []}, "away": objs[1]["teams"]["away"]})
            await ing.send(orjson.dumps(bad).decode())
            err = await recv(ing)
            assert err["code"] == "unknown_team" and err["frame_id"] == 1
            await ing.send(orjson.dumps(objs[0]).decode())
            err = await recv(ing)
            assert err["code"] == "duplicate"
            await ing.send(orjson.dumps(objs[1:]).decode())  # an array of frames
            await asyncio.sleep(0.5)

    asyncio.run(run())
    snap = httpx.get(f"{server.http}/api/matches/m_live/snapshot", timeout=10).json()
    assert snap["health"]["rejected"] == 2 and snap["health"]["duplicates"] == 1
    assert snap["health"]["frames"] == len(objs)


def test_tokens_enforced(tmp_path):
    srv = LiveServer(tmp_path / "data", "--ingest-token", "in-secret", "--view-token", "look").start()
    try:
        assert put_match(srv).status_code == 401
        assert put_match(srv, headers={"Authorization": "Bearer wrong"}).status_code == 401
        assert put_match(srv, headers={"Authorization": "Bearer in-secret"}).status_code == 201
        assert post_frames(srv, frames(1), params={"token": "look"}).status_code == 401
        assert post_frames(srv, frames(1), params={"token": "in-secret"}).status_code == 200
        assert httpx.get(f"{srv.http}/api/matches/m_live/snapshot", timeout=10).status_code == 401
        for tok in ("look", "in-secret"):
            r = httpx.get(f"{srv.http}/api/matches/m_live/snapshot", params={"token": tok}, timeout=10)
            assert r.status_code == 200

        async def run():
            with pytest.raises(ConnectionClosed) as exc:
                async with websockets.connect(f"{srv.ws}/live/m_live") as ws:
                    await ws.recv()
            assert exc.value.rcvd.code == 1008
            with pytest.raises(ConnectionClosed) as exc:
                async with websockets.connect(f"{srv.ws}/ingest/m_live?token=look") as ws:
                    await ws.recv()
            assert exc.value.rcvd.code == 1008
            async with websockets.connect(f"{srv.ws}/live/m_live",
                                          additional_headers={"Authorization": "Bearer look"}) as ws:
                assert (await recv(ws))["type"] == "snapshot"

        asyncio.run(run())
    finally:
        srv.stop()


def test_kill9_recovery_equals_uninterrupted_run(tmp_path):
    objs = frames(20, seed=3)
    ref = LiveServer(tmp_path / "ref").start()
    try:
        put_match(ref)
        assert post_frames(ref, objs).json()["accepted"] == len(objs)
        time.sleep(2.8)  # let the stall flush the tail
        want = httpx.get(f"{ref.http}/api/matches/m_live/snapshot", timeout=10).json()
    finally:
        ref.stop()

    srv = LiveServer(tmp_path / "data").start()
    put_match(srv)
    half = len(objs) // 2
    assert post_frames(srv, objs[:half]).json()["accepted"] == half
    asyncio.run(stream(f"{srv.ws}/ingest/m_live", objs[half:half + 100], rate=None, batch=10))
    time.sleep(0.5)  # websocket frames reach the OS within a moment (fsync at 1 s)
    srv.kill9()
    srv2 = LiveServer(tmp_path / "data")
    srv2.port = srv.port
    srv2.start()
    try:
        got_half = httpx.get(f"{srv2.http}/api/matches/m_live/snapshot", timeout=10).json()
        assert got_half["health"]["frames"] == half + 100  # every acknowledged frame survived
        r = post_frames(srv2, objs)  # the provider re-sends everything: nothing is applied twice
        assert r.json()["duplicates"] + r.json()["late"] == half + 100
        time.sleep(2.8)
        got = httpx.get(f"{srv2.http}/api/matches/m_live/snapshot", timeout=10).json()
        assert got["players"] == want["players"]
        assert got["teams"] == want["teams"]
    finally:
        srv2.stop()


def test_events_drive_score_on_pitch_and_period_messages(server):
    put_match(server)
    objs = frames(6)
    assert post_frames(server, objs).status_code == 200

    async def run():
        async with websockets.connect(f"{server.ws}/live/m_live?every=0.1") as live:
            await recv(live)
            events = [
                {"type": "goal", "team_id": cb.AWAY, "player_id": "a2", "frame_id": 100},
                {"type": "substitution", "player_off": "h3", "player_on": "h2", "frame_id": 120},
                {"type": "period_end", "period": "first_half", "frame_id": 149},
            ]
            r = httpx.post(f"{server.http}/api/matches/m_live/events", json=events, timeout=10)
            assert r.status_code == 200 and r.json()["applied"] == 3
            msg = await recv_until(live, lambda m: m["type"] == "period")
            assert msg["event"] == "end" and msg["period"] == "first_half"
        snap = httpx.get(f"{server.http}/api/matches/m_live/snapshot", timeout=10).json()
        assert snap["teams"][cb.AWAY]["score"] == 1 and snap["teams"][cb.HOME]["score"] == 0
        assert snap["players"]["h3"]["on_pitch"] is False
        bad = httpx.post(f"{server.http}/api/matches/m_live/events",
                         json={"type": "goal", "team_id": "t_x", "frame_id": 1}, timeout=10)
        assert bad.status_code == 422 and "team_id" in bad.json()["error"]["message"]

    asyncio.run(run())


def test_views_and_bad_query_parameters(server):
    put_match(server)
    post_frames(server, frames(2))

    async def run():
        async with websockets.connect(f"{server.ws}/live/m_live?view=team:{cb.AWAY}") as ws:
            snap = await recv(ws)
            assert set(snap["players"]) == {"a1", "a2"} and set(snap["teams"]) == {cb.AWAY}
        async with websockets.connect(f"{server.ws}/live/m_live?view=players:h1,a2") as ws:
            assert set((await recv(ws))["players"]) == {"h1", "a2"}
        for q in ("every=abc", "every=0.001", "since=-3", "view=team:t_nobody", "view=players:zz", "view=weird"):
            async with websockets.connect(f"{server.ws}/live/m_live?{q}") as ws:
                err = await recv(ws)
                assert err["type"] == "error" and err["code"] == "bad_request", q
                with pytest.raises(ConnectionClosed):
                    await recv(ws)

    asyncio.run(run())


def test_limits_and_operator_endpoints(tmp_path):
    srv = LiveServer(tmp_path / "data",
                     config_text="[server]\nmax_message_bytes = 20000\nmax_batch_frames = 10\n").start()
    try:
        put_match(srv)
        r = post_frames(srv, frames(2))  # 50 frames > 10
        assert r.status_code == 413
        r = httpx.post(f"{srv.http}/api/matches/m_live/frames", content=b"x" * 30000, timeout=10)
        assert r.status_code == 413 and r.json()["error"]["code"] == "too_large"
        assert httpx.get(f"{srv.http}/healthz", timeout=10).json()["status"] == "ok"
        m = httpx.get(f"{srv.http}/metrics", timeout=10).text
        for name in ("pacewire_frames_in_total", "pacewire_frames_rejected_total", "pacewire_messages_out_total",
                     "pacewire_processing_seconds_bucket", "pacewire_dropped_backlogs_total"):
            assert name in m
        listed = httpx.get(f"{srv.http}/api/matches", timeout=10).json()["matches"]
        assert [x["match_id"] for x in listed] == ["m_live"]
    finally:
        srv.stop()
