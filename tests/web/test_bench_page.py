"""The bench page in a real Chromium, against a real server fed over WS ingest.

One server and one browser page for the module (starting them is the slow
part); each test brings the feed to the state it needs (streaming, stopped and
settled, resumed), so the tests read as one short match day: the page
connects, the banner follows the feed, its figures equal the REST snapshot,
sorting and the window switch work, the page recovers from a cut socket and
from a server restart, alerts and report links show up as they arrive (the
last fictional match ends there), and the committed demo clip can be picked
as a second match. Screenshots (light and dark) go to test-artifacts/.
The main feed is built in tests/support/bench_page.py (fictional, 10 Hz, one
badly tracked player); the demo clip is demo_feeds/clip/.
"""
from __future__ import annotations

import gzip
import math
import threading
import time
from collections.abc import Callable
from typing import Any

import httpx
import orjson
import pytest
from websockets.sync.client import connect as ws_connect

from tests.support import bench_page as pc
from tests.support.live_server import LiveServer
from tests.support.paths import ARTIFACTS, DEMO_CLIP

HOME, AWAY = "t_harbour", "t_quarry"
WINDOW_FIELDS = ("distance_m", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels", "decels", "energy_jkg",
                 "high_power_m", "m_per_min", "metabolic_power_wkg")
FIGURE_FIELDS = WINDOW_FIELDS + ("max_speed_ms", "minutes", "coverage")
PLAYER_FIELDS = FIGURE_FIELDS + ("speed_ms", "jersey_number")

READ_TABLE = """() => Object.fromEntries([...document.querySelectorAll('#player-body tr[data-player-id]')].map(tr =>
  [tr.dataset.playerId,
   Object.fromEntries([...tr.querySelectorAll('td[data-col]')].map(td => [td.dataset.col, td.dataset.value]))]))"""
READ_ORDER = "() => [...document.querySelectorAll('#player-body tr[data-player-id]')].map(tr => tr.dataset.playerId)"
READ_TEAMS = """() => Object.fromEntries([...document.querySelectorAll('#teams [data-team-id]')].map(card =>
  [card.dataset.teamId, [...card.querySelectorAll('[data-window][data-field]')].map(el =>
    [el.dataset.window, el.dataset.field, el.dataset.value])]))"""


def num(text: str | None) -> float | None:
    return None if text in (None, "") else float(text)


def wait_for(pred: Callable[[], Any], timeout: float, what: str, every: float = 0.1) -> Any:
    deadline = time.monotonic() + timeout
    while True:
        got = pred()
        if got:
            return got
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout:g} s waiting for {what}")
        time.sleep(every)


class Bench:
    """The server, the feed and the page, with the moves the tests make."""

    def __init__(self, srv: LiveServer, feed: pc.Feed, page: Any) -> None:
        self.srv = srv
        self.feed = feed
        self.page = page
        self.errors: list[str] = []
        self.frames_log: list[str] = []
        self.last_sent = time.time()
        self.streamer: threading.Thread | None = None
        self.stream_ended_wall = time.time()

    def watch(self, ws: Any) -> None:
        if "/live/" not in ws.url:
            return
        self.frames_log.append(f"open {ws.url.split('/live/')[1]}")

        def got(payload: str | bytes) -> None:
            m = orjson.loads(payload)
            self.frames_log.append(f"{m.get('type')} {m.get('seq')}{' resync' if m.get('resync') else ''}")
        ws.on("framereceived", got)
        ws.on("close", lambda _: self.frames_log.append("close"))

    def recent(self) -> str:
        return " | ".join(self.frames_log[-25:])

    # -- feed ------------------------------------------------------------------------------
    def put_match(self) -> None:
        r = httpx.put(f"{self.srv.http}/api/matches/{self.feed.match_id}", json=self.feed.setup_body(), timeout=10)
        assert r.status_code in (200, 201), r.text

    def send_fast(self, n: int, batch: int = 250) -> None:
        objs = self.feed.take(n)
        with ws_connect(f"{self.srv.ws}/ingest/{self.feed.match_id}", max_size=None) as ws:
            for i in range(0, len(objs), batch):
                ws.send(orjson.dumps(objs[i:i + batch]).decode())
        self.last_sent = time.time()

    def stream(self, seconds: float) -> threading.Thread:
        """Stream frames in real time from a thread; frame time keeps pace with the wall clock
        across pauses (a live provider resumes with the current time)."""
        assert self.streamer is None or not self.streamer.is_alive()
        self.feed.shift_s += max(time.time() - self.last_sent - 1.0 / pc.FPS, 0.0)
        objs = self.feed.take(int(seconds * pc.FPS))
        assert objs, "the feed ran out of frames"

        def run() -> None:
            with ws_connect(f"{self.srv.ws}/ingest/{self.feed.match_id}", max_size=None) as ws:
                t0 = time.monotonic()
                for k, f in enumerate(objs):
                    delay = t0 + k / pc.FPS - time.monotonic()
                    if delay > 0:
                        time.sleep(delay)
                    ws.send(orjson.dumps(f).decode())
                    self.last_sent = time.time()
            self.stream_ended_wall = time.time()

        self.streamer = threading.Thread(target=run, daemon=True)
        self.streamer.start()
        return self.streamer

    def join(self) -> None:
        if self.streamer is not None:
            self.streamer.join(60)
            assert not self.streamer.is_alive()

    # -- reads ---------------------------------------------------------------------------------
    def rest(self, match_id: str | None = None) -> dict[str, Any]:
        r = httpx.get(f"{self.srv.http}/api/matches/{match_id or self.feed.match_id}/snapshot", timeout=10)
        r.raise_for_status()
        return r.json()

    def table(self) -> dict[str, dict[str, str]]:
        return self.page.evaluate(READ_TABLE)

    def order(self) -> list[str]:
        return self.page.evaluate(READ_ORDER)

    def banner(self) -> str:
        return self.page.get_attribute("#banner", "data-state") or ""

    def settle(self, timeout: float = 12.0, match_id: str | None = None) -> dict[str, Any]:
        """Stop feeding, let the stall finalise the tail, wait until the page equals REST; returns REST."""
        self.join()
        wait_for(lambda: self.rest(match_id)["health"]["state"] == "stalled", 8, "the server to call the feed stalled")
        self.page.click("label[data-window='cumulative']")
        last: list[str] = []

        def same() -> dict[str, Any] | None:
            rest = self.rest(match_id)
            last[:] = mismatches(self.table(), rest["players"], lambda p: p, PLAYER_FIELDS)
            return rest if not last else None

        try:
            return wait_for(same, timeout, "the page to show the REST figures", every=0.25)
        except AssertionError as exc:
            raise AssertionError("page and REST differ: " + "; ".join(last[:8])
                                 + "\npage received: " + self.recent()) from exc


def mismatches(page: dict[str, dict[str, str]], players: dict[str, Any], pick: Callable[[dict], dict | None],
               fields: tuple[str, ...], minutes_from_span: bool = False) -> list[str]:
    """Where the page's data-value differs from the snapshot's figure (pick: player -> figure dict)."""
    out = []
    if set(page) != set(players):
        return [f"players on page {sorted(page)} != feed {sorted(players)}"]
    for pid, p in players.items():
        src = pick(p)
        for f in fields:
            got = num(page[pid].get(f))
            if f in ("jersey_number", "speed_ms") or (f == "coverage" and minutes_from_span):
                want = p[f]  # live or whole-match values, whatever the window
            elif src is None:
                want = None
            elif f == "minutes" and minutes_from_span:
                want = None if src.get("span_s") is None else src["span_s"] / 60
            else:
                want = src.get(f)
            if want is None or got is None:
                ok = want is None and got is None
            else:
                ok = math.isclose(got, want, rel_tol=1e-9, abs_tol=1e-9)
            if not ok:
                out.append(f"{pid}.{f}: page {got!r} != snapshot {want!r}")
    return out


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    pc.require_chromium()
    from playwright.sync_api import sync_playwright

    ARTIFACTS.mkdir(exist_ok=True)
    feed = pc.Feed()
    b = Bench(LiveServer(tmp_path_factory.mktemp("page") / "data").start(), feed, None)
    pw = browser = None
    try:
        b.put_match()
        b.send_fast(feed.bulk_count)  # the match so far, as a fast replay
        wait_for(lambda: b.rest()["health"]["frames"] == feed.bulk_count, 30, "the replayed frames to be applied")
        pw = sync_playwright().start()
        browser = pc.launch(pw)
        ctx = browser.new_context(viewport={"width": 1440, "height": 1000}, color_scheme="light")
        page = ctx.new_page()
        page.set_default_timeout(10_000)
        page.on("pageerror", lambda exc: b.errors.append(str(exc)))
        page.on("websocket", b.watch)  # what the page received, for the failure messages
        b.page = page
        b.browser = browser
        page.goto(b.srv.http + "/")
        yield b
        assert not b.errors, f"JavaScript errors on the page: {b.errors}"
    finally:
        if browser is not None:
            browser.close()
        if pw is not None:
            pw.stop()
        b.srv.stop()


def test_page_connects_and_lists_every_player(bench):
    page = bench.page
    page.wait_for_selector("#conn[data-conn='open']")
    wait_for(lambda: len(bench.order()) == len(pc.IDS), 10, "a row per player")
    rest = bench.rest()
    assert set(bench.order()) == set(pc.IDS) == set(rest["players"])
    assert page.input_value("#match-picker") == bench.feed.match_id
    for pid, p in rest["players"].items():
        row = page.locator(f"tr[data-player-id='{pid}']")
        assert row.locator("td[data-col='name'] .n").inner_text() == p["name"]
        assert (row.locator(".badge-gk").count() == 1) == p["is_goalkeeper"]
    assert page.locator("#teams [data-team-id]").count() == 2
    assert page.inner_text("#scoreline").count("Harbour Town") == 1
    caution = page.locator("#caution")
    assert caution.is_visible()
    assert "qualified medical and performance staff" in caution.inner_text()
    assert "estimates from positional data" in caution.inner_text()


def test_banner_when_the_feed_stops_and_clears_when_it_resumes(bench):
    page = bench.page
    # the replay ended a while ago: the page opened on a stalled feed
    wait_for(lambda: bench.banner() == "stalled", 8, "the stalled banner over the replayed match")
    bench.stream(12)  # the feed resumes, live, frame times shifted by the outage
    # the banner goes once the observed frame rate is back (the server's rate window), and the clock runs
    wait_for(lambda: bench.banner() == "none", 12, "the banner to clear after the feed resumed")
    assert page.get_attribute("#feed-state", "data-state") == "ok"
    clock0 = page.inner_text("#clock")
    wait_for(lambda: page.inner_text("#clock") != clock0, 4, "the clock to move with live deltas")
    assert page.get_attribute("#age", "data-stale") == "false"
    shoot(page, "bench")  # live, while the frames still flow

    bench.join()
    wait_for(lambda: bench.banner() == "stalled", 8, "the stalled banner", every=0.05)
    # when the page raised it (its own clock), against when the last frame went out
    took = float(page.get_attribute("#banner", "data-changed-at")) / 1000 - bench.stream_ended_wall
    assert took < 4.5, f"the stalled banner took {took:.1f} s (the server calls a stall after 2 s)"
    banner = page.locator("#banner")
    assert banner.is_visible() and "stalled" in banner.inner_text().lower()
    assert page.get_attribute("#feed-state", "data-state") == "stalled"
    wait_for(lambda: page.get_attribute("#age", "data-stale") == "true", 6, "the 'data is N s old' indicator")
    assert "s old" in page.inner_text("#age")
    shoot(page, "bench-stalled")


def test_numbers_equal_the_rest_snapshot(bench):
    rest = bench.settle()
    page = bench.page
    # the team panels: outfield totals, the last-5 and last-15 windows, per player
    teams = page.evaluate(READ_TEAMS)
    assert set(teams) == {HOME, AWAY}
    for tid, cells in teams.items():
        out = rest["teams"][tid]["outfield"]
        seen = set()
        for win, field, value in cells:
            if win == "cumulative":
                want = out[field]
            elif win == "per_player":
                want = out["per_player"][field]
            else:
                want = out["windows"][win][field]
            assert num(value) == pytest.approx(want), (tid, win, field)
            seen.add(win)
        assert {"cumulative", "last_5min", "last_15min", "per_player"} <= seen
    # what is shown is what is stored: distance as whole metres, speeds in km/h
    for pid, p in rest["players"].items():
        row = page.locator(f"tr[data-player-id='{pid}']")
        shown = row.locator("td[data-col='distance_m'] .v").inner_text()
        assert shown == f"{math.floor(p['distance_m'] + 0.5):,}", pid
        if p["max_speed_ms"]:
            assert row.locator("td[data-col='max_speed_ms'] .v").inner_text() == f"{p['max_speed_ms'] * 3.6:.1f}"
    # low coverage is marked on the page, with the reason on hover, and only there
    low = {pid for pid, p in rest["players"].items() if p["minutes"] > 0 and p["coverage"] < 0.8}
    assert low == {pc.LOW_COVERAGE}
    for pid in rest["players"]:
        row = page.locator(f"tr[data-player-id='{pid}']")
        assert row.get_attribute("data-uncertain") == ("true" if pid in low else "false")
    cell = page.locator(f"tr[data-player-id='{pc.LOW_COVERAGE}'] td[data-col='hsr_m']")
    assert "uncertain" in cell.get_attribute("class")
    assert "Seen in only" in cell.get_attribute("title")
    assert page.locator("[data-health='coverage_low']").inner_text().startswith("1 under")


def ordered(values: list[float | None], desc: bool) -> bool:
    present = [v for v in values if v is not None]
    if values[len(present):] != [None] * (len(values) - len(present)):
        return False  # empty values go last
    return present == sorted(present, reverse=desc)


def test_sorting_by_click_and_keyboard(bench):
    bench.settle()
    page = bench.page

    def column(col: str) -> list[float | None]:
        t = bench.table()
        return [num(t[pid][col]) for pid in bench.order()]

    page.click("th[data-col='distance_m'] button")
    assert page.get_attribute("th[data-col='distance_m']", "aria-sort") == "descending"
    d = column("distance_m")
    assert ordered(d, desc=True) and d[0] > d[-1]
    page.click("th[data-col='distance_m'] button")
    assert page.get_attribute("th[data-col='distance_m']", "aria-sort") == "ascending"
    assert ordered(column("distance_m"), desc=False)
    # keyboard: focus a heading and press Enter
    page.focus("th[data-col='sprint_m'] button")
    page.keyboard.press("Enter")
    assert page.get_attribute("th[data-col='sprint_m']", "aria-sort") == "descending"
    assert page.get_attribute("th[data-col='distance_m']", "aria-sort") == "none"
    s = column("sprint_m")
    assert ordered(s, desc=True) and s[0] > s[-1]
    rest = bench.rest()
    top = max(rest["players"], key=lambda pid: rest["players"][pid]["sprint_m"])
    assert bench.order()[0] == top
    # a text column sorts A to Z first
    page.focus("th[data-col='name'] button")
    page.keyboard.press("Enter")
    names = [rest["players"][pid]["name"] for pid in bench.order()]
    assert names == sorted(names, key=str.casefold)
    page.keyboard.press("Enter")  # Z to A
    assert page.get_attribute("th[data-col='name']", "aria-sort") == "descending"
    assert [rest["players"][pid]["name"] for pid in bench.order()] == names[::-1]
    page.keyboard.press("Enter")  # a third press: back to team and shirt number
    assert page.get_attribute("th[data-col='name']", "aria-sort") == "none"
    home = sorted((p for p in pc.IDS if p.startswith("h")), key=lambda p: rest["players"][p]["jersey_number"])
    away = sorted((p for p in pc.IDS if p.startswith("a")), key=lambda p: rest["players"][p]["jersey_number"])
    assert bench.order() == home + away


def test_window_switch_shows_that_windows_figures(bench):
    rest = bench.settle()
    page = bench.page
    period = rest["period"]
    assert period == "second_half"
    modes = [el.get_attribute("data-window") for el in page.locator("#window-switch label[data-window]").all()]
    assert modes[:2] == ["cumulative", "period"]
    assert {"last_5min", "last_15min", "peak_1min", "peak_5min"} <= set(modes)
    busy = max(rest["players"], key=lambda pid: rest["players"][pid]["distance_m"])
    distances = {}
    for mode in modes:
        page.click(f"label[data-window='{mode}']")
        page.wait_for_selector(f"#player-table[data-window='{mode}']")
        got = bench.table()
        if mode == "cumulative":
            bad = mismatches(got, rest["players"], lambda p: p, FIGURE_FIELDS)
        elif mode == "period":
            bad = mismatches(got, rest["players"], lambda p: p["periods"].get(period), FIGURE_FIELDS)
        else:
            bad = mismatches(got, rest["players"], lambda p, m=mode: p["windows"].get(m),
                             WINDOW_FIELDS + ("minutes", "coverage"), minutes_from_span=True)
            assert all(got[pid]["max_speed_ms"] == "" for pid in got)  # windows carry no top speed
        assert not bad, f"{mode}: " + "; ".join(bad[:6])
        distances[mode] = num(got[busy]["distance_m"])
    # the switch changes the numbers: match, period, last minute and a peak all differ here
    assert len({distances[m] for m in ("cumulative", "period", "last_1min", "peak_1min")}) == 4, distances
    # keyboard: arrow keys move along the switch
    page.click("label[data-window='cumulative']")
    page.focus("#window-switch input[value='cumulative']")
    page.keyboard.press("ArrowRight")
    page.wait_for_selector("#player-table[data-window='period']")
    page.click("label[data-window='cumulative']")
    # one team only
    page.click(f"label[data-team-filter='{AWAY}']")
    wait_for(lambda: set(bench.order()) == {p for p in pc.IDS if p.startswith("a")}, 3, "only the away team's rows")
    assert page.locator("th[data-col='team']").is_hidden()
    page.click("label[data-team-filter='both']")
    wait_for(lambda: len(bench.order()) == len(pc.IDS), 3, "both teams again")


def test_themes_follow_the_system_and_the_toggle(bench):
    page = bench.page
    assert page.get_attribute("html", "data-theme") == "light"
    page.click("#theme-toggle")
    assert page.get_attribute("html", "data-theme") == "dark"
    assert page.get_attribute("#theme-toggle", "aria-pressed") == "true"
    page.click("#theme-toggle")
    assert page.get_attribute("html", "data-theme") == "light"
    ctx = bench.browser.new_context(viewport={"width": 1280, "height": 800}, color_scheme="dark")
    try:
        other = ctx.new_page()
        other.goto(bench.srv.http + "/")
        assert other.get_attribute("html", "data-theme") == "dark"
        other.wait_for_selector("#player-body tr[data-player-id]")
        other.screenshot(path=str(ARTIFACTS / "bench-dark-1280.png"))
    finally:
        ctx.close()


# players of one team whose row lies wholly inside the viewport (above the fixed caution strip)
ROWS_IN_VIEW = """team => { const bottom = document.querySelector('#caution').getBoundingClientRect().top;
  return [...document.querySelectorAll(`#player-body tr[data-team-id="${team}"]:not([hidden])`)].filter(tr => {
    const b = tr.getBoundingClientRect(); return b.top >= 0 && b.bottom <= bottom; }).length; }"""
IN_VIEW = """sel => { const b = document.querySelector(sel).getBoundingClientRect();
  return b.top >= 0 && b.bottom <= innerHeight && b.width > 0; }"""


def usual_marker(page: Any) -> None:
    """A player's history, when the snapshot has one (``baseline``, written by the history store): his work
    rate in this block as % of his usual, marked below his band; nothing without it, nor with too few matches
    (no ``vs_baseline``; the cell's tip says why). The
    objects are set on the page's own state as the snapshot would carry them, then the table is redrawn."""
    assert page.locator(".usual").count() == 0  # this feed has no history: nothing shown
    page.evaluate("""() => { const ps = window.pacewire.state.players;
      ps.h2.baseline = {matches: 6, required: 5, vs_baseline: {block: {m_per_min: {ratio: 0.82, below: true}}}};
      ps.h3.baseline = {matches: 2, required: 5};
      ps.h4.baseline = {matches: 7, required: 5, vs_baseline: {block: {m_per_min: {ratio: 1.03, below: false}}}}; }""")
    page.click("label[data-window='period']")
    page.click("label[data-window='cumulative']")
    marks = page.eval_on_selector_all(".usual", "els => els.map(e => [e.closest('tr').dataset.playerId, e.innerText])")
    assert sorted(marks) == [["h2", "82 ▾"], ["h4", "103"]], marks
    tip = page.get_attribute("tr[data-player-id='h3'] td[data-col='usual_pct']", "title")
    assert tip == "Not enough history: 2 of 5 past matches", tip


def test_first_screen_at_1280x720_in_both_themes(bench):
    """A laptop on the bench: the match line, the status and at least 8 players of the chosen team are
    on the first screen without scrolling, in either theme, and nothing scrolls sideways."""
    for scheme in ("light", "dark"):
        ctx = bench.browser.new_context(viewport={"width": 1280, "height": 720}, color_scheme=scheme)
        try:
            page = ctx.new_page()
            page.goto(bench.srv.http + "/")
            page.wait_for_selector("#player-body tr[data-player-id]")
            page.click(f"label[data-team-filter='{HOME}']")
            page.wait_for_selector(f"#player-body tr[data-team-id='{AWAY}']", state="detached")
            assert page.get_attribute("html", "data-theme") == scheme
            shown = page.evaluate(ROWS_IN_VIEW, HOME)
            assert shown >= 8, f"{scheme}: only {shown} players of the chosen team on the first screen"
            for sel in (".matchline", "#conn", "#clock"):
                assert page.evaluate(IN_VIEW, sel), f"{scheme}: {sel} is not on the first screen"
            assert page.evaluate("document.documentElement.scrollWidth <= document.documentElement.clientWidth")
            # the essentials only, by default: the rest behind "More figures"
            assert page.locator("th[data-col='peak_pct']").is_visible()
            assert page.locator("th[data-col='energy_jkg']").is_hidden()
            page.screenshot(path=str(ARTIFACTS / f"bench-1280x720-{scheme}.png"))
            if scheme == "light":
                usual_marker(page)
            page.click("label.more-switch")
            page.wait_for_selector("th[data-col='energy_jkg']")
            page.click("label.more-switch")
        finally:
            ctx.close()
    ctx = bench.browser.new_context(viewport={"width": 1440, "height": 900}, color_scheme="light")
    try:
        page = ctx.new_page()
        page.goto(bench.srv.http + "/")
        page.wait_for_selector("#player-body tr[data-player-id]")
        assert page.evaluate(ROWS_IN_VIEW, HOME) >= 8
        page.screenshot(path=str(ARTIFACTS / "bench-1440x900-light.png"))
    finally:
        ctx.close()


def test_recovers_after_the_socket_is_cut_from_the_page(bench):
    page = bench.page
    bench.settle()
    frames0 = int(bench.rest()["health"]["frames"])
    seq = page.evaluate("window.pacewire.seq")
    assert seq > 0
    page.evaluate("window.pacewire.socket.close()")
    page.wait_for_selector("#conn[data-conn='closed'], #conn[data-conn='connecting']", timeout=3000)
    page.wait_for_selector("#conn[data-conn='open']", timeout=8000)
    bench.stream(3)
    wait_for(lambda: int(num(page.get_attribute("[data-health='frames']", "data-value")) or 0) > frames0, 6,
             "fresh frames counted on the page after the reconnect")
    rest = bench.settle()
    assert num(page.get_attribute("[data-health='frames']", "data-value")) == rest["health"]["frames"]
    # it resumed where it was (since=SEQ): the missed messages, no fresh snapshot
    after = bench.frames_log[max(i for i, e in enumerate(bench.frames_log) if e.startswith("open ")):]
    assert after[0].endswith(f"since={seq}"), after[0]
    assert not any(e.startswith("snapshot") for e in after), bench.recent()


def test_recovers_after_a_server_restart(bench):
    page = bench.page
    bench.settle()
    old = bench.srv
    seq_before = page.evaluate("window.pacewire.seq")
    assert seq_before is not None
    old.kill9()
    wait_for(lambda: bench.banner() == "offline", 5, "the 'no connection' banner")
    assert "reconnecting" in page.inner_text("#banner").lower()
    new = LiveServer(old.data)
    new.port = old.port
    new.start()
    bench.srv = new
    page.wait_for_selector("#conn[data-conn='open']", timeout=12_000)
    frames0 = int(bench.rest()["health"]["frames"])
    bench.stream(3)
    wait_for(lambda: int(num(page.get_attribute("[data-health='frames']", "data-value")) or 0) > frames0, 8,
             "fresh data from the restarted server")
    rest = bench.settle()
    assert num(page.get_attribute("[data-health='frames']", "data-value")) == rest["health"]["frames"]
    assert bench.banner() == "stalled"
    # the new process has a new stream: the page asked to resume and was given a fresh snapshot
    after = bench.frames_log[max(i for i, e in enumerate(bench.frames_log) if e.startswith("open ")):]
    assert after[1] == "snapshot 0 resync", bench.recent()


def shoot(page: Any, name: str) -> None:
    """Whole-page screenshots in both themes (the toggle, then back). The viewport grows to the
    page's height first, so the fixed caution strip sits at the end instead of over the table."""
    size = page.viewport_size
    page.set_viewport_size({"width": size["width"], "height": page.evaluate("document.documentElement.scrollHeight")})
    try:
        page.screenshot(path=str(ARTIFACTS / f"{name}-light.png"))
        page.click("#theme-toggle")
        page.wait_for_selector("html[data-theme='dark']")
        page.screenshot(path=str(ARTIFACTS / f"{name}-dark.png"))
        page.click("#theme-toggle")
        page.wait_for_selector("html[data-theme='light']")
    finally:
        page.set_viewport_size(size)


def test_alerts_and_report_links_as_they_arrive(bench):
    """Last: it ends the match. A load budget makes real alerts; the period end makes a real report."""
    page = bench.page
    bench.settle()
    base = f"{bench.srv.http}/api/matches/{bench.feed.match_id}"
    r = httpx.put(f"{base}/budgets", json={"players": {"h3": {"minutes": 1}}}, timeout=10)
    if r.status_code in (404, 405):
        pytest.skip("this build has no load budgets (PUT /api/matches/{id}/budgets): alerts and reports not exercised")
    assert r.status_code == 200, r.text
    assert page.locator("#alerts li.alert-item").count() == 0
    bench.stream(2)
    sel = "#alerts li.alert-item[data-player-id='h3']"
    try:
        wait_for(lambda: page.locator(sel).count() >= 2, 10, "the budget alerts on the page")
    except AssertionError as exc:
        raise AssertionError(f"{exc}; page received: {bench.recent()}") from None  # exc is in the message
    limits = sorted(float(v) for v in page.eval_on_selector_all(sel, "els => els.map(e => e.dataset.limit)"))
    assert limits == [0.8, 1.0]  # the 80 % and 100 % levels of a 1-minute budget
    assert "Caspar Lunde" in page.inner_text("#alerts")
    bench.join()
    # a page opened later (here: reloaded) shows the alerts raised so far, from its opening snapshot
    page.reload()
    page.wait_for_selector("#conn[data-conn='open']", timeout=12_000)
    wait_for(lambda: page.locator(sel).count() == 2, 10, "the alerts on the reloaded page")
    assert sorted(float(v) for v in page.eval_on_selector_all(sel, "els => els.map(e => e.dataset.limit)")) == limits
    # a line each: the player, the rule in words, value against limit with the unit; nothing of it cut off
    # (a clipped line still holds the words in innerText, so the widths are compared too). The side column
    # of a wide screen may wrap a long one onto a second line; a full-width list keeps each to one
    lines = page.eval_on_selector_all(sel, """els => els.map(e => [e.innerText, e.getBoundingClientRect().height,
      parseFloat(getComputedStyle(e).lineHeight) || 20, e.scrollWidth <= e.clientWidth + 1])""")
    for text, height, line, whole in lines:
        assert "Caspar Lunde" in text and "load budget" in text and "limit" in text and " min" in text, text
        assert height < 3 * line, f"an alert takes more than two lines: {text!r}"
        assert whole, f"an alert's line is cut off: {text!r}"
    size = page.viewport_size
    page.set_viewport_size({"width": 1280, "height": size["height"]})  # the list under the table, full width
    for text, height, line, whole in page.eval_on_selector_all(sel, """els => els.map(e => [e.innerText,
      e.getBoundingClientRect().height, parseFloat(getComputedStyle(e).lineHeight) || 20,
      e.scrollWidth <= e.clientWidth + 1])"""):
        assert height < 2 * line and whole, f"an alert at full width is not one whole line: {text!r}"
    page.set_viewport_size(size)
    # full time: the period ends, the report is built, and its link shows up by itself
    last = bench.feed.frames[bench.feed.cursor - 1]["frame_id"]
    r = httpx.post(f"{base}/events", json=[{"type": "period_end", "period": "second_half", "frame_id": last}],
                   timeout=10)
    assert r.status_code == 200, r.text
    wait_for(lambda: "ended" in page.inner_text("#period"), 5, "the period shown as ended")
    # the end is said in the one status place; no band (the stall band least of all)
    wait_for(lambda: page.get_attribute("#conn", "data-status") == "ended", 5, "the ended status")
    assert bench.banner() == "none"
    assert "Full time" in page.inner_text("#conn")
    time.sleep(3.0)  # past the server's 2 s stall time: a finished match never shows the stall band
    assert bench.banner() == "none" and page.get_attribute("#conn", "data-status") == "ended"
    assert page.locator("#age").is_hidden()
    link = page.wait_for_selector("#reports li[data-kind='full_time'] a.report-main", timeout=40_000)
    href = link.get_attribute("href")
    listed = httpx.get(f"{base}/reports", timeout=10).json()["reports"]
    assert any(x["kind"] == "full_time" and href.endswith(x["url"]) for x in listed)
    assert httpx.get(href, timeout=10).status_code == 200
    shoot(page, "bench-full-time")


# text boxes of the report's first page (text nodes, outside charts) and of each chart's SVG text, with
# every pair of boxes that overlap by more than a pixel each way
TEXT_BOXES = """() => {
  const boxes = [];
  const walker = document.createTreeWalker(document.querySelector('#summary'), NodeFilter.SHOW_TEXT);
  for (let n = walker.nextNode(); n; n = walker.nextNode()) {
    if (!n.textContent.trim()) continue;
    const r = document.createRange(); r.selectNodeContents(n);
    for (const b of r.getClientRects()) boxes.push({g: 'summary', t: n.textContent.trim(), b,
      size: parseFloat(getComputedStyle(n.parentElement).fontSize)});
  }
  document.querySelectorAll('svg.chart').forEach((svg, k) => svg.querySelectorAll('text').forEach(t => {
    if (t.textContent.trim()) boxes.push({g: 'chart' + k, t: t.textContent.trim(), b: t.getBoundingClientRect()});
  }));
  const clash = [];
  for (let i = 0; i < boxes.length; i++) for (let j = i + 1; j < boxes.length; j++) {
    const a = boxes[i], c = boxes[j];
    if (a.g !== c.g) continue;
    const w = Math.min(a.b.right, c.b.right) - Math.max(a.b.left, c.b.left);
    const h = Math.min(a.b.bottom, c.b.bottom) - Math.max(a.b.top, c.b.top);
    if (w > 1 && h > 1) clash.push(a.g + ': ' + a.t + ' / ' + c.t);
  }
  const s = document.querySelector('#summary').getBoundingClientRect();
  const small = boxes.filter(x => x.size !== undefined && x.size < 14).map(x => x.t + ' ' + x.size);
  return {bottom: s.bottom, clash, small, n: boxes.length};
}"""


def test_the_report_first_page_fits_one_screen(bench):
    """The full-time report of the match the test above ended: its first page (the summary) fits a
    1280 x 900 screen in both themes with body text of 14 px or more, and no two text boxes overlap, on
    it or in any chart (a legend once sat on its chart's title)."""
    listed = httpx.get(f"{bench.srv.http}/api/matches/{bench.feed.match_id}/reports", timeout=10).json()["reports"]
    url = next(r["url"] for r in listed if r["kind"] == "full_time")
    for scheme in ("light", "dark"):
        ctx = bench.browser.new_context(viewport={"width": 1280, "height": 900}, color_scheme=scheme)
        try:
            page = ctx.new_page()
            page.goto(f"{bench.srv.http}{url}" if url.startswith("/") else f"{bench.srv.http}/{url}")
            page.wait_for_selector("#summary")
            got = page.evaluate(TEXT_BOXES)
            assert got["n"] > 50, got  # the summary and the charts have text to check
            assert got["bottom"] <= 900, f"{scheme}: the first page ends at {got['bottom']:.0f} px"
            assert not got["clash"], f"{scheme}: overlapping text: {got['clash'][:6]}"
            assert not got["small"], f"{scheme}: text under 14 px: {got['small'][:6]}"
            text = page.inner_text("#summary")
            assert "Full time" in text and "Who dropped off" in text and "Caspar Lunde" in text  # his budget alerts
            page.screenshot(path=str(ARTIFACTS / f"report-first-page-{scheme}.png"))
        finally:
            ctx.close()


def test_the_demo_clip_through_the_match_picker(bench):
    """The committed demo clip (fictional, with injected faults) as a second match: pick it, see
    every player of its sheet, and the same figures as REST."""
    assert DEMO_CLIP.is_dir(), f"{DEMO_CLIP} is missing (replay/synth/ writes it)"
    meta = orjson.loads((DEMO_CLIP / "meta.json").read_bytes())
    sheet = orjson.loads((DEMO_CLIP / "match.json").read_bytes())
    lines = gzip.decompress((DEMO_CLIP / "tracking.jsonl.gz").read_bytes()).splitlines()
    mid = meta["match"]["id"]
    r = httpx.put(f"{bench.srv.http}/api/matches/{mid}", json={"meta": meta, "sheet": sheet}, timeout=10)
    assert r.status_code in (200, 201), r.text
    with ws_connect(f"{bench.srv.ws}/ingest/{mid}", max_size=None) as ws:
        for i in range(0, len(lines), 250):
            ws.send(b"[" + b",".join(lines[i:i + 250]) + b"]")
    page = bench.page
    page.wait_for_selector(f"#match-picker option[value='{mid}']", state="attached", timeout=10_000)
    page.select_option("#match-picker", mid)
    rest = bench.settle(match_id=mid)  # the page equals REST, every figure of every player
    roster = {p["id"]: p for side in ("home", "away") for p in sheet["teams"][side]["players"]}
    assert set(bench.order()) == set(roster) == set(rest["players"])
    assert rest["health"]["duplicates"] > 0 and rest["health"]["jumps"] > 0  # the faults went in
    for pid in roster:
        shown = page.locator(f"tr[data-player-id='{pid}'] td[data-col='name'] .n").inner_text()
        assert shown == rest["players"][pid]["name"]
    names = [t["name"] for t in meta["teams"].values()]
    assert all(n in page.inner_text("#scoreline") for n in names)
    # the substitutes who never came on: hidden under one line until it is opened
    unused = {pid for pid, p in rest["players"].items() if not p["minutes"] and not p["on_pitch"]}
    assert unused, "the demo clip has substitutes who did not play"
    hidden = set(page.eval_on_selector_all("#player-body tr[data-player-id][hidden]",
                                           "els => els.map(e => e.dataset.playerId)"))
    assert hidden == unused
    line = page.locator("tr.unused-line button")
    assert "not used" in line.inner_text()
    line.click()
    wait_for(lambda: page.locator("#player-body tr[data-player-id][hidden]").count() == 0, 3, "the unused rows shown")
    page.locator("tr.unused-line button").press("Enter")  # the keyboard closes it again
    wait_for(lambda: page.locator("#player-body tr[data-player-id][hidden]").count() == len(unused), 3, "hidden again")
    # the match picker tells matches apart: kick-off and id on every line
    option = page.inner_text(f"#match-picker option[value='{mid}']")
    assert mid in option and "2026" in option, option
    page.set_viewport_size({"width": 1440, "height": page.evaluate("document.documentElement.scrollHeight")})
    page.screenshot(path=str(ARTIFACTS / "bench-demo-clip-light.png"))


def test_phase_view_of_the_demo_clip(bench):
    """The demo clip's event stream gives game phases: each team card shows minutes, m/min per player and
    HSR per phase, play time and possessions by outcome as REST has them; the phase switch shows each
    player's figures in that phase; the feed panel shows the event stream's health."""
    meta = orjson.loads((DEMO_CLIP / "meta.json").read_bytes())
    mid = meta["match"]["id"]
    if mid not in bench.page.input_value("#match-picker"):  # run alone: load the clip as the test above does
        test_the_demo_clip_through_the_match_picker(bench)
    events = (DEMO_CLIP / "event.jsonl").read_bytes()
    r = httpx.post(f"{bench.srv.http}/api/matches/{mid}/events", content=events, timeout=30)
    assert r.status_code == 200 and r.json()["rejected"] == 0, r.text
    page = bench.page
    page.wait_for_selector("#feed-events:not([hidden])")
    rest = wait_for(lambda: (s := bench.rest(mid))["health"].get("events", {}).get("events") and s, 10,
                    "the events to count")

    def cards() -> dict:
        return page.evaluate(READ_TEAMS)

    def want(snap: dict) -> dict:
        out = {}
        for tid, t in snap["teams"].items():
            o = t["outfield"]
            rows = [[f"phase:{ph}", k, f[k]] for ph, f in o["phases"].items()
                    for k in ("seconds", "per_player_m_per_min", "hsr_m")]
            rows += [["in_play", "in_play_s", o["in_play_s"]], ["in_play", "m_per_min_in_play", o["m_per_min_in_play"]]]
            rows += [["sequences", k, o["sequences"][k]["m_per_min"]] for k in ("shot", "no_shot")]
            out[tid] = {(w, f): v for w, f, v in rows}
        return out

    def same() -> bool:
        snap = bench.rest(mid)
        got = {tid: {(w, f): num(v) for w, f, v in vals if w.startswith(("phase:", "in_play", "sequences"))}
               for tid, vals in cards().items()}
        return got == want(snap) and snap

    rest = wait_for(same, 10, "the team cards to show REST's figures by phase")
    assert any(t["outfield"]["phases"]["attack"]["seconds"] > 0 for t in rest["teams"].values())
    page.click("label[data-window='phase:attack']")
    page.wait_for_selector("#player-table[data-window='phase:attack']")
    got = bench.table()
    bad = mismatches(got, rest["players"], lambda p: p["phases"]["attack"], ("distance_m", "m_per_min", "hsr_m"))
    assert not bad, "; ".join(bad[:6])
    assert page.text_content("#feed-events-state") in ("Events OK", "Events degraded", "Events stalled")
    assert num(page.get_attribute("[data-health='events.corrections']", "data-value")) == \
        rest["health"]["events"]["corrections"]
    page.set_viewport_size({"width": 1440, "height": page.evaluate("document.documentElement.scrollHeight")})
    page.screenshot(path=str(ARTIFACTS / "bench-phases-light.png"))
    page.click("label[data-window='cumulative']")


def test_no_match_says_so(bench, tmp_path):
    """A server with no match set up: the page says there is none (no endless "Connecting…"), and the
    theme button names what pressing it does."""
    srv = LiveServer(tmp_path / "empty").start()
    ctx = bench.browser.new_context(viewport={"width": 1280, "height": 720}, color_scheme="light")
    try:
        page = ctx.new_page()
        page.goto(srv.http + "/")
        page.wait_for_selector("#conn[data-status='none']", timeout=10_000)
        assert page.inner_text("#conn-text") == "No match yet"
        assert "No match" in page.inner_text("#match-picker")
        assert page.locator("#banner").is_hidden()
        assert page.inner_text("#theme-toggle").strip() == "Dark theme"
        page.click("#theme-toggle")
        assert page.inner_text("#theme-toggle").strip() == "Light theme"
    finally:
        ctx.close()
        srv.stop()
