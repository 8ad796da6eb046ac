"""Heart rate in the engine: its sums per sample, period and second, and the figures from them
(docs/wearables.md). The sample decoder and its gate are tested in tests/wire/test_heart.py."""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.engine import heart as hr
from pacewire.engine.heart import HeartParams, HeartProfile, HeartRate

P = HeartParams()
T0 = 1_773_500_400.0  # 2026-03-14T15:00:00Z, a fictional kick-off


def engine(*profiles: HeartProfile) -> HeartRate:
    return HeartRate(P, list(profiles))


def steady(h: HeartRate, player: int, t0: float, seconds: int, bpm: float, hz: float = 1.0) -> None:
    """Samples at ``hz`` from t0 for ``seconds`` (seconds·hz + 1 samples: the first credits nothing)."""
    t = t0 + np.arange(int(seconds * hz) + 1) / hz
    h.add(np.full(t.shape, player), t, np.full(t.shape, float(bpm)))


def one_period(h: HeartRate, t0: float = T0, length: float = 7200.0) -> np.ndarray:
    h.settle([(0, t0, t0 + length)], math.inf)
    return h.period_sums(0)


def test_params_defaults_equal_the_docs():
    # docs/wearables.md, "Heart rate": 30/230 bpm, 40 bpm/s, 3 in a row, 5 s gap, 1 Hz, Edwards zones
    assert (P.min_bpm, P.max_bpm, P.max_jump_bpm_s, P.jump_reset, P.max_gap_s, P.expected_hz, P.stale_s) == \
        (30, 230, 40, 3, 5.0, 1.0, 5.0)
    assert P.zone_edges_pct == (50, 60, 70, 80, 90) and P.edwards_weights == (1, 2, 3, 4, 5)
    assert P.zone_names() == ["50-60%", "60-70%", "70-80%", "80-90%", "90-100%"]


def test_edwards_ten_minutes_at_75_percent():
    # Edwards 1993: 10 min in zone 70-80 % HRmax (weight 3) → 3 × 10 = 30.0 AU
    h = engine(HeartProfile(hr_max_bpm=200))
    steady(h, 0, T0, 600, 150)  # 150 / 200 = 75 %
    sums = one_period(h)
    fig = h.figures(sums, np.array([600.0]))
    assert fig["trimp_edwards"] == [30.0]
    assert fig["hr_zones"] == [{"50-60%": 0.0, "60-70%": 0.0, "70-80%": 600.0, "80-90%": 0.0, "90-100%": 0.0}]
    assert fig["hr_mean_bpm"] == [150.0]
    assert sums[0, hr.HR_DT] == 600 * hr.MICRO  # 601 samples at 1 Hz credit 600 s (the first credits nothing)
    assert fig["hr_coverage"] == [1.0]  # 601 samples / 600 expected, capped at 1 (docs/wearables.md)
    assert fig["trimp_banister"] == [None]  # no hr_rest_bpm or sex


def test_edwards_at_4_hz_is_the_same_load():
    # Edwards 1993 counts minutes, not samples: 10 min at 75 % is 30.0 AU at any sampling rate
    h = engine(HeartProfile(hr_max_bpm=200))
    steady(h, 0, T0, 600, 150, hz=4.0)
    fig = h.figures(one_period(h), np.array([1200.0]))
    assert fig["trimp_edwards"] == [30.0]
    assert fig["hr_coverage"] == [1.0]  # 2401 samples for 1200 expected at 1 Hz, capped


@pytest.mark.parametrize("sex, expected", [
    # Banister 1991: 30 min × HRr 0.5 × a·e^(b·0.5), worked by hand:
    ("male", 25.07),  # 30 × 0.5 × 0.64 × e^0.96 = 9.6 × 2.6117 = 25.07
    ("female", 29.73),  # 30 × 0.5 × 0.86 × e^0.835 = 12.9 × 2.3048 = 29.73
])
def test_banister_half_reserve_for_thirty_minutes(sex, expected):
    h = engine(HeartProfile(hr_max_bpm=190, hr_rest_bpm=50, sex=sex))
    steady(h, 0, T0, 1800, 120)  # HRr = (120 - 50) / (190 - 50) = 0.5
    sums = one_period(h)
    assert sums[0, hr.HR_BANISTER] / 60e6 == pytest.approx(expected, abs=0.005)
    assert h.figures(sums, np.array([1800.0]))["trimp_banister"] == [round(expected, 1)]


def test_banister_reserve_is_clipped():
    # Banister 1991: HRr clipped to [0, 1]: at rest nothing; above HRmax as at HRmax (male: 1 × 0.64 × e^1.92 per min)
    h = engine(HeartProfile(hr_max_bpm=190, hr_rest_bpm=50, sex="male"),
               HeartProfile(hr_max_bpm=190, hr_rest_bpm=50, sex="male"))
    steady(h, 0, T0, 600, 45)
    steady(h, 1, T0, 600, 200)
    sums = one_period(h)
    assert sums[0, hr.HR_BANISTER] == 0
    assert sums[1, hr.HR_BANISTER] / 60e6 == pytest.approx(10 * 0.64 * 6.821, abs=0.01)  # e^1.92 = 6.821 (by hand)


def test_zone_totals_and_edges():
    # Edwards 1993 zones: 50-60 ... 90-100 % HRmax, >= 100 % in the top zone, < 50 % counts nothing
    h = engine(HeartProfile(hr_max_bpm=200))
    bpm = [90, 100, 119.9, 120, 150, 170, 180, 199, 200, 230]  # 45, 50, 59.95, 60, 75, 85, 90, 99.5, 100, 115 %
    per = 60  # each level held for 60 s at 1 Hz
    t = T0 + np.arange(len(bpm) * per + 1)
    b = np.repeat(np.array(bpm, float), per)
    h.add(np.zeros(t.shape, int), t, np.concatenate(([bpm[0]], b)))
    sums = one_period(h)
    zones = h.figures(sums, np.array([600.0]))["hr_zones"][0]
    assert zones == {"50-60%": 120.0, "60-70%": 60.0, "70-80%": 60.0, "80-90%": 60.0, "90-100%": 240.0}
    assert sum(zones.values()) == 540.0  # all credited time but the 60 s under 50 %
    # Edwards 1993: 2 min × 1 + 1 × 2 + 1 × 3 + 1 × 4 + 4 × 5 = 31 AU
    assert sums[0, hr.HR_EDWARDS] == 31 * 60 * hr.MICRO  # the column holds AU × 60 in micro-units


def test_gaps_over_max_gap_credit_nothing():
    # docs/wearables.md: dt credited when at most max_gap_s (5 s), else nothing
    h = engine(HeartProfile(hr_max_bpm=200))
    t = T0 + np.array([0.0, 1.0, 2.0, 10.0, 11.0, 16.0, 21.5])  # gaps: 1, 1, 8 (no), 1, 5 (yes), 5.5 (no)
    h.add(np.zeros(7, int), t, np.full(7, 150.0))
    sums = one_period(h)
    assert sums[0, hr.HR_DT] == 8 * hr.MICRO  # 1 + 1 + 1 + 5
    assert sums[0, hr.HR_N] == 7  # every sample in the period counts for coverage
    assert h.figures(sums, np.array([20.0]))["hr_coverage"] == [0.35]  # 7 / (20 s × 1 Hz)


def test_a_player_without_credited_time_has_no_figures():
    h = engine(HeartProfile(hr_max_bpm=200, hr_rest_bpm=50, sex="male"), HeartProfile())
    steady(h, 0, T0, 60, 150)
    fig = h.figures(one_period(h), np.array([60.0, 0.0]))
    assert fig["hr_mean_bpm"][1] is None and fig["trimp_edwards"][1] is None and fig["hr_zones"][1] is None
    assert fig["trimp_banister"][1] is None
    assert fig["hr_coverage"][1] is None  # no on-pitch time
    assert fig["trimp_banister"][0] is not None and fig["hr_coverage"][0] == 1.0


def test_period_assignment_breaks_and_edges():
    # docs/wearables.md: a sample counts in the period whose [t0, t_end] holds it; between periods nothing
    h = engine(HeartProfile(hr_max_bpm=200), HeartProfile(hr_max_bpm=200))
    spans = [(0, T0, T0 + 100.0), (1, T0 + 200.0, T0 + 300.0)]
    steady(h, 0, T0 - 10, 320, 150)  # 1 Hz from 10 s before kick-off to 10 s after the second period
    h.add(np.array([1, 1, 1]), T0 + np.array([199.999, 200.0, 201.0]), np.array([150.0, 150.0, 150.0]))
    h.settle(spans, math.inf)
    first, second = h.period_sums(0), h.period_sums(1)
    # player 0: samples at t0 .. t0+100 (101 samples, 101 s: the one at t0 credits the second before it)
    assert first[0, hr.HR_N] == 101 and first[0, hr.HR_DT] == 101 * hr.MICRO
    assert second[0, hr.HR_N] == 101
    assert (h.match_sums()[0] == first[0] + second[0]).all()  # break samples credit nothing anywhere
    # player 1: 1 ms before the second period's first frame credits nothing; the next two do
    assert second[1, hr.HR_N] == 2 and second[1, hr.HR_DT] == 1_001_000
    # per second: floor(t - t0); the first 10 s of the first period hold the samples at t0 .. t0+9
    ten = h.period_sums(0, 0, 10)
    assert ten[0, hr.HR_N] == 10 and ten[0, hr.HR_DT] == 10 * hr.MICRO
    assert (h.period_sums(0, 10) + ten == first).all()
    # hr_bpm still shows a sample from the break
    h2 = engine(HeartProfile(hr_max_bpm=200))
    h2.add(np.array([0]), np.array([T0 + 150.0]), np.array([120.0]))
    h2.settle(spans, math.inf)
    assert h2.match_sums()[0, hr.HR_N] == 0
    assert h2.now() == ([120.0], [60.0]) and h2.peak() == [120.0]


def test_samples_wait_for_tracking():
    # docs/wearables.md: a sample counts in a period once tracking has reached its time
    h = engine(HeartProfile())
    steady(h, 0, T0, 10, 150)
    h.settle([(0, T0, T0 + 5.04)], T0 + 5.0)
    assert h.period_sums(0)[0, hr.HR_N] == 6 and h.pending == 5
    h.settle([(0, T0, T0 + 20.0)], T0 + 20.0)
    assert h.period_sums(0)[0, hr.HR_N] == 11 and h.pending == 0


def test_now_stale_and_percent_of_max():
    # docs/wearables.md: hr_bpm null when older than the stale limit (5 s) before the newest sample
    h = engine(HeartProfile(hr_max_bpm=190), HeartProfile(), HeartProfile(hr_max_bpm=200))
    h.add(np.array([0, 1, 2]), T0 + np.array([100.0, 106.0, 101.0]), np.array([171.0, 150.0, 160.0]))
    bpm, pct = h.now()
    assert bpm == [None, 150.0, 160.0]
    assert pct == [None, None, 80.0]  # 160 / 200; player 1 has no hr_max_bpm
    assert h.now(T0 + 104.0) == ([171.0, 150.0, 160.0], [90.0, None, 80.0])  # 171 / 190
    assert h.peak() == [171.0, 150.0, 160.0]
    assert engine(HeartProfile()).now() == ([None], [None])


def test_omitted_names_what_is_missing():
    h = engine(HeartProfile(), HeartProfile(hr_max_bpm=190), HeartProfile(hr_max_bpm=190, hr_rest_bpm=50, sex="female"))
    om = h.omitted()
    assert set(om[0]) == {"hr_pct_max", "hr_zones", "trimp_edwards", "trimp_banister"}
    assert om[0]["trimp_banister"] == "needs hr_max_bpm, hr_rest_bpm and sex (match sheet or heart_rate.profiles_file)"
    assert om[1] == {"trimp_banister": "needs hr_rest_bpm and sex (match sheet or heart_rate.profiles_file)"}
    assert om[2] == {}


def test_bad_profiles_are_refused():
    with pytest.raises(ValueError, match="below hr_max_bpm"):
        HeartProfile(hr_max_bpm=150, hr_rest_bpm=160)
    with pytest.raises(ValueError, match="sex"):
        HeartProfile(sex="m")  # type: ignore[arg-type]


@st.composite
def sample_runs(draw):
    """Three players' samples (per player in time order) interleaved in any arrival order,
    cut into add calls, each followed by a settle at a rising horizon."""
    n = draw(st.integers(1, 60))
    owner = draw(st.lists(st.integers(0, 2), min_size=n, max_size=n))
    times = draw(st.lists(st.floats(-10, 130, allow_nan=False), min_size=n, max_size=n, unique=True))
    bpm = draw(st.lists(st.integers(30, 230), min_size=n, max_size=n))
    # per player, times handed out in arrival order so each player's own samples are in time order
    t = np.empty(n)
    for p in range(3):
        idx = [k for k in range(n) if owner[k] == p]
        t[idx] = sorted(times[k] for k in idx)
    cuts = sorted(set(draw(st.lists(st.integers(1, n), max_size=8))) | {n})
    horizons = sorted(draw(st.lists(st.floats(-10, 140, allow_nan=False), min_size=len(cuts), max_size=len(cuts))))
    return np.array(owner), T0 + t, np.array(bpm, float), cuts, horizons


SPANS = [(0, T0, T0 + 50.0), (1, T0 + 60.0, T0 + 110.0)]


def spans_at(h: float) -> list[tuple[int, float, float]]:
    """The spans as known when tracking is at T0 + h (the current period ends one frame after it)."""
    return [(i, a, min(b, T0 + h + 0.04)) for i, a, b in SPANS if a <= T0 + h]


def run(owner, t, bpm, cuts, horizons) -> HeartRate:
    h = HeartRate(P, [HeartProfile(hr_max_bpm=195, hr_rest_bpm=48, sex="female"), HeartProfile(hr_max_bpm=200),
                      HeartProfile(hr_max_bpm=188, hr_rest_bpm=60, sex="male")])
    start = 0
    for cut, hz in zip(cuts, horizons, strict=True):
        h.add(owner[start:cut], t[start:cut], bpm[start:cut])
        h.settle(spans_at(hz), T0 + hz)
        start = cut
    h.settle(SPANS, math.inf)
    return h


@hsettings(max_examples=300, deadline=None)
@given(sample_runs())
def test_sums_do_not_depend_on_splits(case):
    # docs/wearables.md: the result depends only on timestamps (exact integer sums)
    owner, t, bpm, cuts, horizons = case
    split = run(owner, t, bpm, cuts, horizons)
    whole = run(owner, t, bpm, [len(t)], [1e9])
    for idx in (0, 1):
        assert np.array_equal(split.period_sums(idx), whole.period_sums(idx))
        for s0, s1 in ((0, 10), (5, 30), (20, None)):
            assert np.array_equal(split.period_sums(idx, s0, s1), whole.period_sums(idx, s0, s1))
    assert np.array_equal(split.match_sums(), whole.match_sums())
    assert split.pending == 0 and split.peak() == whole.peak() and split.now() == whole.now()
    # only samples inside a span count
    inside = sum(int(((t >= a) & (t <= b)).sum()) for _, a, b in SPANS)
    assert int(whole.match_sums()[:, hr.HR_N].sum()) == inside
