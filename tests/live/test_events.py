"""The CDF event stream in the live service: HTTP JSON Lines and the events socket beside the control
events, recorded in event.jsonl before it counts (a file the CDF validator accepts), corrections by id,
the event stream's health, and a restart that rebuilds the same figures."""
from __future__ import annotations

import asyncio
import contextlib
import io
import time
import warnings

import cdf
import httpx
import jsonschema
import orjson
import websockets

from pacewire.analyze import analyze_folder
from pacewire.wire.schema import json_schemas, strict
from tests.support import cdf_build as cb, cdf_events as ce
from tests.support.live_match import frames, setup_body
from tests.support.live_server import LiveServer
from tests.support.sockets import recv, recv_until

MID = "m_live"


def put(srv: LiveServer) -> None:
    assert httpx.put(f"{srv.http}/api/matches/{MID}", json=setup_body(), timeout=10).status_code == 201


def post(srv: LiveServer, path: str, content: bytes) -> httpx.Response:
    return httpx.post(f"{srv.http}/api/matches/{MID}/{path}", content=content, timeout=30)


def ev(eid: str, t: float, *a, **kw) -> dict:
    return ce.event(eid, t, *a, match_id=MID, **kw)


def snapshot(srv: LiveServer) -> dict:
    return httpx.get(f"{srv.http}/api/matches/{MID}/snapshot", timeout=10).json()


def validate_file(path) -> None:
    """The CDF validator (0.1.1) in its strictest mode over every line; raises on any problem."""
    with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("error")  # an advisory (unknown key) fails too
        cdf.EventSchemaValidator().validate_schema(sample=str(path), mode="extreme", limit=None)


def test_events_over_http_and_socket_are_recorded_valid_and_corrected_by_id(server):
    put(server)
    assert post(server, "frames", b"\n".join(cb.lines(frames(30)))).status_code == 200
    kick = ev("e1", 0.0, sub_type="kick_off")
    lines = [orjson.dumps(kick), b"{broken", orjson.dumps(ev("e2", 8.0, "interception", team=cb.AWAY, player="a1")),
             orjson.dumps(ce.with_event(kick, x=400.0))]
    r = post(server, "events", b"\n".join(lines))
    assert r.status_code == 200
    out = r.json()
    assert (out["accepted"], out["rejected"], out["duplicates"], out["corrections"]) == (2, 2, 0, 0)
    assert [(e["code"], e["line"]) for e in out["errors"]] == [("bad_json", 2), ("out_of_pitch", 4)]
    assert out["errors"][1]["event_id"] == "e1"
    folder = server.data / "matches" / MID
    assert len((folder / "event.jsonl").read_bytes().splitlines()) == 2  # answered once recorded

    async def run():
        async with websockets.connect(f"{server.ws}/ingest/{MID}/events") as ws:
            await ws.send(orjson.dumps(ev("e3", 15.0, "carry")).decode())  # one object
            moved = ce.with_event(ev("e2", 8.0, "interception", team=cb.AWAY, player="a1"), time=cb.stamp(9.0))
            await ws.send(orjson.dumps([moved, ev("e3", 15.0, "carry")]).decode())  # a correction and a duplicate
            err = await recv(ws)
            assert err["type"] == "error" and err["code"] == "duplicate" and err["event_id"] == "e3"
            await ws.send(orjson.dumps(ev("e4", 20.0, "pass", player="zz")).decode())
            err = await recv(ws)
            assert err["code"] == "unknown_player" and "'zz'" in err["message"]

    asyncio.run(run())
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and snapshot(server)["health"].get("events", {}).get("events") != 3:
        time.sleep(0.1)
    h = snapshot(server)["health"]["events"]
    assert (h["events"], h["corrections"], h["duplicates"], h["rejected"]) == (3, 1, 1, 3)
    assert h["lag_s"] is not None and h["state"] in ("ok", "degraded")
    recorded = (folder / "event.jsonl").read_bytes().splitlines()
    assert len(recorded) == 4  # e1, e2, e3 and e2's correction: every accepted version, in arrival order
    assert orjson.loads(recorded[3])["event"]["time"] == cb.stamp(9.0)
    validate_file(folder / "event.jsonl")


def test_control_events_still_work_beside_cdf_events(server):
    put(server)
    post(server, "frames", b"\n".join(cb.lines(frames(6))))
    r = httpx.post(f"{server.http}/api/matches/{MID}/events", timeout=10,
                   json=[{"type": "goal", "team_id": cb.AWAY, "player_id": "a2", "frame_id": 100}])
    assert r.status_code == 200 and r.json() == {"applied": 1}
    r = httpx.post(f"{server.http}/api/matches/{MID}/events", timeout=10,
                   json=[{"type": "goal", "team_id": cb.AWAY, "frame_id": 100}, ev("e1", 0.0)])
    assert r.status_code == 422 and r.json()["error"]["code"] == "bad_event"
    assert snapshot(server)["teams"][cb.AWAY]["score"] == 1
    r = httpx.post(f"{server.http}/api/matches/{MID}/events", timeout=10, json=ev("e1", 0.0))  # one JSON object
    assert r.status_code == 200 and r.json()["accepted"] == 1


def test_event_stream_health_gap_and_recovery_after_a_restart(tmp_path):
    srv = LiveServer(tmp_path / "data").start()
    try:
        put(srv)
        post(srv, "frames", b"\n".join(cb.lines(frames(60))))
        evs = [ev(f"e{i}", 2.0 * i, "pass", player=("h2", "h3")[i % 2]) for i in range(8)]  # then 45 s of silence
        post(srv, "events", b"\n".join(orjson.dumps(e) for e in evs))
        r = httpx.post(f"{srv.http}/api/matches/{MID}/events", timeout=10,
                       json={"type": "period_end", "period": "first_half", "match_time_s": 60.0})
        assert r.status_code == 200  # the whistle: the tail is final, as offline
        time.sleep(0.5)
        snap = snapshot(srv)
        h = snap["health"]["events"]
        # sent after a minute of frames, the events run a minute behind the tracking: late as well
        assert h["state"] == "degraded" and [r["code"] for r in h["reasons"]] == ["event_gap", "event_lag"]
        assert abs(h["lag_s"] - (59.96 - 7.0)) < 0.01  # median of 59.96 s (last frame) minus 0, 2, ... 14 s
        assert h["since_last_s"] >= 44  # 14 s to 60 s, the ball in play throughout (tests.support.live_match)
        assert h["events_per_min"] == 8.0  # eight events within the last 60 s of match time
        want = {k: snap[k] for k in ("players", "teams")}
        # phases, sequences and the event stream's health are all described by the published schema
        errors = [e.message[:200] for e in jsonschema.Draft202012Validator(strict(json_schemas()["snapshot"]))
                  .iter_errors(snap)]
        assert errors == [] and "sequences" in snap["teams"][cb.HOME]["outfield"]
    finally:
        srv.kill9()
    srv2 = LiveServer(tmp_path / "data").start()
    try:
        snap = snapshot(srv2)
        assert {k: snap[k] for k in ("players", "teams")} == want
        assert snap["health"]["events"]["events"] == 8
        r = post(srv2, "events", orjson.dumps(evs[0]))  # the decoder goes on from the recording
        assert r.json()["duplicates"] == 1
    finally:
        srv2.stop()
    folder = tmp_path / "data" / "matches" / MID
    offline = analyze_folder(folder).snapshot()
    # offline = live for the final events: the phases, the figures they partition, the sequences
    for pid, p in want["players"].items():
        assert offline["players"][pid]["phases"] == p["phases"], pid
    for tid in want["teams"]:
        assert offline["teams"][tid]["outfield"]["sequences"] == want["teams"][tid]["outfield"]["sequences"]


def test_the_events_socket_refuses_an_unknown_match(server):
    async def run():
        async with websockets.connect(f"{server.ws}/ingest/m_nobody/events") as ws:
            msg = await recv_until(ws, lambda m: m["type"] == "error")
            assert msg["code"] == "unknown_match"

    asyncio.run(run())


def test_an_event_accepted_after_a_torn_last_line_survives_the_next_restart(tmp_path):
    """Power lost in the middle of a write leaves event.jsonl without its last newline: after the restart
    the torn line is skipped, and an event accepted then is recorded on a line of its own, so a second
    restart still has it (no accepted event is ever lost)."""
    srv = LiveServer(tmp_path / "data").start()
    try:
        put(srv)
        post(srv, "frames", b"\n".join(cb.lines(frames(20))))
        assert post(srv, "events", orjson.dumps(ev("e1", 1.0))).json()["accepted"] == 1
    finally:
        srv.kill9()
    path = tmp_path / "data" / "matches" / MID / "event.jsonl"
    with open(path, "ab") as fh:
        fh.write(orjson.dumps(ev("e2", 2.0))[:40])  # what a power cut leaves of the next write
    for run in range(2):
        srv = LiveServer(tmp_path / "data").start()
        try:
            if run == 0:
                assert post(srv, "events", orjson.dumps(ev("e3", 3.0))).json()["accepted"] == 1
            assert snapshot(srv)["health"]["events"]["events"] == 2  # e1 and e3; the torn e2 never counted
        finally:
            srv.kill9()
    first, torn, third = path.read_bytes().splitlines()
    assert (orjson.loads(first)["event"]["id"], len(torn), orjson.loads(third)["event"]["id"]) == ("e1", 40, "e3")
