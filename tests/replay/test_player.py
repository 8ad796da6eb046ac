"""Replay into a real server: pacing, seek, stop/resume, equality with analyze."""
from __future__ import annotations

import asyncio
import signal
import subprocess
import sys
import time

import httpx
import pytest

from pacewire.analyze import analyze_folder
from pacewire.replay.player import replay
from tests.support import cdf_build as cb
from tests.support.clips import clip
from tests.support.live_server import LiveServer
from tests.support.snapshots import player_figures, settled_snapshot
from tests.support.trajectories import FPS


def test_replay_at_max_speed_equals_analyze(server, tmp_path):
    folder = clip(tmp_path, 90, two_halves=True)
    sent, last = asyncio.run(replay(folder, f"{server.ws}/ingest/m_test", None))
    assert sent == 90 * FPS and last.period == "second_half"
    got = settled_snapshot(server)
    want = analyze_folder(folder).snapshot()
    assert player_figures(got) == player_figures(want)
    assert got["teams"][cb.HOME]["outfield"]["distance_m"] == want["teams"][cb.HOME]["outfield"]["distance_m"]


def test_pacing_speed_20_over_one_minute(server, tmp_path):
    folder = clip(tmp_path, 60)
    t0 = time.monotonic()
    asyncio.run(replay(folder, f"{server.ws}/ingest/m_test", 20.0))
    took = time.monotonic() - t0
    # 60 s of match at 20x = 3 s (the set-up request adds a little)
    assert took == pytest.approx(3.0, rel=0.05)


def test_seek_gives_the_same_figures_as_a_full_replay(tmp_path):
    folder = clip(tmp_path, 150)
    full = LiveServer(tmp_path / "full").start()
    try:
        asyncio.run(replay(folder, f"{full.ws}/ingest/m_test", None))
        want = settled_snapshot(full)
    finally:
        full.stop()
    seek = LiveServer(tmp_path / "seek").start()
    try:
        sent, _ = asyncio.run(replay(folder, f"{seek.ws}/ingest/m_test", 50.0, start_s=120.0))
        assert sent == 150 * FPS
        got = settled_snapshot(seek)
    finally:
        seek.stop()
    assert player_figures(got) == player_figures(want)


def test_ctrl_c_stops_cleanly_and_resume_completes(server, tmp_path):
    folder = clip(tmp_path, 60)
    cmd = [sys.executable, "-m", "pacewire.replay", str(folder), "--to", f"{server.ws}/ingest/m_test", "--speed", "4"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:  # wait until frames flow (the machine may be slow to start it)
        r = httpx.get(f"{server.http}/api/matches/m_test/snapshot", timeout=10)
        if r.status_code == 200 and r.json()["health"]["frames"] > 10 * FPS:
            break
        time.sleep(0.2)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=30)
    assert proc.returncode == 0, err
    text = err.decode()
    assert "stopped at" in text and "resume with --from" in text and "Traceback" not in text
    where = text.rsplit("resume with --from ", 1)[1].split()[0]
    done = subprocess.run([*cmd[:-2], "--speed", "max", "--from", where], capture_output=True, timeout=120)
    assert done.returncode == 0, done.stderr
    got = settled_snapshot(server)
    want = analyze_folder(folder).snapshot()
    assert player_figures(got) == player_figures(want)
    # the resume asked the server where it stood: every frame once, none sent again, none late
    h = got["health"]
    assert (h["frames"], h["resent"], h["late"], h["duplicates"]) == (60 * FPS, 0, 0, 0)


def test_bad_target_and_missing_folder(tmp_path):
    out = subprocess.run([sys.executable, "-m", "pacewire.replay", str(tmp_path), "--to", "http://x/y"],
                         capture_output=True, timeout=60)
    assert out.returncode == 2 and b"meta.json" in out.stderr or b"ws://" in out.stderr
    folder = clip(tmp_path, 2)
    out = subprocess.run([sys.executable, "-m", "pacewire.replay", str(folder), "--to", "http://127.0.0.1:1/x"],
                         capture_output=True, timeout=60)
    assert out.returncode == 2 and b"ws://HOST:PORT/ingest/MATCH" in out.stderr
    out = subprocess.run([sys.executable, "-m", "pacewire.replay", str(folder), "--to", "ws://127.0.0.1:9/ingest/m",
                          "--speed", "500"], capture_output=True, timeout=60)
    assert out.returncode == 2 and b"0.25 to 100" in out.stderr
