"""kloppy event datasets as CDF v0.3.2 event lines (Anzer et al. 2025), for ``pacewire import``.

Every event provider kloppy reads (StatsBomb, Sportec, Metrica, Stats Perform, Wyscout, DataFactory)
gives an ``EventDataset`` in kloppy's own event model; this module writes each event as the CDF
event object the validator accepts: metres with the origin at the centre spot (a provider without a
metric pitch is laid on 105 x 68 m, common practice), an absolute UTC time (the period start plus the
event's time in the period; a provider that gives only relative times gets the fictional kick-off of
:mod:`pacewire.replay.kloppy_cdf`), snake_case types and outcomes. Events without a player or a
team (formation changes, some provider-specific records) have no CDF form and are left out, counted.

kloppy is imported where it is used.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

from pacewire.replay.kloppy_cdf import CDF_PERIODS, as_utc, cdf_coordinate_system, rfc3339

PITCH_M = (105.0, 68.0)  # a provider without a metric pitch is laid on this one (common practice)
# kloppy result names -> CDF outcome_type
SHOT_OUTCOMES = {"GOAL": "successful", "OFF_TARGET": "wide", "POST": "woodwork", "BLOCKED": "blocked",
                 "SAVED": "saved", "OWN_GOAL": "own_goal"}
PASS_OUTCOMES = {"COMPLETE": "successful", "INCOMPLETE": "intercepted", "OUT": "out_of_play", "OFFSIDE": "offside"}
BODY_PARTS = {"RIGHT_FOOT": "right_foot", "LEFT_FOOT": "left_foot", "HEAD": "head", "HEAD_OTHER": "head",
              "BOTH_HANDS": "hands", "LEFT_HAND": "hands", "RIGHT_HAND": "hands", "KEEPER_ARM": "hands",
              "CHEST": "upper_body", "DROP_KICK": "feet"}
TYPES = {"PASS": "pass", "SHOT": "shot", "TAKE_ON": "take_on", "CARRY": "carry", "CLEARANCE": "clearance",
         "INTERCEPTION": "interception", "DUEL": "duel", "SUBSTITUTION": "substitution", "CARD": "card",
         "PLAYER_ON": "player_on", "PLAYER_OFF": "player_off", "RECOVERY": "recovery", "MISCONTROL": "miscontrol",
         "BALL_OUT": "ball_out", "FOUL_COMMITTED": "foul", "GOALKEEPER": "goalkeeping", "PRESSURE": "pressure"}


@dataclass
class Converted:
    """The CDF lines of a dataset, and what had no CDF form."""

    lines: list[dict[str, Any]] = field(default_factory=list)
    skipped: dict[str, int] = field(default_factory=dict)  # kloppy event type -> count


def snake(text: str) -> str:
    """A provider's name as a CDF snake_case value (``Ball Receipt*`` -> ``ball_receipt``)."""
    s = re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_")
    return s if s and s[0].isalpha() else f"x_{s}" if s else "other"


def to_cdf_coordinates(dataset: Any) -> Any:
    """The dataset in CDF coordinates: its own pitch in metres when it has one, else 105 x 68 m."""
    from kloppy.domain import Unit

    dims = dataset.metadata.coordinate_system.pitch_dimensions
    metric = getattr(dims, "unit", None) == Unit.METERS and dims.pitch_length and dims.pitch_width
    length, width = (float(dims.pitch_length), float(dims.pitch_width)) if metric else PITCH_M
    return dataset.transform(to_coordinate_system=cdf_coordinate_system(length, width))


def _qualifier(e: Any, kind: str) -> Any:
    for q in e.qualifiers or ():
        if type(q).__name__ == kind:
            return q.value
    return None


def _xy(point: Any, lim: tuple[float, float] = (65.0, 42.5)) -> tuple[float, float] | None:
    if point is None or point.x is None or point.y is None:
        return None
    x, y = float(point.x), float(point.y)
    if x != x or y != y:
        return None
    return round(max(-lim[0], min(lim[0], x)), 2), round(max(-lim[1], min(lim[1], y)), 2)


def _kind(e: Any) -> tuple[str, str | None, bool, str]:
    """(type, sub_type, is_successful, outcome_type) of a kloppy event."""
    name = e.event_type.name
    kind = TYPES.get(name) or snake(getattr(e, "event_name", None) or name)
    setp = _qualifier(e, "SetPieceQualifier")
    sub = setp.name.lower() if setp is not None else None
    if sub == "penalty":
        sub = "penalty_kick"
    result = getattr(e, "result", None)
    rname = result.name if result is not None else None
    if name == "SHOT":
        return kind, sub, rname == "GOAL", SHOT_OUTCOMES.get(rname or "", "unsuccessful")
    if name == "PASS":
        return kind, sub, rname == "COMPLETE", PASS_OUTCOMES.get(rname or "", "unsuccessful")
    if name == "GOALKEEPER":
        gk = _qualifier(e, "GoalkeeperQualifier")
        return kind, gk.name.lower() if gk is not None else None, True, "successful"
    if name == "CARD":
        card = getattr(e, "card_type", None)
        return kind, None, True, snake(card.name) if card is not None else "card"
    ok = rname is None or rname in ("COMPLETE", "SUCCESS", "WON", "GOAL")
    return kind, sub, ok, "successful" if ok else "unsuccessful"


def _period_starts(dataset: Any) -> dict[int, Any]:
    return {p.id: as_utc(p.start_timestamp) for p in dataset.metadata.periods}


def event_line(e: Any, match_id: str, starts: dict[int, Any]) -> dict[str, Any] | None:
    """One kloppy event as a CDF event line; None when it has no CDF form (no player or team)."""
    if e.player is None or e.team is None or e.period is None or e.coordinates is None:
        return None
    at = _xy(e.coordinates)
    if at is None:
        return None
    kind, sub, ok, outcome = _kind(e)
    t = starts[e.period.id] + (e.timestamp if isinstance(e.timestamp, timedelta) else timedelta(0))
    ends = kind in ("pass", "shot")
    end = _xy(getattr(e, "receiver_coordinates", None) or getattr(e, "end_coordinates", None)
              or getattr(e, "result_coordinates", None))
    part = _qualifier(e, "BodyPartQualifier")
    ev: dict[str, Any] = {
        "id": str(e.event_id), "time": rfc3339(t), "period": CDF_PERIODS[e.period.id], "type": kind,
        "sub_type": sub, "is_successful": ok, "outcome_type": outcome,
        "player_id": str(e.player.player_id), "team_id": str(e.team.team_id),
        "receiver_id": None, "receiver_time": None, "receiver_team_id": None, "x": at[0], "y": at[1],
        "x_end": (end or at)[0] if ends or end else None, "y_end": (end or at)[1] if ends or end else None,
        "body_part": BODY_PARTS.get(part.name, "other") if part is not None else ("other" if ends else None),
        "related_event_ids": None,
    }
    receiver = getattr(e, "receiver_player", None)
    if kind == "pass" and receiver is not None and receiver.team is not None:
        ev["receiver_id"], ev["receiver_team_id"] = str(receiver.player_id), str(receiver.team.team_id)
        rt = getattr(e, "receive_timestamp", None)
        if isinstance(rt, timedelta):
            ev["receiver_time"] = rfc3339(starts[e.period.id] + rt)
    return {"match": {"id": match_id}, "meta": {"is_synced": False}, "event": ev}


def convert(dataset: Any, match_id: str, starts: dict[int, Any] | None = None) -> Converted:
    """Every event of a dataset (already in CDF coordinates) as CDF lines, in the dataset's order.
    ``starts``: UTC start of each kloppy period id (the tracking's, to put the events on its clock by
    their time within the period); default the dataset's own."""
    out = Converted()
    starts = {**_period_starts(dataset), **(starts or {})}
    seen: dict[str, int] = {}
    for e in dataset.events:
        line = event_line(e, match_id, starts)
        if line is None:
            out.skipped[e.event_type.name] = out.skipped.get(e.event_type.name, 0) + 1
            continue
        eid = line["event"]["id"]
        seen[eid] = seen.get(eid, 0) + 1
        if seen[eid] > 1:  # kloppy can make two events of one (a foul and its card): CDF ids are unique
            line["event"]["id"] = f"{eid}_{seen[eid]}"
        out.lines.append(line)
    return out
