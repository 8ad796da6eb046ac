"""The alerts of a report: one row per alert raised (the HTML table, ``alerts.csv``) and counts per rule.

An alert's body is the ``alert`` message's (rule, kind, player, figure, value,
limit, message, level for budgets) with its own match clock and period; the
rows add the player's shirt number and name from the snapshot.
"""
from __future__ import annotations

import csv
import io
from typing import Any

from pacewire.reports.table import cell

COLUMNS = ("match_time_s", "period", "rule", "kind", "player_id", "jersey_number", "name", "team_id", "figure",
           "value", "limit", "level", "message")


def alert_rows(snapshot: dict[str, Any], alerts: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """One flat row per alert, oldest first, with the player's shirt number and name."""
    players = snapshot.get("players") or {}
    rows = []
    for a in alerts:
        p = players.get(a.get("player_id")) or {}
        rows.append({**{c: a.get(c) for c in COLUMNS}, "jersey_number": p.get("jersey_number"),
                     "name": p.get("name")})
    return rows


def alerts_csv(snapshot: dict[str, Any], alerts: list[dict[str, Any]]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(COLUMNS)
    for r in alert_rows(snapshot, alerts):
        w.writerow([cell(r[c]) for c in COLUMNS])
    return buf.getvalue()


def counts(alerts: list[dict[str, Any]]) -> dict[str, dict[str, int]]:
    """Per rule: ``alerts`` (how many), ``players`` (how many players had one), ``most`` (the most one
    player had)."""
    per: dict[str, dict[str, int]] = {}
    for a in alerts:
        per.setdefault(str(a.get("rule")), {}).setdefault(str(a.get("player_id")), 0)
        per[str(a.get("rule"))][str(a.get("player_id"))] += 1
    return {rule: {"alerts": sum(by.values()), "players": len(by), "most": max(by.values())}
            for rule, by in per.items()}
