"""CDF v0.3.2 event objects on the wire (Anzer et al. 2025): the checks, the corrections, and what
each event means for the game phases.

A CDF event line is ``{"match": {"id"}, "meta": {"is_synced"}, "event": {...}, "tracking": {...}}``
(the schema ``event.json`` of the PyPI package ``common-data-format-validator``). The decoder
accepts only what that package's validator accepts in its strictest mode (every key known,
snake_case values, UTC timestamps, coordinates within its bounds), so the recorded ``event.jsonl``
is a valid CDF event file. It never raises on bad input: each refused event comes back as an
:class:`EventRefusal` with a code and a reason naming the field, and nothing of it is applied.

Events are keyed by ``event.id``: the same id again with the same content is a duplicate (dropped,
counted); with other content it is a correction (the latest wins, counted). Each accepted event
becomes a few ball-context marks (:mod:`pacewire.engine.phases`): who has the ball from when, when
the ball goes dead and when play restarts, and shots.
"""
from __future__ import annotations

import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import orjson

from pacewire.engine.eventlog import ACTIVITY, DEAD, LOOSE, ON_BALL, RESTART, SHOT, Mark
from pacewire.engine.types import PERIOD_INDEX, PERIODS, Roster
from pacewire.wire.cdf import FrameError, Reject, decode_json_lines, parse_message

TOP_KEYS = ("match", "meta", "event", "tracking")
EVENT_REQUIRED = ("id", "time", "period", "type", "sub_type", "is_successful", "outcome_type", "receiver_id",
                  "receiver_time", "receiver_team_id", "x", "y", "x_end", "y_end", "body_part", "related_event_ids")
EVENT_OPTIONAL = ("player_id", "team_id", "official_id", "match_clock", "metrics", "var")
_EVENT_KEYS = frozenset(EVENT_REQUIRED + EVENT_OPTIONAL)
BODY_PARTS = ("left_foot", "right_foot", "feet", "head", "hands", "upper_body", "lower_body", "body", "other")
METRICS = ("xg", "post_shot_xg", "xpass", "epv")
VAR = ("reviewed", "upheld")
# the CDF validator's bounds on any x / y (Anzer et al. 2025); x_end / y_end are held to them too
X_LIM, Y_LIM = 65.0, 42.5
MAX_ID = 128
# RFC 3339 in UTC, as the CDF validator requires of every date-time
_UTC = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(Z|\+00:00)$")
_SNAKE = re.compile(r"^[a-z][a-z0-9_]*$")
_IDENT = re.compile(r"^[a-zA-Z][a-zA-Z0-9_]*$")  # what the validator takes for an identifier-like value

# What an event means for the ball context (engine marks). Restarts put the ball back in play.
RESTARTS = frozenset({"kick_off", "throw_in", "goal_kick", "corner_kick", "free_kick", "penalty_kick", "drop_ball"})
# Outcomes after which the ball is out of play (a goal, or the ball over a line).
DEAD_OUTCOMES = frozenset({"out_of_play", "out", "wide", "own_goal", "goal", "offside"})
# Actions that show the acting team with the ball at the event's time.
ON_BALL_TYPES = frozenset({"pass", "shot", "carry", "dribble", "take_on", "reception", "ball_receipt", "touch",
                           "cross", "header"})
# Actions that win the ball when successful.
WIN_TYPES = frozenset({"interception", "recovery", "ball_recovery", "tackle", "claim", "pick_up", "catch"})
# Actions after which the ball is loose: neither team is known to have it until the next action.
LOOSE_TYPES = frozenset({"clearance", "block", "save", "punch", "deflection"})
# Referee decisions and other stoppages that make the ball dead.
STOP_TYPES = frozenset({"foul", "foul_committed", "offside", "ball_out", "injury", "final_whistle", "end"})


@dataclass(frozen=True)
class EventRefusal(FrameError):
    """A refused event: code, reason, and its id and line when known."""

    event_id: str | None = None

    def as_dict(self) -> dict[str, Any]:
        d = super().as_dict()
        if self.event_id is not None:
            d["event_id"] = self.event_id
        return d


@dataclass(frozen=True)
class Accepted:
    """One accepted event: its key (first-seen order of its id), id, period index, time (UTC s),
    its marks, and whether it corrects an earlier event of the same id."""

    key: int
    id: str
    period: int
    t: float
    marks: tuple[Mark, ...]
    correction: bool


@dataclass(frozen=True)
class Checked:
    """A valid event of a batch: its position and line, id, canonical content, period, time and marks."""

    index: int
    line: int | None
    id: str
    blob: bytes
    period: int
    t: float
    marks: tuple[Mark, ...]


@dataclass
class EventResult:
    events: list[Accepted] = field(default_factory=list)
    errors: list[FrameError] = field(default_factory=list)
    rejected: int = 0
    duplicates: int = 0
    corrections: int = 0
    accepted: list[int] = field(default_factory=list)  # input positions of the accepted events
    undo: list[tuple[str, bytes | None, bytes]] = field(default_factory=list)  # (id, content before, after)

    def __len__(self) -> int:
        return len(self.events)


def _utc(value: Any, where: str) -> float:
    if type(value) is not str or not _UTC.match(value):
        raise Reject("bad_timestamp", f"{where} {value!r} is not an RFC 3339 UTC date-time "
                                      "(e.g. 2026-03-14T15:00:00.040Z)")
    try:
        return datetime.fromisoformat(value).timestamp()
    except (ValueError, OverflowError, OSError):
        raise Reject("bad_timestamp", f"{where} {value!r} is not a valid date-time") from None


def _number(value: Any, where: str, lim: float | None = None) -> float:
    if type(value) not in (int, float) or not math.isfinite(value):
        raise Reject("bad_type", f"{where} must be a number, got {_kind(value)}")
    if lim is not None and not -lim <= value <= lim:
        raise Reject("out_of_pitch", f"{where} {value} is outside [-{lim:g}, {lim:g}] m")
    return float(value)


def _kind(value: Any) -> str:
    return "null" if value is None else type(value).__name__


def _text(value: Any, where: str, snake: bool = False, nullable: bool = False) -> str | None:
    if value is None and nullable:
        return None
    if type(value) is not str or not value:
        raise Reject("bad_type", f"{where} must be a non-empty string{' or null' if nullable else ''}, "
                                 f"got {_kind(value)}")
    if len(value) > MAX_ID:
        raise Reject("bad_value", f"{where} is longer than {MAX_ID} characters")
    if snake and not _SNAKE.match(value):
        raise Reject("bad_value", f"{where} {value!r} must be snake_case (CDF)")
    return value


def _closed(obj: Any, where: str, keys: Iterable[str]) -> dict[str, Any]:
    if type(obj) is not dict:
        raise Reject("bad_type", f"{where} must be an object, got {_kind(obj)}")
    known = set(keys)
    extra = [k for k in obj if k not in known]
    if extra:
        raise Reject("bad_value", f"unknown field {where}.{extra[0]}; CDF v0.3.2 {where} holds only "
                                  f"{', '.join(sorted(known))}")
    return obj


class EventDecoder:
    """Checks CDF event objects of one match and keeps the content of every id accepted so far."""

    def __init__(self, roster: Roster) -> None:
        self.roster = roster
        self.team_index = {tid: k for k, tid in enumerate(roster.team_ids)}
        self.tracked = roster.tracked()
        self.content: dict[str, bytes] = {}  # event id -> its accepted content (canonical JSON)
        self.keys: dict[str, int] = {}  # event id -> key, in first-seen order

    # -- batches ---------------------------------------------------------------------------
    def rollback(self, res: EventResult) -> None:
        """Forget a batch that could not be stored (what a later batch changed since stays)."""
        for eid, old, new in reversed(res.undo):
            if self.content.get(eid) != new:
                continue
            if old is None:
                del self.content[eid]
                del self.keys[eid]  # the order of the others is kept: ties sort the same after a restart
            else:
                self.content[eid] = old

    def decode_lines(self, lines: Iterable[bytes | str], first_line: int = 1) -> EventResult:
        """JSON Lines, one event per line; blank lines are skipped."""
        return decode_json_lines(self.decode_objects, lines, first_line)

    def decode_message(self, data: bytes | str) -> EventResult:
        """One websocket message: an event object or a JSON array of them."""
        objs = parse_message(data)
        if isinstance(objs, FrameError):
            return EventResult(errors=[objs], rejected=1)
        return self.decode_objects(objs)

    def checked(self, objs: Sequence[Any], lines: Sequence[int] | None = None
                ) -> tuple[list[Checked], EventResult]:
        """The valid events of a batch, each with its canonical content, and a result holding the
        refusals (no id bookkeeping: the Redis ingest role keeps that in Redis)."""
        res = EventResult()
        out: list[Checked] = []
        for k, obj in enumerate(objs):
            line = lines[k] if lines is not None else None
            eid = _id_of(obj)
            try:
                period, t, marks = self.check(obj)
                blob = orjson.dumps(obj, option=orjson.OPT_SORT_KEYS)
            except Reject as rej:
                res.rejected += 1
                res.errors.append(EventRefusal(rej.code, rej.message, None, line, eid))
                continue
            except Exception as exc:  # a shape no rule foresaw: still a clear refusal
                res.rejected += 1
                res.errors.append(EventRefusal("bad_event", f"event could not be read: {type(exc).__name__}: {exc}",
                                               None, line, eid))
                continue
            assert eid is not None  # check() refuses an event without a string id
            out.append(Checked(k, line, eid, blob, period, t, marks))
        return out, res

    def checked_lines(self, lines: Iterable[bytes | str]) -> tuple[list[Checked], EventResult]:
        """:meth:`checked` of JSON Lines (blank lines skipped, bad JSON refused with its line number)."""
        good: list[Checked] = []

        def check(objs: Sequence[Any], numbers: Sequence[int]) -> EventResult:
            ok, res = self.checked(objs, numbers)
            good.extend(ok)
            return res

        return good, decode_json_lines(check, lines)

    def decode_objects(self, objs: Sequence[Any], lines: Sequence[int] | None = None) -> EventResult:
        good, res = self.checked(objs, lines)
        for c in good:
            old = self.content.get(c.id)
            if old == c.blob:
                res.duplicates += 1
                res.errors.append(EventRefusal("duplicate", f"event {c.id!r} was already applied with this content",
                                               None, c.line, c.id))
                continue
            res.undo.append((c.id, old, c.blob))
            self.content[c.id] = c.blob
            key = self.keys.setdefault(c.id, len(self.keys))
            res.corrections += old is not None
            res.events.append(Accepted(key, c.id, c.period, c.t, c.marks, old is not None))
            res.accepted.append(c.index)
        return res

    # -- one event ----------------------------------------------------------------------------
    def check(self, obj: Any) -> tuple[int, float, tuple[Mark, ...]]:
        """(period index, time in UTC s, marks) of a valid event; Reject naming the first fault."""
        top = _closed(obj, "the event line", TOP_KEYS)
        for key in ("match", "meta", "event"):
            if key not in top:
                raise Reject("missing_field", f"missing required field {key!r}")
        match = _closed(top["match"], "match", ("id",))
        if match.get("id") != self.roster.match_id:
            raise Reject("wrong_match", f"match.id {match.get('id')!r} is not {self.roster.match_id!r}")
        meta = _closed(top["meta"], "meta", ("is_synced",))
        if type(meta.get("is_synced")) is not bool:
            raise Reject("missing_field" if "is_synced" not in meta else "bad_type", "meta.is_synced must be a boolean")
        if "tracking" in top:
            _check_tracking(top["tracking"])
        ev = _closed(top["event"], "event", _EVENT_KEYS)
        for key in EVENT_REQUIRED:
            if key not in ev:
                raise Reject("missing_field", f"missing required field event.{key}")
        _text(ev["id"], "event.id")
        t = _utc(ev["time"], "event.time")
        period = ev["period"]
        if type(period) is not str or period not in PERIOD_INDEX:
            raise Reject("bad_value", f"event.period {period!r} is not one of {', '.join(PERIODS)}")
        kind = _text(ev["type"], "event.type", snake=True)
        assert kind is not None  # not nullable
        sub = _text(ev["sub_type"], "event.sub_type", snake=True, nullable=True)
        if type(ev["is_successful"]) is not bool:
            raise Reject("bad_type", "event.is_successful must be a boolean")
        outcome = _text(ev["outcome_type"], "event.outcome_type", snake=True)
        team = self._actor(ev, kind)
        receiver_team = self._receiver(ev)
        t_end = t if ev["receiver_time"] is None else _utc(ev["receiver_time"], "event.receiver_time")
        _number(ev["x"], "event.x", X_LIM)
        _number(ev["y"], "event.y", Y_LIM)
        ends = kind in ("pass", "shot")  # the schema: passes and shots have an end point and a body part
        for key, lim in (("x_end", X_LIM), ("y_end", Y_LIM)):
            if ev[key] is not None or ends:
                _number(ev[key], f"event.{key}", lim)
        part = ev["body_part"]
        if part is not None or ends:
            if part not in BODY_PARTS:
                raise Reject("bad_value", f"event.body_part {part!r} is not one of {', '.join(BODY_PARTS)}"
                                          f"{'' if ends else ' or null'}")
        _check_related(ev["related_event_ids"])
        _check_extras(ev)
        assert outcome is not None  # not nullable
        return PERIOD_INDEX[period], t, marks_of(kind, sub, outcome, ev["is_successful"], team, receiver_team, t, t_end)

    def _actor(self, ev: dict[str, Any], kind: str) -> int:
        """Team index of the acting team (-1 for a referee event); the schema's rule: a referee event has an
        official_id and no player or team, every other event a player_id and a team_id."""
        if kind == "referee":
            _text(ev.get("official_id"), "event.official_id")
            for key in ("player_id", "team_id"):
                if key in ev:
                    raise Reject("bad_value", f"a referee event has no event.{key} (CDF: official_id only)")
            return -1
        if "official_id" in ev:
            raise Reject("bad_value", "event.official_id belongs to referee events only")
        tid = _text(ev.get("team_id"), "event.team_id")
        pid = _text(ev.get("player_id"), "event.player_id")
        return self._player_of(pid, tid, "event.player_id", "event.team_id")

    def _receiver(self, ev: dict[str, Any]) -> int:
        tid = _text(ev["receiver_team_id"], "event.receiver_team_id", nullable=True)
        pid = _text(ev["receiver_id"], "event.receiver_id", nullable=True)
        if tid is None:
            if pid is not None and pid not in self.roster.index:
                raise Reject("unknown_player", f"event.receiver_id {pid!r} is not in the match sheet")
            return -1 if pid is None else self.roster.players[self.roster.index[pid]].team
        return self._player_of(pid, tid, "event.receiver_id", "event.receiver_team_id")

    def _player_of(self, pid: str | None, tid: str | None, pkey: str, tkey: str) -> int:
        team = self.team_index.get(tid or "")
        if team is None:
            raise Reject("unknown_team", f"{tkey} {tid!r} is neither team of the match")
        if pid is None:
            return team
        i = self.roster.index.get(pid)
        if i is None:
            if self.tracked[team]:  # a team without players in the sheet (one-team feed) names any player
                raise Reject("unknown_player", f"{pkey} {pid!r} is not in the match sheet")
        elif self.roster.players[i].team != team:
            raise Reject("unknown_player", f"{pkey} {pid!r} does not play for {tid!r}")
        return team


def _id_of(obj: Any) -> str | None:
    ev = obj.get("event") if type(obj) is dict else None
    eid = ev.get("id") if type(ev) is dict else None
    return eid if type(eid) is str else None


def _check_tracking(obj: Any) -> None:
    tr = _closed(obj, "tracking", ("frame_id", "frame_id_end", "player"))
    for key in ("frame_id", "frame_id_end"):
        if key in tr and (type(tr[key]) is not int or tr[key] < 0):
            raise Reject("bad_type", f"tracking.{key} must be a whole number >= 0")
    if "player" in tr:
        pl = _closed(tr["player"], "tracking.player", ("x", "y"))
        for key, lim in (("x", X_LIM), ("y", Y_LIM)):
            if key in pl:
                _number(pl[key], f"tracking.player.{key}", lim)


def _check_related(value: Any) -> None:
    if value is None:
        return
    if type(value) is not list:
        raise Reject("bad_type", f"event.related_event_ids must be an array of ids or null, got {_kind(value)}")
    for v in value:
        if type(v) is not str or not v:
            raise Reject("bad_type", "event.related_event_ids holds non-empty strings only")
        if _IDENT.match(v) and not _SNAKE.match(v):  # the validator checks such values for snake_case
            raise Reject("bad_value", f"event.related_event_ids value {v!r} must be snake_case (CDF)")


def _check_extras(ev: dict[str, Any]) -> None:
    if "match_clock" in ev:
        clock = ev["match_clock"]
        if type(clock) is not str or _IDENT.match(clock) and not _SNAKE.match(clock):
            raise Reject("bad_type", "event.match_clock must be a string MM:SS.mm")
    if "metrics" in ev:
        for key, v in _closed(ev["metrics"], "event.metrics", METRICS).items():
            _number(v, f"event.metrics.{key}")
    if "var" in ev:
        for key, v in _closed(ev["var"], "event.var", VAR).items():
            if type(v) is not bool:
                raise Reject("bad_type", f"event.var.{key} must be a boolean")


def marks_of(kind: str, sub: str | None, outcome: str, ok: bool, team: int, receiver_team: int, t: float,
             t_end: float) -> tuple[Mark, ...]:
    """What one event says about the ball: ``(time, team, effect)`` marks (effects in
    :mod:`pacewire.engine.phases`). Every event marks activity at its time, which tells the
    phases the event stream is alive there."""
    marks: list[Mark] = [(t, team, ACTIVITY)]
    restart = sub in RESTARTS
    if kind in STOP_TYPES or kind == "referee" and sub in STOP_TYPES:
        marks.append((t, -1, DEAD))
        return tuple(marks)
    if team < 0:
        return tuple(marks)
    if restart and kind in ("pass", "shot"):
        marks.append((t, team, RESTART))
    elif kind in ON_BALL_TYPES:
        marks.append((t, team, ON_BALL))
    elif (kind in WIN_TYPES or sub in WIN_TYPES) and ok:
        marks.append((t, team, ON_BALL))
    elif kind in LOOSE_TYPES or sub in LOOSE_TYPES:
        marks.append((t, -1, LOOSE))
    if kind == "shot":
        marks.append((t, team, SHOT))
        if outcome in DEAD_OUTCOMES or ok and outcome == "successful":  # a goal, or the ball over the line
            marks.append((t_end, -1, DEAD))
        return tuple(marks)
    if kind == "pass" or kind in ON_BALL_TYPES:
        if outcome in DEAD_OUTCOMES:
            marks.append((t_end, -1, DEAD))
        elif receiver_team >= 0 and receiver_team != team:  # intercepted: the other team has it on receipt
            marks.append((t_end, receiver_team, ON_BALL))
    return tuple(marks)
