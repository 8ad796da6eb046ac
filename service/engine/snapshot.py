"""The snapshot body (DESIGN §3): players, teams and health, from a MatchState.

Built vectorised over players. Parts that change only when a second of data
completes (windows) or never again (ended periods) are cached on the state
and reused as the same objects, so consumers that diff snapshots skip them
at once.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from service.engine import exertion as ex
from service.engine.match import CLOCK_START_MIN, CONTEXTS

if TYPE_CHECKING:
    from service.engine.match import MatchState, _Period

_U = 1e-6
_WINDOW_KEYS = ("distance_m", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels", "decels", "energy_jkg",
                "high_power_m", "m_per_min", "metabolic_power_wkg")


def _col(a: np.ndarray, nd: int) -> list:
    return np.round(a.astype(float), nd).tolist()


def _window_cols(sums: np.ndarray, span_s: np.ndarray) -> dict[str, list]:
    """Figures of one window for every row of ``sums`` (rows, F) in micro-units; span_s (rows,)."""
    dist = sums[:, ex.DIST] * _U
    ok = span_s > 0
    safe = np.where(ok, span_s, 1.0)
    mpm = np.round(dist / (safe / 60.0), 1)
    mp = np.round(sums[:, ex.ENERGY] * _U / safe, 2)
    return {
        "distance_m": _col(dist, 1),
        "hsr_m": _col(sums[:, ex.HSR] * _U, 1),
        "sprint_m": _col(sums[:, ex.SPRINT] * _U, 1),
        "hsr_efforts": sums[:, ex.N_HSR].tolist(),
        "sprints": sums[:, ex.N_SPR].tolist(),
        "accels": sums[:, ex.N_ACC].tolist(),
        "decels": sums[:, ex.N_DEC].tolist(),
        "energy_jkg": _col(sums[:, ex.ENERGY] * _U, 1),
        "high_power_m": _col(sums[:, ex.HIPOW] * _U, 1),
        "m_per_min": [v if o else None for v, o in zip(mpm.tolist(), ok.tolist())],
        "metabolic_power_wkg": [v if o else None for v, o in zip(mp.tolist(), ok.tolist())],
    }


def _rows(cols: dict[str, list], n: int) -> list[dict[str, Any]]:
    keys = list(cols)
    vals = [cols[k] for k in keys]
    return [dict(zip(keys, [v[i] for v in vals])) for i in range(n)]


def _windows(sums: np.ndarray, span_s: np.ndarray, extra: dict[str, list] | None = None) -> list[dict[str, Any]]:
    cols = _window_cols(sums, span_s)
    cols["span_s"] = _col(span_s, 1)
    if extra:
        cols.update(extra)
    return _rows(cols, sums.shape[0])


def _figures(sums: np.ndarray, zones: np.ndarray, zone_names: list[str], onpitch_s: np.ndarray,
             max_speed: np.ndarray, coverage: np.ndarray) -> list[dict[str, Any]]:
    """Scalar figures + zones per player over one stretch (match or period)."""
    cols = _window_cols(sums, onpitch_s)
    cols["minutes"] = _col(onpitch_s / 60.0, 2)
    cols["max_speed_ms"] = _col(max_speed, 2)
    cols["coverage"] = _col(coverage, 3)
    zm = np.round(zones * _U, 1).tolist()
    cols["zones"] = [dict(zip(zone_names, z)) for z in zm]
    return _rows(cols, sums.shape[0])


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


def _cache(state: "MatchState") -> dict[Any, Any]:
    c = getattr(state, "_snapshot_cache", None)
    if c is None:
        c = state._snapshot_cache = {}  # type: ignore[attr-defined]
    return c


def _player_windows(state: "MatchState") -> tuple[list[dict[str, Any]], dict[int, np.ndarray]]:
    """windows per player, and the last-N sums of the current period; cached per completed second."""
    periods = state.periods
    cur = state.current
    seen_players = int((cur.first_seen >= 0).sum()) if cur is not None else 0
    key = ("windows", seen_players,
           tuple((p.index, p.bins.complete, p.bins.end_slot if p.ended else -1) for p in periods))
    cache = _cache(state)
    hit = cache.get("windows")
    if hit is not None and hit[0] == key:
        return hit[1], hit[2]
    n, fps = state.n, state.fps
    per_player: list[dict[str, Any]] = [{} for _ in range(n)]
    team_last: dict[int, np.ndarray] = {}
    if cur is not None:
        b = cur.bins
        stop = b.complete
        first_sec = np.where(cur.first_seen >= 0, cur.first_seen // fps, stop)
        for m in state.settings.windows.last_min:
            start = max(stop - m * 60, 0)
            sums = b.span(start, stop)
            covered = b.covered_s(start, stop)
            span = np.clip(covered - np.clip(first_sec - start, 0, None), 0, None).astype(float)
            team_last[m] = sums
            for i, w in enumerate(_windows(sums, span)):
                per_player[i][f"last_{m}min"] = w
    for w_s in state.peak_s:
        best = np.full((n, ex.N_FIG), -1, np.int64)
        start_clock = np.full(n, -1.0)
        for per in periods:
            pk = per.bins.peak[w_s]
            better = pk[:, ex.DIST] > best[:, ex.DIST]
            start_clock = np.where(better, CLOCK_START_MIN[per.name] * 60 + per.bins.peak_start[w_s], start_clock)
            best = np.maximum(best, pk)
        rows = _windows(np.maximum(best, 0), np.full(n, float(w_s)), {"start_s": _col(start_clock, 1)})
        k = f"peak_{w_s // 60}min"
        for i in range(n):
            per_player[i][k] = rows[i] if best[i, ex.DIST] >= 0 else None
    for per in periods:
        bins = per.bins
        for k, s0, s1 in _blocks(state, per):
            if s0 >= bins.complete:
                continue
            span = bins.covered_s(s0, s1)
            for i, w in enumerate(_windows(bins.span(s0, s1), np.full(n, span))):
                per_player[i][k] = w
    cache["windows"] = (key, per_player, team_last)
    return per_player, team_last


def _period_figures(state: "MatchState", per: "_Period") -> list[dict[str, Any]]:
    """Per-player figures of one period; cached for good once the period ended."""
    cache = _cache(state)
    key = ("period", per.index)
    if per.ended and key in cache:
        return cache[key]
    o = per.onpitch_slots()
    cov = np.where(o > 0, np.minimum(per.sums[:, ex.VALID] / np.maximum(o, 1), 1.0), 0.0)
    figs = _figures(per.sums, per.zones, state.zone_names, o / state.fps, per.max_speed, cov)
    if per.ended:
        cache[key] = figs
    return figs


_HR_WINDOW_KEYS = ("hr_mean_bpm", "trimp_edwards", "trimp_banister")


def _hr_cols(state: "MatchState", sums: np.ndarray, onpitch_s: np.ndarray, keys: tuple[str, ...] | None = None) -> list[dict[str, Any]]:
    cols = state.heart.figures(sums, onpitch_s)  # type: ignore[union-attr]
    if keys is not None:
        cols = {k: cols[k] for k in keys}
    return _rows(cols, state.n)


def _with_heart_windows(state: "MatchState", windows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Per-player windows with the heart-rate figures of the last-N windows and fixed blocks added
    (not cached with the windows: samples settle on their own clock)."""
    hr = state.heart
    out = [dict(w) for w in windows]
    zero = np.zeros(state.n)
    cur = state.current
    if cur is not None:
        stop = cur.bins.complete
        for m in state.settings.windows.last_min:
            key = f"last_{m}min"
            rows = _hr_cols(state, hr.period_sums(cur.index, max(stop - m * 60, 0), stop), zero, _HR_WINDOW_KEYS)  # type: ignore[union-attr]
            for i, r in enumerate(rows):
                if out[i].get(key) is not None:
                    out[i][key] = {**out[i][key], **r}
    for per in state.periods:
        for key, s0, s1 in _blocks(state, per):
            if s0 >= per.bins.complete:
                continue
            rows = _hr_cols(state, hr.period_sums(per.index, s0, s1), zero, _HR_WINDOW_KEYS)  # type: ignore[union-attr]
            for i, r in enumerate(rows):
                if out[i].get(key) is not None:
                    out[i][key] = {**out[i][key], **r}
    return out


def _hr_health(state: "MatchState", on_pitch: list[bool]) -> dict[str, float | None]:
    """Heart-rate samples received over the last minute ÷ expected, per player on the pitch: a strap
    that drops out shows here as low coverage, not as a low heart rate."""
    from service.engine.heart import HR_N

    cur = state.current
    hr = state.heart
    out: dict[str, float | None] = {}
    if cur is None or hr is None:
        return out
    stop = cur.bins.complete
    start = max(stop - 60, 0)
    got = hr.period_sums(cur.index, start, stop)[:, HR_N]
    first_sec = np.where(cur.first_seen >= 0, cur.first_seen // state.fps, stop)
    span = np.clip(stop - np.maximum(start, first_sec), 0, None) * hr.p.expected_hz
    share = np.round(np.minimum(got / np.where(span > 0, span, 1), 1.0), 3).tolist()
    for i, pl in enumerate(state.roster.players):
        if on_pitch[i]:
            out[pl.id] = share[i] if span[i] > 0 else None
    return out


def _health(state: "MatchState", now: float | None, extra_reasons: list[dict[str, str]] | None,
            on_pitch: list[bool], cov: np.ndarray) -> dict[str, Any]:
    """The snapshot's ``health`` object at wall-clock ``now`` (None: the last frame's time)."""
    h = state.health
    clock = now if now is not None else (h.last_arrival if h.last_arrival is not None else 0.0)
    dropout = state.dropout()
    status, reasons = h.evaluate(clock, dropout, extra_reasons)
    lag_med, lag_p95 = h.lag(clock)
    cov_r = np.round(cov, 3).tolist()
    roster = state.roster
    heart = state.heart
    health = {
        "state": status,
        "reasons": reasons,
        "fps_observed": round(h.fps_observed(clock), 2),
        "fps_nominal": state.fps,
        "dropout": round(dropout, 3),
        "lag_s": None if lag_med is None else round(lag_med, 3),
        "lag_p95_s": None if lag_p95 is None else round(lag_p95, 3),
        "late": h.late,
        "duplicates": h.duplicates,
        "rejected": h.rejected,
        "jumps": state.jumps,
        "frames": state.frames,
        "coverage": {pl.id: cov_r[i] for i, pl in enumerate(roster.players)},
    }
    if heart is not None:
        health["hr_coverage"] = _hr_health(state, on_pitch)
    if heart is not None or state.hr_rejected or state.hr_duplicates or state.hr_late:
        health["hr_rejected"] = state.hr_rejected
        health["hr_duplicates"] = state.hr_duplicates
        health["hr_late"] = state.hr_late
    return health


def build_health(state: "MatchState", now: float | None, extra_reasons: list[dict[str, str]] | None) -> dict[str, Any]:
    """The snapshot's ``health`` alone, equal to ``build_snapshot(...)["health"]`` at the same ``now``
    (the health check runs four times a second and needs no figures)."""
    return _health(state, now, extra_reasons, state.on_pitch().tolist(), state.coverage())


def build_snapshot(state: "MatchState", now: float | None, extra_reasons: list[dict[str, str]] | None) -> dict[str, Any]:
    roster = state.roster
    n = state.n
    fps = state.fps
    periods = state.periods
    cur = state.current

    total = np.zeros((n, ex.N_FIG), np.int64)
    zones = np.zeros((n, len(state.zone_names)), np.int64)
    poss = np.zeros((n, 3, 2), np.int64)
    onp = np.zeros(n, np.int64)
    vmax = np.zeros(n)
    for per in periods:
        total += per.sums
        zones += per.zones
        poss += per.poss
        onp += per.onpitch_slots()
        np.maximum(vmax, per.max_speed, out=vmax)
    onp_s = onp / fps
    cov = state.coverage()
    on_pitch = state.on_pitch().tolist()
    figs = _figures(total, zones, state.zone_names, onp_s, vmax, cov)
    windows, team_last = _player_windows(state)
    per_figs = [(per.name, _period_figures(state, per)) for per in periods]
    heart = state.heart
    hr_rows = None
    if heart is not None:
        windows = _with_heart_windows(state, windows)
        per_figs = [(name, [{**f, **h} for f, h in zip(pf, _hr_cols(state, heart.period_sums(per.index),
                                                                     per.onpitch_slots() / fps))])
                    for (name, pf), per in zip(per_figs, periods)]
        latest = max(state.last_t or 0.0, float(np.nanmax(heart.last_t)))
        hr_now, hr_pct = heart.now(latest)
        hr_rows = _hr_cols(state, heart.match_sums(), onp_s)
        for i, (bpm, pct, peak, omitted) in enumerate(zip(hr_now, hr_pct, heart.peak(), heart.omitted())):
            hr_rows[i] = {"hr_bpm": bpm, "hr_pct_max": pct, **hr_rows[i], "hr_peak_bpm": peak, "hr_omitted": omitted}
    speed = [None] * n
    if cur is not None:
        recent = (cur.last_valid >= 0) & (cur.track.fin - cur.last_valid <= fps)
        sp = np.round(cur.last_speed, 2).tolist()
        speed = [s if r else None for s, r in zip(sp, recent.tolist())]
    poss_rows = None
    if state.has_ball:
        pm = np.round(poss * _U, 1).tolist()
        poss_rows = [{ctx: {"distance_m": pm[i][k][0], "hsr_m": pm[i][k][1]} for k, ctx in enumerate(CONTEXTS)}
                     for i in range(n)]

    players: dict[str, Any] = {}
    for i, pl in enumerate(roster.players):
        obj: dict[str, Any] = {
            "team_id": roster.team_ids[pl.team],
            "jersey_number": pl.jersey_number,
            "name": pl.name,
            "is_goalkeeper": pl.is_goalkeeper,
            "on_pitch": on_pitch[i],
            "speed_ms": speed[i],
            **figs[i],
            "windows": windows[i],
            "periods": {name: pf[i] for name, pf in per_figs},
        }
        if poss_rows is not None:
            obj["possession"] = poss_rows[i]
        if hr_rows is not None:
            obj.update(hr_rows[i])
        players[pl.id] = obj

    elapsed_s = sum((max(p.last_slot, 0) + 1) / fps for p in periods) if periods else 0.0
    teams: dict[str, Any] = {}
    tracked = roster.tracked()
    for k, tid in enumerate(roster.team_ids):
        if not tracked[k]:
            # one-team feed: the other team's figures are absent, not zeros
            teams[tid] = {"name": roster.team_names[k], "side": ("home", "away")[k], "tracked": False}
            continue
        mask = (state.team == k) & ~state.gk & (onp > 0)
        tsum = total[mask].sum(axis=0).tolist()
        minutes = float(onp_s[mask].sum()) / 60.0
        count = int(mask.sum())
        outfield = _windows(np.array([tsum], np.int64), np.array([elapsed_s]))[0]
        outfield.pop("span_s")
        outfield["players"] = count
        outfield["minutes"] = round(elapsed_s / 60.0, 2)
        outfield["per_player"] = {
            "distance_m": round(tsum[ex.DIST] * _U / count, 1) if count else None,
            "hsr_m": round(tsum[ex.HSR] * _U / count, 1) if count else None,
            "sprint_m": round(tsum[ex.SPRINT] * _U / count, 1) if count else None,
            "m_per_min": round(tsum[ex.DIST] * _U / minutes, 1) if minutes > 0 else None,
        }
        tw: dict[str, Any] = {}
        if cur is not None:
            stop = cur.bins.complete
            for m, sums in team_last.items():
                span = cur.bins.covered_s(stop - m * 60, stop)
                tw[f"last_{m}min"] = _windows(sums[mask].sum(axis=0)[None], np.array([span]))[0]
        outfield["windows"] = tw
        teams[tid] = {"name": roster.team_names[k], "side": ("home", "away")[k], "tracked": True, "outfield": outfield}

    health = _health(state, now, extra_reasons, on_pitch, cov)
    return {
        "match_id": roster.match_id,
        "match_time_s": round(state.match_time_s(), 2),
        "period": state.period_name(),
        "players": players,
        "teams": teams,
        "health": health,
    }
