"""Engine behaviour on constructed paths: each expected value names where it comes from."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

from pacewire.analyze import new_match
from pacewire.config import load_settings
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import Block
from tests.support import cdf_build as cb
from tests.support.trajectories import FPS, distance, ramped, round_circle, speeds


def run(xy: np.ndarray, n_home: int | None = None, gk: tuple[str, ...] = (), overrides: dict | None = None,
        chunks: list[int] | None = None, **frame_kw) -> dict:
    """Analyse positions (T, P, 2) as CDF frames; ``chunks`` splits them into decode/step calls."""
    P = xy.shape[1]
    n_home = P if n_home is None else n_home
    ids = cb.player_ids(n_home, P - n_home)
    state, dec = new_match(cb.meta(), cb.sheet(n_home, P - n_home, gk=gk), load_settings(overrides=overrides))
    lines = cb.lines(cb.frames(xy, ids, n_home, **frame_kw))
    chunks = chunks or [len(lines)]
    i = 0
    for c in chunks:
        state.ingest(dec.decode_lines(lines[i:i + c]))
        i += c
    assert i == len(lines)
    state.finish()
    return build_snapshot(state)


R_TRACK = 30.0  # runs follow a circle of this radius (m) so they stay on the pitch


def piecewise(speed_durations: list[tuple[float, float]]) -> np.ndarray:
    """Path length (m) of a run at piecewise-constant speeds [(m/s, s), ...], one value per frame."""
    return distance(speeds(speed_durations))


def one_player(s: np.ndarray, y: np.ndarray | None = None) -> np.ndarray:
    """Positions (T, 1, 2) along the circle of radius R_TRACK for path lengths ``s``;
    with ``y`` given, ``s`` and ``y`` are x and y directly."""
    xy = np.zeros((len(s), 1, 2))
    if y is not None:
        xy[:, 0, 0], xy[:, 0, 1] = s, y
    else:
        xy[:, 0] = round_circle(s, R_TRACK)
    return xy


def test_circle_gives_its_circumference():
    # geometry: 4 laps of a circle of radius 15 m at 4 m/s = 8 pi r = 376.99 m
    r, v = 15.0, 4.0
    laps_s = 4 * 2 * np.pi * r / v
    t = np.arange(0, laps_s + 1 / FPS / 2, 1 / FPS)
    xy = one_player(r * np.cos(v * t / r), r * np.sin(v * t / r))
    p = run(xy)["players"]["h1"]
    assert p["distance_m"] == pytest.approx(8 * np.pi * r, rel=0.01)


def test_constant_run_is_300_m_per_minute():
    # 5 m/s × 60 s = 300 m per minute (definition)
    p = run(one_player(piecewise([(5.0, 180.0)])))["players"]["h1"]
    assert p["m_per_min"] == pytest.approx(300.0, rel=0.005)
    assert p["windows"]["last_1min"]["m_per_min"] == pytest.approx(300.0, rel=0.005)
    assert p["windows"]["peak_1min"]["distance_m"] == pytest.approx(300.0, rel=0.005)
    assert p["hsr_m"] == 0.0 and p["sprints"] == 0


def test_ten_second_sprint_counts_once():
    # a sprint start towards 8 m/s held 10 s (tau 1 s, Furusawa et al. 1927), then a stop: the distance
    # above the 7.0 m/s sprint threshold (Di Salvo et al. 2009) is that of the path itself; smoothing
    # softens the way in and out, so allow 5 %.
    v = ramped([(0, 5), (8.0, 10.0), (0, 5)], tau_s=1.0)
    p = run(one_player(distance(v)))["players"]["h1"]
    assert p["sprint_m"] == pytest.approx(float((v * (v >= 7.0)).sum() / FPS), rel=0.05)
    assert p["sprints"] == 1
    assert p["hsr_efforts"] == 1  # a sprint is also an HSR effort (common practice)
    # the start and the stop hold more than ±3 m/s² for over 0.5 s (Akenhead et al. 2013)
    assert p["accels"] == 1 and p["decels"] == 1


def test_short_burst_is_no_sprint():
    # about 0.75 s above 7 m/s: shorter than the 1 s minimum of a sprint (common practice), longer
    # than the 0.5 s a top speed must be held (config/default.toml)
    v = ramped([(5.0, 10.0), (9.0, 1.0), (5.0, 10.0)], tau_s=0.8)
    assert 0.5 < (v >= 7.0).sum() / FPS < 1.0
    p = run(one_player(distance(v)))["players"]["h1"]
    assert p["sprints"] == 0
    assert p["max_speed_ms"] > 7.0  # the burst was seen, just too short to count


def test_two_sprints_with_a_pause_count_twice():
    x = distance(ramped([(0, 3), (8.0, 4.0), (3.0, 4.0), (8.0, 4.0), (0, 3)], tau_s=1.0))
    assert run(one_player(x))["players"]["h1"]["sprints"] == 2


def test_goalkeeper_excluded_from_outfield_totals():
    T = 60 * FPS
    xy = np.zeros((T, 3, 2))
    xy[:, 0] = one_player(piecewise([(4.0, 60.0)])[:T])[:, 0]  # goalkeeper runs most (home h1)
    xy[:, 1] = one_player(piecewise([(2.0, 60.0)])[:T])[:, 0]
    xy[:, 2] = one_player(piecewise([(3.0, 60.0)])[:T])[:, 0]  # away a1
    snap = run(xy, n_home=2, gk=("h1",))
    players = snap["players"]
    home = snap["teams"][cb.HOME]["outfield"]
    assert players["h1"]["is_goalkeeper"]
    assert home["distance_m"] == pytest.approx(players["h2"]["distance_m"], abs=0.2)
    assert home["players"] == 1
    assert snap["teams"][cb.AWAY]["outfield"]["distance_m"] == pytest.approx(players["a1"]["distance_m"], abs=0.2)


def test_position_noise_barely_inflates_distance():
    # Gaussian noise of 0.1 m per axis on a 5 m/s run (common practice for optical tracking error).
    rng = np.random.default_rng(11)
    t = np.arange(0, 120, 1 / FPS)
    xy = one_player(5 * t)
    clean = run(xy)["players"]["h1"]["distance_m"]
    noisy_xy = xy + rng.normal(0, 0.1, xy.shape)
    noisy = run(noisy_xy)["players"]["h1"]["distance_m"]
    raw = np.linalg.norm(np.diff(noisy_xy[:, 0], axis=0), axis=1).sum()
    raw_clean = np.linalg.norm(np.diff(xy[:, 0], axis=0), axis=1).sum()
    assert abs(noisy / clean - 1) < 0.01
    assert raw / raw_clean - 1 > 0.05  # raw differentiation is badly inflated by the same noise


def test_short_gap_bridged_long_gap_credits_nothing():
    x = piecewise([(4.0, 60.0)])
    base = run(one_player(x))["players"]["h1"]
    short = one_player(x)
    short[500:520] = np.nan  # 0.8 s: bridged (common practice: gaps ≤ 1 s)
    ps = run(short)["players"]["h1"]
    assert ps["distance_m"] == pytest.approx(base["distance_m"], abs=0.5)
    assert ps["coverage"] == 1.0
    long_ = one_player(x)
    long_[500:750] = np.nan  # 10 s: nothing credited, coverage drops
    pl = run(long_)["players"]["h1"]
    # 10 s at 4 m/s missing, plus the one-sided fits at the gap edges
    assert pl["distance_m"] == pytest.approx(base["distance_m"] - 40.0, abs=2.0)
    assert pl["coverage"] == pytest.approx(1 - 250 / len(x), abs=0.01)


def test_jump_is_rejected_and_counted():
    x = piecewise([(4.0, 60.0)])
    xy = one_player(x)
    xy[700, 0, 1] += 25.0  # one frame 25 m off: far faster than 12.5 m/s (common practice)
    snap = run(xy)
    p = snap["players"]["h1"]
    base = run(one_player(x))["players"]["h1"]
    assert snap["health"]["jumps"] == 1
    assert p["distance_m"] == pytest.approx(base["distance_m"], abs=0.5)
    assert p["max_speed_ms"] < 4.5


def test_possession_split():
    T = 60 * FPS
    xy = one_player(piecewise([(4.0, 60.0)])[:T])
    status = np.ones(T, bool)
    status[: 10 * FPS] = False  # first 10 s out of play
    poss = np.where(np.arange(T) < 35 * FPS, 0, 1)  # home (own team) then away
    p = run(xy, status=status, poss=poss)["players"]["h1"]
    pos = p["possession"]
    assert pos["out_of_play"]["distance_m"] == pytest.approx(40.0, abs=1.5)
    assert pos["in_possession"]["distance_m"] == pytest.approx(100.0, abs=1.5)
    assert pos["out_of_possession"]["distance_m"] == pytest.approx(100.0, abs=1.5)


def test_no_ball_status_means_no_possession_split():
    p = run(one_player(piecewise([(4.0, 10.0)])))["players"]["h1"]
    assert "possession" not in p


def test_relative_zones_use_each_players_max_speed():
    x = piecewise([(6.0, 30.0)])
    over = {"zones": {"mode": "relative", "max_speed_ms": {"h1": 10.0}}}
    p = run(one_player(x), overrides=over)["players"]["h1"]
    # 6 m/s is 60 % of 10 m/s: in the 50-70 % band (common-practice bands of config/default.toml)
    assert p["zones"]["50-70%"] == pytest.approx(p["distance_m"], rel=0.01)


def test_periods_and_blocks():
    T = 20 * 60 * FPS  # 20 minutes of the first half, then 2 of the second
    xy1 = one_player(piecewise([(3.0, 20 * 60)])[:T])
    ids = ["h1"]
    state, dec = new_match(cb.meta(), cb.sheet(1, 0, gk=()), load_settings())
    f1 = cb.frames(xy1, ids, 1)
    xy2 = one_player(piecewise([(2.0, 120)])[: 120 * FPS])
    f2 = cb.frames(xy2, ids, 1, period="second_half", t0=T / FPS + 900, frame0=T)
    state.ingest(dec.decode_lines(cb.lines(f1 + f2)))
    state.finish()
    p = build_snapshot(state)["players"]["h1"]
    assert set(p["periods"]) == {"first_half", "second_half"}
    assert p["periods"]["first_half"]["distance_m"] == pytest.approx(3600, rel=0.005)
    assert p["periods"]["second_half"]["distance_m"] == pytest.approx(240, rel=0.01)
    assert p["windows"]["block_0_15"]["distance_m"] == pytest.approx(2700, rel=0.005)
    assert p["windows"]["block_15_30"]["distance_m"] == pytest.approx(900, rel=0.01)
    assert p["windows"]["block_45_60"]["distance_m"] == pytest.approx(240, rel=0.01)
    assert p["minutes"] == pytest.approx(22.0, abs=0.05)
    assert p["windows"]["peak_10min"]["distance_m"] == pytest.approx(1800, rel=0.005)


def _figures(snap: dict) -> dict:
    # health's arrival figures are about delivery, not the frames; compare the rest
    return {"players": snap["players"], "teams": snap["teams"], "jumps": snap["health"]["jumps"]}


def _messy_match(seed: int, seconds: int = 90) -> np.ndarray:
    """Three players with smooth random movement, dropouts, long gaps and jumps."""
    rng = np.random.default_rng(seed)
    T = seconds * FPS
    t = np.arange(T) / FPS
    xy = np.zeros((T, 3, 2))
    for p in range(3):
        f = rng.uniform(0.05, 0.4, 3)
        a = rng.uniform(3, 12, 3)
        ph = rng.uniform(0, 6, 3)
        xy[:, p, 0] = sum(a[k] * np.sin(f[k] * t + ph[k]) for k in range(3))
        xy[:, p, 1] = sum(a[k] * np.cos(0.7 * f[k] * t + ph[k]) for k in range(3)) / 2
    for _ in range(6):
        p = rng.integers(3)
        s = rng.integers(0, T - 100)
        xy[s: s + rng.integers(1, 80), p] = np.nan
    for _ in range(3):
        xy[rng.integers(0, T), rng.integers(3), 0] += rng.choice([-20.0, 20.0])
    return xy


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_blocking_does_not_change_figures(seed):
    # the engine is the same in every path (docs/architecture.md): live, replay and offline give
    # identical numbers for identical input, however the frames arrive in blocks.
    xy = _messy_match(seed)
    whole = run(xy, n_home=2)
    frame_by_frame = run(xy, n_home=2, chunks=[1] * len(xy))
    by_25 = run(xy, n_home=2, chunks=[25] * (len(xy) // 25))
    assert _figures(whole) == _figures(frame_by_frame) == _figures(by_25)


@hsettings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 10_000), cuts=st.lists(st.integers(1, 400), min_size=1, max_size=30))
def test_any_blocking_gives_identical_figures(seed, cuts):
    xy = _messy_match(seed, seconds=40)
    T = len(xy)
    chunks, total = [], 0
    for c in cuts:
        if total + c >= T:
            break
        chunks.append(c)
        total += c
    chunks.append(T - total)
    assert _figures(run(xy, n_home=2, chunks=chunks)) == _figures(run(xy, n_home=2))


def test_stall_flush_then_resume_keeps_every_frame():
    x = piecewise([(4.0, 30.0)])
    xy = one_player(x)
    ids = ["h1"]
    state, dec = new_match(cb.meta(), cb.sheet(1, 0, gk=()), load_settings())
    lines = cb.lines(cb.frames(xy, ids, 1))
    state.ingest(dec.decode_lines(lines[:400]))
    state.flush()  # the feed stalled: the tail is finalised at once
    flushed = build_snapshot(state)["players"]["h1"]["distance_m"]
    assert flushed == pytest.approx(4.0 * 399 / FPS, abs=0.5)
    state.ingest(dec.decode_lines(lines[400:]))
    state.finish()
    assert build_snapshot(state)["players"]["h1"]["distance_m"] == pytest.approx(4.0 * (len(x) - 1) / FPS, abs=1.0)


def test_block_take_and_concat_round_trip():
    b = Block.empty(3)
    assert len(Block.concat([b, b])) == 0


def test_health_lag_rules():
    from pacewire.engine.health import FeedHealth, HealthParams

    def feed(offset_fn, seconds=30, speed=1):
        """25 wall-clock ticks a second, each with ``speed`` frames 1/25 s apart in frame time."""
        h = FeedHealth(HealthParams(5.0, 0.9, 0.2, 2.0, 2.0), fps_nominal=25)
        for k in range(seconds * 25):
            now = 1000.0 + k / 25
            stamps = now - offset_fn(k / 25) + np.arange(speed) / 25
            h.on_frames(now, stamps, speed)
        return h.evaluate(now, 0.0), h, now

    # a provider clock 1 h off, steady: the feed is fine (common practice: judge delay, not offset), and the
    # lag is not reported, since the timestamps are not wall-clock time (an offset beyond 60 s)
    (state, _), h, now = feed(lambda t: 3600.0)
    assert state == "ok" and h.lag(now) == (None, None) and "3,600 s behind" in h.lag_note(now)
    # a provider 0.3 s behind the wall clock: the lag is reported (common practice: NTP-synced clocks)
    (state, _), h, now = feed(lambda t: 0.3)
    assert state == "ok" and h.lag(now)[0] == pytest.approx(0.3) and h.lag_note(now) is None
    # a 10x replay: frame time runs ahead of the wall clock, never "late"; its rate is counted on the
    # frames' own clock (25/s, not 250/s) and its speed shown as 10x
    (state, _), h, now = feed(lambda t: 5000.0 - 9 * t, speed=10)
    assert state == "ok" and h.fast(now) and h.fps_observed(now) == pytest.approx(25, rel=0.01)
    assert h.speed(now) == pytest.approx(10, rel=0.02) and "10.0x faster" in h.lag_note(now)
    # a 10x replay that sends one frame in ten is missing frames: low rate on the frames' clock
    (state, reasons), h, now = feed(lambda t: 5000.0 - 9 * t)
    assert state == "degraded" and [r["code"] for r in reasons] == ["low_rate"]
    assert h.fps_observed(now) == pytest.approx(2.5, rel=0.02)
    # a feed falling behind by 0.5 s every second is late within seconds
    (state, reasons), _, _ = feed(lambda t: 0.5 * t)
    assert state == "degraded" and [r["code"] for r in reasons] == ["late_delivery"]


def test_savgol_weights_equal_scipys():
    # Savitzky & Golay 1964 as implemented by scipy.signal.savgol_coeffs (the reference)
    from scipy.signal import savgol_coeffs

    from pacewire.engine.kinematics import savgol_weights

    for w, order in ((25, 3), (11, 2), (51, 3)):
        for d in range(3):
            for j in (0, w // 3, w // 2, w - 1):
                np.testing.assert_allclose(savgol_weights(w, order, d, 0.04, j),
                                           savgol_coeffs(w, order, deriv=d, delta=0.04, pos=j, use="dot"),
                                           rtol=1e-9, atol=1e-9)
