"""The flat player table of a report: one row per player, every snapshot leaf a column.

Columns are the player object's leaves with dotted names (``distance_m``,
``windows.peak_5min.start_s``, ``periods.first_half.hsr_m``,
``possession.in_possession.distance_m``, ``zones.5.5-7.0``, and with heart
rate ``hr_mean_bpm``, ``hr_zones.80-90%``, ``hr_omitted.trimp_banister``), so the CSV holds
every contract figure and reads back to exactly the snapshot's values:
numbers as JSON writes them, ``true``/``false``, and an empty cell for null
or absent.
"""
from __future__ import annotations

import csv
import io
from typing import Any

import orjson

ID_COLUMNS = ("player_id",)


def flatten(obj: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    """Leaves of a nested dict with dotted keys; a null sub-object stays one null leaf."""
    out: dict[str, Any] = {}
    for key, value in obj.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            out.update(flatten(value, name + "."))
        else:
            out[name] = value
    return out


def player_order(snapshot: dict[str, Any]) -> list[str]:
    """Home team first, then by jersey number (the match sheet's order of play)."""
    teams = list(snapshot["teams"])
    players = snapshot["players"]
    return sorted(players, key=lambda pid: (teams.index(players[pid]["team_id"]) if players[pid]["team_id"] in teams
                                            else len(teams), players[pid]["jersey_number"], pid))


def tracked_teams(snapshot: dict[str, Any]) -> list[tuple[str, dict[str, Any]]]:
    """The teams the feed tracks, in snapshot order: a one-team (wearables) feed leaves the
    other team with ``tracked: false`` and no ``outfield`` figures (docs/wearables.md)."""
    return [(tid, t) for tid, t in snapshot["teams"].items() if t.get("tracked", True) and "outfield" in t]


def one_team(snapshot: dict[str, Any]) -> bool:
    """Only one team tracked: say so, and show no opponent comparison."""
    return len(snapshot["teams"]) > 1 and len(tracked_teams(snapshot)) == 1


def has_heart_rate(snapshot: dict[str, Any]) -> bool:
    """Heart-rate fields appear only once the match has accepted a heart-rate sample (docs/wearables.md)."""
    return any(key.startswith("hr_") for p in snapshot["players"].values() for key in p)


def player_rows(snapshot: dict[str, Any]) -> tuple[list[str], list[dict[str, Any]]]:
    """(columns, rows): one flat row per player, columns in first-seen order."""
    rows = []
    columns: dict[str, None] = dict.fromkeys(ID_COLUMNS)
    for pid in player_order(snapshot):
        row = {"player_id": pid, **flatten(snapshot["players"][pid])}
        columns.update(dict.fromkeys(row))
        rows.append(row)
    return list(columns), rows


def cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, str):
        return value
    return orjson.dumps(value).decode()  # 12.5, 3, true: exactly the snapshot's JSON


def to_csv(snapshot: dict[str, Any]) -> str:
    columns, rows = player_rows(snapshot)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for row in rows:
        w.writerow([cell(row.get(c)) for c in columns])
    return buf.getvalue()


def parse_cell(text: str) -> Any:
    """The inverse of :func:`cell` for number, boolean and empty cells (tests, readers)."""
    if text == "":
        return None
    try:
        return orjson.loads(text)
    except orjson.JSONDecodeError:
        return text
