"""Writes a report folder: report.html, report.csv, snapshot.json (and index.json, last).

The input is what the engine state gives on the event loop in a few
milliseconds (a snapshot and the per-block series); everything here is plain
Python, numpy and matplotlib, safe to run in a worker thread. The same
function builds live reports and offline ones (``pacewire report``), so the
two agree for the same frames.
"""
from __future__ import annotations

import os
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import orjson

from pacewire.engine import exertion as ex
from pacewire.engine.blocks import BlockSeries
from pacewire.reports import charts
from pacewire.reports.alert_log import alerts_csv
from pacewire.reports.baseline import baseline_section, comparison_columns
from pacewire.reports.export import export_csv, report_table
from pacewire.reports.page import Played, page, zone_names
from pacewire.reports.phases import phases_section
from pacewire.reports.table import has_heart_rate, player_order, tracked_teams
from pacewire.wire.messages import envelope

KINDS = ("half_time", "full_time")
FILES = ("report.html", "report.csv", "snapshot.json", "alerts.csv")
SOURCES = ("live", "replay", "offline")
WHOLE_BLOCK = 0.9  # share of a block on the pitch for it to count as played whole (pacewire default)


def report_kind(period: str) -> str:
    """The report a period's end calls for: half time after the first half, full time after any later one."""
    return "half_time" if period == "first_half" else "full_time"


@dataclass(frozen=True)
class ReportInput:
    kind: str  # half_time | full_time
    snapshot: dict[str, Any]  # snapshot body: match_id, match_time_s, period, players, teams, health
    series: BlockSeries  # intensity blocks (reports.intensity_block_min)
    source: str  # live | replay | offline: where the figures came from
    created_at: float  # epoch s
    alerts: list[dict[str, Any]] = field(default_factory=list)  # raised up to the report, oldest first
    # each player's blocks against his own past matches (pacewire.reports.baseline.comparison); None: no history
    against_own: dict[str, dict[str, Any]] | None = None


def _write_atomic(path: Path, data: bytes) -> None:
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def outfield_possession(snapshot: dict[str, Any]) -> dict[str, dict[str, float]]:
    """Outfield distance per ball context, per team (empty without ball status)."""
    out: dict[str, dict[str, float]] = {}
    for p in snapshot["players"].values():
        pos = p.get("possession")
        if pos is None or p["is_goalkeeper"]:
            continue
        team = out.setdefault(p["team_id"], {})
        for key, c in pos.items():
            team[key] = round(team.get(key, 0.0) + c["distance_m"], 1)
    return out


def draw_charts(snapshot: dict[str, Any], series: BlockSeries) -> dict[str, str]:
    players = snapshot["players"]
    ids = list(series.player_ids)
    order = player_order(snapshot)
    out: dict[str, str] = {}
    teams = []
    tracked = tracked_teams(snapshot)  # an untracked team (one-team feed) gets no line, bar or map
    heart = has_heart_rate(snapshot)
    for tid, t in tracked:
        mask = np.array([players[i]["team_id"] == tid and not players[i]["is_goalkeeper"] for i in ids], bool)
        teams.append((t["name"] or tid, t["side"], mask))
    if len(series):
        out["team-intensity"] = charts.team_intensity(series, teams)
    windows = sorted({int(k[5:-3]) for p in players.values() for k, v in (p.get("windows") or {}).items()
                      if k.startswith("peak_") and v is not None and int(k[5:-3]) <= 5})
    for tid, t in tracked:
        played = [(pid, players[pid]) for pid in order if players[pid]["team_id"] == tid and players[pid]["minutes"]]
        if not played:
            continue
        name = t["name"] or tid
        if len(series):
            rows = [ids.index(pid) for pid, _ in played]
            labels = [charts.player_label(pid, p) for pid, p in played]
            out[f"heatmap-{tid}"] = charts.player_heatmap(series, rows, labels, name)
        out[f"bars-{tid}"] = charts.player_bars(played, name)
        if windows:
            out[f"peaks-{tid}"] = charts.peak_timeline(played, windows, name)
        if heart and any(p.get("hr_zones") for _, p in played):
            out[f"hr-zones-{tid}"] = charts.hr_zones(played, zone_names(played), name)
    poss = outfield_possession(snapshot)
    if poss:
        out["possession"] = charts.possession_split(
            [(t["name"] or tid, t["side"], poss.get(tid, {})) for tid, t in tracked])
    return out


def build_report(inp: ReportInput, root: Path, low_coverage: float = 0.8,
                 extra: dict[str, Any] | None = None) -> dict[str, Any]:
    """Write ``root/{kind}/`` and return its index entry (also written as index.json, last;
    ``extra`` fields are added to it)."""
    if inp.kind not in KINDS:
        raise ValueError(f"report kind must be one of {KINDS}")
    snap = inp.snapshot
    folder = root / inp.kind
    folder.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    svgs = draw_charts(snap, inp.series)
    ser = inp.series
    rate = ser.per_min(ex.DIST)
    per_min = {pid: [None if not np.isfinite(v) else round(float(v), 1) for v in rate[:, i]]
               for i, pid in enumerate(ser.player_ids)}
    # the first page compares whole blocks only (90 % of the block on the pitch): a stoppage-time block of
    # 2-3 min, mostly the game winding down, or a block he came on in, set against a full 5 min, reads as
    # a drop-off that is not one
    full = ser.onpitch_s >= ser.block_min * 60.0 * WHOLE_BLOCK
    steady = {pid: [v if full[b, i] else None for b, v in enumerate(per_min[pid])]
              for i, pid in enumerate(ser.player_ids)}
    own = inp.against_own

    def more(teams: list[tuple[str, dict[str, Any]]], played: dict[str, Played]) -> list[str]:
        return phases_section(teams, played) + (baseline_section(teams, played, own) if own else [])

    text = page(inp.kind, snap, svgs, outfield_possession(snap), inp.source, inp.created_at, low_coverage,
                [(charts.block_label(k), per) for k, per in zip(ser.keys, ser.periods, strict=True)], per_min,
                inp.alerts, more, steady)
    msg = envelope("snapshot", snap["match_id"], 0, snap["match_time_s"], snap["period"],
                   players=snap["players"], teams=snap["teams"], health=snap["health"], alerts=inp.alerts)
    _write_atomic(folder / "report.html", text.encode("utf-8"))
    # the report's figures under the export's names (export.csv); snapshot.json beside it holds every leaf
    columns, rows = report_table(snap, list(ser.keys), per_min)
    if own:
        own_columns, own_rows = comparison_columns(own)
        columns += own_columns
        for row in rows:
            row.update(dict.fromkeys(own_columns), **own_rows.get(row["player_id"], {}))
    _write_atomic(folder / "report.csv", export_csv(columns, rows).encode("utf-8"))
    _write_atomic(folder / "alerts.csv", alerts_csv(snap, inp.alerts).encode("utf-8"))
    _write_atomic(folder / "snapshot.json", orjson.dumps(msg, option=orjson.OPT_INDENT_2) + b"\n")
    entry = {"kind": inp.kind, "created_at": round(inp.created_at, 3), "match_time_s": snap["match_time_s"],
             "period": snap["period"], "source": inp.source, "build_s": round(time.perf_counter() - t0, 3),
             **(extra or {})}
    _write_atomic(folder / "index.json", orjson.dumps(entry))
    return entry


def list_reports(root: Path) -> list[dict[str, Any]]:
    """Index entries of the reports written under ``root`` (half time first)."""
    out = []
    for kind in KINDS:
        try:
            out.append(orjson.loads((root / kind / "index.json").read_bytes()))
        except (OSError, orjson.JSONDecodeError):
            continue
    return out
