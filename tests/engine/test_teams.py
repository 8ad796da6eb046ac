"""Team figures on a constructed match: totals, time-weighted means, per-player averages over time on the
pitch, and no summed per-kilogram figure. Each expected value is worked by hand beside it."""
from __future__ import annotations

import numpy as np
import pytest

from tests.engine.test_figures import piecewise, run
from tests.support import cdf_build as cb
from tests.support.trajectories import FPS, round_circle

# Metabolic power at a constant speed on the flat (Osgnach et al. 2010 variant, the default):
# C = 3.6 J/kg/m (Minetti et al. 2002 at zero slope) x KT 1.29 = 4.644 J/kg/m, P = C v.
COST = 3.6 * 1.29


@pytest.fixture(scope="module")
def snap() -> dict:
    """Home: h1 a goalkeeper at 5 m/s (left out of team figures); h2 at 4 m/s and h3 at 2 m/s for
    10 minutes; h4 at 3 m/s for the first 5 minutes only (then gone: substituted). Away: a1 alone."""
    T = 600 * FPS
    xy = np.full((T, 5, 2), np.nan)
    for j, (v, secs, r) in enumerate([(5.0, 600, 8.0), (4.0, 600, 16.0), (2.0, 600, 24.0), (3.0, 300, 32.0),
                                      (3.0, 600, 20.0)]):
        xy[: secs * FPS, j] = round_circle(piecewise([(v, secs)])[: secs * FPS], r)
    return run(xy, n_home=4, gk=("h1",))


def test_team_totals_are_sums_and_rates_are_time_weighted_means(snap):
    home = snap["teams"][cb.HOME]["outfield"]
    p = snap["players"]
    # totals: the outfield players' distances (2400 + 1200 + 900 m by construction), exact inside the
    # engine and rounded once: within a metre of the sum of the rounded player figures
    assert home["distance_m"] == pytest.approx(sum(p[k]["distance_m"] for k in ("h2", "h3", "h4")), abs=1.5)
    assert home["distance_m"] == pytest.approx(4500.0, rel=0.01)
    assert home["players"] == 3
    # minutes on the pitch: 10 + 10 + 5 (by construction); the match lasted 10 minutes
    assert home["player_minutes"] == pytest.approx(25.0, abs=0.1) and home["minutes"] == pytest.approx(10.0, abs=0.1)
    # work rate of the average player: 4500 m / 25 player-minutes = 180 m/min (arithmetic); a sum of the three
    # rates would say 240 + 120 + 180 = 540
    assert home["m_per_min"] == pytest.approx(180.0, rel=0.01)
    # metabolic power: (4 x 600 + 2 x 600 + 3 x 300) x 4.644 / 1500 player-seconds = 13.93 W/kg, the mean of
    # 18.58, 9.29 and 13.93 W/kg weighted by 600, 600 and 300 s (a sum would say 41.8)
    assert home["metabolic_power_wkg"] == pytest.approx(COST * 4500 / 1500, rel=0.02)
    assert home["energy_jkg"] is None  # no per-kilogram sum
    assert snap["teams"][cb.AWAY]["outfield"]["metabolic_power_wkg"] == pytest.approx(COST * 3.0, rel=0.02)


def test_per_player_averages_per_90_and_per_minute_on_the_pitch(snap):
    home = snap["teams"][cb.HOME]["outfield"]
    per_90, per_min = home["per_90min"], home["per_min"]
    # 4500 m over 25 player-minutes: 180 m per minute, 16,200 m per 90 minutes (arithmetic)
    assert per_min["distance_m"] == pytest.approx(180.0, rel=0.01)
    assert per_90["distance_m"] == pytest.approx(16200.0, rel=0.01)
    # energy: 4500 m x 4.644 J/kg/m over 25 minutes = 835.9 J/kg per minute, 75,233 per 90 minutes
    assert per_min["energy_jkg"] == pytest.approx(COST * 4500 / 25, rel=0.02)
    assert per_90["energy_jkg"] == pytest.approx(COST * 4500 / 25 * 90, rel=0.02)
    assert per_90["hsr_m"] == 0 and per_min["sprints"] == 0  # nobody ran above 5.5 m/s
    # kept for clients of the first version: the per-90 distances and the work rate
    assert home["per_player"] == {"distance_m": per_90["distance_m"], "hsr_m": per_90["hsr_m"],
                                  "sprint_m": per_90["sprint_m"], "m_per_min": home["m_per_min"]}


def test_team_windows_count_only_the_players_credited_in_them(snap):
    """In the last 5 minutes h4 was gone: the window's rate is the mean of h2 and h3, (4 + 2) / 2 m/s = 180 m/min,
    not 120 (which counting h4's absent minutes would give)."""
    w = snap["teams"][cb.HOME]["outfield"]["windows"]["last_5min"]
    assert w["distance_m"] == pytest.approx((4.0 + 2.0) * 300, rel=0.01)
    assert w["m_per_min"] == pytest.approx(180.0, rel=0.01)
    assert w["metabolic_power_wkg"] == pytest.approx(COST * 3.0, rel=0.02)
    assert w["energy_jkg"] is None and w["span_s"] == 300
