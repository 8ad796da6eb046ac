"""Wearable feeds in the reports and on the bench page: one team tracked, heart rate (docs/wearables.md).

A fictional club tracks only its own six players (GNSS-style units at 10 Hz, no
ball, a heart-rate strap each at 1 Hz). The players differ on purpose:

* h4 has no heart-rate profile: every figure that needs HRmax, resting HR or
  sex is left out, and the views say why;
* h5's strap drops out six seconds in every ten: low heart-rate coverage,
  which the views must show as coverage, never as a low heart rate;
* h6's strap goes silent for the last 12 s: no current bpm ("no signal");
  h6 also lacks resting HR and sex, so Banister's TRIMP is left out.

Everything runs for real: the engine on built frames, a real server fed over
HTTP, the reports it writes, ``pacewire report`` over its recording, and the
page in Debian's Chromium.
"""
from __future__ import annotations

import asyncio
import html
import math
import time
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import orjson
import pytest

from pacewire.config import load_settings
from pacewire.engine.blocks import block_series
from pacewire.engine.snapshot import build_snapshot
from pacewire.reports.builder import ReportInput, build_report
from pacewire.reports.offline import build_offline
from pacewire.reports.page import HEALTH_CAUTION, HR_CAVEAT, OMITTED_MARK
from pacewire.reports.table import flatten, to_csv
from tests.support import bench_page as pc, cdf_build as cb
from tests.support.live_server import LiveServer
from tests.support.paths import ARTIFACTS
from tests.support.reports import assert_report_csv, collect_reports, parse_strict, tiny_state
from tests.support.trajectories import drawn_rates, sway

FPS = 10
N = 6
IDS = cb.player_ids(N, 0)
HOME, AWAY = cb.HOME, cb.AWAY
FIRST_S, SECOND_S, BREAK_S = 150, 90, 900.0
NO_PROFILE, GAPPY, SILENT = "h4", "h5", "h6"
SILENT_LAST_S = 12  # h6's strap sends nothing in the match's last 12 s (stale after 5 s: config heart_rate.stale_s)
# invented names (no real person intended)
NAMES = ["Arvo Tennick", "Bryn Calloway", "Cato Merriden", "Dario Fenwick", "Eske Holloway", "Fitz Ambrin"]
PROFILES: dict[str, dict[str, Any]] = {
    "h1": {"hr_max_bpm": 188, "hr_rest_bpm": 52, "sex": "male"},
    "h2": {"hr_max_bpm": 195, "hr_rest_bpm": 48, "sex": "female"},
    "h3": {"hr_max_bpm": 192, "hr_rest_bpm": 50, "sex": "male"},
    "h5": {"hr_max_bpm": 200, "hr_rest_bpm": 55, "sex": "male"},
    "h6": {"hr_max_bpm": 190},
}


def sheet() -> dict[str, Any]:
    """Six home players with invented names and heart-rate profiles; the away team has none (not tracked)."""
    out = cb.sheet(N, 0, gk=("h1",))
    for i, p in enumerate(out["teams"]["home"]["players"]):
        p["first_name"], p["last_name"] = NAMES[i].split(" ")
        p.update(PROFILES.get(p["id"], {}))
    out["teams"]["home"]["name"], out["teams"]["away"]["name"] = "Harbour Town", "Quarry Lane"
    return out


def trajectory(seconds: float, seed: int) -> np.ndarray:
    """Smooth fictional movement (m), inside the pitch: 2-6 m/s with some faster stretches."""
    amplitude = np.array([(6.0, 4.0)] + [(30.0, 20.0)] * (N - 1))  # h1, the goalkeeper, stays near his goal
    centre = np.array([(-45.0, 0.0)] + [(0.0, 0.0)] * (N - 1))
    return sway(seconds, N, amplitude, drawn_rates(N, 0.12, 0.3, seed), centre=centre, fps=FPS)


def frames(match_id: str, seed: int = 3) -> list[dict[str, Any]]:
    """Both halves (a 15-minute break between), one team, no ball (a wearables feed)."""
    n1 = FIRST_S * FPS
    xy = trajectory(FIRST_S + SECOND_S, seed)
    out = (cb.frames(xy[:n1], IDS, N, FPS, match_id, "first_half")
           + cb.frames(xy[n1:], IDS, N, FPS, match_id, "second_half", t0=FIRST_S + BREAK_S, frame0=n1))
    for f in out:
        del f["ball"]
    return out


def hr_samples(seconds: float, t0: float = 0.0, last: bool = True) -> list[dict[str, Any]]:
    """1 Hz heart rate per player: a slow swing between about 125 and 185 bpm (under 4 bpm/s: no
    hr_jump). h5's strap sends in 4 s of every 10; h6's stops 12 s before the match's end (``last``)."""
    out = []
    for k in range(int(seconds)):
        t = t0 + k
        for j, pid in enumerate(IDS):
            if pid == GAPPY and k % 10 >= 4:
                continue
            if pid == SILENT and last and k >= seconds - SILENT_LAST_S:
                continue
            bpm = 155 + 30 * math.sin(t / 40 + j) - (25 if pid == "h1" else 0)
            out.append({"player_id": pid, "timestamp": cb.stamp(t), "bpm": round(bpm, 1)})
    return out


def match_hr() -> list[dict[str, Any]]:
    return hr_samples(FIRST_S, last=False) + hr_samples(SECOND_S, t0=FIRST_S + BREAK_S)


# -- reports from the engine directly -------------------------------------------------------------
def engine_state(match_id: str, with_hr: bool):
    from pacewire.engine.match import MatchState
    from pacewire.params import match_params
    from pacewire.wire.cdf import FrameDecoder, parse_setup
    from pacewire.wire.heart import HrDecoder

    settings = load_settings()
    roster = parse_setup(cb.meta(match_id, fps=FPS), sheet())
    state = MatchState(roster, match_params(settings, roster))
    if with_hr:
        res = HrDecoder(roster, state.params.heart).decode_lines(cb.lines(match_hr()))
        assert not res.errors, res.errors[:3]
        state.ingest_heart(res)
    dec = FrameDecoder(roster, settings.decode.outside_margin_m, settings.decode.recent_ids)
    res = dec.decode_lines(cb.lines(frames(match_id)))
    assert not res.errors, res.errors[:3]
    state.ingest(res)
    state.finish()
    return state


def write_report(state, folder: Path) -> tuple[str, dict[str, Any], str]:
    snap = build_snapshot(state)
    build_report(ReportInput("full_time", snap, block_series(state, 1, "split"), "replay", time.time()), folder)
    return (folder / "full_time" / "report.html").read_text(), snap, (folder / "full_time" / "report.csv").read_text()


def section(doc, name: str):
    el = doc.find(f".//section[@id='{name}']")
    assert el is not None, name
    return el


def text_of(el) -> str:
    return "".join(el.itertext())


def test_one_team_report_says_so_and_has_no_opponent_column(tmp_path):
    state = engine_state("m_one", with_hr=False)
    text, snap, csv_text = write_report(state, tmp_path)
    assert snap["teams"][AWAY] == {"name": "Quarry Lane", "side": "away", "tracked": False}  # the contract's shape
    doc = parse_strict(text)
    assert "one team tracked" in text_of(doc.find(".//header"))
    teams = section(doc, "teams")
    heads = [text_of(th) for th in teams.findall(".//thead//th")]
    assert heads == ["outfield players", "Harbour Town"]  # no empty opponent column
    assert "Quarry Lane" not in text_of(section(doc, "players")) + text_of(section(doc, "peaks"))
    assert doc.find(".//section[@id='heart']") is None and doc.find(".//section[@id='possession']") is None
    svgs = [s.get("aria-label") for s in doc.findall(".//{http://www.w3.org/2000/svg}svg")]
    assert not any(AWAY in (s or "") or "Quarry" in (s or "") for s in svgs), svgs
    for pid in IDS:
        assert html.escape(snap["players"][pid]["name"]) in text
    assert html.escape(HEALTH_CAUTION) in text
    assert not any(c.startswith("hr_") for c in csv_text.splitlines()[0].split(","))  # no HR, no HR columns
    assert_report_csv(csv_text, snap)
    # a two-team optical match: no such note (tests/reports/test_match_reports.py covers the rest)
    two, _, _ = write_report(tiny_state(), tmp_path / "two")
    assert "one team tracked" not in two and 'id="heart"' not in two


def heart_rows(doc) -> dict[str, list]:
    """Heart-rate table rows by player name: the <td> elements."""
    rows = {}
    for tr in section(doc, "heart").findall(".//tbody/tr"):
        tds = tr.findall("td")
        rows[text_of(tds[1])] = tds
    return rows


def test_heart_rate_report_from_the_engine(tmp_path):
    state = engine_state("m_hr", with_hr=True)
    text, snap, csv_text = write_report(state, tmp_path)
    doc = parse_strict(text)
    players = snap["players"]
    rows = heart_rows(doc)
    assert set(rows) == {players[pid]["name"] for pid in IDS if players[pid]["minutes"]}
    zones = list(players["h2"]["hr_zones"])
    assert zones == ["50-60%", "60-70%", "70-80%", "80-90%", "90-100%"]  # docs/wearables.md
    head = [text_of(th) for th in section(doc, "heart").find(".//thead").findall(".//th")]
    assert head[4:9] == zones and "TRIMP Edwards" in head and "TRIMP Banister" in head
    for pid in IDS:
        p, tds = players[pid], rows[players[pid]["name"]]
        assert text_of(tds[2]) == f"{p['hr_mean_bpm']:.0f}" and text_of(tds[3]) == f"{p['hr_peak_bpm']:.0f}"
        omitted = p["hr_omitted"]
        for k, z in enumerate(zones):
            cell = tds[4 + k]
            if "hr_zones" in omitted:
                assert text_of(cell) == OMITTED_MARK and cell.find("span").get("title") == omitted["hr_zones"]
            else:
                s = int(round(p["hr_zones"][z]))
                assert text_of(cell) == f"{s // 60}:{s % 60:02d}", (pid, z)
        for k, fig in ((9, "trimp_edwards"), (10, "trimp_banister")):
            if fig in omitted:
                assert text_of(tds[k]) == OMITTED_MARK and tds[k].find("span").get("title") == omitted[fig]
            else:
                assert text_of(tds[k]) == f"{p[fig]:.1f}", (pid, fig)
        labels = {"hr_pct_max": "% HRmax", "hr_zones": "zones", "trimp_edwards": "TRIMP Edwards",
                  "trimp_banister": "TRIMP Banister"}
        # which and why, under the table: each reason once, after the figures it holds back
        note = [text_of(li) for li in section(doc, "heart").findall(".//ul[@class='why']/li")
                if p["name"] in text_of(li)]
        assert len(note) == (1 if omitted else 0), pid
        for reason in set(omitted.values()):
            assert note[0].count(reason) == 1, (pid, reason)
            figs = [labels[f] for f, why in omitted.items() if why == reason]
            assert f"{', '.join(figs)}: {reason}" in note[0], (pid, reason)
        # the strap with gaps is tagged as such: the mean stays a real heart rate
        assert ("gaps" in text_of(tds[11])) == (pid == GAPPY), pid
    assert players[GAPPY]["hr_coverage"] < 0.5 and players[GAPPY]["hr_mean_bpm"] > 100
    assert set(players[NO_PROFILE]["hr_omitted"]) == {"hr_pct_max", "hr_zones", "trimp_edwards", "trimp_banister"}
    assert set(players[SILENT]["hr_omitted"]) == {"trimp_banister"}
    # Edwards 1993: TRIMP = sum of minutes in each zone x its weight 1..5, from the zone times shown
    p = players["h3"]
    want = sum(w * p["hr_zones"][z] / 60 for w, z in zip((1, 2, 3, 4, 5), zones, strict=True))
    assert p["trimp_edwards"] == pytest.approx(want, abs=0.1)
    svgs = [s.get("aria-label") for s in doc.findall(".//{http://www.w3.org/2000/svg}svg")]
    assert "hr-zones-Harbour Town" in svgs
    assert html.escape(HR_CAVEAT) in text
    # CSV: every HR figure a column, equal to the snapshot
    header = csv_text.splitlines()[0].split(",")
    for col in ("hr_mean_bpm", "hr_peak_bpm", "hr_zone_80-90%_s", "trimp_edwards", "trimp_banister", "hr_coverage",
                "hr_omitted"):
        assert col in header, col
    assert_report_csv(csv_text, snap)
    feed = text_of(section(doc, "feed"))
    assert "heart-rate samples refused" in feed


def test_report_heart_rate_from_a_hand_built_snapshot():
    """The page function against the contract alone: a strap at 41 % coverage is tagged, a figure
    left out shows the em dash with its reason, and absent HR keys mean no heart-rate section."""
    from pacewire.reports.page import heart_table, page

    base = {"jersey_number": 7, "name": "Gil Hartwell", "team_id": HOME, "is_goalkeeper": False, "minutes": 12.0,
            "hr_bpm": None, "hr_pct_max": None, "hr_mean_bpm": 151.2, "hr_peak_bpm": 179.0,
            "hr_zones": {"50-60%": 30.0, "60-70%": 95.5, "70-80%": 250.0, "80-90%": 61.0, "90-100%": 0.0},
            "trimp_edwards": 12.3, "trimp_banister": None, "hr_coverage": 0.41,
            "hr_omitted": {"trimp_banister": "needs hr_rest_bpm and sex (match sheet or heart_rate.profiles_file)"}}
    doc = parse_strict("<!doctype html><title>t</title>" + heart_table([("p7", base)], 0.9))
    tds = doc.findall(".//tbody/tr/td")
    assert [text_of(td) for td in tds[4:9]] == ["0:30", "1:36", "4:10", "1:01", "0:00"]  # m:ss of the seconds
    assert text_of(tds[10]) == OMITTED_MARK and "hr_rest_bpm and sex" in tds[10].find("span").get("title")
    assert "gaps" in text_of(tds[11]) and "41%" in text_of(tds[11])
    ok = dict(base, hr_coverage=0.97)
    tds = parse_strict("<!doctype html><title>t</title>" + heart_table([("p7", ok)], 0.9)).findall(".//tbody/tr/td")
    assert text_of(tds[11]) == "97%"
    snap = {"match_id": "m", "match_time_s": 720.0, "period": "first_half", "health": {"state": "ok"},
            "teams": {HOME: {"name": "Harbour Town", "side": "home", "tracked": True,
                             "outfield": dict.fromkeys(("players", "distance_m", "hsr_m", "sprint_m", "hsr_efforts",
                                                        "sprints", "accels", "decels", "high_power_m"), 0)
                             | {"per_player": {"distance_m": 0, "m_per_min": 0, "hsr_m": 0, "sprint_m": 0}}},
                      AWAY: {"name": "Quarry Lane", "side": "away", "tracked": False}},
            "players": {"p7": dict(base, distance_m=1500.0, m_per_min=125.0, hsr_m=90.0, sprint_m=10.0, hsr_efforts=4,
                                   sprints=1, accels=3, decels=2, max_speed_ms=7.5, high_power_m=120.0,
                                   metabolic_power_wkg=9.1, coverage=0.99)}}
    text = page("half_time", snap, {}, {}, "live", 0.0, 0.9)
    doc = parse_strict(text)
    assert doc.find(".//section[@id='heart']") is not None and "one team tracked" in text
    plain = {k: v for k, v in snap["players"]["p7"].items() if not k.startswith(("hr_", "trimp_"))}
    text = page("half_time", dict(snap, players={"p7": plain}), {}, {}, "live", 0.0, 0.9)
    assert 'id="heart"' not in text and "Heart rate." not in text


# -- a live server: reports, the offline report, the page ------------------------------------------
@pytest.fixture(scope="module")
def live(tmp_path_factory):
    """'m_w': a one-team match with heart rate, both halves and the final whistle (two reports);
    'm_p': the same club's first 100 s, still in play, for the page."""
    base = tmp_path_factory.mktemp("wearables")
    srv = LiveServer(base / "data", config_text="[server]\nmax_message_bytes = 16777216\n").start()
    try:
        for mid in ("m_w", "m_p"):
            r = httpx.put(f"{srv.http}/api/matches/{mid}", json={"meta": cb.meta(mid, fps=FPS), "sheet": sheet()},
                          timeout=10)
            assert r.status_code == 201, r.text

        def post(path: str, objs: list[dict] | None = None, **kw) -> httpx.Response:
            if objs is not None:
                kw["content"] = b"\n".join(cb.lines(objs))
            r = httpx.post(f"{srv.http}{path}", timeout=60, **kw)
            assert r.status_code == 200, r.text
            return r

        async def run():
            watch = asyncio.create_task(collect_reports(f"{srv.ws}/live/m_w", 2))
            await asyncio.sleep(0.5)
            # heart rate first: it counts as tracking reaches its time
            got = (await asyncio.to_thread(post, "/api/matches/m_w/hr", match_hr())).json()
            assert got["accepted"] == len(match_hr()) and got["rejected"] == 0, got
            fr = frames("m_w")
            await asyncio.to_thread(post, "/api/matches/m_w/frames", fr)
            ev = {"type": "period_end", "period": "second_half", "frame_id": fr[-1]["frame_id"]}
            await asyncio.to_thread(post, "/api/matches/m_w/events", json=ev)
            return await watch

        msgs = asyncio.run(run())
        n = 100 * FPS
        post("/api/matches/m_p/hr", hr_samples(100))
        post("/api/matches/m_p/frames", frames("m_p")[:n])
        yield srv, msgs
    finally:
        srv.stop()


def test_live_reports_of_a_one_team_heart_rate_match(live):
    srv, msgs = live
    assert [m["kind"] for m in msgs if m["type"] == "report"] == ["half_time", "full_time"]
    for kind in ("half_time", "full_time"):
        base = f"{srv.http}/api/matches/m_w/reports/{kind}"
        snap = httpx.get(f"{base}/snapshot.json", timeout=10).json()
        assert snap["teams"][AWAY]["tracked"] is False and "outfield" not in snap["teams"][AWAY]
        text = httpx.get(f"{base}/report.html", timeout=10).text
        doc = parse_strict(text)
        assert "one team tracked" in text_of(doc.find(".//header"))
        heads = [text_of(th) for th in section(doc, "teams").findall(".//thead//th")]
        assert heads == ["outfield players", "Harbour Town"]
        rows = heart_rows(doc)
        assert "gaps" in text_of(rows[snap["players"][GAPPY]["name"]][11])
        csv_text = httpx.get(f"{base}/report.csv", timeout=10).text
        assert "hr_mean_bpm" in csv_text.splitlines()[0].split(",")
        assert_report_csv(csv_text, snap)
    half = httpx.get(f"{srv.http}/api/matches/m_w/reports/half_time/snapshot.json", timeout=10).json()
    full = httpx.get(f"{srv.http}/api/matches/m_w/reports/full_time/snapshot.json", timeout=10).json()
    # the half-time report holds the first half's heart rate only, though the whole match had arrived
    for pid in IDS:
        assert set(half["players"][pid]["periods"]) == {"first_half"}
        first = full["players"][pid]["periods"]["first_half"]
        assert half["players"][pid]["hr_mean_bpm"] == first["hr_mean_bpm"], pid
        assert half["players"][pid]["trimp_edwards"] == first["trimp_edwards"], pid


def test_offline_report_equals_live_with_heart_rate(live, tmp_path):
    """``pacewire report`` over the recording (tracking.jsonl and hr.jsonl): the same CSV, byte for byte."""
    srv, _ = live
    folder = srv.data / "matches" / "m_w"
    assert (folder / "hr.jsonl").exists() or (folder / "hr.jsonl.gz").exists()
    build_offline(folder, tmp_path, load_settings(), progress=False)
    for kind in ("half_time", "full_time"):
        live_csv = httpx.get(f"{srv.http}/api/matches/m_w/reports/{kind}/report.csv", timeout=10).text
        assert (tmp_path / kind / "report.csv").read_text() == live_csv, kind
        assert "trimp_edwards" in live_csv.splitlines()[0]
        off = orjson.loads((tmp_path / kind / "snapshot.json").read_bytes())
        on = httpx.get(f"{srv.http}/api/matches/m_w/reports/{kind}/snapshot.json", timeout=10).json()
        assert off["players"] == on["players"]
        for tid, team in off["teams"].items():  # the live service adds the score from match events
            assert team == {k: v for k, v in on["teams"][tid].items() if k != "score"}


# -- the bench page in Chromium --------------------------------------------------------------------
READ_TABLE = """() => Object.fromEntries([...document.querySelectorAll('#player-body tr[data-player-id]')].map(tr =>
  [tr.dataset.playerId, Object.fromEntries([...tr.querySelectorAll('td[data-col]')].map(td => [td.dataset.col,
    {value: td.dataset.value, text: td.innerText.trim(), cls: td.className, title: td.title || "",
     omitted: td.dataset.omitted || null}]))]))"""
HR_COLS = ("hr_bpm", "hr_pct_max", "hr_mean_bpm", "trimp_edwards", "hr_coverage")


@pytest.fixture(scope="module")
def browser_page(live):
    pc.require_chromium()
    from playwright.sync_api import sync_playwright

    srv, _ = live
    ARTIFACTS.mkdir(exist_ok=True)
    errors: list[str] = []
    pw = sync_playwright().start()
    browser = None
    try:
        browser = pc.launch(pw)
        page = browser.new_context(viewport={"width": 1600, "height": 1000}, color_scheme="light").new_page()
        page.set_default_timeout(10_000)
        page.on("pageerror", lambda exc: errors.append(str(exc)))
        page.goto(f"{srv.http}/?match=m_p")
        page.click("label.more-switch")  # these tests read every heart-rate column, not only the essentials
        yield page
        assert not errors, f"JavaScript errors on the page: {errors}"
    finally:
        if browser is not None:
            browser.close()
        pw.stop()


def wait_equal(page, srv, window: str, pick, match_id: str = "m_p") -> tuple[dict, dict]:
    """Until the page's HR cells equal the REST snapshot (``pick``: player -> source of the window)."""
    deadline = time.monotonic() + 15
    while True:
        rest = httpx.get(f"{srv.http}/api/matches/{match_id}/snapshot", timeout=10).json()
        got = page.evaluate(READ_TABLE)
        bad = []
        if set(got) != set(rest["players"]):
            bad.append(f"rows {sorted(got)}")
        else:
            for pid, p in rest["players"].items():
                for col in HR_COLS:
                    src = p if col in ("hr_bpm", "hr_pct_max") or (col == "hr_coverage" and window != "period") \
                        else pick(p)
                    want = None if src is None else src.get(col)
                    cell = got[pid].get(col)
                    if cell is None:
                        bad.append(f"{pid}.{col} missing")
                        continue
                    shown = None if cell["value"] in ("", None) else float(cell["value"])
                    if (want is None) != (shown is None) or (want is not None and not math.isclose(shown, want)):
                        bad.append(f"{pid}.{col}: page {shown} != {want}")
        if not bad:
            return rest, got
        if time.monotonic() > deadline:
            raise AssertionError(f"{window}: " + "; ".join(bad[:8]))
        time.sleep(0.25)


def test_page_shows_one_team_tracked_and_heart_rate(live, browser_page):
    srv, _ = live
    page = browser_page
    page.wait_for_selector("#player-body tr[data-player-id]")
    page.wait_for_selector("#tracking:not([hidden])")
    assert "one team tracked" in page.inner_text("#tracking").lower()
    # no opponent comparison: one team card, a note on the other team, no team filter or column
    assert page.locator("#teams [data-team-id]").count() == 1
    assert page.get_attribute("#teams [data-team-id]", "data-team-id") == HOME
    note = page.inner_text("#one-team")
    assert "one team tracked" in note.lower() and "Quarry Lane" in note and "not tracked" in note
    assert page.locator("#team-filter").is_hidden() and page.locator("th[data-col='team']").is_hidden()
    for col in HR_COLS:
        assert page.locator(f"th[data-col='{col}']").is_visible(), col
    # every heading sits over its own column (the hidden team column leaves no gap or shift)
    shifted = page.evaluate("""() => { const tr = document.querySelector('#player-body tr[data-player-id]');
      return [...document.querySelectorAll('#player-head th')].filter(th => !th.hidden).map(th => {
        const td = tr.querySelector(`td[data-col="${th.dataset.col}"]`);
        return [th.dataset.col, Math.round(th.getBoundingClientRect().left),
                td && !td.hidden ? Math.round(td.getBoundingClientRect().left) : null];
      }).filter(([, a, b]) => a !== b); }""")
    assert not shifted, shifted
    assert page.locator("#hr-legend").is_visible() and page.locator("#feed-hr").is_visible()
    assert "qualified medical and performance staff" in page.inner_text("#caution")

    rest, got = wait_equal(page, srv, "cumulative", lambda p: p)
    players = rest["players"]
    # left out for lack of a profile: an em dash, the reason on hover
    for col in ("hr_pct_max", "trimp_edwards"):
        cell = got[NO_PROFILE][col]
        assert cell["text"].startswith("\u2014") and cell["omitted"] == players[NO_PROFILE]["hr_omitted"][col]
        assert players[NO_PROFILE]["hr_omitted"][col] in cell["title"]
    assert got[NO_PROFILE]["hr_bpm"]["text"] == f"{players[NO_PROFILE]['hr_bpm']:.0f}"  # bpm needs no profile
    # the strap with gaps: low coverage, tagged; its mean is a normal heart rate, marked incomplete
    assert players[GAPPY]["hr_coverage"] < 0.8 < min(players[p]["hr_coverage"] for p in IDS if p != GAPPY)
    rows = {pid: page.get_attribute(f"tr[data-player-id='{pid}']", "data-hr-gaps") for pid in IDS}
    assert rows == {pid: "true" if pid == GAPPY else "false" for pid in IDS}
    cov = got[GAPPY]["hr_coverage"]
    assert "gaps" in cov["cls"] and "gaps" in cov["text"].lower() and "not a low heart rate" in cov["title"]
    assert "strap" in got[GAPPY]["hr_mean_bpm"]["cls"] and float(got[GAPPY]["hr_mean_bpm"]["value"]) > 100
    # a strap gone quiet: no signal, not a number
    assert players[SILENT]["hr_bpm"] is None and players[SILENT]["on_pitch"]
    assert got[SILENT]["hr_bpm"]["text"].lower() == "no signal" and "nosignal" in got[SILENT]["hr_bpm"]["cls"]
    assert got["h2"]["hr_pct_max"]["text"] == f"{math.floor(players['h2']['hr_pct_max'] + 0.5)}"
    # the essentials, heart rate on, at 1280 px: % HRmax among them, and no sideways scroll
    page.click("label.more-switch")
    page.wait_for_selector("#player-table[data-more='false']")
    page.set_viewport_size({"width": 1280, "height": 720})
    assert page.locator("th[data-col='hr_pct_max']").is_visible() and page.locator("th[data-col='hr_bpm']").is_hidden()
    widths = page.evaluate("""() => { const w = document.querySelector('.table-wrap'), d = document.documentElement;
      return [d.scrollWidth, d.clientWidth, w.scrollWidth, w.clientWidth]; }""")
    assert widths[0] <= widths[1] and widths[2] <= widths[3], f"sideways scroll at 1280 px: {widths}"
    page.screenshot(path=str(ARTIFACTS / "bench-wearables-1280x720.png"))
    page.click("label.more-switch")
    page.set_viewport_size({"width": 1600, "height": page.evaluate("document.documentElement.scrollHeight")})
    page.screenshot(path=str(ARTIFACTS / "bench-wearables-light.png"))
    page.set_viewport_size({"width": 1600, "height": 1000})


def test_page_heart_rate_in_windows_and_period(live, browser_page):
    srv, _ = live
    page = browser_page
    page.click("label[data-window='last_5min']")
    page.wait_for_selector("#player-table[data-window='last_5min']")
    rest, _ = wait_equal(page, srv, "last_5min", lambda p: (p.get("windows") or {}).get("last_5min"))
    assert any(p["windows"]["last_5min"]["hr_mean_bpm"] for p in rest["players"].values())
    page.click("label[data-window='period']")
    page.wait_for_selector("#player-table[data-window='period']")
    wait_equal(page, srv, "period", lambda p: (p.get("periods") or {}).get(rest["period"]))
    page.click("label[data-window='cumulative']")
    # sorting by an HR column: high first, left-out and empty last
    page.click("th[data-col='trimp_edwards'] button")
    order = page.evaluate("() => [...document.querySelectorAll('#player-body tr[data-player-id]')]"
                          ".map(t => t.dataset.playerId)")
    vals = [rest["players"][pid]["trimp_edwards"] for pid in order]
    present = [v for v in vals if v is not None]
    assert present == sorted(present, reverse=True) and vals[len(present):] == [None] * (len(vals) - len(present))
    assert order[-1] == NO_PROFILE
    page.click("th[data-col='trimp_edwards'] button")
    page.click("th[data-col='trimp_edwards'] button")  # third press: back to shirt order


def test_page_heart_rate_columns_arrive_with_the_first_samples(live, browser_page):
    """A one-team match without heart rate: no HR columns. The first samples arrive while the page
    watches: the columns, the legend and the feed's heart-rate line appear through the live deltas."""
    srv, _ = live
    page = browser_page
    r = httpx.put(f"{srv.http}/api/matches/m_q", json={"meta": cb.meta("m_q", fps=FPS), "sheet": sheet()}, timeout=10)
    assert r.status_code == 201, r.text
    fr = frames("m_q", seed=5)

    def post(path: str, objs: list[dict]) -> None:
        r = httpx.post(f"{srv.http}/api/matches/m_q/{path}", content=b"\n".join(cb.lines(objs)), timeout=60)
        assert r.status_code == 200, r.text

    post("frames", fr[:60 * FPS])
    page.wait_for_selector("#match-picker option[value='m_q']", state="attached", timeout=15_000)
    page.select_option("#match-picker", "m_q")
    page.wait_for_selector("#player-body tr[data-player-id='h2']")
    page.wait_for_selector("#tracking:not([hidden])")
    assert page.locator("th[data-col='hr_bpm']").count() == 0
    assert page.locator("#hr-legend").is_hidden() and page.locator("#feed-hr").is_hidden()
    post("hr", hr_samples(70))
    post("frames", fr[60 * FPS:70 * FPS])
    page.wait_for_selector("th[data-col='hr_bpm']", timeout=10_000)
    rest, got = wait_equal(page, srv, "cumulative", lambda p: p, match_id="m_q")
    assert rest["players"]["h2"]["hr_mean_bpm"] is not None and got["h2"]["hr_mean_bpm"]["value"]
    assert page.locator("#hr-legend").is_visible() and page.locator("#feed-hr").is_visible()
    # the heading and the cells stay in step after the head was rebuilt
    heading = page.evaluate("() => [...document.querySelectorAll('#player-head th')].map(th => th.dataset.col).join()")
    cells = page.evaluate("() => [...document.querySelector('#player-body tr').children]"
                          ".map(td => td.dataset.col).join()")
    assert heading == cells


def test_flatten_keeps_hr_zone_names():
    """CSV column names hold the zone names as the snapshot spells them (hr_zones.50-60%)."""
    flat = flatten({"hr_zones": {"50-60%": 1.0}, "hr_omitted": {}})
    assert flat == {"hr_zones.50-60%": 1.0}
    snap = {"teams": {}, "players": {"p": {"team_id": "t", "jersey_number": 1, "hr_zones": None}}}
    assert to_csv(snap).splitlines()[0] == "player_id,team_id,jersey_number,hr_zones"
