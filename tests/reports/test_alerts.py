"""Alert rules: each fires once on a constructed case and not on its near miss; budgets at 80% and 100%;
the low-coverage guard; bad rule and budget data get clear errors; alerts reach subscribers live."""
from __future__ import annotations

import asyncio
import csv
import io
import math
import time

import httpx
import numpy as np
import orjson
import pytest
import websockets

from pacewire.config import ConfigError, load_settings
from pacewire.engine.blocks import clock_block, window_coverage
from pacewire.engine.match import MatchState
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import BALL_IN, PERIOD_INDEX, Block
from pacewire.params import match_params
from pacewire.reports.alerts import Alerter, Band
from pacewire.store import history
from pacewire.store.record import MatchRecord
from pacewire.wire.cdf import parse_setup
from pacewire.wire.rules import (
    Caps,
    DropOffBaseline,
    DropOffPeak,
    LoadBudget,
    RulesError,
    check_rules,
    load_budgets,
    load_rules,
    parse_budgets,
)
from tests.support import cdf_build as cb, trajectories
from tests.support.live_server import LiveServer
from tests.support.trajectories import FPS

N_HOME, N_AWAY = 3, 2  # h1 and a1 are goalkeepers
IDS = cb.player_ids(N_HOME, N_AWAY)
H2, GK = IDS.index("h2"), IDS.index("h1")
EVERY_S = 5  # alerts are evaluated live once per completed second; every 5 s is enough to see a crossing


def circle(speeds: np.ndarray, radius: float = 25.0) -> np.ndarray:
    """Positions (T, 2) running round a circle at the given speed per frame (m/s)."""
    return trajectories.round_circle(trajectories.distance(speeds)[1:], radius)


def run(paths: dict[int, np.ndarray], seen: dict[int, np.ndarray] | None = None, settings=None):
    """Feed one period of frames to a MatchState in EVERY_S-second blocks (figures do not depend
    on the blocking); after each, record (snapshot, coverage per window, current 15-minute block)."""
    settings = settings or load_settings()
    roster = parse_setup(cb.meta("m_al"), cb.sheet(N_HOME, N_AWAY))
    state = MatchState(roster, match_params(settings, roster))
    T = max(p.shape[0] for p in paths.values())
    xy = np.full((T, len(IDS), 2), np.nan)
    for j, p in paths.items():
        xy[:, j] = p
        if seen and j in seen:
            xy[~seen[j], j] = np.nan
    out = []
    t0 = 1.77e9
    step = EVERY_S * FPS
    for s in range(0, T, step):
        slot = np.arange(s, min(s + step, T))
        n = slot.size
        state.step(Block(frame_id=slot.copy(), t=t0 + slot / FPS,
                         period=np.full(n, PERIOD_INDEX["first_half"], np.int8), slot=slot, xy=xy[slot],
                         ball=np.full(n, BALL_IN, np.int8), poss=np.zeros(n, np.int8)))
        snap = build_snapshot(state)
        cov = {w: window_coverage(state, w) for w in settings.windows.last_min}
        out.append((snap, cov, clock_block("first_half", snap["match_time_s"], 15, 45)))
    return out


def evaluate(rules, frames, budgets=None, baselines=None):
    a = Alerter(list(rules), tuple(IDS), 0.05)
    if budgets:
        a.set_budgets(budgets)
    if baselines:
        a.baselines = baselines
    got = []
    for snap, cov, block in frames:
        got += [(snap["match_time_s"], x) for x in a.evaluate(snap, cov, block)]
    return got


def peak_rule(figure="distance", share=0.75, min_coverage=0.8, **kw):
    return DropOffPeak(id=f"{figure}_peak", kind="drop_off_peak", figure=figure, window_min=5, share=share,
                       min_on_pitch_min=5, min_coverage=min_coverage, **kw)


def steps(*parts: tuple[float, float]) -> np.ndarray:
    """Speeds per frame from (seconds, m/s) parts."""
    return trajectories.speeds([(v, sec) for sec, v in parts])


# -- drop-off against the player's own peak -----------------------------------------------------
@pytest.fixture(scope="module")
def distance_runs():
    """4 m/s for 6 min (240 m/min, arithmetic), then 6 min at 2.85 m/s (171 m/min: below 75% of
    the peak, 180) or at 3.15 m/s (189 m/min: the near miss). The goalkeeper runs the drop too."""
    drop = steps((360, 4.0), (360, 2.85))
    near = steps((360, 4.0), (360, 3.15))
    return run({H2: circle(drop), GK: circle(drop, 20.0)}), run({H2: circle(near)})


def test_distance_drop_vs_peak_fires_once_and_not_on_the_near_miss(distance_runs):
    drop, near = distance_runs
    got = evaluate([peak_rule()], drop)
    assert [(a.rule, a.player_id) for _, a in got] == [("distance_peak", "h2")]  # once; not the goalkeeper
    t, a = got[0]
    # the limit is 75% of the peak 5-min window: 0.75 x 240 m/min = 180 (arithmetic; smoothing costs < 1%)
    assert a.limit == pytest.approx(180.0, rel=0.01)
    assert a.value < a.limit and a.value > 171.0 * 0.99  # first seen just after crossing
    assert 360 < t < 360 + 300  # after the change, before the window holds only the slower running
    assert a.figure == "m_per_min" and "h2" not in a.message and "peak 5-min" in a.message
    assert a.body()["player_id"] == "h2" and a.body()["team_id"] == cb.HOME
    assert evaluate([peak_rule()], near) == []
    # the goalkeeper is watched only when asked for
    assert {x.player_id for _, x in evaluate([peak_rule(goalkeepers=True)], drop)} == {"h1", "h2"}


def test_drop_off_waits_for_the_minimum_time_on_the_pitch(distance_runs):
    drop, _ = distance_runs
    late = DropOffPeak(id="late", kind="drop_off_peak", figure="distance", window_min=5, share=0.75,
                       min_on_pitch_min=13, min_coverage=0.8)
    assert evaluate([late], drop) == []  # the run is 12 minutes long


def test_hsr_drop_vs_peak_fires_once_and_not_on_the_near_miss():
    """6.2 m/s (in the 5.5-7.0 m/s HSR band, Bradley et al. 2009) for 6 min: 372 HSR m/min; then
    20-s cycles with a share f at 6.2 m/s and the rest at 4.0 m/s: f = 0.65 gives ~242 m/min (below
    75% of the peak, 279), f = 0.85 gives ~316 (the near miss). Arithmetic on the constructed speeds."""
    def cycles(f: float) -> np.ndarray:
        return steps((360, 6.2), *([(20 * f, 6.2), (20 * (1 - f), 4.0)] * 18))

    got = evaluate([peak_rule("hsr")], run({H2: circle(cycles(0.65))}))
    assert [(a.rule, a.player_id, a.figure) for _, a in got] == [("hsr_peak", "h2", "hsr_m_per_min")]
    assert got[0][1].limit == pytest.approx(0.75 * 372.0, rel=0.02)
    assert evaluate([peak_rule("hsr")], run({H2: circle(cycles(0.85))})) == []


def test_a_drop_that_recovers_and_drops_again_fires_twice():
    """Once per crossing: back above the limit (plus the re-arm margin), a second drop alerts again."""
    speeds = steps((360, 4.0), (330, 2.6), (420, 4.0), (330, 2.6))
    got = evaluate([peak_rule()], run({H2: circle(speeds)}))
    assert len(got) == 2 and got[1][0] - got[0][0] > 400


# -- alerts worth reading: a clear recovery before the next one, a cap per window -------------------------
def evaluate_with(rules, frames, **kw):
    """Alerts with the re-arm and cap rules given (the dataclass defaults otherwise)."""
    a = Alerter(list(rules), tuple(IDS), **kw)
    return [(snap["match_time_s"], x) for snap, cov, block in frames for x in a.evaluate(snap, cov, block)], a


@pytest.fixture(scope="module")
def recovering_runs():
    """After 9 min at 4 m/s (240 m/min, the peak 5-min window; clear of the limit from minute 5, when the
    window is full, so the rule arms), a drop to 2.6 m/s (156 m/min: below 75 % of the peak, 180), a recovery
    at 4 m/s, and a second drop. The recovery lasts 7 min in one run and 3 min in the other, which is too
    short for the last-5-min rate to climb clear of the limit by 20 % (216 m/min) at all (after 3 min of 4 m/s
    it is 156 + (240 - 156) x 3/5 = 206 m/min). Arithmetic on the constructed speeds."""
    long_rest = steps((540, 4.0), (330, 2.6), (420, 4.0), (330, 2.6))
    short_rest = steps((540, 4.0), (330, 2.6), (180, 4.0), (330, 2.6))
    return run({H2: circle(long_rest)}), run({H2: circle(short_rest)})


def test_a_rule_rearms_only_after_a_clear_recovery_held_long_enough(recovering_runs):
    long_rest, short_rest = recovering_runs
    rules = [peak_rule()]
    got, _ = evaluate_with(rules, long_rest, rearm_margin=0.2, rearm_hold_s=180)
    assert [a.player_id for _, a in got] == ["h2", "h2"] and got[1][0] - got[0][0] > 600  # two falls, two alerts
    got, _ = evaluate_with(rules, short_rest, rearm_margin=0.2, rearm_hold_s=180)
    assert [a.player_id for _, a in got] == ["h2"]  # a short recovery is part of the same drop
    # the same short recovery re-arms a rule that asks for less (5 % above the limit at once, as before)
    got, _ = evaluate_with(rules, short_rest, rearm_margin=0.05, rearm_hold_s=0)
    assert len(got) == 2
    # a rule's own margin wins over the default
    got, _ = evaluate_with([peak_rule(rearm_margin=0.5)], long_rest, rearm_margin=0.05, rearm_hold_s=0)
    assert got == []  # 240 m/min never reaches 1.5 x 180 = 270: the rule never arms


def test_the_cap_allows_so_many_alerts_per_rule_player_and_window(recovering_runs):
    long_rest, _ = recovering_runs
    rules = [peak_rule()]
    # both drops fall in the first 45 minutes: one alert with a cap of 1 per 45-minute window ...
    got, a = evaluate_with(rules, long_rest, rearm_margin=0.2, rearm_hold_s=180, cap_count=1, cap_window_min=45,
                           period_min={"first_half": 45})
    assert len(got) == 1
    # ... and the rule was disarmed by the second crossing all the same: the log holds the one alert, with its clock
    assert [(x["rule"], x["player_id"], x["period"]) for x in a.raised] == [("distance_peak", "h2", "first_half")]
    assert a.raised[0]["match_time_s"] == got[0][0]
    # with 15-minute windows the second drop (after minute 15) is in a window of its own
    assert got[0][0] < 900
    got, _ = evaluate_with(rules, long_rest, rearm_margin=0.2, rearm_hold_s=180, cap_count=1, cap_window_min=15)
    assert len(got) == 2 and got[1][0] >= 900


def test_a_drop_from_the_start_is_no_fall_against_the_peak():
    """A player who never ran clearly above the limit gives no peak alert (the rule arms on a clear stretch);
    the 75 % of peak limit is met from the start by constant running at the peak itself: no alert either."""
    flat = run({H2: circle(steps((720, 3.0)))})
    got, _ = evaluate_with([peak_rule()], flat, rearm_margin=0.2, rearm_hold_s=180)
    assert got == []


def test_alerts_raised_before_a_restart_count_against_the_cap_and_disarm(recovering_runs):
    long_rest, _ = recovering_runs
    first, a = evaluate_with([peak_rule()], long_rest, rearm_margin=0.2, rearm_hold_s=180)
    assert len(first) == 2
    b = Alerter([peak_rule()], tuple(IDS), rearm_margin=0.2, rearm_hold_s=180, cap_count=1, cap_window_min=45)
    b.restore(a.raised[:1])  # the first alert was kept with the match; the server restarts after it
    assert b.raised == a.raised[:1]
    later = [x for snap, cov, block in long_rest if snap["match_time_s"] > first[0][0]
             for x in b.evaluate(snap, cov, block)]
    assert later == []  # the second drop is in the same 45-minute window: capped


# -- the feed-quality guard -------------------------------------------------------------------------
def test_no_drop_off_alert_when_the_player_is_barely_seen():
    """4 m/s throughout, but after 6 minutes the player is seen 2 s and missed 2 s in turn: gaps over
    the 1-s bridge (kinematics.bridge_gap_s) credit nothing, so his distance rate halves, and coverage in
    the window falls to ~0.5. The drop is the camera's: no alert; without the guard the same case alerts."""
    speeds = steps((720, 4.0))
    seen = np.ones(speeds.size, bool)
    k = np.arange(speeds.size)
    seen[(k >= 360 * FPS) & ((k // (2 * FPS)) % 2 == 1)] = False
    frames = run({H2: circle(speeds)}, {H2: seen})
    last_cov = frames[-1][1][5][H2]
    assert 0.4 < last_cov < 0.6
    assert evaluate([peak_rule(min_coverage=0.8)], frames) == []
    assert len(evaluate([peak_rule(min_coverage=0.0)], frames)) == 1


# -- drop-off against the baseline band -------------------------------------------------------------
def test_drop_vs_baseline_band(tmp_path):
    """Three stored live matches with h2 at 180, 192 and 204 m/min in block 0-15: median 192,
    spread 1.4826 x MAD 12 = 17.79 (Rousseeuw & Croux 1993); band floor with 1 spread = 174.2 m/min.
    2.85 m/s (171 m/min) alerts; 2.95 m/s (177 m/min) is the near miss."""
    db = tmp_path / "history.sqlite"
    for k, rate in enumerate((180.0, 192.0, 204.0)):
        history.save(db, MatchRecord(key=f"past{k}", match_id=f"past{k}", source="live", kickoff_t=1.7e9 + k * 86400,
                                     match_time_s=5400.0, frames=135000, origin="test", teams=(),
                                     players=(("h2", cb.HOME, "Test H2", 2, False, 90.0, 1.0),),
                                     figures=(("h2", "block_0_15", "m_per_min", rate),)))
    bands = history.baselines(db, ["h2"], 5, 60.0)
    band = bands["h2"]["block_0_15"]["m_per_min"]
    assert (band.median, band.n) == (192.0, 3) and band.spread == pytest.approx(17.791, abs=1e-3)
    rule = DropOffBaseline(id="dist_base", kind="drop_off_baseline", figure="distance", window_min=5, spreads=1.0,
                           min_matches=3, min_on_pitch_min=5, min_coverage=0.8)
    got = evaluate([rule], run({H2: circle(steps((600, 2.85)))}), baselines=bands)
    assert [(a.rule, a.player_id) for _, a in got] == [("dist_base", "h2")]
    assert got[0][1].limit == pytest.approx(192.0 - 17.791, abs=0.05)
    assert "block_0_15" in got[0][1].message
    near = run({H2: circle(steps((600, 2.95)))})
    assert evaluate([rule], near, baselines=bands) == []
    # too few matches behind the band: no alert
    fewer = {"h2": {"block_0_15": {"m_per_min": Band(192.0, 17.791, 2)}}}
    assert evaluate([rule], run({H2: circle(steps((600, 2.85)))}), baselines=fewer) == []


# -- load budgets ---------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def sprint_run():
    """Repeated 10-s cycles: 3 s at 7.5 m/s (sprint band, Di Salvo et al. 2009), 7 s at 3 m/s."""
    return run({H2: circle(steps(*([(3, 7.5), (7, 3.0)] * 36)), 30.0)})


@pytest.mark.parametrize("figure", ["minutes", "hsr_m", "sprint_m", "sprints"])
def test_budget_alerts_at_80_and_100_percent(sprint_run, figure):
    final = float(sprint_run[-1][0]["players"]["h2"][figure])
    assert final > 0
    rule = LoadBudget(id="budget", kind="load_budget", levels=[0.8, 1.0])

    def levels(cap: float) -> list[float]:
        cap = int(cap) if figure == "sprints" else cap
        got = evaluate([rule], sprint_run, budgets={"h2": Caps(**{figure: cap})})
        assert all(a.figure == figure and a.player_id == "h2" and a.value >= a.limit for _, a in got)
        return [a.level for _, a in got]

    over = final if figure == "sprints" else final * 0.99
    assert levels(over) == [0.8, 1.0]  # both, once each, in order
    near = final + 1 if figure == "sprints" else final * 1.01
    assert levels(near) == [0.8]  # the near miss of 100%
    assert levels(math.ceil(final / 0.8) + 1 if figure == "sprints" else final / 0.79) == []  # nor 80%


def test_changing_a_budget_lets_its_levels_fire_again(sprint_run):
    rule = LoadBudget(id="budget", kind="load_budget", levels=[0.8, 1.0])
    a = Alerter([rule], tuple(IDS))
    a.set_budgets({"h2": Caps(minutes=3.0)})
    snap, cov, block = sprint_run[-1]
    assert [x.level for x in a.evaluate(snap, cov, block)] == [0.8, 1.0]
    assert a.evaluate(snap, cov, block) == []
    a.set_budgets({"h2": Caps(minutes=3.0)})  # unchanged: nothing again
    assert a.evaluate(snap, cov, block) == []
    a.set_budgets({"h2": Caps(minutes=6.5)})
    assert [x.level for x in a.evaluate(snap, cov, block)] == [0.8]


# -- bad data gets clear errors -----------------------------------------------------------------------
GOOD_RULE = """
[[rules]]
id = "d"
kind = "drop_off_peak"
figure = "distance"
window_min = 5
share = 0.7
min_on_pitch_min = 15
min_coverage = 0.8
"""


@pytest.mark.parametrize("text,needle", [
    ("[[rules]\nid = 1\n", "not valid TOML"),
    (GOOD_RULE.replace('"drop_off_peak"', '"drop_of_peak"'), "does not match any of the expected tags"),
    (GOOD_RULE.replace("share = 0.7", "share = 1.5"), "rules.0.drop_off_peak.share"),
    (GOOD_RULE.replace("share = 0.7", "shar = 0.7"), "rules.0.drop_off_peak.shar"),
    (GOOD_RULE.replace('figure = "distance"', 'figure = "speed"'), "rules.0.drop_off_peak.figure"),
    (GOOD_RULE + GOOD_RULE, "rule ids must be unique: d"),
    ('[[rules]]\nid = "b"\nkind = "load_budget"\nlevels = [1.0, 0.8]\n', "strictly increasing"),
    ('[[rules]]\nid = "Bad Id"\nkind = "load_budget"\nlevels = [0.8]\n', "rules.0.load_budget.id"),
])
def test_bad_rule_files_get_clear_errors(tmp_path, text, needle):
    f = tmp_path / "rules.toml"
    f.write_text(text)
    with pytest.raises(RulesError) as exc:
        load_rules(f)
    assert needle in str(exc.value) and str(f) in str(exc.value)
    # and the server refuses to start on it: the config names the file
    cfg = tmp_path / "club.toml"
    cfg.write_text(f'[alerts]\nrules_file = "{f}"\n')
    with pytest.raises(ConfigError) as exc:
        load_settings(cfg)
    assert needle in str(exc.value) and "alerts" in str(exc.value)


def test_rule_files_in_json_and_windows_that_are_not_computed(tmp_path):
    f = tmp_path / "rules.json"
    f.write_text(orjson.dumps({"rules": [{"id": "d", "kind": "drop_off_peak", "figure": "hsr", "window_min": 3,
                                          "share": 0.5, "min_on_pitch_min": 10, "min_coverage": 0.7}]}).decode())
    rules = load_rules(f)
    assert rules[0].window_min == 3
    s = load_settings()
    with pytest.raises(RulesError, match=r"rules.0 \(d\).window_min: 3 is not in windows.last_min"):
        check_rules(rules, s.windows.last_min, s.windows.peak_min)
    (tmp_path / "broken.json").write_text("{")
    with pytest.raises(RulesError, match="not valid JSON"):
        load_rules(tmp_path / "broken.json")
    with pytest.raises(RulesError, match="cannot read"):
        load_rules(tmp_path / "missing.toml")


@pytest.mark.parametrize("body,needle", [
    ({"players": {"h9": {"minutes": 60}}}, "players.h9: not in the match sheet"),
    ({"players": {"h2": {"minutes": -5}}}, "players.h2.minutes: Input should be greater than 0"),
    ({"players": {"h2": {"hsr": 400}}}, "players.h2.hsr: Extra inputs are not permitted"),
    ({"players": {"h2": {}}}, "give at least one cap"),
    ({"players": {"h2": {"sprints": 2.5}}}, "players.h2.sprints"),
    ({"budgets": {}}, "budgets: Extra inputs are not permitted"),
    ([1, 2], "Input should be a valid dictionary"),
])
def test_bad_budgets_get_clear_errors(body, needle):
    with pytest.raises(RulesError) as exc:
        parse_budgets(body, "budgets", set(IDS))
    assert needle in str(exc.value)


def test_default_rules_are_valid_and_computable():
    s = load_settings()
    check_rules(list(s.alerts.rules), s.windows.last_min, s.windows.peak_min)
    assert {r.kind for r in s.alerts.rules} == {"drop_off_peak", "drop_off_baseline", "load_budget"}
    budget = next(r for r in s.alerts.rules if r.kind == "load_budget")
    assert budget.levels == [0.8, 1.0]  # the pacewire default levels


# -- live: budgets over HTTP, alerts on the wire ------------------------------------------------------
def test_budget_files_load_and_bad_ones_are_refused(tmp_path):
    f = tmp_path / "budgets.toml"
    f.write_text('[players.h2]\nminutes = 60\nsprints = 12\n')
    assert load_budgets(f).players["h2"].items() == [("minutes", 60.0), ("sprints", 12.0)]
    bad = tmp_path / "bad.toml"
    bad.write_text('[players.h2]\nminutes = "sixty"\n')
    cfg = tmp_path / "club.toml"
    cfg.write_text(f'[alerts]\nbudgets_file = "{bad}"\n')
    with pytest.raises(ConfigError, match=r"budgets file .*bad.toml: players.h2.minutes"):
        load_settings(cfg)


async def alerts_until_quiet(ws, quiet_s: float = 0.5) -> list[dict]:
    """The alert messages a socket receives until it stays quiet for ``quiet_s``."""
    out = []
    while True:
        try:
            m = orjson.loads(await asyncio.wait_for(ws.recv(), quiet_s))
        except TimeoutError:
            return out
        if m["type"] == "alert":
            out.append(m)


def test_budgets_over_http_and_alerts_on_the_live_stream(tmp_path):
    # the club's budgets file gives a2 one minute; h2's budget comes over HTTP
    (tmp_path / "budgets.toml").write_text("[players.a2]\nminutes = 1.0\n[players.nobody_here]\nminutes = 5.0\n")
    srv = LiveServer(tmp_path / "data", config_text=f'[alerts]\nbudgets_file = "{tmp_path / "budgets.toml"}"\n').start()
    try:
        mid = "m_bud"
        r = httpx.put(f"{srv.http}/api/matches/{mid}", json={"meta": cb.meta(mid), "sheet": cb.sheet(N_HOME, N_AWAY)},
                      timeout=10)
        assert r.status_code == 201
        url = f"{srv.http}/api/matches/{mid}/budgets"
        # from the file: the players of this match only
        assert httpx.get(url, timeout=10).json()["players"] == {"a2": {"minutes": 1.0}}
        bad = httpx.put(url, json={"players": {"h9": {"minutes": 1}}}, timeout=10)
        assert bad.status_code == 422 and bad.json()["error"]["code"] == "bad_budgets"
        assert "h9" in bad.json()["error"]["message"]
        assert httpx.put(url, content=b"{nope", timeout=10).status_code == 400
        # a player returning from injury: one minute of play (80% at 48 s, 100% at 60 s)
        ok = httpx.put(url, json={"players": {"h2": {"minutes": 1.0}}}, timeout=10)
        assert ok.status_code == 200 and ok.json()["players"] == {"h2": {"minutes": 1.0}}
        assert httpx.get(url, timeout=10).json()["players"] == {"h2": {"minutes": 1.0}}  # PUT replaces them all
        stored = orjson.loads((srv.data / "matches" / mid / "budgets.json").read_bytes())
        assert stored["players"]["h2"] == {"minutes": 1.0}

        xy = np.full((70 * FPS, len(IDS), 2), np.nan)
        xy[:, H2] = circle(np.full(70 * FPS, 3.0))
        xy[:, IDS.index("a2")] = circle(np.full(70 * FPS, 2.0), 15.0)
        objs = cb.frames(xy, IDS, N_HOME, match_id=mid)

        async def go():
            async with websockets.connect(f"{srv.ws}/live/{mid}?every=1") as everyone, \
                    websockets.connect(f"{srv.ws}/live/{mid}?every=1&view=team:{cb.AWAY}") as away:
                for i in range(0, len(objs), 250):  # 10 s of frames per batch
                    body = b"\n".join(cb.lines(objs[i:i + 250]))
                    await asyncio.to_thread(httpx.post, f"{srv.http}/api/matches/{mid}/frames", content=body,
                                            timeout=30)
                alerts = []
                deadline = time.monotonic() + 15
                while len(alerts) < 2 and time.monotonic() < deadline:
                    m = orjson.loads(await asyncio.wait_for(everyone.recv(), deadline - time.monotonic()))
                    if m["type"] == "alert":
                        alerts.append(m)
                await asyncio.sleep(1.0)
                # nothing more for the home stream (once per level); nothing at all for the away one
                return alerts + await alerts_until_quiet(everyone), await alerts_until_quiet(away)

        alerts, away_alerts = asyncio.run(go())
        assert [(m["rule"], m["player_id"], m["level"]) for m in alerts] == [("load_budget", "h2", 0.8),
                                                                              ("load_budget", "h2", 1.0)]
        for m in alerts:
            assert m["value"] >= m["limit"] and m["match_id"] == mid and "message" in m and m["team_id"] == cb.HOME
        assert [m["limit"] for m in alerts] == [0.8, 1.0]
        assert away_alerts == []  # a stream showing the other team does not get h2's alerts
    finally:
        srv.stop()


def test_budget_caps_take_numbers_only():
    # a cap of true or "12" is a typing mistake to name, not a value to guess (common practice: strict input)
    for bad in (True, "12", [60]):
        with pytest.raises(RulesError, match="players.h1.minutes"):
            parse_budgets({"players": {"h1": {"minutes": bad}}})
    assert parse_budgets({"players": {"h1": {"minutes": 60, "hsr_m": 450.5}}}).players["h1"].items() == [
        ("minutes", 60.0), ("hsr_m", 450.5)]


def _wait(get, pred, timeout: float, what: str):
    """Poll ``get()`` until ``pred`` holds of its result; fails naming ``what``."""
    deadline = time.monotonic() + timeout
    while True:
        got = get()
        if pred(got):
            return got
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what}; last: {got!r}"[:2000])
        time.sleep(0.2)


@pytest.mark.slow
def test_alerts_stay_in_the_snapshot_the_reports_and_across_a_restart(tmp_path):
    """Two budget alerts (a one-minute budget, 80 % and 100 %) on a real server: the snapshot holds them
    (REST, a new subscriber's opening snapshot; a view of the other team holds none), the half-time report
    lists them (HTML, alerts.csv, snapshot.json), and a restarted server still shows them."""
    srv = LiveServer(tmp_path / "data").start()
    mid = "m_keep"
    base = f"{srv.http}/api/matches/{mid}"
    try:
        assert httpx.put(base, json={"meta": cb.meta(mid), "sheet": cb.sheet(N_HOME, N_AWAY)},
                         timeout=10).status_code == 201
        assert httpx.put(f"{base}/budgets", json={"players": {"h2": {"minutes": 1.0}}}, timeout=10).status_code == 200
        xy = np.full((70 * FPS, len(IDS), 2), np.nan)
        xy[:, H2] = circle(np.full(70 * FPS, 3.0))
        xy[:, IDS.index("a2")] = circle(np.full(70 * FPS, 2.0), 15.0)
        objs = cb.frames(xy, IDS, N_HOME, match_id=mid)
        for i in range(0, len(objs), 250):
            r = httpx.post(f"{base}/frames", content=b"\n".join(cb.lines(objs[i:i + 250])), timeout=30)
            assert r.status_code == 200, r.text
        snap = _wait(lambda: httpx.get(f"{base}/snapshot", timeout=10).json(), lambda s: len(s.get("alerts", [])) == 2,
                     15, "two alerts in the snapshot")
        alerts = snap["alerts"]
        assert [(a["rule"], a["player_id"], a["level"], a["period"]) for a in alerts] == [
            ("load_budget", "h2", 0.8, "first_half"), ("load_budget", "h2", 1.0, "first_half")]
        # raised at 80 % and 100 % of one minute on the pitch: 48 and 60 s into the match (the budget's levels)
        assert 47 <= alerts[0]["match_time_s"] <= 50 and 59 <= alerts[1]["match_time_s"] <= 62

        async def openers() -> tuple[dict, dict]:
            async with websockets.connect(f"{srv.ws}/live/{mid}?every=1") as everyone, \
                    websockets.connect(f"{srv.ws}/live/{mid}?every=1&view=team:{cb.AWAY}") as away:
                return orjson.loads(await everyone.recv()), orjson.loads(await away.recv())

        everyone, away = asyncio.run(openers())
        assert everyone["type"] == "snapshot" and everyone["alerts"] == alerts  # a page opened later shows them
        assert away["type"] == "snapshot" and away["alerts"] == []  # a view shows its players' alerts only

        # the half-time whistle: the report lists the alerts in each of its forms
        r = httpx.post(f"{base}/events", json=[{"type": "period_end", "period": "first_half",
                                                "frame_id": objs[-1]["frame_id"]}], timeout=10)
        assert r.status_code == 200, r.text
        listed = _wait(lambda: httpx.get(f"{base}/reports", timeout=10).json()["reports"],
                       lambda rs: any(x["kind"] == "half_time" for x in rs), 60, "the half-time report")
        entry = next(x for x in listed if x["kind"] == "half_time")
        rows = list(csv.DictReader(io.StringIO(httpx.get(srv.http + entry["alerts_csv"], timeout=10).text)))
        assert [(x["rule"], x["player_id"], x["jersey_number"], x["level"]) for x in rows] == [
            ("load_budget", "h2", "2", "0.8"), ("load_budget", "h2", "2", "1.0")]
        assert orjson.loads(httpx.get(srv.http + entry["json"], timeout=10).content)["alerts"] == alerts
        html = httpx.get(srv.http + entry["url"], timeout=10).text
        section = html[html.index('<section id="alerts">'):]
        section = section[:section.index("</section>")]
        assert section.count("<tr") == 2 + 1 + 2  # two heads, the count of the one rule, the two alerts
        assert "load_budget" in section and "reached 80%" in section and "reached 100%" in section

        # a restart: the match comes back from its folder with the alerts it had raised
        srv.stop()
        srv = LiveServer(tmp_path / "data")
        srv.start()
        base = f"{srv.http}/api/matches/{mid}"
        back = _wait(lambda: httpx.get(f"{base}/snapshot", timeout=10), lambda r: r.status_code == 200, 30,
                     "the match back after the restart").json()
        assert back["alerts"] == alerts
    finally:
        srv.stop()


@pytest.mark.slow
def test_the_demo_match_gives_alerts_worth_reading(tmp_path):
    """The fictional 95-minute demo match (``pacewire synth --minutes 95``) with the default rules, evaluated at
    every second as live: no player gets more than 3 alerts of one rule, and the match at most one alert per
    outfield player who played, on average (pacewire's targets for alerts the bench reads: common practice,
    a few prompts a match, never a stream)."""
    from pacewire.replay.synth import write_match
    from pacewire.reports.alert_log import counts
    from pacewire.reports.offline import run_recording

    folder = write_match(tmp_path / "demo", minutes=95)
    state, _, _, alerts = run_recording(folder, load_settings(), progress=False, alerts=True)
    outfield = [p for p in state.roster.players if not p.is_goalkeeper
                and sum(int(per.onpitch_slots()[state.roster.index[p.id]]) for per in state.periods) > 0]
    per_rule = counts(alerts)
    assert alerts and all(c["most"] <= 3 for c in per_rule.values()), per_rule
    assert len(alerts) <= len(outfield), (len(alerts), len(outfield), per_rule)
