"""The full synthetic match against published ranges, as pacewire's engine measures it.

Each seed is a 95-minute match with its feed faults, as ``pacewire synth --minutes 95 --seed S``
writes it, analysed as ``pacewire analyze`` does (pacewire.replay.synth.positions groups the
figures by position). The targets hold for full-match players (on the pitch >= 90 min).
Every check value names its source; where the exact band is from memory, it says so.
"""
from __future__ import annotations

import statistics

import numpy as np
import pytest

from pacewire.replay import synth
from pacewire.replay.synth.positions import PlayerFigures, full_match, match_figures, substitutions

pytestmark = pytest.mark.slow

SEEDS = (2026, 1, 2)  # 2026: the demo match `pacewire demo` writes (replay/demo.py)
Match = tuple[list[PlayerFigures], list[tuple[str, str, float, float]]]


@pytest.fixture(scope="module")
def matches(tmp_path_factory) -> dict[int, Match]:
    """Figures of every player and the substitutions of each seed's match."""
    out = {}
    for seed in SEEDS:
        folder = synth.write_match(tmp_path_factory.mktemp(f"seed{seed}"), minutes=95, seed=seed, compress=False)
        rows = match_figures(folder)
        out[seed] = (rows, substitutions(folder, rows))
    return out


def _outfield(rows: list[PlayerFigures]) -> list[PlayerFigures]:
    return [r for r in full_match(rows) if r.role != "GK"]


def _median(rows: list[PlayerFigures], key: str) -> float:
    return float(statistics.median(getattr(r, key) for r in rows))


def test_every_seed_has_enough_full_match_players(matches):
    for seed, (rows, _) in matches.items():
        full = full_match(rows)
        assert len(_outfield(rows)) >= 12, seed  # 20 outfield starters, 5 substituted
        assert sum(r.role == "GK" for r in full) == 2, seed


def test_distance_by_position(matches):
    for seed, (rows, _) in matches.items():
        out = _outfield(rows)
        for r in out:
            # Bradley et al. 2009; Osgnach et al. 2010 (10,950 +- 1,044 m): outfielders 9.5-13.0 km
            assert 9_500 <= r.distance_m <= 13_000, (seed, r)
        # Osgnach et al. 2010: the typical outfielder within one sd of 10,950 m
        assert 10_950 - 1_044 <= _median(out, "distance_m") <= 10_950 + 1_044, seed
        by_role = {role: _median([r for r in out if r.role == role], "distance_m") for role in ("CM", "CB")}
        assert by_role["CM"] > by_role["CB"], (seed, by_role)  # Bradley et al. 2009: CM run most, CB least
        for r in full_match(rows):
            if r.role == "GK":
                assert 4_000 <= r.distance_m <= 6_500, (seed, r)  # common practice: goalkeepers 4.0-6.5 km


def test_high_speed_running_is_several_times_the_sprint_distance(matches):
    for seed, (rows, _) in matches.items():
        out = _outfield(rows)
        hsr, sprint = _median(out, "hsr_m"), _median(out, "sprint_m")
        # Di Salvo et al. 2009; Bradley et al. 2009 (exact bands from memory): median HSR
        # (19.8-25.2 km/h) 500-1,100 m, sprint (>= 25.2 km/h) 150-450 m per outfielder
        assert 500 <= hsr <= 1_100, (seed, hsr)
        assert 150 <= sprint <= 450, (seed, sprint)
        # ... and several times more running in the HSR band than in the sprint band
        assert hsr >= 1.8 * sprint, (seed, hsr, sprint)
        assert statistics.median(r.hsr_m / r.sprint_m for r in out) >= 1.8, seed
        # Di Salvo et al. 2009: centre-backs run the least at high speed, wide midfielders the most
        cb = _median([r for r in out if r.role == "CB"], "hsr_m")
        wm = _median([r for r in out if r.role == "WM"], "hsr_m")
        assert cb < wm, (seed, cb, wm)


def test_sprint_acceleration_and_deceleration_counts(matches):
    for seed, (rows, _) in matches.items():
        out = _outfield(rows)
        assert 8 <= _median(out, "sprints") <= 35, seed  # Di Salvo et al. 2009 (band from memory)
        accels, decels = _median(out, "accels"), _median(out, "decels")
        assert 15 <= accels <= 80, (seed, accels)  # > 3 m/s^2 held 0.5 s (Akenhead et al. 2013 band; from memory)
        # Harper et al. 2019: high decelerations at least as frequent as high accelerations
        assert decels >= accels, (seed, accels, decels)
        assert statistics.median(r.decels - r.accels for r in out) >= 0, seed


def test_top_speeds_differ_between_players_and_keepers_are_slower(matches):
    for seed, (rows, _) in matches.items():
        top = np.array([r.top_speed_kmh for r in _outfield(rows)])
        # common practice: match peak speeds of outfielders about 29-33.5 km/h, players who differ
        assert 29.0 <= float(np.median(top)) <= 33.5, (seed, top)
        assert np.percentile(top, 90) - np.percentile(top, 10) >= 3.0, (seed, top)
        for r in full_match(rows):
            if r.role == "GK":
                assert r.top_speed_kmh <= 26.0, (seed, r)  # common practice: goalkeepers rarely beyond 26 km/h


def test_running_falls_in_the_second_half_and_the_last_15_minutes(matches):
    for seed, (rows, _) in matches.items():
        out = _outfield(rows)
        ratio = _median(out, "half2_over_half1")
        # Mohr et al. 2003; Bradley et al. 2009: a little less distance per minute after half-time
        assert 0.90 <= ratio <= 0.99, (seed, ratio)
        # Mohr et al. 2003: less high-intensity running in the last 15 minutes than in the first 15
        first, last = _median(out, "hi_first15_m"), _median(out, "hi_last15_m")
        assert last < first, (seed, first, last)
        assert sum(r.hi_last15_m for r in out) < 0.9 * sum(r.hi_first15_m for r in out), seed


def test_high_intensity_drops_after_the_most_intense_5_minutes(matches):
    # Mohr et al. 2003: in the 5 minutes after a player's most intense 5 minutes, high-intensity
    # running is about 12 % below his match average (pooled over the seeds: a per-match median
    # of ~15 players is too noisy a figure on its own)
    ratios = [r.after_peak_ratio for rows, _ in matches.values() for r in _outfield(rows)]
    assert statistics.median(ratios) <= 0.88, sorted(ratios)


def test_metabolic_power(matches):
    for seed, (rows, _) in matches.items():
        power = _median(_outfield(rows), "metabolic_power_wkg")
        assert 9.0 <= power <= 13.0, (seed, power)  # Osgnach et al. 2010: 10.7 W/kg on average


def test_substitutes_run_more_per_minute_than_the_players_they_replace(matches):
    # Bradley et al. 2014: substitutes run more than the players they replace
    for seed, (_, subs) in matches.items():
        assert len(subs) == 5, seed
        for sub, replaced, sub_rate, replaced_rate in subs:
            assert sub_rate > replaced_rate, (seed, sub, replaced, sub_rate, replaced_rate)


def test_every_position_has_believable_peaks_and_sprint_distance(matches):
    for seed, (rows, _) in matches.items():
        by_role: dict[str, list[PlayerFigures]] = {}
        for r in full_match(rows):
            by_role.setdefault(r.role, []).append(r)
        assert set(by_role) == {"GK", "CB", "FB", "CM", "WM", "FW"}, (seed, sorted(by_role))
        for role, members in by_role.items():
            for r in members:
                if role == "GK":
                    assert r.sprint_m == 0.0, (seed, r)  # common practice: keepers almost never sprint
                    continue
                # common practice (from memory): the fastest match peaks recorded in top leagues are about
                # 36-37 km/h; Sonderegger et al. 2016 and the 100 m record (12.4 m/s) bound them far above
                assert 26.0 <= r.top_speed_kmh <= 36.0, (seed, r)
                # Di Salvo et al. 2009 (from memory): even the most sprint-heavy players cover well under
                # 900 m above 25.2 km/h in a match
                assert r.sprint_m <= 900.0, (seed, r)
                assert r.sprints <= 45, (seed, r)  # Di Salvo et al. 2009 (from memory): up to about 40 per match
