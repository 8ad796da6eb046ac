"""A season on one laptop: finished matches archived and served from disk, a restart that indexes them
and rebuilds only the unfinished match, memory that does not grow with the finished matches."""
from __future__ import annotations

import asyncio
import shutil
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx
import pytest

from pacewire.analyze import analyze_folder
from pacewire.replay.player import replay
from pacewire.replay.synth import write_match
from tests.support.live_server import LiveServer
from tests.support.snapshots import player_figures

CONFIG = "[archive]\ngrace_s = 0.5\ncheck_s = 0.2\ncheckpoint_s = 10.0\n"
LIVE = "m_live"
SRC = "f_src"  # the archived match copied; the copies' ids have its length
RSS_SLACK_MB = 10.0  # allocator noise between two processes (common practice); a rebuilt match costs more


def wait_for(check: Callable[[], Any], what: str, limit_s: float = 120.0) -> Any:
    """Poll until ``check()`` is truthy (a guard against hanging, not a timed assertion)."""
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        got = check()
        if got:
            return got
        time.sleep(0.2)
    raise AssertionError(f"never happened: {what}")


def entry(srv: LiveServer, match_id: str) -> dict[str, Any] | None:
    rows = httpx.get(f"{srv.http}/api/matches", timeout=30).json()["matches"]
    return next((r for r in rows if r["match_id"] == match_id), None)


def archived(srv: LiveServer, match_id: str) -> bool:
    e = entry(srv, match_id)
    return e is not None and bool(e.get("archived"))


def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    raise AssertionError("no VmRSS")


def fill(data: Path, src: Path, n: int) -> list[str]:
    """``n`` finished matches in ``data``: copies of one archived match folder under new ids of the
    same length (so each recorded file keeps its size, which its archive checks)."""
    ids = [f"f{k:04d}" for k in range(n)]
    for mid in ids:
        dst = data / "matches" / mid
        shutil.copytree(src, dst)
        for path in dst.rglob("*"):
            if path.suffix in (".json", ".jsonl", ".csv", ".html"):
                path.write_bytes(path.read_bytes().replace(SRC.encode(), mid.encode()))
    return ids


@pytest.fixture(scope="module")
def season(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """One short synthetic match played to its end through a server and archived there; and the
    recording of the match that will be live."""
    base = tmp_path_factory.mktemp("season")
    finished = write_match(base / "synth_fin", minutes=1, fps=10, seed=5, faults=False)
    live = write_match(base / "synth_live", minutes=2, fps=10, seed=6, faults=False)
    srv = LiveServer(base / "one", config_text=CONFIG).start()
    try:
        asyncio.run(replay(finished, f"{srv.ws}/ingest/{SRC}", None))
        wait_for(lambda: archived(srv, SRC), "the finished match archived")
        e = entry(srv, SRC)
        assert e is not None and e["status"] == "ended" and e["kickoff_t"] is not None
    finally:
        srv.stop()
    folder = base / "one" / "matches" / SRC
    assert (folder / "final.json").exists() and (folder / "export.csv").exists()
    return folder, live


def check_finished(srv: LiveServer, ids: list[str]) -> None:
    """Every finished match listed as ended and archived, its report and export served from disk."""
    rows = {r["match_id"]: r for r in httpx.get(f"{srv.http}/api/matches", timeout=30).json()["matches"]}
    assert set(ids) | {LIVE} == set(rows)
    for mid in ids:
        assert rows[mid]["status"] == "ended" and rows[mid]["archived"] is True
        reports = httpx.get(f"{srv.http}/api/matches/{mid}/reports", timeout=30).json()["reports"]
        assert "full_time" in {r["kind"] for r in reports}
        html = httpx.get(f"{srv.http}/api/matches/{mid}/reports/full_time/report.html", timeout=30)
        assert html.status_code == 200 and "<html" in html.text.lower()
        csv = httpx.get(f"{srv.http}/api/matches/{mid}/export.csv", timeout=30)
        assert csv.status_code == 200 and len(csv.text.splitlines()) > 10  # a header and a row per player


def restart_mid_match(data: Path, live: Path, damage: bool) -> tuple[LiveServer, float]:
    """The live match replayed 15 s into the second half, the server killed, started again;
    returns the new server and its RSS once the live match answers."""
    srv = LiveServer(data, config_text=CONFIG).start()
    asyncio.run(replay(live, f"{srv.ws}/ingest/{LIVE}", None, until_s=2715.0))  # match clock: 45:00 + 15 s
    feed = httpx.get(f"{srv.http}/api/matches/{LIVE}/feed", timeout=30).json()
    assert feed["period"] == "second_half" and feed["match_status"] == "live"
    time.sleep(1.5)  # the recorder's fsync interval (1 s): what was acknowledged is on disk
    srv.kill9()
    cp = data / "matches" / LIVE / "checkpoint.npz"
    assert cp.exists()  # written during the replay: the restart goes on from it
    if damage:
        cp.write_bytes(b"not a checkpoint")  # a torn or foreign file: the whole recording instead
    again = LiveServer(data, config_text=CONFIG)
    again.port = srv.port
    again.start()
    snap = httpx.get(f"{again.http}/api/matches/{LIVE}/snapshot", timeout=60).json()
    assert snap["match_status"] == "live"
    after = httpx.get(f"{again.http}/api/matches/{LIVE}/feed", timeout=30).json()
    assert after["last_frame_id"] == feed["last_frame_id"]  # every acknowledged frame survived the kill
    wait_for(lambda: httpx.get(f"{again.http}/healthz", timeout=30).json()["recovering"] == 0, "rebuilds done")
    assert ("checkpoint not used" in again.log.read_text()) == damage
    assert again.proc is not None
    return again, rss_mb(again.proc.pid)


@pytest.mark.slow
def test_a_season_restarts_from_disk_and_memory_stays_flat(season, tmp_path):
    src, live = season
    want = player_figures(analyze_folder(live).snapshot())  # the uninterrupted run of the live match
    rss = {}
    for n in (5, 40):
        data = tmp_path / f"season{n}"
        ids = fill(data, src, n)
        srv, rss[n] = restart_mid_match(data, live, damage=n == 5)
        try:
            health = httpx.get(f"{srv.http}/healthz", timeout=30).json()
            assert (health["archived"], health["in_memory"]) == (n, 1)  # finished matches only indexed
            check_finished(srv, ids)
            asyncio.run(replay(live, f"{srv.ws}/ingest/{LIVE}", None))  # the provider resumes to the end
            wait_for(lambda s=srv: archived(s, LIVE), "the live match archived after its end")
            got = httpx.get(f"{srv.http}/api/matches/{LIVE}/snapshot", timeout=30).json()
            assert got["match_status"] == "ended"
            assert player_figures(got) == want  # killed mid-match, restarted: the uninterrupted figures
            assert (data / "matches" / LIVE / "final.json").exists()
        finally:
            srv.stop()
    print(f"RSS after restart, MB: {rss}")
    # a rebuilt one-minute match costs far more than the slack; an indexed one a few kilobytes
    assert rss[40] - rss[5] < RSS_SLACK_MB, rss


def test_a_write_brings_an_archived_match_back_and_a_period_start_reopens_it(season, tmp_path):
    src, _ = season
    data = tmp_path / "data"
    fill(data, src, 1)
    srv = LiveServer(data, config_text="[archive]\ngrace_s = 3600.0\n").start()
    try:
        assert httpx.get(f"{srv.http}/healthz", timeout=30).json()["in_memory"] == 0
        before = httpx.get(f"{srv.http}/api/matches/f0000/snapshot", timeout=30).json()
        feed = httpx.get(f"{srv.http}/api/matches/f0000/feed", timeout=30).json()
        assert feed["match_status"] == "ended" and feed["period"] == "second_half"
        assert httpx.get(f"{srv.http}/healthz", timeout=30).json()["in_memory"] == 0  # reads stay on disk
        # frames after the end are refused as before (the match comes back into memory to count them)
        r = httpx.post(f"{srv.http}/api/matches/f0000/frames", content=b"{}\n", timeout=60)
        assert r.status_code == 409 and r.json()["error"]["code"] == "match_ended"
        r = httpx.post(f"{srv.http}/api/matches/f0000/events", json={"type": "period_start", "period": "second_half",
                                                                   "match_time_s": 2700.0}, timeout=60)
        assert r.status_code == 200, r.text
        health = httpx.get(f"{srv.http}/healthz", timeout=30).json()
        assert (health["in_memory"], health["archived"]) == (1, 0)
        e = entry(srv, "f0000")
        assert e is not None and e["status"] == "live" and e["archived"] is False
        now = httpx.get(f"{srv.http}/api/matches/f0000/snapshot", timeout=30).json()
        assert player_figures(now) == player_figures(before)  # rebuilt from the recording: the same figures
    finally:
        srv.stop()


@pytest.mark.slow
def test_live_frames_are_accepted_while_old_matches_are_rebuilt(season, tmp_path):
    """Forty matches that must be rebuilt from their recordings (finished before they were archived)
    and one live match: the live match is set up, fed and answers while the rebuilds still run."""
    src, live = season
    data = tmp_path / "data"
    ids = fill(data, src, 40)
    for mid in ids:
        (data / "matches" / mid / "final.json").unlink()  # as a match finished before archiving existed
    srv = LiveServer(data, config_text="[archive]\ngrace_s = 3600.0\n").start()
    try:
        assert httpx.get(f"{srv.http}/healthz", timeout=30).json()["recovering"] > 0
        sent, _ = asyncio.run(replay(live, f"{srv.ws}/ingest/{LIVE}", None, until_s=20.0))
        snap = httpx.get(f"{srv.http}/api/matches/{LIVE}/snapshot", timeout=30).json()
        health = httpx.get(f"{srv.http}/healthz", timeout=30).json()
        assert snap["health"]["frames"] == sent  # every frame sent is applied ...
        assert health["recovering"] > 0  # ... while old matches are still waiting to be rebuilt
        wait_for(lambda: httpx.get(f"{srv.http}/healthz", timeout=30).json()["recovering"] == 0, "rebuilds done")
        rows = {r["match_id"]: r for r in httpx.get(f"{srv.http}/api/matches", timeout=30).json()["matches"]}
        assert all(rows[mid]["status"] == "ended" for mid in ids)  # and they were rebuilt after
    finally:
        srv.stop()
