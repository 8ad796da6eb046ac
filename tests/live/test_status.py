"""How a match ends, end to end on a real server: the match status, the break, full time without an
event, frames after the end, a reopening event, a restart (README, "How a match ends")."""
from __future__ import annotations

import asyncio
import csv
import io

import httpx
import orjson
import pytest
import websockets

from tests.support.live_match import frames, setup_body
from tests.support.live_server import LiveServer
from tests.support.match_end import (
    CONFIG,
    TIMEOUT_S,
    Follower,
    half,
    post_event,
    post_frames,
    schema_problems,
    status_is,
)

MID = "m_end"


def snapshot(srv: LiveServer, mid: str = MID) -> dict:
    return httpx.get(f"{srv.http}/api/matches/{mid}/snapshot", timeout=30).json()


def listed(srv: LiveServer, mid: str = MID) -> dict:
    return next(m for m in httpx.get(f"{srv.http}/api/matches", timeout=30).json()["matches"] if m["match_id"] == mid)


async def _play(srv: LiveServer, out: dict) -> None:
    """Two halves, each followed by silence; then frames after the end, a reopening period_start,
    more frames and silence again."""
    async with Follower(f"{srv.ws}/live/{MID}?every=0.5") as f:
        out["opening"] = f.msgs[0]
        out["listed_before"] = listed(srv)
        first, second = half("first_half", MID), half("second_half", MID, seed=1)
        assert (await asyncio.to_thread(post_frames, srv.http, MID, first)).status_code == 200
        await f.until(status_is("break"), 60)
        out["break_snapshot"] = await asyncio.to_thread(snapshot, srv)
        out["listed_break"] = listed(srv)
        assert (await asyncio.to_thread(post_frames, srv.http, MID, second)).status_code == 200
        ended = await f.until(status_is("ended"), 60)
        ended_at = next(i for i, m in enumerate(f.msgs) if m is ended)
        await f.until(lambda m: m["type"] == "report" and m["kind"] == "full_time", 60)
        await asyncio.sleep(TIMEOUT_S)  # long past any stall limit: the feed must not be called stalled
        out["ended_snapshot"] = await asyncio.to_thread(snapshot, srv)
        out["listed_ended"] = listed(srv)
        out["export"] = (await asyncio.to_thread(
            httpx.get, f"{srv.http}/api/matches/{MID}/export.csv", timeout=30)).text
        out["after_end_msgs"] = list(f.msgs[ended_at:])
        # frames after full time: refused over HTTP and over the ingest socket, and counted
        late = frames(4, match_id=MID, period="second_half", t0=2 * 62 + 900.0 + 5, frame0=len(first) + len(second))
        out["post_after_end"] = await asyncio.to_thread(post_frames, srv.http, MID, late[:50])
        async with websockets.connect(f"{srv.ws}/ingest/{MID}") as ws:
            await ws.send(orjson.dumps(late[50:60]).decode())
            out["ws_after_end"] = orjson.loads(await asyncio.wait_for(ws.recv(), 30))
        out["refused_snapshot"] = await asyncio.to_thread(snapshot, srv)
        # a period_start event reopens the match: the same frames are taken, and silence ends it again
        mark = len(f.msgs)
        ev = {"type": "period_start", "period": "second_half", "frame_id": late[0]["frame_id"]}
        assert (await asyncio.to_thread(post_event, srv.http, MID, ev)).status_code == 200
        await f.until(status_is("live"), 30, after=mark)
        out["post_reopened"] = await asyncio.to_thread(post_frames, srv.http, MID, late)
        await f.until(status_is("ended"), 60, after=mark)
        out["msgs"] = list(f.msgs)
    out["reports"] = httpx.get(f"{srv.http}/api/matches/{MID}/reports", timeout=30).json()["reports"]


@pytest.fixture(scope="module")
def played(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("status")
    srv = LiveServer(tmp / "data", config_text=CONFIG).start()
    out: dict = {"srv": srv, "data": tmp / "data"}
    try:
        assert httpx.put(f"{srv.http}/api/matches/{MID}", json=setup_body(MID), timeout=30).status_code == 201
        asyncio.run(_play(srv, out))
    finally:
        srv.stop()
    again = LiveServer(tmp / "data", config_text=CONFIG).start()  # a restart rebuilds the match from its folder
    try:
        out["restarted"] = snapshot(again)
        out["restarted_post"] = post_frames(again.http, MID, half("second_half", MID)[-10:])
    finally:
        again.stop()
    return out


def test_status_moves_live_break_live_ended_without_an_event(played):
    assert played["opening"]["match_status"] == "not_started"
    assert played["listed_before"]["status"] == "not_started"
    statuses = [(m["match_status"], m["cause"]) for m in played["msgs"] if m["type"] == "status"]
    # first half, break by the timeout (nominal minute played, then silence), second half, full time by the
    # timeout; then reopened by the period_start event and ended again
    assert statuses == [("live", "frames"), ("break", "timeout"), ("live", "frames"), ("ended", "timeout"),
                        ("live", "frames"), ("ended", "timeout")]
    assert played["break_snapshot"]["match_status"] == "break" and played["listed_break"]["status"] == "break"
    assert played["ended_snapshot"]["match_status"] == "ended" and played["listed_ended"]["status"] == "ended"
    ended = next(m for m in played["msgs"] if m["type"] == "status" and m["match_status"] == "ended")
    assert ended["period"] == "second_half" and f"no frame came for {TIMEOUT_S:g} s" in ended["message"]
    # the full-time whistle is announced as a period end too
    assert any(m["type"] == "period" and m["event"] == "end" and m["period"] == "second_half" for m in played["msgs"])


def test_nobody_is_on_the_pitch_in_the_break_and_after_full_time(played):
    for key in ("break_snapshot", "ended_snapshot"):
        players = played[key]["players"]
        assert players and not any(p["on_pitch"] for p in players.values()), key
    rows = list(csv.DictReader(io.StringIO(played["export"])))
    assert rows and {r["on_pitch"] for r in rows} == {"false"}
    # the players did play: their figures are there
    assert all(float(r["distance_m"]) > 100 for r in rows)


def test_full_time_report_without_an_event_and_no_stall_after_it(played):
    assert [e["kind"] for e in played["reports"]] == ["half_time", "full_time"]
    health = played["ended_snapshot"]["health"]
    assert health["state"] == "finished" and health["reasons"] == []
    after = played["after_end_msgs"]
    assert [m["health"]["state"] for m in after if m["type"] == "health"] == ["finished"]
    assert not any(m.get("health", {}).get("state") == "stalled" for m in after)
    # made final as an event in the recording: what a restart, a successor and the exports see
    recorded = (played["data"] / "matches" / MID / "events.jsonl").read_bytes()
    events = [orjson.loads(line) for line in recorded.splitlines()]
    assert {"type": "period_end", "period": "second_half", "source": "timeout"}.items() <= events[0].items()


def test_frames_after_full_time_are_refused_with_a_clear_error_and_counted(played):
    r = played["post_after_end"]
    assert r.status_code == 409
    err = r.json()["error"]
    assert err["code"] == "match_ended" and err["after_end"] == 50 and err["accepted"] == 0
    assert "period_start event reopens it" in err["message"]
    ws = played["ws_after_end"]
    assert ws["type"] == "error" and ws["code"] == "match_ended" and "10 frames refused" in ws["message"]
    h = played["refused_snapshot"]["health"]
    assert h["after_end"] == 60 and h["frames"] == played["ended_snapshot"]["health"]["frames"]
    assert h["state"] == "finished"


def test_a_period_start_event_reopens_the_match(played):
    r = played["post_reopened"]
    assert r.status_code == 200 and r.json()["accepted"] == 100
    reopened = [m for m in played["msgs"] if m["type"] == "status"][-2:]
    assert [m["match_status"] for m in reopened] == ["live", "ended"]


def test_a_restart_keeps_the_match_ended(played):
    snap = played["restarted"]
    assert snap["match_status"] == "ended" and snap["health"]["state"] == "finished"
    assert not any(p["on_pitch"] for p in snap["players"].values())
    assert played["restarted_post"].status_code == 409


def test_every_message_validates_against_its_published_schema(played):
    msgs = played["msgs"]
    assert {"snapshot", "delta", "status", "health", "period", "report"} <= {m["type"] for m in msgs}
    for m in [*msgs, played["ws_after_end"]]:
        assert schema_problems(m) == [], (m["type"], m["seq"])
    for key in ("break_snapshot", "ended_snapshot", "restarted"):
        assert schema_problems(played[key]) == [], key


def test_a_period_end_event_ends_at_once_and_waits_for_its_frame(tmp_path):
    """Default periods (45 min): only events end these halves. The second half's end names a frame the
    server has not had yet (an event may overtake the frames): it waits for it."""
    srv = LiveServer(tmp_path / "data").start()
    mid = "m_whistle"
    try:
        assert httpx.put(f"{srv.http}/api/matches/{mid}", json=setup_body(mid), timeout=30).status_code == 201

        async def run() -> list[dict]:
            async with Follower(f"{srv.ws}/live/{mid}") as f:
                first = frames(10, match_id=mid)
                second = frames(10, match_id=mid, seed=1, period="second_half", t0=910.0, frame0=len(first))
                assert (await asyncio.to_thread(post_frames, srv.http, mid, first)).status_code == 200
                ev = {"type": "period_end", "period": "first_half", "frame_id": first[-1]["frame_id"]}
                assert (await asyncio.to_thread(post_event, srv.http, mid, ev)).status_code == 200
                await f.until(status_is("break"), 30)
                assert (await asyncio.to_thread(post_frames, srv.http, mid, second[:100])).status_code == 200
                ev = {"type": "period_end", "period": "second_half", "frame_id": second[-1]["frame_id"]}
                assert (await asyncio.to_thread(post_event, srv.http, mid, ev)).status_code == 200
                await asyncio.sleep(1.0)
                assert snapshot(srv, mid)["match_status"] == "live"  # its frame has not come yet
                r = await asyncio.to_thread(post_frames, srv.http, mid, second[100:])
                assert r.status_code == 200 and r.json()["accepted"] == len(second) - 100
                await f.until(status_is("ended"), 30)
                await f.until(lambda m: m["type"] == "report" and m["kind"] == "full_time", 60)
                r = await asyncio.to_thread(post_frames, srv.http, mid, frames(
                    1, match_id=mid, period="second_half", t0=930.0, frame0=second[-1]["frame_id"] + 1))
                assert r.status_code == 409
                return list(f.msgs)

        msgs = asyncio.run(run())
        assert [(m["match_status"], m["cause"]) for m in msgs if m["type"] == "status"] == [
            ("live", "frames"), ("break", "period_end"), ("live", "frames"), ("ended", "period_end")]
        snap = snapshot(srv, mid)
        assert snap["health"]["frames"] == 20 * 25 and snap["health"]["state"] == "finished"
        assert [e["kind"] for e in httpx.get(f"{srv.http}/api/matches/{mid}/reports", timeout=30).json()["reports"]
                ] == ["half_time", "full_time"]
    finally:
        srv.stop()
