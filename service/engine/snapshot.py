"""The snapshot body the service publishes (players, teams, health), from a MatchState.

Built vectorised over players. Parts that change only when a second of data
completes (windows) or never again (ended periods) are cached on the state
and reused as the same objects, so consumers that diff snapshots skip them
at once. Within a part, each player's row is rebuilt only when its inputs
changed since the last build (``_reuse``), and a player none of whose parts
changed keeps the same player object: live, substitutes and stopped players
cost nothing per frame.
"""
from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from pacewire.engine import exertion as ex
from pacewire.engine.baseline import Baselines
from pacewire.engine.heart import HR_N
from pacewire.engine.match import CLOCK_START_MIN, CONTEXTS, MatchState
from pacewire.engine.period import Period
from pacewire.engine.phases import IN_PLAY_CODES, PHASES, PhaseTotals
from pacewire.engine.precision import Precision

_U = 1e-6
_WINDOW_KEYS = ("distance_m", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels", "decels", "energy_jkg",
                "high_power_m", "m_per_min", "metabolic_power_wkg")
_COUNTS = [ex.N_HSR, ex.N_SPR, ex.N_ACC, ex.N_DEC]
_Rows = list[dict[str, Any]]  # one object per player, roster order
_PeriodRows = list[tuple[str, _Rows]]  # (period name, its rows) per period
_Extra = tuple[tuple[str, np.ndarray, int], ...]  # (key, column, decimals) added to window rows
_TeamLast = dict[int, np.ndarray]  # last-N minutes -> sums (P, F) of the current period


def _rounded(cols: list[np.ndarray], nd: tuple[int, ...]) -> list[list[Any]]:
    """Rows of the columns, column j rounded to nd[j] decimals in one pass (x * 10**d, rint, / 10**d);
    a column of nd[j] <= 0 holds whole numbers and comes back as ints (100 for 1e2 steps)."""
    m = np.empty((len(cols[0]), len(cols)))
    for j, c in enumerate(cols):
        m[:, j] = c
    whole = [j for j, d in enumerate(nd) if d <= 0]
    if len(whole) < len(nd):
        scale = np.array([10.0 ** max(d, 0) for d in nd])
        rows = (np.rint(m * scale) / scale).tolist()
    else:
        rows = [[0] * len(nd) for _ in range(m.shape[0])]
    if whole:
        step = np.array([10.0 ** -nd[j] for j in whole])
        ints = (np.rint(m[:, whole] / step) * step).astype(np.int64).tolist()
        for row, vals in zip(rows, ints, strict=True):
            for j, v in zip(whole, vals, strict=True):
                row[j] = v
    return rows


def _round_list(a: np.ndarray, decimals: int) -> list[Any]:
    """``a`` rounded to ``decimals`` as nested lists, ints when ``decimals`` <= 0 (see _rounded)."""
    if decimals > 0:
        return np.round(a, decimals).tolist()
    step = 10.0 ** -decimals
    return (np.rint(a / step) * step).astype(np.int64).tolist()


def _window_rows(sums: np.ndarray, span_s: np.ndarray, prec: Precision, extra: _Extra = ()) -> list[dict[str, Any]]:
    """Figures of one window for every row of ``sums`` (rows, F) in micro-units; span_s (rows,);
    ``extra``: (key, column, decimals) added after the window figures."""
    dist = sums[:, ex.DIST] * _U
    energy = sums[:, ex.ENERGY] * _U
    ok = span_s > 0
    safe = np.where(ok, span_s, 1.0)
    d = prec.distance
    nd = (d, d, d, prec.energy, d, prec.rate, prec.power)
    f = _rounded([dist, sums[:, ex.HSR] * _U, sums[:, ex.SPRINT] * _U, energy, sums[:, ex.HIPOW] * _U,
                  dist / (safe / 60.0), energy / safe, *(c for _, c, _ in extra)],
                 nd + tuple(d for _, _, d in extra))
    keys = [(k, j) for j, (k, _, _) in enumerate(extra, len(nd))]
    out = []
    for r, c, o in zip(f, sums[:, _COUNTS].tolist(), ok.tolist(), strict=True):
        row = {"distance_m": r[0], "hsr_m": r[1], "sprint_m": r[2], "hsr_efforts": c[0], "sprints": c[1],
               "accels": c[2], "decels": c[3], "energy_jkg": r[3], "high_power_m": r[4],
               "m_per_min": r[5] if o else None, "metabolic_power_wkg": r[6] if o else None}
        for k, j in keys:
            row[k] = r[j]
        out.append(row)
    return out


def _windows(sums: np.ndarray, span_s: np.ndarray, prec: Precision, extra: _Extra = ()) -> list[dict[str, Any]]:
    return _window_rows(sums, span_s, prec, (("span_s", span_s, prec.seconds), *extra))


def _figures(sums: np.ndarray, zones: np.ndarray, zone_names: tuple[str, ...], onpitch_s: np.ndarray,
             max_speed: np.ndarray, coverage: np.ndarray, prec: Precision) -> list[dict[str, Any]]:
    """Scalar figures + zones per player over one stretch (match or period)."""
    rows = _window_rows(sums, onpitch_s, prec, (("minutes", onpitch_s / 60.0, prec.minutes),
                                                ("max_speed_ms", max_speed, prec.speed),
                                                ("coverage", coverage, prec.share)))
    for row, z in zip(rows, _round_list(zones * _U, prec.distance), strict=True):
        row["zones"] = dict(zip(zone_names, z, strict=True))
    return rows


def _reuse(cache: dict[Any, Any], name: Any, inputs: np.ndarray, build: Callable[[Any], list[Any]],
           rebuilt: list[np.ndarray] | None = None) -> list[Any]:
    """``build(rows)``: one object per row of ``inputs`` (rows, k), which determines it in full. Rows whose
    inputs equal those of the last call under ``name`` come back as the very objects returned then, so a
    diff against the last snapshot skips them at once; only the others are built. Callers never mutate
    what this returns. ``rebuilt`` gets the indices of the rows built."""
    hit = cache.get(name)
    if hit is not None and hit[0].shape == inputs.shape:
        changed = (hit[0] != inputs).any(axis=1)
        if not changed.any():
            if rebuilt is not None:
                rebuilt.append(np.zeros(0, np.int64))
            return hit[1]
        idx = np.flatnonzero(changed)
        rows = list(hit[1])
        for i, r in zip(idx.tolist(), build(idx), strict=True):
            rows[i] = r
    else:
        idx = np.arange(inputs.shape[0])
        rows = build(slice(None))
    if rebuilt is not None:
        rebuilt.append(idx)
    cache[name] = (inputs, rows)
    return rows


def _stack(*cols: np.ndarray) -> np.ndarray:
    """Inputs of _reuse as one float matrix (integer sums in micro-units stay exact below 2**53)."""
    return np.column_stack([c.reshape(c.shape[0], -1) for c in cols]).astype(float, copy=False)


def _cached_figures(cache: dict[Any, Any], name: Any, state: MatchState, sums: np.ndarray, zones: np.ndarray,
                    onpitch_s: np.ndarray, max_speed: np.ndarray, coverage: np.ndarray,
                    same_as: Any = None) -> list[dict[str, Any]]:
    """Figure rows (see _reuse); the rows cached under ``same_as`` when their inputs are these (a match
    of one period so far: its figures are the period's)."""
    inputs = _stack(sums, zones, onpitch_s, max_speed, coverage)
    hit = cache.get(same_as) if same_as is not None else None
    if hit is not None and hit[0].shape == inputs.shape and np.array_equal(hit[0], inputs):
        cache[name] = hit
        return hit[1]
    names = state.params.zones.names
    prec = state.params.precision
    return _reuse(cache, name, inputs,
                  lambda r: _figures(sums[r], zones[r], names, onpitch_s[r], max_speed[r], coverage[r], prec))


def _rows(cols: dict[str, list[Any]], n: int) -> list[dict[str, Any]]:
    keys = list(cols)
    vals = [cols[k] for k in keys]
    return [dict(zip(keys, [v[i] for v in vals], strict=True)) for i in range(n)]


def _blocks(state: MatchState, per: Period) -> list[tuple[str, int, int]]:
    """Fixed blocks of a period: (key, first second, stop second); the last takes stoppage time."""
    length_min = state.params.period_min[per.index]
    block_min = state.params.windows.block_min
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


def _cache(state: MatchState) -> dict[Any, Any]:
    c = getattr(state, "_snapshot_cache", None)
    if c is None:
        c = state._snapshot_cache = {}
    return c


def _player_windows(state: MatchState) -> tuple[list[dict[str, Any]], _TeamLast]:
    """windows per player, and the last-N sums of the current period; cached per completed second.
    A player's windows object, and each window in it, stays the same object while unchanged. The
    last-N and block windows of every player are one row set (one pass when a second completes), the
    peak windows another."""
    cur = state.current
    seen_players = int((cur.first_seen >= 0).sum()) if cur is not None else 0
    key = ("windows", seen_players,
           tuple((p.index, p.bins.complete, p.bins.end_slot if p.ended else -1) for p in state.periods))
    cache = _cache(state)
    hit = cache.get("windows")
    if hit is not None and hit[0] == key:
        return hit[1], hit[2]
    names, sums, spans, team_last = _window_sums(state)
    rebuilt: list[np.ndarray] = []
    rows: list[Any] = []
    if names:
        all_sums, all_spans = np.concatenate(sums), np.concatenate(spans)
        prec = state.params.precision
        rows = _reuse(cache, ("windows", tuple(names)), _stack(all_sums, all_spans),
                      lambda r: _windows(all_sums[r], all_spans[r], prec), rebuilt)
    peak_names, peak_rows = _peak_rows(state, cache, rebuilt)
    n_last = len(team_last)
    # the contract's order: last-N, peaks, blocks
    named_rows = ([(name, rows, k) for k, name in enumerate(names[:n_last])]
                  + [(name, peak_rows, k) for k, name in enumerate(peak_names)]
                  + [(name, rows, k) for k, name in enumerate(names[n_last:], n_last)])
    per_player = _per_player(cache, state.n, named_rows, rebuilt)
    cache["windows"] = (key, per_player, team_last)
    return per_player, team_last


def _window_sums(state: MatchState) -> tuple[list[str], list[np.ndarray], list[np.ndarray], _TeamLast]:
    """Names, sums (P, N_FIG) and spans (P,) s of the last-N windows of the current period, then of
    the fixed blocks of every period that hold data; and the last-N sums by minutes."""
    n, fps = state.n, state.fps
    cur = state.current
    names: list[str] = []  # last-N, then blocks: rows k * n .. k * n + n - 1 of the row set
    sums: list[np.ndarray] = []
    spans: list[np.ndarray] = []
    team_last: _TeamLast = {}
    if cur is not None:
        b = cur.bins
        stop = b.complete
        first_sec = np.where(cur.first_seen >= 0, cur.first_seen // fps, stop)
        for m in state.params.windows.last_min:
            start = max(stop - m * 60, 0)
            last = b.span(start, stop)
            covered = b.covered_s(start, stop)
            team_last[m] = last
            names.append(f"last_{m}min")
            sums.append(last)
            spans.append(np.clip(covered - np.clip(first_sec - start, 0, None), 0, None).astype(float))
    for per in state.periods:
        bins = per.bins
        for k, s0, s1 in _blocks(state, per):
            if s0 >= bins.complete:
                continue
            names.append(k)
            sums.append(bins.span(s0, s1))
            spans.append(np.full(n, bins.covered_s(s0, s1)))
    return names, sums, spans, team_last


def _peak_rows(state: MatchState, cache: dict[Any, Any], rebuilt: list[np.ndarray]) -> tuple[list[str], list[Any]]:
    """Names and rows (window k of player i at k * P + i; None before the window was reached) of the
    peak windows: the best of every period, its start on the match clock."""
    n = state.n
    periods = state.periods
    peak_names = [f"peak_{w_s // 60}min" for w_s in state.peak_s]
    if not peak_names:
        return peak_names, []
    best: np.ndarray = np.full((len(peak_names), n, ex.N_FIG), -1, np.int64)
    start_clock: np.ndarray = np.full((len(peak_names), n), -1.0)
    for per in periods:
        clock_s, peak, peak_start = CLOCK_START_MIN[per.name] * 60, per.bins.peak, per.bins.peak_start
        for j, w_s in enumerate(state.peak_s):
            pk = peak[w_s]
            better = pk[:, ex.DIST] > best[j, :, ex.DIST]
            start_clock[j] = np.where(better, clock_s + peak_start[w_s], start_clock[j])
            best[j] = np.maximum(best[j], pk)
    best, start_clock = best.reshape(-1, ex.N_FIG), start_clock.reshape(-1)
    span = np.repeat(np.array([float(w_s) for w_s in state.peak_s]), n)

    def build_peaks(r: Any) -> list[Any]:
        prec = state.params.precision
        made = _windows(np.maximum(best[r], 0), span[r], prec, (("start_s", start_clock[r], prec.seconds),))
        return [w if ok else None for w, ok in zip(made, (best[r][:, ex.DIST] >= 0).tolist(), strict=True)]

    return peak_names, _reuse(cache, ("peaks", tuple(peak_names)), _stack(best, start_clock), build_peaks, rebuilt)


def _per_player(cache: dict[Any, Any], n: int, named_rows: list[tuple[str, list[Any], int]],
                rebuilt: list[np.ndarray]) -> list[dict[str, Any]]:
    """Each player's windows object: ``{name: rows[k * n + i]}`` over ``named_rows`` (name, rows, k).
    Only players with a row in ``rebuilt`` get a new object, unless the names changed."""
    prev = cache.get("windows_players")
    all_names = [name for name, _, _ in named_rows]
    if prev is None or len(prev) != n or cache.get("windows_names") != all_names:
        touched = range(n)
        per_player: list[dict[str, Any]] = [{} for _ in range(n)]
    else:
        touched = np.unique(np.concatenate([r % n for r in rebuilt])).tolist() if rebuilt else []
        per_player = list(prev)
    for i in touched:
        per_player[i] = dict(zip(all_names, [rows[k * n + i] for _, rows, k in named_rows], strict=True))
    cache["windows_players"] = per_player
    cache["windows_names"] = all_names
    return per_player


def _period_figures(state: MatchState, per: Period) -> list[dict[str, Any]]:
    """Per-player figures of one period; cached for good once the period ended."""
    cache = _cache(state)
    key = ("period", per.index)
    if per.ended and key in cache:
        return cache[key]
    o = per.onpitch_slots()
    cov = np.where(o > 0, np.minimum(per.sums[:, ex.VALID] / np.maximum(o, 1), 1.0), 0.0)
    figs = _cached_figures(cache, ("figures", per.index), state, per.sums, per.zones, o / state.fps,
                           per.max_speed, cov, same_as=("figures", "match"))
    if per.ended:
        cache[key] = figs
    return figs


_HR_WINDOW_KEYS = ("hr_mean_bpm", "trimp_edwards", "trimp_banister")


def _hr_cols(state: MatchState, sums: np.ndarray, onpitch_s: np.ndarray, keys: tuple[str, ...] | None = None
             ) -> list[dict[str, Any]]:
    assert state.heart is not None  # called for a match with heart-rate samples only
    cols = state.heart.figures(sums, onpitch_s)
    if keys is not None:
        cols = {k: cols[k] for k in keys}
    return _rows(cols, state.n)


def _with_heart_windows(state: MatchState, windows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Per-player windows with the heart-rate figures of the last-N windows and fixed blocks added
    (not cached with the windows: samples settle on their own clock)."""
    hr = state.heart
    assert hr is not None  # called for a match with heart-rate samples only
    out = [dict(w) for w in windows]
    zero = np.zeros(state.n)
    cur = state.current
    if cur is not None:
        stop = cur.bins.complete
        for m in state.params.windows.last_min:
            key = f"last_{m}min"
            rows = _hr_cols(state, hr.period_sums(cur.index, max(stop - m * 60, 0), stop), zero, _HR_WINDOW_KEYS)
            for i, r in enumerate(rows):
                if out[i].get(key) is not None:
                    out[i][key] = {**out[i][key], **r}
    for per in state.periods:
        for key, s0, s1 in _blocks(state, per):
            if s0 >= per.bins.complete:
                continue
            rows = _hr_cols(state, hr.period_sums(per.index, s0, s1), zero, _HR_WINDOW_KEYS)
            for i, r in enumerate(rows):
                if out[i].get(key) is not None:
                    out[i][key] = {**out[i][key], **r}
    return out


def _hr_health(state: MatchState, on_pitch: list[bool]) -> dict[str, float | None]:
    """Heart-rate samples received over the last minute ÷ expected, per player on the pitch: a strap
    that drops out shows here as low coverage, not as a low heart rate."""
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


def _artefacts(state: MatchState) -> dict[str, Any]:
    """Samples removed as tracking artefacts: per player (samples, seconds) and in all."""
    n = state.artefacts()
    secs = np.round(n / state.fps, 1).tolist()
    total = int(n.sum())
    return {"artefacts": {pl.id: {"samples": c, "seconds": s}
                          for pl, c, s in zip(state.roster.players, n.tolist(), secs, strict=True)},
            "artefact_samples": total, "artefact_s": round(total / state.fps, 1)}


def _health(state: MatchState, now: float | None, extra_reasons: list[dict[str, str]] | None,
            on_pitch: list[bool], cov: np.ndarray) -> dict[str, Any]:
    """The snapshot's ``health`` object at wall-clock ``now`` (None: the last frame's time)."""
    h = state.health
    clock = now if now is not None else (h.last_arrival if h.last_arrival is not None else 0.0)
    dropout = state.dropout()
    status, reasons = h.evaluate(clock, dropout, extra_reasons)
    lag_med, lag_p95 = h.lag(clock)
    cov_r = _round_list(cov, state.params.precision.share)
    roster = state.roster
    heart = state.heart
    speed = h.speed(clock)
    health = {
        "state": status,
        "reasons": reasons,
        "fps_observed": round(h.fps_observed(clock), 2),
        "fps_nominal": state.fps,
        "feed_speed": None if speed is None else round(speed, 1),
        "rate_clock": "frames" if h.fast(clock) else "wall",
        "dropout": round(dropout, 3),
        "lag_s": None if lag_med is None else round(lag_med, 3),
        "lag_p95_s": None if lag_p95 is None else round(lag_p95, 3),
        "lag_note": h.lag_note(clock),
        "late": h.late,
        "duplicates": h.duplicates,
        "resent": h.resent,
        "after_end": h.after_end,
        "rejected": h.rejected,
        "jumps": state.jumps,
        "frames": state.frames,
        "coverage": {pl.id: cov_r[i] for i, pl in enumerate(roster.players)},
        **_artefacts(state),
    }
    if heart is not None:
        health["hr_coverage"] = _hr_health(state, on_pitch)
    if heart is not None or state.hr_rejected or state.hr_duplicates or state.hr_late:
        health["hr_rejected"] = state.hr_rejected
        health["hr_duplicates"] = state.hr_duplicates
        health["hr_late"] = state.hr_late
    events = state.event_stream(now)
    if events is not None:
        health["events"] = events
    return health


def _team_windows(state: MatchState, masks: list[np.ndarray], team_last: _TeamLast) -> list[dict[str, Any]]:
    """Each team's last-N outfield windows, all in one pass; the same objects until a second completes
    or the players counted change (``team_last`` comes from the windows cache, whose key says when)."""
    cache = _cache(state)
    key = (cache["windows"][0], b"".join(m.tobytes() for m in masks))
    hit = cache.get("team_windows")
    if hit is not None and hit[0] == key:
        return hit[1]
    out: list[dict[str, Any]] = [{} for _ in masks]
    cur = state.current
    if cur is not None and team_last:
        stop = cur.bins.complete
        names = [f"last_{m}min" for m in team_last]
        spans = [cur.bins.covered_s(stop - m * 60, stop) for m in team_last]
        sums = np.array([s[mask].sum(axis=0) for mask in masks for s in team_last.values()], np.int64)
        # players' credited seconds in the window: a player substituted off stops counting when he left
        player_s = sums[:, ex.VALID] / state.fps
        prec = state.params.precision
        rows = _team_rows(sums.reshape(-1, ex.N_FIG), player_s, prec,
                          (("span_s", np.array(spans * len(masks), float), prec.seconds),))
        for k in range(len(masks)):
            out[k] = dict(zip(names, rows[k * len(names):(k + 1) * len(names)], strict=True))
    cache["team_windows"] = (key, out)
    return out


def _team_rows(sums: np.ndarray, player_s: np.ndarray, prec: Precision, extra: _Extra = ()) -> list[dict[str, Any]]:
    """Team figures over a stretch from the outfield sums (T, F) and the players' seconds on the pitch
    in it (T,): distances and counts summed; m_per_min and metabolic_power_wkg per player-second, i.e.
    the time-weighted means of the players' own figures; energy_jkg none (a sum of per-kilogram figures
    means nothing)."""
    rows = _window_rows(sums, player_s, prec, extra)
    for row in rows:
        row["energy_jkg"] = None
    return rows


_AVG_FIGS = (("distance_m", ex.DIST, _U), ("hsr_m", ex.HSR, _U), ("sprint_m", ex.SPRINT, _U),
             ("high_power_m", ex.HIPOW, _U), ("energy_jkg", ex.ENERGY, _U), ("hsr_efforts", ex.N_HSR, 1.0),
             ("sprints", ex.N_SPR, 1.0), ("accels", ex.N_ACC, 1.0), ("decels", ex.N_DEC, 1.0))


def _averages(sums: np.ndarray, player_min: np.ndarray, prec: Precision) -> tuple[list[Any], list[Any]]:
    """Per-player averages of each team (T, F sums; T player-minutes): per 90 minutes on the pitch and
    per minute on the pitch, None before any time on the pitch."""
    cols = [sums[:, j] * u / np.where(player_min > 0, player_min, 1.0) for _, j, u in _AVG_FIGS]
    d, c = prec.distance, prec.per_90_count
    per_90 = _rounded([x * 90.0 for x in cols], (d, d, d, d, prec.energy, c, c, c, c))
    d, c = prec.per_min_distance, prec.per_min_count
    per_min = _rounded(cols, (d, d, d, d, prec.per_min_energy, c, c, c, c))
    names = [k for k, _, _ in _AVG_FIGS]
    ok = (player_min > 0).tolist()
    return ([dict(zip(names, r, strict=True)) if o else None for r, o in zip(per_90, ok, strict=True)],
            [dict(zip(names, r, strict=True)) if o else None for r, o in zip(per_min, ok, strict=True)])


def build_health(state: MatchState, now: float | None, extra_reasons: list[dict[str, str]] | None) -> dict[str, Any]:
    """The snapshot's ``health`` alone, equal to ``build_snapshot(...)["health"]`` at the same ``now``
    (the health check runs four times a second and needs no figures)."""
    return _health(state, now, extra_reasons, state.on_pitch().tolist(), state.coverage())


def build_snapshot(state: MatchState, now: float | None = None,
                   extra_reasons: list[dict[str, str]] | None = None,
                   baselines: Baselines | None = None) -> dict[str, Any]:
    """The snapshot body plus ``match_time_s`` and ``period`` (envelope fields).

    ``now``: wall-clock seconds for health (live); None evaluates at the last
    frame's time (offline: no arrival lag is known). ``extra_reasons``: health
    reasons the caller adds (``{"code", "message"}``). ``baselines``: the
    players' bands from past matches (``players.{id}.baseline``), or None.
    """
    roster = state.roster
    total, zones, poss, onp, vmax = _match_sums(state)
    onp_s = onp / state.fps
    cov = state.coverage()
    on_pitch = state.on_pitch().tolist()
    cache = _cache(state)
    figs = _cached_figures(cache, ("figures", "match"), state, total, zones, onp_s, vmax, cov)
    windows, team_last = _player_windows(state)
    per_figs = [(per.name, _period_figures(state, per)) for per in state.periods]
    hr_rows = None
    if state.heart is not None:
        windows, per_figs, hr_rows = _with_heart(state, windows, per_figs, onp_s)
    speed = _speeds(state)
    poss_rows = _possession_rows(cache, poss, state.params.precision) if state.has_ball else None
    phases = state.phases()
    phase_rows = _player_phase_rows(state, cache, phases)
    base_rows = _baseline_rows(state, cache, baselines)
    players = _players(state, cache, on_pitch, speed, figs, windows, per_figs, poss_rows, hr_rows, phase_rows,
                       base_rows)
    teams = _teams(state, total, onp, onp_s, team_last, phases)
    health = _health(state, now, extra_reasons, on_pitch, cov)
    return {
        "match_id": roster.match_id,
        "match_time_s": round(state.match_time_s(), 2),
        "period": state.period_name(),
        "players": players,
        "teams": teams,
        "health": health,
    }


def _match_sums(state: MatchState) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Whole-match sums per player over the periods: figures (P, N_FIG), zones (P, Z) µm,
    possession (P, 3, 2) µm, on-pitch slots (P,) and max speed (P,) m/s."""
    n = state.n
    total = np.zeros((n, ex.N_FIG), np.int64)
    zones = np.zeros((n, len(state.params.zones.names)), np.int64)
    poss = np.zeros((n, 3, 2), np.int64)
    onp = np.zeros(n, np.int64)
    vmax = np.zeros(n)
    for per in state.periods:
        total += per.sums
        zones += per.zones
        poss += per.poss
        onp += per.onpitch_slots()
        np.maximum(vmax, per.max_speed, out=vmax)
    return total, zones, poss, onp, vmax


def _with_heart(state: MatchState, windows: _Rows, per_figs: _PeriodRows, onp_s: np.ndarray
                ) -> tuple[_Rows, _PeriodRows, _Rows]:
    """The windows and period figures with the heart-rate figures added, and each player's
    match heart-rate row (latest, %HRmax, match sums, peak, omitted figures)."""
    heart = state.heart
    assert heart is not None
    fps = state.fps
    windows = _with_heart_windows(state, windows)
    per_figs = [(name, [{**f, **h} for f, h in zip(pf, _hr_cols(state, heart.period_sums(per.index),
                                                                 per.onpitch_slots() / fps), strict=True)])
                for (name, pf), per in zip(per_figs, state.periods, strict=True)]
    latest = max(state.last_t or 0.0, float(np.nanmax(heart.last_t)))
    hr_now, hr_pct = heart.now(latest)
    hr_rows = _hr_cols(state, heart.match_sums(), onp_s)
    for i, (bpm, pct, peak, omitted) in enumerate(zip(hr_now, hr_pct, heart.peak(), heart.omitted(), strict=True)):
        hr_rows[i] = {"hr_bpm": bpm, "hr_pct_max": pct, **hr_rows[i], "hr_peak_bpm": peak, "hr_omitted": omitted}
    return windows, per_figs, hr_rows


def _speeds(state: MatchState) -> list[float | None]:
    """Each player's speed at his latest credited sample, m/s; None when that is over a second old."""
    cur = state.current
    if cur is None:
        return [None] * state.n
    recent = (cur.last_valid >= 0) & (cur.track.fin - cur.last_valid <= state.fps)
    sp = _round_list(cur.last_speed, state.params.precision.speed)
    return [s if r else None for s, r in zip(sp, recent.tolist(), strict=True)]


def _possession_rows(cache: dict[Any, Any], poss: np.ndarray, prec: Precision) -> _Rows:
    """Each player's distance and HSR per ball context, from ``poss`` (P, 3, 2) µm (see _reuse)."""
    flat = poss.reshape(poss.shape[0], -1)

    def poss_build(r: Any) -> list[dict[str, Any]]:
        pm = _round_list(poss[r] * _U, prec.distance)
        return [{ctx: {"distance_m": p[k][0], "hsr_m": p[k][1]} for k, ctx in enumerate(CONTEXTS)} for p in pm]

    return _reuse(cache, "possession", flat.astype(float), poss_build)


def _baseline_rows(state: MatchState, cache: dict[Any, Any], baselines: Baselines | None
                   ) -> list[dict[str, Any] | None] | None:
    """Each player's ``baseline`` (roster order), rebuilt when a second completes or the bands change."""
    if baselines is None:
        return None
    key = (id(baselines), tuple((p.index, p.bins.complete, p.bins.end_slot if p.ended else -1) for p in state.periods))
    hit = cache.get("baseline")
    if hit is not None and hit[0] == key and hit[2] is baselines:
        return hit[1]
    rows = baselines.bodies(state)
    cache["baseline"] = (key, rows, baselines)
    return rows


def _players(state: MatchState, cache: dict[Any, Any], on_pitch: list[bool], speed: list[float | None], figs: _Rows,
             windows: _Rows, per_figs: _PeriodRows, poss_rows: _Rows | None, hr_rows: _Rows | None,
             phase_rows: _Rows, base_rows: list[dict[str, Any] | None] | None = None) -> dict[str, Any]:
    """The snapshot's ``players``. A player whose every part is the object of the last snapshot keeps
    that player object (a diff skips it)."""
    roster = state.roster
    prev = cache.get("players")
    made: dict[str, tuple[tuple[Any, ...], dict[str, Any]]] = {}
    players: dict[str, Any] = {}
    period_names = [name for name, _ in per_figs]
    for i, pl in enumerate(roster.players):
        parts = (figs[i], windows[i], *(pf[i] for _, pf in per_figs),
                 None if poss_rows is None else poss_rows[i], phase_rows[i],
                 None if base_rows is None else base_rows[i])
        old = prev.get(pl.id) if prev is not None else None
        if (hr_rows is None and old is not None and old[0][0] == on_pitch[i] and old[0][1] == speed[i]
                and old[0][2] == period_names and len(old[0][3]) == len(parts)
                and all(a is b for a, b in zip(old[0][3], parts, strict=True))):
            obj = old[1]
        else:
            obj = {
                "team_id": roster.team_ids[pl.team],
                "jersey_number": pl.jersey_number,
                "name": pl.name,
                "is_goalkeeper": pl.is_goalkeeper,
                "on_pitch": on_pitch[i],
                "speed_ms": speed[i],
                **figs[i],
                "m_per_min_in_play": phase_rows[i]["m_per_min_in_play"],
                "windows": windows[i],
                "periods": {name: pf[i] for name, pf in per_figs},
            }
            if poss_rows is not None:
                obj["possession"] = poss_rows[i]
            obj["phases"] = phase_rows[i]["phases"]
            if hr_rows is not None:
                obj.update(hr_rows[i])
            if base_rows is not None and base_rows[i] is not None:
                obj["baseline"] = base_rows[i]
        made[pl.id] = ((on_pitch[i], speed[i], period_names, parts), obj)
        players[pl.id] = obj
    cache["players"] = made
    return players


def _teams(state: MatchState, total: np.ndarray, onp: np.ndarray, onp_s: np.ndarray,
           team_last: _TeamLast, phases: PhaseTotals) -> dict[str, Any]:
    """The snapshot's ``teams``: each tracked team's outfield totals, per-player averages over time on the
    pitch (service/wire/schema.py defines each figure), windows and figures by game phase."""
    roster = state.roster
    periods = state.periods
    fps = state.fps
    prec = state.params.precision
    elapsed_s = sum((max(p.last_slot, 0) + 1) / fps for p in periods) if periods else 0.0
    teams: dict[str, Any] = {}
    tracked = roster.tracked()
    masks = [(state.team == k) & ~state.gk & (onp > 0) for k in range(len(roster.team_ids))]
    tsums = np.array([total[m].sum(axis=0) for m in masks], np.int64).reshape(len(masks), ex.N_FIG)
    player_s = np.array([onp_s[m].sum() for m in masks], float)
    outfields = _team_rows(tsums, player_s, prec)  # both teams in one pass
    per_90, per_min = _averages(tsums, player_s / 60.0, prec)
    player_min = _round_list(player_s / 60.0, prec.minutes)
    team_windows = _team_windows(state, masks, team_last)
    for k, tid in enumerate(roster.team_ids):
        if not tracked[k]:
            # one-team feed: the other team's figures are absent, not zeros
            teams[tid] = {"name": roster.team_names[k], "side": ("home", "away")[k], "tracked": False}
            continue
        outfield = outfields[k]
        outfield["players"] = int(masks[k].sum())
        outfield["minutes"] = round(elapsed_s / 60.0, prec.minutes)
        outfield["player_minutes"] = player_min[k]
        outfield["per_90min"] = per_90[k]
        outfield["per_min"] = per_min[k]
        p90 = per_90[k] or {}
        outfield["per_player"] = {"distance_m": p90.get("distance_m"), "hsr_m": p90.get("hsr_m"),
                                  "sprint_m": p90.get("sprint_m"), "m_per_min": outfield["m_per_min"]}
        outfield["windows"] = team_windows[k]
        outfield.update(_team_phases(state, phases, k, masks[k]))
        teams[tid] = {"name": roster.team_names[k], "side": ("home", "away")[k], "tracked": True, "outfield": outfield}
    return teams


# -- game phases ---------------------------------------------------------------------------------
def _merge_codes(a: np.ndarray) -> np.ndarray:
    """(..., N_CODES) → (..., phases): the label codes as the reported phases (both unknown codes in one)."""
    out = a[..., :len(PHASES)].copy()
    out[..., -1] += a[..., len(PHASES):].sum(axis=-1)
    return out


def _rate(value: float, seconds: float, prec: Precision) -> float | int | None:
    """``value`` per minute over ``seconds`` at the precision of m/min (None without any time)."""
    return _round_one(value / seconds * 60.0, prec.rate) if seconds > 0 else None


def _round_one(value: float, decimals: int) -> float | int:
    """One figure as _round_list rounds it (an int when ``decimals`` <= 0)."""
    return _round_list(np.array([value]), decimals)[0]


def _phase_block(sums: np.ndarray, seconds: np.ndarray, rate_s: np.ndarray, prec: Precision) -> list[dict[str, Any]]:
    """Per row: {phase: {seconds, distance_m, m_per_min, hsr_m, sprint_m}} from ``sums`` (rows, phases,
    N_FIG) µm, ``seconds`` (rows, phases) shown (0.1 s) and ``rate_s`` (rows, phases) the m/min divides
    by; distances and m/min at the wire precision ``prec``."""
    dist = sums[..., ex.DIST] * _U
    ok = rate_s > 0
    rate = np.where(ok, dist / np.where(ok, rate_s, 1.0) * 60.0, 0.0)
    secs = np.round(seconds, 1).tolist()
    d = prec.distance
    dists = [_round_list(a, d) for a in (dist, sums[..., ex.HSR] * _U, sums[..., ex.SPRINT] * _U)]
    rates = _round_list(rate, prec.rate)
    oks = ok.tolist()
    return [{ph: {"seconds": secs[i][j], "distance_m": dists[0][i][j], "m_per_min": rates[i][j] if oks[i][j] else None,
                  "hsr_m": dists[1][i][j], "sprint_m": dists[2][i][j]} for j, ph in enumerate(PHASES)}
            for i in range(len(oks))]


def _in_play_rate(sums: np.ndarray, seconds: np.ndarray, prec: Precision) -> list[float | int | None]:
    """Distance per minute of play from per-code sums (rows, N_CODES, N_FIG) and seconds (rows, N_CODES)."""
    dist = sums[:, IN_PLAY_CODES, ex.DIST].sum(axis=1) * _U
    secs = seconds[:, IN_PLAY_CODES].sum(axis=1)
    return [_rate(d, s, prec) for d, s in zip(dist.tolist(), secs.tolist(), strict=True)]


def _player_phase_rows(state: MatchState, cache: dict[Any, Any], phases: PhaseTotals) -> _Rows:
    """Each player's ``phases`` and ``m_per_min_in_play`` (seconds: his samples seen / fps), see _reuse."""
    sums = phases.player  # (P, N_CODES, N_FIG)
    seen_s = sums[:, :, ex.SEEN] / state.fps
    prec = state.params.precision

    def build(r: Any) -> list[dict[str, Any]]:
        merged = _merge_codes(sums[r].transpose(0, 2, 1)).transpose(0, 2, 1)
        secs = _merge_codes(seen_s[r])
        blocks = _phase_block(merged, secs, secs, prec)
        in_play = _in_play_rate(sums[r], seen_s[r], prec)
        return [{"phases": b, "m_per_min_in_play": m} for b, m in zip(blocks, in_play, strict=True)]

    return _reuse(cache, "phases", sums.reshape(state.n, -1).astype(float), build)


def _team_phases(state: MatchState, phases: PhaseTotals, k: int, mask: np.ndarray) -> dict[str, Any]:
    """A team's outfield ``phases`` (m/min per minute of match time in the phase, as ``m_per_min``, and per
    outfield player-minute), ``m_per_min_in_play``, ``in_play_s`` and, with events, ``sequences``."""
    sums = phases.player[mask].sum(axis=0)[None]  # (1, N_CODES, N_FIG)
    team_s = phases.team_s[k][None]
    player_s = sums[:, :, ex.SEEN] / state.fps
    merged = _merge_codes(sums.transpose(0, 2, 1)).transpose(0, 2, 1)
    prec = state.params.precision
    block = _phase_block(merged, _merge_codes(team_s), _merge_codes(team_s), prec)[0]
    per_player = _merge_codes(player_s)[0].tolist()
    dist = (merged[0, :, ex.DIST] * _U).tolist()
    for ph, d, ps in zip(PHASES, dist, per_player, strict=True):
        block[ph]["per_player_m_per_min"] = _rate(d, ps, prec)
    out: dict[str, Any] = {"phases": block, "m_per_min_in_play": _in_play_rate(sums, team_s, prec)[0],
                           "in_play_s": round(float(team_s[0, IN_PLAY_CODES].sum()), 1)}
    if phases.sequences is not None:
        out["sequences"] = _sequences(phases.sequences[k], state.fps, prec)
    return out


def _sequences(rows: np.ndarray, fps: int, prec: Precision) -> dict[str, Any]:
    """Possession sequences by outcome from rows (shot, no shot) of [spells, seconds, distance µm, HSR µm,
    samples seen]: count, seconds, mean seconds, the outfield players' m/min and HSR m/min (``prec``)."""
    out = {}
    for name, (count, secs, dist, hsr, seen) in zip(("shot", "no_shot"), rows.tolist(), strict=True):
        seen_s = seen / fps
        count = int(count)
        out[name] = {"count": count, "seconds": round(secs, 1), "mean_s": round(secs / count, 1) if count else None,
                     "m_per_min": _rate(dist * _U, seen_s, prec), "hsr_m_per_min": _rate(hsr * _U, seen_s, prec)}
    return out
