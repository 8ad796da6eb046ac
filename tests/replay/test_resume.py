"""A real ``pacewire replay`` process against a real server: the period ends it sends, feed health while
it runs faster than real time, resuming where the server stands, and surviving a dropped socket, a
server restart and a server that does not come back."""
from __future__ import annotations

import asyncio
import gzip
import statistics
import subprocess
import sys
import time
from pathlib import Path

import httpx
import orjson
import pytest

from pacewire.analyze import analyze_folder
from tests.support.clips import clip
from tests.support.live_server import LiveServer
from tests.support.match_end import Follower, post_frames, status_is
from tests.support.proxy import CuttingProxy
from tests.support.snapshots import player_figures, settled_snapshot
from tests.support.trajectories import FPS

MID = "m_test"


def command(folder: Path, to: str, *args: str) -> list[str]:
    return [sys.executable, "-m", "pacewire.replay", str(folder), "--to", to, *args]


def run_replay(folder: Path, to: str, *args: str, timeout: float = 180) -> subprocess.CompletedProcess[str]:
    return subprocess.run(command(folder, to, *args), capture_output=True, text=True, timeout=timeout)


def set_up(srv: LiveServer, folder: Path, mid: str = MID) -> None:
    """The recording's set-up on the server (as the replay itself does first)."""
    meta, sheet = orjson.loads((folder / "meta.json").read_bytes()), orjson.loads((folder / "match.json").read_bytes())
    assert httpx.put(f"{srv.http}/api/matches/{mid}", json={"meta": meta, "sheet": sheet}, timeout=30
                     ).status_code == 201


def snapshot(srv: LiveServer, mid: str = MID) -> dict:
    return httpx.get(f"{srv.http}/api/matches/{mid}/snapshot", timeout=30).json()


def frames_held(srv: LiveServer, mid: str = MID) -> int:
    try:
        r = httpx.get(f"{srv.http}/api/matches/{mid}/snapshot", timeout=5)
    except httpx.HTTPError:
        return -1
    return r.json()["health"]["frames"] if r.status_code == 200 else -1


def wait_for(pred, timeout: float, what: str) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if pred():
            return
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


def assert_clean_feed(snap: dict, frames: int) -> None:
    """Every frame once: nothing sent twice, nothing late."""
    h = snap["health"]
    assert (h["frames"], h["resent"], h["late"], h["duplicates"]) == (frames, 0, 0, 0), h


# -- 2. the period ends of the meta -------------------------------------------------------------------------
def test_replay_sends_the_period_ends_it_knows_and_the_match_ends(server, tmp_path):
    """Default periods (45 min) cannot end a 90-second clip by themselves: only the ends the meta
    gives (frame_id_end) do, sent by the replay as period_end events."""
    with_ends = clip(tmp_path, 90, two_halves=True, ends=True)
    set_up(server, with_ends)

    async def run() -> list[dict]:
        async with Follower(f"{server.ws}/live/{MID}") as f:
            done = await asyncio.to_thread(run_replay, with_ends, f"{server.ws}/ingest/{MID}", "--speed", "max")
            assert done.returncode == 0, done.stderr
            await f.until(status_is("ended"), 30)
            await f.until(lambda m: m["type"] == "report" and m["kind"] == "full_time", 60)
            return list(f.msgs)

    msgs = asyncio.run(run())
    assert [(m["match_status"], m["cause"]) for m in msgs if m["type"] == "status"] == [
        ("live", "frames"), ("break", "period_end"), ("live", "frames"), ("ended", "period_end")]
    assert [(m["event"], m["period"]) for m in msgs if m["type"] == "period"] == [
        ("start", "first_half"), ("end", "first_half"), ("start", "second_half"), ("end", "second_half")]
    snap = snapshot(server)
    assert snap["health"]["state"] == "finished" and not any(p["on_pitch"] for p in snap["players"].values())
    assert player_figures(snap) == player_figures(analyze_folder(with_ends).snapshot())
    # the same clip without the ends in its meta leaves the match live: the ends above came from the replay
    without = clip(tmp_path, 90, two_halves=True, name="no_ends")
    assert run_replay(without, f"{server.ws}/ingest/m_other", "--speed", "max").returncode == 0
    assert settled_snapshot(server, "m_other")["match_status"] == "live"
    # frames after the end: more of the match replayed into the ended one is refused, and the replay says so
    longer = clip(tmp_path, 100, two_halves=True, ends=True, name="longer")
    out = run_replay(longer, f"{server.ws}/ingest/{MID}", "--speed", "max")
    assert out.returncode == 2 and "has ended" in out.stderr and "Traceback" not in out.stderr


# -- 3. feed health in a replay and after a resume ----------------------------------------------------------
def test_a_fast_replay_shows_its_feed_rate_and_speed_not_a_lag(server, tmp_path):
    folder = clip(tmp_path, 120)
    proc = subprocess.Popen(command(folder, f"{server.ws}/ingest/{MID}", "--speed", "20"),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    seen = []
    try:
        while proc.poll() is None:
            snap = snapshot(server) if frames_held(server) > 0 else None
            if snap is not None and 20 * FPS < snap["health"]["frames"] < 115 * FPS:
                seen.append(snap["health"])  # warmed up (the rate window is full), still streaming
            time.sleep(0.2)
    finally:
        _, err = proc.communicate(timeout=60)
    assert proc.returncode == 0, err
    assert len(seen) >= 3
    for h in seen:
        # the feed's own rate (25 frames per second of match), not the 500/s they arrive at
        assert h["rate_clock"] == "frames" and h["fps_observed"] == pytest.approx(25, rel=0.1), h
        assert h["lag_s"] is None and "faster than the wall clock" in h["lag_note"], h
        assert "low_rate" not in [r["code"] for r in h["reasons"]]
        assert h["feed_speed"] > 1.5  # config [health] fast_feed_ratio
    # the replay's speed, as such (loose: a loaded machine paces unevenly)
    assert 8 < statistics.median(h["feed_speed"] for h in seen) < 40


def test_a_real_time_replay_of_an_old_recording_reports_no_lag(server, tmp_path):
    folder = clip(tmp_path, 60)  # stamped 2026-03-14: months from the wall clock
    done = run_replay(folder, f"{server.ws}/ingest/{MID}", "--speed", "1", "--until", "00:07")
    assert done.returncode == 0, done.stderr
    h = snapshot(server)["health"]
    assert h["rate_clock"] == "wall" and h["lag_s"] is None and "behind the wall clock" in h["lag_note"]


def test_resume_from_sends_only_what_the_server_lacks(server, tmp_path):
    folder = clip(tmp_path, 60)
    to = f"{server.ws}/ingest/{MID}"
    assert run_replay(folder, to, "--speed", "max", "--until", "00:40").returncode == 0
    held = httpx.get(f"{server.http}/api/matches/{MID}/feed", timeout=30).json()
    assert held["last_frame_id"] == 40 * FPS and held["period"] == "first_half"  # frames 0 .. 40 s
    # resume from earlier than the server stands: nothing it holds is sent again
    done = run_replay(folder, to, "--speed", "50", "--from", "00:20")
    assert done.returncode == 0, done.stderr
    snap = settled_snapshot(server)
    assert_clean_feed(snap, 60 * FPS)
    assert player_figures(snap) == player_figures(analyze_folder(folder).snapshot())


def test_frames_sent_again_count_as_resent_and_only_unseen_ones_as_late(server, tmp_path):
    folder = clip(tmp_path, 60)
    objs = [orjson.loads(x) for x in gzip.decompress((folder / "tracking.jsonl.gz").read_bytes()).splitlines()]
    set_up(server, folder)
    missing = objs[100]
    r = post_frames(server.http, MID, objs[:100] + objs[101:1000])
    assert r.status_code == 200 and r.json()["accepted"] == 999
    # a provider resending a stretch it sent long ago (beyond the last 512 ids, config [decode] recent_ids)
    r = post_frames(server.http, MID, objs[:100])
    assert r.json()["resent"] == 100 and r.json()["late"] == 0
    # the recent ones are duplicates; the one never received before is late
    r = post_frames(server.http, MID, [*objs[990:1000], missing])
    assert (r.json()["duplicates"], r.json()["late"], r.json()["resent"]) == (10, 1, 0)
    h = settled_snapshot(server)["health"]
    assert (h["resent"], h["duplicates"], h["late"]) == (100, 10, 1)


# -- 4. surviving a dropped socket ---------------------------------------------------------------------------
def test_replay_survives_a_dropped_socket(server, tmp_path):
    folder = clip(tmp_path, 60)
    proxy = CuttingProxy(server.port, cut_after=60_000).start()  # about 7 s of this clip's frames
    try:
        done = run_replay(folder, f"ws://127.0.0.1:{proxy.port}/ingest/{MID}", "--speed", "10")
    finally:
        proxy.stop()
    assert proxy.cuts == 1
    assert done.returncode == 0, done.stderr
    assert "connection to the server lost" in done.stderr and "reconnected" in done.stderr
    assert "Traceback" not in done.stderr
    snap = settled_snapshot(server)
    assert_clean_feed(snap, 60 * FPS)
    assert player_figures(snap) == player_figures(analyze_folder(folder).snapshot())


def test_replay_survives_a_server_restart(tmp_path):
    folder = clip(tmp_path, 60)
    srv = LiveServer(tmp_path / "data").start()
    proc = subprocess.Popen(command(folder, f"{srv.ws}/ingest/{MID}", "--speed", "5"),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    again = LiveServer(tmp_path / "data")
    again.port = srv.port  # the same address: what a provider's replay knows
    try:
        wait_for(lambda: frames_held(srv) > 15 * FPS, 120, "frames to flow")
        srv.kill9()
        time.sleep(1.0)
        again.start()
        _, err = proc.communicate(timeout=180)
        assert proc.returncode == 0, err
        assert "reconnected" in err and "Traceback" not in err
        snap = settled_snapshot(again)
    finally:
        proc.kill()
        again.stop()
        srv.stop()
    assert_clean_feed(snap, 60 * FPS)
    assert player_figures(snap) == player_figures(analyze_folder(folder).snapshot())


def test_a_server_that_does_not_come_back_ends_the_replay_in_one_line(tmp_path):
    folder = clip(tmp_path, 60)
    srv = LiveServer(tmp_path / "data").start()
    proc = subprocess.Popen(command(folder, f"{srv.ws}/ingest/{MID}", "--speed", "5", "--retry-for", "2"),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        wait_for(lambda: frames_held(srv) > 10 * FPS, 120, "frames to flow")
        srv.kill9()
        _, err = proc.communicate(timeout=120)
    finally:
        proc.kill()
        srv.stop()
    assert proc.returncode == 2
    assert "Traceback" not in err
    last = [line for line in err.splitlines() if line.strip()][-1]
    assert last.startswith("pacewire replay: gave up reaching the server") and "resume with --from " in last
