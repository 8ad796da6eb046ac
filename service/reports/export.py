"""The per-player export (``export.json``, ``export.csv``): the headline figures, one row per player;
and the report's CSV, the same columns plus the other figures the report shows, under the same names.

Row values are the snapshot's own: ``zone_BAND_m`` is ``zones[BAND]`` and
``peak_Nmin_distance_m`` is ``windows.peak_Nmin.distance_m`` (empty until N
minutes were played). The report adds ``peak_Nmin_m_per_min``, ``peak_Nmin_hsr_m``,
``peak_Nmin_start_s`` (match clock), ``possession_CONTEXT_distance_m`` and ``_hsr_m``, the heart-rate
figures (``hr_zone_ZONE_s``: seconds in a zone of % HRmax), and ``block_A_B_m_per_min`` (distance per
minute on the pitch in each block of the intensity table). Every name ends in its SI unit, ``minutes``
or a count; ``coverage`` is a share of frames (0–1).
"""
from __future__ import annotations

import csv
import io
from typing import Any

from pacewire.reports.table import cell, player_order

ID_COLUMNS = ("player_id", "team_id", "jersey_number", "name", "is_goalkeeper", "on_pitch")
FIGURE_COLUMNS = ("minutes", "distance_m", "m_per_min", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels",
                  "decels", "speed_ms", "max_speed_ms", "metabolic_power_wkg", "energy_jkg", "high_power_m", "coverage")


def export_table(snapshot: dict[str, Any]) -> tuple[list[str], list[dict[str, Any]]]:
    """Columns and one row per player (home team first, then by shirt number) from a snapshot body."""
    players = snapshot["players"]
    first = next(iter(players.values()), None)
    zones = list(first["zones"]) if first else []
    peaks = [k for k in first["windows"] if k.startswith("peak_")] if first else []
    columns = [*ID_COLUMNS, *FIGURE_COLUMNS, *(f"zone_{z}_m" for z in zones), *(f"{k}_distance_m" for k in peaks)]
    rows = []
    for pid in player_order(snapshot):
        p = players[pid]
        row: dict[str, Any] = {"player_id": pid}
        for c in (*ID_COLUMNS[1:], *FIGURE_COLUMNS):
            row[c] = p.get(c)
        for z in zones:
            row[f"zone_{z}_m"] = p["zones"].get(z)
        for k in peaks:
            w = p["windows"].get(k)
            row[f"{k}_distance_m"] = w["distance_m"] if w else None
        rows.append(row)
    return columns, rows


def export_csv(columns: list[str], rows: list[dict[str, Any]]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([cell(r[c]) for c in columns])
    return buf.getvalue()


HR_COLUMNS = ("hr_mean_bpm", "hr_peak_bpm", "trimp_edwards", "trimp_banister", "hr_coverage")
PEAK_FIGURES = (("m_per_min", "m_per_min"), ("hsr_m", "hsr_m"), ("start_s", "start_s"))
CONTEXT_FIGURES = ("distance_m", "hsr_m")


def report_table(snapshot: dict[str, Any], blocks: list[str] | None = None,
                 per_min: dict[str, list[float | None]] | None = None) -> tuple[list[str], list[dict[str, Any]]]:
    """The export's columns and rows plus the report's other figures (module docstring); ``blocks``: the
    intensity blocks' keys (``block_0_5``), ``per_min``: each player's distance per minute in them."""
    columns, rows = export_table(snapshot)
    players = snapshot["players"]
    first = next(iter(players.values()), None)
    peaks = [k for k in first["windows"] if k.startswith("peak_")] if first else []
    contexts = list(first.get("possession") or {}) if first else []
    heart = any(k.startswith("hr_") for p in players.values() for k in p)
    zones = list(next((p["hr_zones"] for p in players.values() if p.get("hr_zones")), {}))
    extra = [f"{k}_{name}" for k in peaks for name, _ in PEAK_FIGURES]
    extra += [f"possession_{c}_{f}" for c in contexts for f in CONTEXT_FIGURES]
    if heart:
        extra += [*HR_COLUMNS, *(f"hr_zone_{z}_s" for z in zones), "hr_omitted"]
    extra += [f"{b}_m_per_min" for b in (blocks or [])]
    for row in rows:
        p = players[row["player_id"]]
        for k in peaks:
            w = p["windows"].get(k)
            for name, key in PEAK_FIGURES:
                row[f"{k}_{name}"] = w.get(key) if w else None
        for c in contexts:
            ctx = (p.get("possession") or {}).get(c) or {}
            for f in CONTEXT_FIGURES:
                row[f"possession_{c}_{f}"] = ctx.get(f)
        if heart:
            for c in HR_COLUMNS:
                row[c] = p.get(c)
            for z in zones:
                row[f"hr_zone_{z}_s"] = (p.get("hr_zones") or {}).get(z)
            row["hr_omitted"] = "; ".join(f"{fig}: {why}" for fig, why in (p.get("hr_omitted") or {}).items()) or None
        for b, v in zip(blocks or [], (per_min or {}).get(row["player_id"], []), strict=False):
            row[f"{b}_m_per_min"] = v
    return [*columns, *extra], rows
