"""The report's section "against own recent matches": each player's 15-minute blocks against his bands.

A player's bands come from his own past live and replayed matches
(:mod:`pacewire.engine.baseline`, read once at the match's start); each block
of the report's stretch (the first half at half time, the match at full time)
is set against the band of the same block of the match clock, and the stretch
as a whole against the match band. A block under its band's low edge is marked.
The same figures go into the report CSV as ``own_{block}_*`` columns
(:func:`comparison_columns`); the matches behind each band are named in both.

Kept apart from the page's layout (:mod:`pacewire.reports.page`): this module
gives the section's parts and the CSV fields; the page places them.
"""
from __future__ import annotations

from typing import Any

import numpy as np

from pacewire.engine.baseline import METRICS, Baselines, PlayerBaseline, block_label
from pacewire.engine.blocks import BlockSeries
from pacewire.reports.page import Played, _table, esc, num

RATE_WORDS = {"m_per_min": "m/min", "hsr_m_per_min": "HSR m/min", "sprint_m_per_min": "sprint m/min",
              "accel_decel_per_min": "acc+dec /min"}


def _rates(series: BlockSeries) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(rates per block (B, P, M), the stretch's rates (P, M), minutes per block (B, P)); NaN off the pitch."""
    minutes = series.onpitch_s / 60.0
    totals = np.stack([sum((series.total_m(c) for c in cols), np.zeros_like(minutes)) for cols in METRICS.values()],
                      axis=-1)
    whole = minutes.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        per_block = np.where(minutes[..., None] > 0, totals / np.where(minutes > 0, minutes, 1.0)[..., None], np.nan)
        so_far = np.where(whole[:, None] > 0, totals.sum(axis=0) / np.where(whole > 0, whole, 1.0)[:, None], np.nan)
    return per_block, so_far, minutes


def _scope(pb: PlayerBaseline, scope: str, values: np.ndarray, minutes: float) -> dict[str, Any] | None:
    bands = pb.bands.get(scope)
    if not bands or minutes <= 0:
        return None
    out: dict[str, Any] = {"minutes": round(minutes, 1), "matches": " ".join(pb.formed_by.get(scope, ()))}
    for j, rate in enumerate(METRICS):
        b = bands.get(rate)
        v = float(values[j])
        if b is None or not np.isfinite(v):
            continue
        out[rate] = {"value": round(v, 2), "median": round(b.median, 2), "low": round(b.low, 2),
                     "high": round(b.high, 2), "ratio": round(v / b.median, 2) if b.median > 0 else None,
                     "below": bool(v < b.low)}
    return out


def comparison(baselines: Baselines, series: BlockSeries) -> dict[str, dict[str, Any]]:
    """Per player: ``{block label | "match": {minutes, matches, rate: {value, median, low, high, ratio, below}}}``
    for his blocks with a band; a player without enough history gets ``{history_matches, required}``. Empty
    when no player has a band (no section, no columns: the report then equals one built offline)."""
    if not any(pb.enough for pb in baselines.players.values()):
        return {}
    per_block, so_far, minutes = _rates(series)
    labels = [block_label(k) for k in series.keys]
    out: dict[str, dict[str, Any]] = {}
    for i, pid in enumerate(series.player_ids):
        pb = baselines.players.get(pid)
        if pb is None or float(minutes[:, i].sum()) <= 0:
            continue
        if not pb.enough:
            out[pid] = {"history_matches": pb.matches, "required": pb.required}
            continue
        row: dict[str, Any] = {}
        for b, label in enumerate(labels):
            got = _scope(pb, label, per_block[b, i], float(minutes[b, i]))
            if got is not None:
                row[label] = got
        whole = _scope(pb, "match", so_far[i], float(minutes[:, i].sum()))
        if whole is not None:
            row["match"] = whole
        out[pid] = row
    return out


def comparison_columns(comp: dict[str, dict[str, Any]]) -> tuple[list[str], dict[str, dict[str, Any]]]:
    """The report CSV's columns of the comparison and each player's cells, named as export.csv names its
    own (underscores, the unit last): ``own_{scope}_{value|median|low|high}_{rate}``, ``own_{scope}_{rate}_ratio``
    and ``_below``, ``own_{scope}_minutes``, ``own_{scope}_matches`` (the ids behind the band); a scope is a
    block of the match clock (``0_15``) or ``match``. A player short of history: ``own_history_matches`` and
    ``own_required_matches``."""
    scopes = sorted({k for row in comp.values() for k in row if k[:1].isdigit()}, key=lambda k: int(k.split("-")[0]))
    columns = ["own_history_matches", "own_required_matches"]
    for scope in [*scopes, "match"]:
        s = "own_" + scope.replace("-", "_")
        columns += [f"{s}_minutes", f"{s}_matches"]
        for rate in METRICS:
            columns += [f"{s}_{stat}_{rate}" for stat in ("value", "median", "low", "high")]
            columns += [f"{s}_{rate}_ratio", f"{s}_{rate}_below"]
    rows: dict[str, dict[str, Any]] = {}
    for pid, row in comp.items():
        cells: dict[str, Any] = {"own_history_matches": row.get("history_matches"),
                                 "own_required_matches": row.get("required")}
        for scope, got in row.items():
            if not isinstance(got, dict):
                continue
            s = "own_" + scope.replace("-", "_")
            cells[f"{s}_minutes"], cells[f"{s}_matches"] = got["minutes"], got["matches"]
            for rate in METRICS:
                d = got.get(rate)
                if d:
                    cells.update({f"{s}_{stat}_{rate}": d[stat] for stat in ("value", "median", "low", "high")})
                    cells[f"{s}_{rate}_ratio"], cells[f"{s}_{rate}_below"] = d["ratio"], d["below"]
        rows[pid] = cells
    return [c for c in columns if any(c in cells for cells in rows.values())], rows


def _cell(scope: dict[str, Any] | None) -> tuple[str, str]:
    """One block's cell: m/min, the m/min band (low-high) under it, and ▾ with the rates under their bands."""
    if scope is None:
        return "–", ""
    low = [RATE_WORDS[r] for r in METRICS if (scope.get(r) or {}).get("below")]
    d = scope.get("m_per_min") or {}
    text = (f'{num(d.get("value"), 1)}{" ▾" if low else ""}<br><span class="n">{num(d.get("low"), 0)}–'
            f'{num(d.get("high"), 0)}</span>')
    if low:
        text += f'<br><b class="below">▾ {esc(", ".join(low))}</b>'
    return text, "below" if low else ""


def baseline_section(teams: list[tuple[str, dict[str, Any]]], played_by_team: dict[str, Played],
                     comp: dict[str, dict[str, Any]]) -> list[str]:
    """The section's HTML parts; nothing when no player of the report has a history."""
    if not comp:
        return []
    labels = sorted({k for row in comp.values() for k in row if k[:1].isdigit()}, key=lambda k: int(k.split("-")[0]))
    parts = ['<section id="against-own"><h2>Against own recent matches <span class="n">m/min per block of the match '
             "clock; under it the player's band over his own last live and replayed matches (median ∓ 1.5 robust "
             "spreads); ▾ marks rates under their band</span></h2>"]
    for tid, t in teams:
        rows = []
        for pid, p in played_by_team.get(tid, []):
            row = comp.get(pid)
            if row is None:
                continue
            cells = [(num(p["jersey_number"]), ""), (esc(p.get("name") or pid), "l")]
            if "history_matches" in row:
                cells += [(f'no band: {row["history_matches"]} of {row["required"]} matches', "l")]
                cells += [("", "")] * len(labels)
            else:
                cells += [_cell(row.get("match"))] + [_cell(row.get(k)) for k in labels]
            rows.append(cells)
        if rows:
            parts.append(f'<h3>{esc(t["name"] or tid)}</h3>')
            parts.append(_table([("#", ""), ("player", "l"), ("so far", "")] + [(k, "") for k in labels], rows))
            parts.append(_sources(comp, labels, played_by_team.get(tid, [])))
    parts.append('<p class="note">Bands come from live and replayed matches only (post-processed figures run a few '
                 "percent higher); a block's band needs enough matches with minutes in it. Stoppage time counts in "
                 "the half's last block.</p></section>")
    return parts


def _sources(comp: dict[str, dict[str, Any]], labels: list[str], played: Played) -> str:
    """Which matches formed each band: one line per set of matches, naming its blocks and its players."""
    sets: dict[str, tuple[set[str], list[str]]] = {}
    for pid, p in played:
        row = comp.get(pid) or {}
        for key in ["match", *labels]:
            scope = row.get(key)
            if isinstance(scope, dict) and scope.get("matches"):
                scopes, who = sets.setdefault(scope["matches"], (set(), []))
                scopes.add("so far" if key == "match" else key)
                if f"#{p['jersey_number']}" not in who:
                    who.append(f"#{p['jersey_number']}")
    items = "".join(f"<li>{esc(', '.join(m.split()))}: {esc(', '.join(sorted(scopes)))} "
                    f'<span class="n">({esc(" ".join(who))})</span></li>'
                    for m, (scopes, who) in sorted(sets.items()))
    return f'<p class="note">Matches behind the bands:</p><ul class="sources">{items}</ul>' if items else ""
