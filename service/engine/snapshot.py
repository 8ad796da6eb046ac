"""The snapshot body (DESIGN §3): players, teams and health, from a MatchState."""
from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from service.engine import exertion as ex
from service.engine.match import CLOCK_START_MIN, CONTEXTS

if TYPE_CHECKING:
    from service.engine.match import MatchState, _Period

_U = 1e-6


def _r(x: float, nd: int) -> float:
    return round(float(x), nd)


def _window(sums: np.ndarray, span_s: float) -> dict[str, Any]:
    """Figures of one window for one player or team; sums in micro-units."""
    dist = sums[ex.DIST] * _U
    return {
        "distance_m": _r(dist, 1),
        "hsr_m": _r(sums[ex.HSR] * _U, 1),
        "sprint_m": _r(sums[ex.SPRINT] * _U, 1),
        "hsr_efforts": int(sums[ex.N_HSR]),
        "sprints": int(sums[ex.N_SPR]),
        "accels": int(sums[ex.N_ACC]),
        "decels": int(sums[ex.N_DEC]),
        "energy_jkg": _r(sums[ex.ENERGY] * _U, 1),
        "high_power_m": _r(sums[ex.HIPOW] * _U, 1),
        "m_per_min": _r(dist / (span_s / 60.0), 1) if span_s > 0 else None,
        "metabolic_power_wkg": _r(sums[ex.ENERGY] * _U / span_s, 2) if span_s > 0 else None,
        "span_s": _r(span_s, 1),
    }


def _figures(sums: np.ndarray, zones: np.ndarray, zone_names: list[str], onpitch_s: float,
             max_speed: float, coverage: float) -> dict[str, Any]:
    """Scalar figures + zones for one player over one stretch (match or period)."""
    w = _window(sums, onpitch_s)
    span = w.pop("span_s")
    del span
    w["minutes"] = _r(onpitch_s / 60.0, 2)
    w["max_speed_ms"] = _r(max_speed, 2)
    w["coverage"] = _r(coverage, 3)
    w["zones"] = {name: _r(zones[k] * _U, 1) for k, name in enumerate(zone_names)}
    return w


def _blocks(state: "MatchState", per: "_Period") -> list[tuple[str, int, int]]:
    """Fixed blocks of a period: (key, first second, stop second); the last takes stoppage time."""
    length_min = getattr(state.settings.periods, per.name)
    block_min = state.settings.windows.block_min
    if length_min <= 0:
        return []
    n_blocks = max(math.ceil(length_min / block_min), 1)
    clock = CLOCK_START_MIN[per.name]
    out = []
    for b in range(n_blocks):
        start = clock + b * block_min
        stop = min(clock + (b + 1) * block_min, clock + length_min)
        last = b == n_blocks - 1
        out.append((f"block_{start}_{stop}", b * block_min * 60, 10**9 if last else (b + 1) * block_min * 60))
    return out


def build_snapshot(state: "MatchState", now: float | None, extra_reasons: list[dict[str, str]] | None) -> dict[str, Any]:
    roster = state.roster
    n = state.n
    fps = state.fps
    periods = state.periods
    zone_names = state.zone_names
    cur = state.current

    total = np.zeros((n, ex.N_FIG), np.int64)
    zones = np.zeros((n, len(zone_names)), np.int64)
    poss = np.zeros((n, 3, 2), np.int64)
    onp = np.zeros(n, np.int64)
    vmax = np.zeros(n)
    per_period: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
    for per in periods:
        total += per.sums
        zones += per.zones
        poss += per.poss
        o = per.onpitch_slots()
        onp += o
        np.maximum(vmax, per.max_speed, out=vmax)
        per_period[per.name] = (per.sums, per.zones, o, per.max_speed)
    onp_s = onp / fps
    cov = state.coverage()
    on_pitch = state.on_pitch()

    # windows of the current period
    last_min = state.settings.windows.last_min
    windows: list[dict[str, Any]] = [{} for _ in range(n)]
    team_last: dict[int, np.ndarray] = {}
    if cur is not None:
        b = cur.bins
        stop = b.complete
        first_sec = np.where(cur.first_seen >= 0, cur.first_seen // fps, stop)
        for m in last_min:
            start = max(stop - m * 60, 0)
            sums = b.span(start, stop)
            covered = b.covered_s(start, stop)
            span = np.clip(covered - np.clip(first_sec - start, 0, None), 0, None).astype(float)
            team_last[m] = sums
            key = f"last_{m}min"
            for i in range(n):
                windows[i][key] = _window(sums[i], float(span[i]))
    for w_s in state.peak_s:
        best = np.full((n, ex.N_FIG), -1, np.int64)
        start_clock = np.full(n, -1.0)
        for per in periods:
            pk = per.bins.peak[w_s]
            better = pk[:, ex.DIST] > best[:, ex.DIST]
            start_clock = np.where(better, CLOCK_START_MIN[per.name] * 60 + per.bins.peak_start[w_s], start_clock)
            best = np.maximum(best, pk)
        key = f"peak_{w_s // 60}min"
        for i in range(n):
            if best[i, ex.DIST] < 0:
                windows[i][key] = None
            else:
                d = _window(best[i], float(w_s))
                d["start_s"] = _r(start_clock[i], 1)
                windows[i][key] = d
    for per in periods:
        bins = per.bins
        for key, s0, s1 in _blocks(state, per):
            if s0 >= bins.complete:
                continue
            sums = bins.span(s0, s1)
            span = bins.covered_s(s0, s1)
            for i in range(n):
                windows[i][key] = _window(sums[i], span)

    players: dict[str, Any] = {}
    for i, pl in enumerate(roster.players):
        fig = _figures(total[i], zones[i], zone_names, float(onp_s[i]), float(vmax[i]), float(cov[i]))
        speed = None
        if cur is not None and cur.last_valid[i] >= 0 and cur.track.fin - cur.last_valid[i] <= fps:
            speed = _r(cur.last_speed[i], 2)
        obj: dict[str, Any] = {
            "team_id": roster.team_ids[pl.team],
            "jersey_number": pl.jersey_number,
            "name": pl.name,
            "is_goalkeeper": pl.is_goalkeeper,
            "on_pitch": bool(on_pitch[i]),
            "speed_ms": speed,
            **fig,
            "windows": windows[i],
            "periods": {},
        }
        for name, (psums, pzones, po, pvmax) in per_period.items():
            pcov = min(psums[i, ex.VALID] / po[i], 1.0) if po[i] > 0 else 0.0
            obj["periods"][name] = _figures(psums[i], pzones[i], zone_names, float(po[i] / fps), float(pvmax[i]), pcov)
        if state.has_ball:
            obj["possession"] = {
                ctx: {"distance_m": _r(poss[i, k, 0] * _U, 1), "hsr_m": _r(poss[i, k, 1] * _U, 1)}
                for k, ctx in enumerate(CONTEXTS)
            }
        players[pl.id] = obj

    elapsed_s = sum((max(p.last_slot, 0) + 1) / fps for p in periods) if periods else 0.0
    teams: dict[str, Any] = {}
    for k, tid in enumerate(roster.team_ids):
        mask = (state.team == k) & ~state.gk & (onp > 0)
        tsum = total[mask].sum(axis=0)
        minutes = onp_s[mask].sum() / 60.0
        count = int(mask.sum())
        outfield = _window(tsum, elapsed_s)
        outfield.pop("span_s")
        outfield["players"] = count
        outfield["minutes"] = _r(elapsed_s / 60.0, 2)
        outfield["per_player"] = {
            "distance_m": _r(tsum[ex.DIST] * _U / count, 1) if count else None,
            "hsr_m": _r(tsum[ex.HSR] * _U / count, 1) if count else None,
            "sprint_m": _r(tsum[ex.SPRINT] * _U / count, 1) if count else None,
            "m_per_min": _r(tsum[ex.DIST] * _U / minutes, 1) if minutes > 0 else None,
        }
        tw: dict[str, Any] = {}
        if cur is not None:
            stop = cur.bins.complete
            for m, sums in team_last.items():
                span = cur.bins.covered_s(stop - m * 60, stop)
                tw[f"last_{m}min"] = _window(sums[mask].sum(axis=0), span)
        outfield["windows"] = tw
        teams[tid] = {"name": roster.team_names[k], "side": ("home", "away")[k], "outfield": outfield}

    h = state.health
    clock = now if now is not None else (h.last_arrival if h.last_arrival is not None else 0.0)
    dropout = state.dropout()
    status, reasons = h.evaluate(clock, dropout, extra_reasons)
    lag_med, lag_p95 = h.lag(clock)
    health = {
        "state": status,
        "reasons": reasons,
        "fps_observed": _r(h.fps_observed(clock), 2),
        "fps_nominal": state.fps,
        "dropout": _r(dropout, 3),
        "lag_s": None if lag_med is None else _r(lag_med, 3),
        "lag_p95_s": None if lag_p95 is None else _r(lag_p95, 3),
        "late": h.late,
        "duplicates": h.duplicates,
        "rejected": h.rejected,
        "jumps": state.jumps,
        "frames": state.frames,
        "coverage": {pl.id: _r(cov[i], 3) for i, pl in enumerate(roster.players)},
    }
    return {
        "match_id": roster.match_id,
        "match_time_s": _r(state.match_time_s(), 2),
        "period": state.period_name(),
        "players": players,
        "teams": teams,
        "health": health,
    }
