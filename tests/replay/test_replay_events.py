"""The synthetic match's CDF event stream through replay and analyze: the same figures by phase from a
replay at max speed, from other splits of the stream into messages, from a seek, and offline; the
events on the frames' clock."""
from __future__ import annotations

import asyncio
import time

import httpx
import orjson
import pytest

from pacewire.analyze import analyze_folder
from pacewire.replay import synth
from pacewire.replay.player import replay
from tests.support.live_server import LiveServer
from tests.support.snapshots import player_figures, settled_snapshot

MID = "pw_synth_match"


@pytest.fixture(scope="module")
def match(tmp_path_factory):
    """Six fictional minutes with every fault of the tracking and of the event stream."""
    return synth.write_match(tmp_path_factory.mktemp("ev"), minutes=6, fps=25, seed=8, compress=False)


def team_parts(snap: dict) -> dict:
    return {tid: {k: t["outfield"].get(k) for k in ("phases", "sequences", "m_per_min_in_play", "in_play_s")}
            for tid, t in snap["teams"].items()}


@pytest.mark.slow
def test_replay_at_max_speed_equals_analyze_with_events(server, match):
    sent, _ = asyncio.run(replay(match, f"{server.ws}/ingest/{MID}", None))
    got = settled_snapshot(server, MID)
    want = analyze_folder(match).snapshot()
    assert player_figures(got) == player_figures(want)
    assert team_parts(got) == team_parts(want)
    faults = orjson.loads((match / "faults.json").read_bytes())["faults"]
    fixes = sum(f["kind"] == "event_correction" for f in faults)
    ev = got["health"]["events"]
    assert fixes >= 3 and ev["corrections"] == want["health"]["events"]["corrections"] == fixes
    assert ev["events"] == want["health"]["events"]["events"] and ev["rejected"] == 0


@pytest.mark.slow
def test_other_splits_of_the_event_stream_give_the_same_figures(tmp_path, match):
    want = analyze_folder(match).snapshot()
    srv = LiveServer(tmp_path / "data").start()
    try:
        body = {"meta": orjson.loads((match / "meta.json").read_bytes()),
                "sheet": orjson.loads((match / "match.json").read_bytes())}
        assert httpx.put(f"{srv.http}/api/matches/{MID}", json=body, timeout=10).status_code == 201
        events = (match / "event.jsonl").read_bytes().splitlines()
        # the events first, in HTTP batches of 7 lines, then the frames: the order of arrival changes nothing
        for i in range(0, len(events), 7):
            r = httpx.post(f"{srv.http}/api/matches/{MID}/events", content=b"\n".join(events[i:i + 7]), timeout=30)
            assert r.status_code == 200
        frames = (match / "tracking.jsonl").read_bytes().splitlines()
        for i in range(0, len(frames), 300):  # 300 frames of about 2 KiB: under the 1 MiB body limit
            r = httpx.post(f"{srv.http}/api/matches/{MID}/frames", content=b"\n".join(frames[i:i + 300]), timeout=60)
            assert r.status_code == 200
        got = settled_snapshot(srv, MID)
    finally:
        srv.stop()
    assert player_figures(got) == player_figures(want)
    assert team_parts(got) == team_parts(want)


@pytest.mark.slow
def test_seek_with_events_gives_the_figures_of_a_full_replay(tmp_path, match):
    want = analyze_folder(match).snapshot()
    srv = LiveServer(tmp_path / "seek").start()
    try:
        asyncio.run(replay(match, f"{srv.ws}/ingest/{MID}", 50.0, start_s=150.0))
        got = settled_snapshot(srv, MID)
    finally:
        srv.stop()
    assert player_figures(got) == player_figures(want)
    assert team_parts(got) == team_parts(want)


def test_events_go_on_the_frames_clock(server, tmp_path):
    folder = synth.write_match(tmp_path / "clock", minutes=1.5, fps=25, seed=2, compress=False, faults=False)
    t0 = time.monotonic()
    asyncio.run(replay(folder, f"{server.ws}/ingest/{MID}", 20.0))
    took = time.monotonic() - t0
    snap = httpx.get(f"{server.http}/api/matches/{MID}/snapshot", timeout=10).json()
    ev = snap["health"]["events"]
    assert ev["events"] == len((folder / "event.jsonl").read_bytes().splitlines())
    # paced with the frames: each event arrives when the tracking has reached its time, within a tick
    # (0.02 s of wall time = 0.4 s of match time at 20x) and the frames' own smoothing lag
    assert ev["lag_s"] is not None and abs(ev["lag_s"]) < 1.0
    # 90 s of match at 20x = 4.5 s, plus 1 s for the skipped half-time break (pacewire.replay.player)
    assert took == pytest.approx(5.5, rel=0.15)
