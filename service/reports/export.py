"""The per-player export (``export.json``, ``export.csv``): the headline figures, one row per player.

Row values are the snapshot's own: ``zone_BAND_m`` is ``zones[BAND]`` and
``peak_Nmin_distance_m`` is ``windows.peak_Nmin.distance_m`` (empty until N
minutes were played).
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
