"""pacewire's match control events: checked against the match sheet, then applied to the figures.

``period_start``, ``period_end``, ``substitution``, ``goal`` and ``card``, each
placed by a ``frame_id`` or a ``match_time_s``. The same code applies them live,
when a match is rebuilt from its recording, and when figures are recomputed for
an earlier match time, so the three agree.
"""
from __future__ import annotations

from typing import Any

from pacewire.engine.match import MatchState
from pacewire.engine.types import PERIODS, Roster
from pacewire.errors import PacewireError

EVENT_TYPES = ("period_start", "period_end", "substitution", "goal", "card")
FIELDS = frozenset({"type", "frame_id", "match_time_s", "period", "player_off", "player_on", "team_id", "player_id",
                    "card", "source"})
# who says so: the provider (the default), or the service itself when a silent feed ended the match
SOURCES = ("provider", "timeout")


class EventError(PacewireError, ValueError):
    """A match event that cannot be applied; the message says why."""

    code = "bad_event"


def check_event(roster: Roster, e: Any) -> dict[str, Any]:
    """A copy of the event if it is well formed and names players and teams of ``roster``."""
    if not isinstance(e, dict):
        raise EventError("an event must be a JSON object")
    kind = e.get("type")
    if kind not in EVENT_TYPES:
        raise EventError(f"type must be one of {', '.join(EVENT_TYPES)}")
    if "frame_id" not in e and "match_time_s" not in e:
        raise EventError("an event needs a frame_id or a match_time_s")
    if "frame_id" in e and type(e["frame_id"]) is not int:
        raise EventError("frame_id must be an integer")
    if "match_time_s" in e and (type(e["match_time_s"]) not in (int, float) or not 0 <= e["match_time_s"] < 36000):
        raise EventError("match_time_s must be a number of seconds")
    if e.get("source", "provider") not in SOURCES:
        raise EventError(f"source must be one of {', '.join(SOURCES)}")
    _check_kind(roster, kind, e)
    extra = set(e) - FIELDS
    if extra:
        raise EventError(f"unknown fields: {', '.join(sorted(extra))}")
    return dict(e)


def _check_kind(roster: Roster, kind: str, e: dict[str, Any]) -> None:
    players = roster.index
    if kind in ("period_start", "period_end"):
        if e.get("period") not in PERIODS:
            raise EventError(f"period must be one of {', '.join(PERIODS)}")
    elif kind == "substitution":
        for name in ("player_off", "player_on"):
            pid = e.get(name)
            if not isinstance(pid, str) or pid not in players:
                raise EventError(f"{name} {pid!r} is not in the match sheet")
        if roster.players[players[e["player_off"]]].team != roster.players[players[e["player_on"]]].team:
            raise EventError("player_off and player_on play for different teams")
    elif kind == "goal":
        if e.get("team_id") not in roster.team_ids:
            raise EventError(f"team_id must be one of {', '.join(roster.team_ids)}")
        if "player_id" in e and e["player_id"] not in players:
            raise EventError(f"player_id {e['player_id']!r} is not in the match sheet")
    elif kind == "card":
        if e.get("card") not in ("yellow", "second_yellow", "red"):
            raise EventError("card must be yellow, second_yellow or red")
        if e.get("player_id") not in players:
            raise EventError(f"player_id {e.get('player_id')!r} is not in the match sheet")


def apply_event(state: MatchState, ev: dict[str, Any]) -> None:
    """What a checked event does to the figures: who is on the pitch, whether the period is over
    (a ``period_start`` of the period just ended reopens it). A goal changes the score only, which
    the figures do not hold."""
    kind = ev["type"]
    if kind == "substitution":
        state.substitute(ev["player_off"], ev["player_on"])
    elif kind == "card" and ev.get("card") in ("red", "second_yellow"):
        state.substitute(ev["player_id"], None)
    elif kind == "period_end" and state.period_name() == ev.get("period"):
        state.end_period()
    elif kind == "period_start":
        state.reopen_period(ev["period"])


def applies_by(ev: dict[str, Any], last_frame_id: int | None, at_s: float) -> bool:
    """Whether an event had happened by match time ``at_s`` (``last_frame_id`` the last frame by then)."""
    if "frame_id" in ev:
        return last_frame_id is not None and ev["frame_id"] <= last_frame_id
    return float(ev.get("match_time_s", float("inf"))) <= at_s
