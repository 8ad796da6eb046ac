"""Half-time and full-time reports: live end to end, offline, and the files themselves."""
from __future__ import annotations

import asyncio
import html
import subprocess
import sys
import time
from pathlib import Path

import httpx
import numpy as np
import orjson
import pytest

from pacewire.analyze import analyze_folder
from pacewire.config import load_settings
from pacewire.engine.snapshot import build_snapshot
from pacewire.reports.builder import FILES
from pacewire.reports.offline import build_offline
from pacewire.reports.page import HEALTH_CAUTION, LIVE_CAVEAT
from pacewire.reports.table import to_csv
from pacewire.store import history
from tests.support import cdf_build as cb
from tests.support.live_server import LiveServer
from tests.support.reports import (
    IDS,
    N_AWAY,
    N_HOME,
    assert_report_csv,
    collect_reports,
    parse_strict,
    tiny_state,
    trajectory,
)
from tests.support.trajectories import FPS

HALF_S = 70  # each half: 70 s of play
# one-minute halves keep the live run short; the period timeout applies once the nominal length is played
CONFIG = """
[periods]
first_half = 1
second_half = 1
[reports]
period_timeout_s = 1.5
intensity_block_min = 1
[server]
max_message_bytes = 16777216
"""


def half(period: str, seed: int, match_id: str, t0: float, frame0: int) -> list[dict]:
    n = HALF_S * FPS
    status = (np.arange(n) // (9 * FPS)) % 4 != 3  # ball out of play a quarter of the time
    poss = (np.arange(n) // (13 * FPS)) % 2  # possession changes every 13 s
    return cb.frames(trajectory(HALF_S, seed), IDS, N_HOME, match_id=match_id, period=period, t0=t0,
                     frame0=frame0, status=status, poss=poss)


def post(srv: LiveServer, path: str, objs=None, **kw) -> httpx.Response:
    if objs is not None:
        kw["content"] = b"\n".join(cb.lines(objs))
    return httpx.post(f"{srv.http}{path}", timeout=60, **kw)


@pytest.fixture(scope="module")
def live(tmp_path_factory):
    """Two matches on one server: 'm_a' ends each half with the feed (second-half frames,
    then a period_end event); 'm_b' plays a first half and stops (the period timeout)."""
    base = tmp_path_factory.mktemp("reports")
    srv = LiveServer(base / "data", config_text=CONFIG).start()
    try:
        for mid in ("m_a", "m_b"):
            r = httpx.put(f"{srv.http}/api/matches/{mid}",
                          json={"meta": cb.meta(mid), "sheet": cb.sheet(N_HOME, N_AWAY)}, timeout=10)
            assert r.status_code == 201

        async def run():
            watch_a = asyncio.create_task(collect_reports(f"{srv.ws}/live/m_a", 2))
            watch_b = asyncio.create_task(collect_reports(f"{srv.ws}/live/m_b", 1))
            await asyncio.sleep(0.5)
            first = half("first_half", 1, "m_a", 0.0, 0)
            second = half("second_half", 2, "m_a", HALF_S + 900.0, len(first))
            # both halves in one batch: the half-time report must hold the first half only
            assert (await asyncio.to_thread(post, srv, "/api/matches/m_a/frames", first + second)).status_code == 200
            ev = {"type": "period_end", "period": "second_half", "frame_id": second[-1]["frame_id"]}
            assert (await asyncio.to_thread(post, srv, "/api/matches/m_a/events", json=ev)).status_code == 200
            b = half("first_half", 3, "m_b", 0.0, 0)
            assert (await asyncio.to_thread(post, srv, "/api/matches/m_b/frames", b)).status_code == 200
            return await watch_a, await watch_b

        msgs_a, msgs_b = asyncio.run(run())
        yield srv, base, msgs_a, msgs_b
    finally:
        srv.stop()


def test_reports_follow_each_period_end_and_are_listed(live):
    srv, _, msgs_a, msgs_b = live
    rep_a = [m for m in msgs_a if m["type"] == "report"]
    assert [m["kind"] for m in rep_a] == ["half_time", "full_time"]
    assert rep_a[0]["url"] == "/api/matches/m_a/reports/half_time/report.html"
    # the report comes after the period's end message
    kinds = [(m["type"], m.get("kind") or m.get("event")) for m in msgs_a]
    assert kinds.index(("period", "end")) < kinds.index(("report", "half_time"))
    assert [m["kind"] for m in msgs_b if m["type"] == "report"] == ["half_time"]  # by the period timeout
    listed = httpx.get(f"{srv.http}/api/matches/m_a/reports", timeout=10).json()["reports"]
    assert [e["kind"] for e in listed] == ["half_time", "full_time"]
    for e in listed:
        assert set(e) >= {"kind", "url", "csv", "json", "created_at"}
        for key in ("url", "csv", "json"):
            r = httpx.get(srv.http + e[key], timeout=10)
            assert r.status_code == 200 and r.content
        assert httpx.get(srv.http + e["url"], timeout=10).headers["content-type"].startswith("text/html")
    # a fixed allow-list of files: nothing else under the folder is served
    for bad in ("index.json", "..%2F..%2Fmeta.json", "report.pdf"):
        assert httpx.get(f"{srv.http}/api/matches/m_a/reports/full_time/{bad}", timeout=10).status_code == 404
    assert httpx.get(f"{srv.http}/api/matches/m_a/reports/extra_time/report.html", timeout=10).status_code == 404
    assert httpx.get(f"{srv.http}/api/matches/m_b/reports/full_time/report.html", timeout=10).status_code == 404


def test_report_csv_equals_its_snapshot_and_the_live_state(live):
    srv, _, _, _ = live
    for kind in ("half_time", "full_time"):
        base = f"{srv.http}/api/matches/m_a/reports/{kind}"
        snap = httpx.get(f"{base}/snapshot.json", timeout=10).json()
        assert snap["type"] == "snapshot" and snap["match_id"] == "m_a"
        report_csv = httpx.get(f"{base}/report.csv", timeout=10).text
        other = assert_report_csv(report_csv, snap)
        assert other and all(c.startswith("block_") and c.endswith("_m_per_min") for c in other), other
        # the report's CSV speaks export.csv's names: its columns start with the export's, in order
        export = httpx.get(f"{srv.http}/api/matches/m_a/export.csv", timeout=10).text.splitlines()[0].split(",")
        header = report_csv.splitlines()[0].split(",")
        assert header[:len(export)] == export
        assert len(header) < 100  # the report's figures, not every leaf of the snapshot (about 230 before)
    half_time = httpx.get(f"{srv.http}/api/matches/m_a/reports/half_time/snapshot.json", timeout=10).json()
    full_time = httpx.get(f"{srv.http}/api/matches/m_a/reports/full_time/snapshot.json", timeout=10).json()
    assert half_time["period"] == "first_half" and set(half_time["players"]["h2"]["periods"]) == {"first_half"}
    assert full_time["period"] == "second_half"
    # after the whistle the live state is final: the full-time report holds exactly its players
    now = httpx.get(f"{srv.http}/api/matches/m_a/snapshot", timeout=10).json()
    # but the baseline, which the live service reads from the history at the match's start
    assert {pid: {k: v for k, v in p.items() if k != "baseline"} for pid, p in now["players"].items()} \
        == full_time["players"]


def test_offline_report_equals_live_report(live, tmp_path):
    """``pacewire report`` over the live recordings: the same CSV, players and team figures."""
    srv, _, _, _ = live
    for mid, kinds in (("m_a", ("half_time", "full_time")), ("m_b", ("half_time",))):
        out = tmp_path / mid
        if mid == "m_a":  # the command, with its progress bar
            run = subprocess.run([sys.executable, "-m", "pacewire", "report", str(srv.data / "matches" / mid),
                                  "--out", str(out), "--config", str(srv.config)], capture_output=True, text=True,
                                 timeout=120)
            assert run.returncode == 0, run.stderr
            assert "100%" in run.stderr and "[####" in run.stderr
        else:
            build_offline(srv.data / "matches" / mid, out, load_settings(srv.config), progress=False)
        assert sorted(p.name for p in out.iterdir()) == sorted(kinds)
        for kind in kinds:
            live_csv = httpx.get(f"{srv.http}/api/matches/{mid}/reports/{kind}/report.csv", timeout=10).text
            assert (out / kind / "report.csv").read_text() == live_csv, (mid, kind)
            live_snap = httpx.get(f"{srv.http}/api/matches/{mid}/reports/{kind}/snapshot.json", timeout=10).json()
            off_snap = orjson.loads((out / kind / "snapshot.json").read_bytes())
            assert off_snap["players"] == live_snap["players"]
            for tid, team in off_snap["teams"].items():
                assert team["outfield"] == live_snap["teams"][tid]["outfield"]


def test_live_full_time_is_stored_as_live_history(live):
    srv, _, _, _ = live
    stored = {m["match_key"]: m for m in history.matches(srv.data / "history.sqlite")}
    assert stored["m_a"]["source"] == "live" and stored["m_a"]["played"] == len(IDS)
    assert "m_b" not in stored  # no full time yet
    assert history.figures(srv.data / "history.sqlite", "m_a", "h2")["block_0_1"]["distance_m"] > 0


def test_html_report_is_valid_self_contained_and_names_every_player(live):
    srv, _, _, _ = live
    for kind in ("half_time", "full_time"):
        text = httpx.get(f"{srv.http}/api/matches/m_a/reports/{kind}/report.html", timeout=10).text
        snap = httpx.get(f"{srv.http}/api/matches/m_a/reports/{kind}/snapshot.json", timeout=10).json()
        doc = parse_strict(text)
        for pid, p in snap["players"].items():
            assert html.escape(p["name"]) in text, pid
        assert html.escape(HEALTH_CAUTION) in text and html.escape(LIVE_CAVEAT) in text
        svgs = doc.findall(".//{http://www.w3.org/2000/svg}svg")
        assert len(svgs) >= 5  # team intensity, per-team heat maps, bars, peak timelines, ball context
        # self-contained: no scripts, no external stylesheets or images, nothing fetched
        assert not doc.findall(".//script") and not doc.findall(".//link") and not doc.findall(".//img")
        assert "http://" not in text.replace('xmlns="http://www.w3.org/2000/svg"', "").replace(
            'xmlns:xlink="http://www.w3.org/1999/xlink"', "")
        assert "@page{size:A4" in text and "@media print" in text
        for section in ("teams", "intensity", "players", "peaks", "possession", "feed"):
            assert doc.find(f".//section[@id='{section}']") is not None, section


def test_report_table_holds_every_contract_figure():
    """The CSV's columns: every player figure of the snapshot message (docs/schema), its windows, periods and zones."""
    state = tiny_state()
    snap = build_snapshot(state)
    header = to_csv(snap).splitlines()[0].split(",")
    contract = ["distance_m", "speed_ms", "max_speed_ms", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels",
                "decels", "metabolic_power_wkg", "energy_jkg", "high_power_m", "minutes", "m_per_min", "coverage"]
    for col in contract:
        assert col in header
    for w in ("last_1min", "last_5min", "peak_1min"):
        assert f"windows.{w}.distance_m" in header
    assert "windows.peak_1min.start_s" in header and "periods.first_half.hsr_m" in header
    assert any(c.startswith("zones.") for c in header)


def test_offline_cli_refuses_a_missing_folder(tmp_path):
    run = subprocess.run([sys.executable, "-m", "pacewire", "report", str(tmp_path / "nothing"), "--out",
                          str(tmp_path / "out")], capture_output=True, text=True, timeout=60)
    assert run.returncode == 2 and "not a folder" in run.stderr
    assert not any((tmp_path / "out" / "full_time" / name).exists() for name in FILES)


def test_synthetic_match_report(tmp_path):
    """A full squad from the synthetic match generator: every player of the sheet named, valid HTML."""
    from pacewire.engine.blocks import block_series
    from pacewire.replay.synth import write_match
    from pacewire.reports.builder import ReportInput, build_report

    folder = write_match(tmp_path / "synth", minutes=2, fps=25, seed=11, faults=False)
    state = analyze_folder(folder).state
    snap = build_snapshot(state)
    build_report(ReportInput("full_time", snap, block_series(state, 1, "split"), "replay", time.time()), tmp_path / "r")
    text = (tmp_path / "r" / "full_time" / "report.html").read_text()
    parse_strict(text)
    sheet = orjson.loads((folder / "match.json").read_bytes())
    for side in ("home", "away"):
        for p in sheet["teams"][side]["players"]:
            name = snap["players"][p["id"]]["name"]
            assert html.escape(name) in text, p["id"]
    assert_report_csv((tmp_path / "r" / "full_time" / "report.csv").read_text(), snap)
    assert Path(tmp_path / "r" / "full_time" / "index.json").exists()


def test_a_player_with_many_tracking_artefacts_is_marked_as_low_coverage(tmp_path):
    """A track that re-locks 6 m off every 1.5 s and glides back over 0.6 s (the shape of the synthetic
    feed's re-acquisition slides): its samples are taken out, so the player's coverage falls below the
    report's low-coverage mark like a player not seen, and the feed section gives the seconds removed."""
    from pacewire.analyze import new_match
    from pacewire.engine.blocks import block_series
    from pacewire.reports.builder import ReportInput, build_report

    xy = trajectory(90, 5)
    glide = 15  # frames: 0.6 s at 25 fps
    u = np.arange(glide) / glide
    for start in range(2 * FPS, len(xy) - glide, int(1.5 * FPS)):
        xy[start:start + glide, 2] += np.array([6.0, 0.0]) * ((1.0 - u) ** 2)[:, None]
    settings = load_settings()
    state, dec = new_match(cb.meta("m_art"), cb.sheet(N_HOME, N_AWAY), settings)
    state.ingest(dec.decode_lines(cb.lines(cb.frames(xy, IDS, N_HOME, match_id="m_art"))))
    state.finish()
    snap = build_snapshot(state)
    health, players = snap["health"], snap["players"]
    assert health["artefacts"][IDS[2]]["samples"] > 0.1 * len(xy)  # a slide's first frames at least
    assert health["artefact_samples"] == health["artefacts"][IDS[2]]["samples"]  # nobody else's
    build_report(ReportInput("full_time", snap, block_series(state, 1, "split"), "replay", time.time()), tmp_path,
                 settings.reports.low_coverage)
    doc = parse_strict((tmp_path / "full_time" / "report.html").read_text())
    low = {}
    for row in doc.findall(".//section[@id='players']//tbody/tr"):
        cells = row.findall("td")
        low[cells[1].text.removesuffix(" (GK)")] = cells[-1].get("class") == "low"
    names = {pid: p.get("name") or pid for pid, p in players.items() if p["minutes"]}
    assert low[names[IDS[2]]] and players[IDS[2]]["coverage"] < settings.reports.low_coverage
    assert not any(low[names[pid]] for pid in names if pid != IDS[2])  # everyone else seen throughout
    feed = {r.findall("td")[0].text: r.findall("td")[1].text
            for r in doc.findall(".//section[@id='feed']//tbody/tr")}
    assert float(feed["tracking artefacts removed, s"]) == pytest.approx(health["artefact_s"], abs=0.05)
    assert health["artefact_s"] == pytest.approx(health["artefact_samples"] / FPS, abs=0.05)
