"""Replay into a real server: pacing, seek, stop/resume, equality with analyze; import via kloppy."""
from __future__ import annotations

import asyncio
import importlib.resources
import signal
import subprocess
import sys
import time
import warnings

import httpx
import numpy as np
import pytest

import cdf_build as cb
from live_server import LiveServer
from pacewire.analyze import analyze_folder
from pacewire.replay.player import replay

FPS = 25
IDS = cb.player_ids(2, 2)


def clip(tmp_path, seconds: float = 60, two_halves: bool = False, name: str = "clip"):
    """A short fictional recording: four players moving smoothly."""
    T = int(seconds * FPS)
    t = np.arange(T) / FPS
    xy = np.zeros((T, 4, 2))
    for p in range(4):
        xy[:, p, 0] = 18 * np.sin(0.23 * t + p)
        xy[:, p, 1] = 12 * np.cos(0.31 * t + 2 * p)
    if two_halves:
        h = T // 2
        objs = cb.frames(xy[:h], IDS, 2) + cb.frames(xy[h:], IDS, 2, period="second_half", t0=h / FPS + 900, frame0=h)
    else:
        objs = cb.frames(xy, IDS, 2)
    return cb.write_folder(tmp_path / name, cb.meta(), cb.sheet(2, 2), objs, gz=True)


@pytest.fixture
def server(tmp_path):
    srv = LiveServer(tmp_path / "data").start()
    yield srv
    srv.stop()


def figures(snap: dict) -> dict:
    """Players' figures; on_pitch is live state (offline, the match is over and nobody is on)."""
    return {pid: {k: v for k, v in p.items() if k != "on_pitch"} for pid, p in snap["players"].items()}


def settled_snapshot(srv: LiveServer, match_id: str = "m_test") -> dict:
    time.sleep(2.8)  # the stall shows the tail finalised
    return httpx.get(f"{srv.http}/api/matches/{match_id}/snapshot", timeout=10).json()


def test_replay_at_max_speed_equals_analyze(server, tmp_path):
    folder = clip(tmp_path, 90, two_halves=True)
    sent, last = asyncio.run(replay(folder, f"{server.ws}/ingest/m_test", None))
    assert sent == 90 * FPS and last.period == "second_half"
    got = settled_snapshot(server)
    want = analyze_folder(folder).snapshot()
    assert figures(got) == figures(want)
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
    assert figures(got) == figures(want)


def test_ctrl_c_stops_cleanly_and_resume_completes(server, tmp_path):
    folder = clip(tmp_path, 60)
    cmd = [sys.executable, "-m", "replay", str(folder), "--to", f"{server.ws}/ingest/m_test", "--speed", "4"]
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
    assert "stopped at" in text and "resume with --from" in text
    where = text.rsplit("resume with --from ", 1)[1].split()[0]
    done = subprocess.run([*cmd[:-2], "--speed", "max", "--from", where], capture_output=True, timeout=120)
    assert done.returncode == 0, done.stderr
    got = settled_snapshot(server)
    want = analyze_folder(folder).snapshot()
    assert figures(got) == figures(want)
    assert got["health"]["frames"] == 60 * FPS


def test_bad_target_and_missing_folder(tmp_path):
    out = subprocess.run([sys.executable, "-m", "replay", str(tmp_path), "--to", "http://x/y"], capture_output=True, timeout=60)
    assert out.returncode == 2 and b"meta.json" in out.stderr or b"ws://" in out.stderr
    folder = clip(tmp_path, 2)
    out = subprocess.run([sys.executable, "-m", "replay", str(folder), "--to", "http://127.0.0.1:1/x"], capture_output=True, timeout=60)
    assert out.returncode == 2 and b"ws://HOST:PORT/ingest/MATCH" in out.stderr
    out = subprocess.run([sys.executable, "-m", "replay", str(folder), "--to", "ws://127.0.0.1:9/ingest/m", "--speed", "500"],
                         capture_output=True, timeout=60)
    assert out.returncode == 2 and b"0.25 to 100" in out.stderr


def test_import_of_kloppy_epts_sample_is_valid_cdf(tmp_path):
    """kloppy 3.19.1's wheel ships a short 25 fps EPTS sample (99 frames, real data)."""
    pytest.importorskip("kloppy")
    import cdf

    files = importlib.resources.files("kloppy") / "tests" / "files"
    out = subprocess.run([sys.executable, "-m", "pacewire", "import", str(files / "epts_metrica_tracking.txt"),
                          "--format", "epts", "--meta", str(files / "epts_metrica_metadata.xml"),
                          "--out", str(tmp_path / "imp")], capture_output=True, timeout=120)
    assert out.returncode == 0, out.stderr
    folder = tmp_path / "imp"
    lines = (folder / "tracking.jsonl").read_bytes().splitlines()
    assert len(lines) > 50
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cdf.TrackingSchemaValidator().validate_schema(sample=str(folder / "tracking.jsonl"), mode="strict", limit=None)
    snap = analyze_folder(folder).snapshot()
    assert snap["health"]["rejected"] == 0
    # every player the sample tracks for at least 2 s is credited distance
    import orjson
    counts: dict[str, int] = {}
    for line in lines:
        for side in ("home", "away"):
            for p in orjson.loads(line)["teams"][side]["players"]:
                counts[p["id"]] = counts.get(p["id"], 0) + 1
    tracked = {pid for pid, n in counts.items() if n >= 2 * 25}
    assert tracked and all(snap["players"][pid]["distance_m"] > 0 for pid in tracked)


def test_import_without_a_needed_meta_file_says_so(tmp_path):
    files = importlib.resources.files("kloppy") / "tests" / "files"
    out = subprocess.run([sys.executable, "-m", "pacewire", "import", str(files / "epts_metrica_tracking.txt"),
                          "--format", "epts", "--out", str(tmp_path / "imp")], capture_output=True, timeout=120)
    assert out.returncode == 2 and b"needs --meta" in out.stderr
