"""Pydantic models of every message out (README, "Consuming the stream") and their JSON Schemas (2020-12).

The models are the one source of truth for the published schemas: ``docs/schema/``
is written from them (``make schema``), ``GET /api/schema/messages`` serves them,
and the tests check that both agree with the models and with what a real server
sends. The models describe; the server builds its messages elsewhere
(``pacewire.engine.snapshot``, ``pacewire.live``), so a test validates real
messages against these schemas.

Units are SI and part of every field name (``_m`` metres, ``_ms`` m/s, ``_s``
seconds, ``_wkg`` W/kg, ``_jkg`` J/kg). Window keys, zone band names and period
keys depend on ``config/default.toml``, so they are described by patterns.

The published schemas are open (unknown fields allowed): within a contract
version fields are only added. :func:`strict` closes every object, which the
tests use to catch a field the server sends but the models do not describe.

Run ``python -m pacewire.wire.schema --out docs/schema`` to write the files.
"""
from __future__ import annotations

import argparse
import copy
import json
import sys
import types
import typing
from pathlib import Path
from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, create_model

from pacewire.engine.types import PERIODS
from pacewire.wire.messages import CONTRACT_VERSION

JSON_SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"

Period = Literal[PERIODS]  # type: ignore[valid-type]  # mypy reads no Literal of a run-time tuple
WINDOW_KEY = r"^(last_[0-9]+min|peak_[0-9]+min|block_[0-9]+_[0-9]+)$"
LAST_WINDOW_KEY = r"^last_[0-9]+min$"
ZONE_KEY = r"^[0-9]+(\.[0-9]+)?(-[0-9]+(\.[0-9]+)?%?|%?\+)$"
ID = Annotated[str, Field(min_length=1)]


def _optional_key(description: str, **bounds: Any) -> Any:
    """A key a message leaves out where it does not apply; when present it is never null, so the
    annotation stays non-optional and the None default only makes the key not required."""
    return Field(None, description=description, **bounds)



class _Shape(BaseModel):
    # described, not enforced: the published schema stays open for added fields
    model_config = ConfigDict(extra="ignore")


# -- the snapshot body -------------------------------------------------------------------------
class WindowFigures(_Shape):
    """Distance and effort figures over a stretch of play (window, block, period, team)."""

    distance_m: float = Field(ge=0, description="Distance covered, m.")
    hsr_m: float = Field(ge=0, description="High-speed running distance, 5.5-7.0 m/s (19.8-25.2 km/h), m "
                                           "(Bradley et al. 2009; Di Salvo et al. 2009).")
    sprint_m: float = Field(ge=0, description="Sprint distance, >= 7.0 m/s (25.2 km/h), m (Di Salvo et al. 2009).")
    hsr_efforts: int = Field(ge=0, description="High-speed efforts: >= 5.5 m/s held >= 1 s (a sprint is one too), "
                                               "count.")
    sprints: int = Field(ge=0, description="Sprint efforts: >= 7.0 m/s held >= 1 s, count.")
    accels: int = Field(ge=0, description="Accelerations above +3 m/s^2 held >= 0.5 s, count (Akenhead et al. 2013).")
    decels: int = Field(ge=0, description="Decelerations below -3 m/s^2 held >= 0.5 s, count (Akenhead et al. 2013).")
    energy_jkg: float = Field(ge=0, description="Metabolic energy spent, J/kg "
                                                "(di Prampero et al. 2005; Osgnach et al. 2010).")
    high_power_m: float = Field(ge=0, description="Distance covered while metabolic power exceeded 20 W/kg, m "
                                                  "(Osgnach et al. 2010).")
    m_per_min: float | None = Field(description="Distance per minute on the pitch, m/min; "
                                                "null before any time on the pitch.")
    metabolic_power_wkg: float | None = Field(description="Mean metabolic power, W/kg; "
                                                          "null before any time on the pitch.")


HR_ZONE_KEY = r"^[0-9]+(\.[0-9]+)?-[0-9]+(\.[0-9]+)?%$"


class HeartWindow(_Shape):
    """Heart-rate figures over a stretch of play; present once the match has heart-rate samples
    (docs/wearables.md). Estimates from a strap: decisions stay with qualified staff."""

    hr_mean_bpm: float | None = Field(None, description="Time-weighted mean heart rate, bpm; "
                                                        "null without credited samples.")
    trimp_edwards: float | None = Field(None, ge=0, description="Edwards' TRIMP: minutes in the 50-60 ... 90-100 % "
                                                                "HRmax zones weighted 1-5, AU (Edwards 1993); "
                                                                "null without hr_max_bpm.")
    trimp_banister: float | None = Field(None, ge=0, description="Banister's TRIMP: minutes x HRr x a*exp(b*HRr), "
                                                                 "AU (Banister 1991); "
                                                                 "null without hr_max_bpm, hr_rest_bpm and sex.")


class HeartZones(_Shape):
    """Seconds in each heart-rate zone, % of HRmax (``50-60%`` ... ``90-100%``; Edwards 1993)."""

    model_config = ConfigDict(json_schema_extra={"patternProperties": {HR_ZONE_KEY: {"type": "number", "minimum": 0}}})


class HeartFigures(HeartWindow):
    hr_zones: HeartZones | None = Field(None, description="Seconds per heart-rate zone; null without hr_max_bpm.")
    hr_coverage: float | None = Field(None, ge=0, le=1, description="Heart-rate samples credited / "
                                                                    "(seconds on the pitch x expected rate); "
                                                                    "null before time on the pitch.")


class Window(WindowFigures, HeartWindow):
    """A rolling window (``last_Nmin``), a fixed block (``block_A_B``) or a peak (``peak_Nmin``)."""

    span_s: float = Field(ge=0, description="Seconds of play the window covers (shorter than N minutes early on).")
    start_s: float = _optional_key(description="Peak windows only: match clock at the window's start, s.")


class Zones(_Shape):
    """Distance per speed band, m; band names come from the configured edges, e.g. ``0.0-2.0`` (m/s)
    and ``7.0+``, or ``0-30%`` and ``85%+`` (share of the player's max speed)."""

    model_config = ConfigDict(json_schema_extra={"patternProperties": {ZONE_KEY: {"type": "number", "minimum": 0}}})


class PeriodFigures(WindowFigures, HeartFigures):
    """A player's figures over one stretch of the match (the whole match, or one period)."""

    minutes: float = Field(ge=0, description="Minutes on the pitch.")
    max_speed_ms: float = Field(ge=0, description="Top speed, m/s.")
    coverage: float = Field(ge=0, le=1, description="Credited samples / samples on the pitch (1 = no gaps).")
    zones: Zones = Field(description="Distance per speed band, m.")


class ContextFigures(_Shape):
    distance_m: float = Field(ge=0, description="Distance covered in this ball context, m.")
    hsr_m: float = Field(ge=0, description="High-speed running distance in this ball context, m.")


class Possession(_Shape):
    """Distance split by ball context (only when the feed carries ball status and possession)."""

    in_possession: ContextFigures
    out_of_possession: ContextFigures
    out_of_play: ContextFigures


PhaseName = Literal["attack", "defence", "attacking_transition", "defensive_transition", "dead_ball", "unknown"]


class PhaseFigures(_Shape):
    """Figures over the seconds of one game phase (its team's phase, second by second)."""

    seconds: float = Field(ge=0, description="Seconds in this phase: a player's while seen on the pitch, a team's "
                                             "of match time.")
    distance_m: float = Field(ge=0, description="Distance covered in this phase, m.")
    m_per_min: float | None = Field(description="Distance per minute of this phase, m/min; null before any.")
    hsr_m: float = Field(ge=0, description="High-speed running distance in this phase, m.")
    sprint_m: float = Field(ge=0, description="Sprint distance in this phase, m.")


class TeamPhaseFigures(PhaseFigures):
    per_player_m_per_min: float | None = Field(description="Outfield distance per outfield player-minute in this "
                                                           "phase, m/min.")


PHASES_DESCRIPTION = ("Figures by game phase: attack and defence (organised possession and out of possession), "
                      "attacking_transition and defensive_transition (the first seconds after the ball was won or "
                      "lost in open play, phases.transition_s), dead_ball, and unknown (a loose ball, or no context). "
                      "Possession from the CDF event stream, else the tracking's ball; the phases partition the "
                      "totals.")


class Player(PeriodFigures):
    """One player: identity, whole-match figures, windows, per-period figures."""

    team_id: ID = Field(description="The player's team (a key of ``teams``).")
    jersey_number: int = Field(description="Shirt number from the match sheet.")
    name: str = Field(description="Display name from the match sheet (may be empty).")
    is_goalkeeper: bool = Field(description="position_group GK in the match sheet; "
                                            "goalkeepers are left out of team figures.")
    on_pitch: bool = Field(description="On the pitch now (seen recently, or brought on by a substitution event).")
    speed_ms: float | None = Field(description="Current speed, m/s; null when not seen in the last second.")
    windows: dict[Annotated[str, Field(pattern=WINDOW_KEY)], Window | None] = Field(
        description="last_Nmin: rolling windows of the current period; peak_Nmin: the best N-minute window so far "
                    "(null until N minutes were played; Fereday et al. 2020); block_A_B: fixed blocks of the "
                    "match clock, minutes A to B.")
    periods: dict[Period, PeriodFigures] = Field(description="The same figures per period played.")
    possession: Possession = _optional_key(description="Distance by ball context; "
                                                       "present when the feed has possession.")
    phases: dict[PhaseName, PhaseFigures] = Field(description=PHASES_DESCRIPTION)
    m_per_min_in_play: float | None = Field(description="Distance per minute of effective playing time (the ball in "
                                                        "play), m/min (Altmann et al. 2023); null before any.")
    hr_bpm: float | None = Field(None, description="Latest heart rate, bpm; null when older than heart_rate.stale_s.")
    hr_pct_max: float | None = Field(None, description="hr_bpm as % of the player's HRmax; null without hr_max_bpm.")
    hr_peak_bpm: float | None = Field(None, description="Highest accepted heart rate, bpm.")
    hr_omitted: dict[str, str] = _optional_key(description="Heart-rate figures left out for this player, each with why "
                                                           "(a profile value is missing).")


class PerPlayer(_Shape):
    """Team outfield figures per outfield player who played."""

    distance_m: float | None = Field(description="Distance per outfield player, m.")
    hsr_m: float | None = Field(description="High-speed running distance per outfield player, m.")
    sprint_m: float | None = Field(description="Sprint distance per outfield player, m.")
    m_per_min: float | None = Field(description="Outfield distance per outfield player-minute, m/min.")


class TeamWindow(WindowFigures):
    span_s: float = Field(ge=0, description="Seconds of play the window covers.")


class SequenceFigures(_Shape):
    """A team's possession sequences (spells with the ball in play) of one outcome."""

    count: int = Field(ge=0, description="Sequences, count.")
    seconds: float = Field(ge=0, description="Their total duration, s.")
    mean_s: float | None = Field(description="Their mean duration, s; null without any.")
    m_per_min: float | None = Field(description="Outfield distance per outfield player-minute during them, m/min.")
    hsr_m_per_min: float | None = Field(description="Outfield high-speed running per outfield player-minute during "
                                                    "them, m/min.")


class Sequences(_Shape):
    """Possession sequences by outcome (Bradley & Ade 2018): those in which the team shot, and the others."""

    shot: SequenceFigures
    no_shot: SequenceFigures


class Outfield(WindowFigures):
    """A team's outfield totals (goalkeepers excluded); rates per minute of match time."""

    players: int = Field(ge=0, description="Outfield players who have played.")
    minutes: float = Field(ge=0, description="Minutes of match time played.")
    per_player: PerPlayer
    windows: dict[Annotated[str, Field(pattern=LAST_WINDOW_KEY)], TeamWindow] = Field(
        description="Rolling windows of the current period, summed over outfield players.")
    phases: dict[PhaseName, TeamPhaseFigures] = Field(description=PHASES_DESCRIPTION + " m_per_min: per minute "
                                                                  "of match time in the phase, as m_per_min above.")
    m_per_min_in_play: float | None = Field(description="Outfield distance per minute of effective playing time, "
                                                        "m/min (Altmann et al. 2023).")
    in_play_s: float = Field(ge=0, description="Effective playing time so far (the ball in play), s.")
    sequences: Sequences = _optional_key(description="Possession sequences by outcome; present when the match has "
                                                     "a CDF event stream (shots come from it).")


class Team(_Shape):
    name: str = Field(description="Team name from the set-up.")
    side: Literal["home", "away"]
    score: int = _optional_key(ge=0, description="Goals from match events (live service only).")
    tracked: bool = Field(description="The feed tracks this team's players; false for the other team of a "
                                      "one-team (wearables) feed, which then has no outfield figures.")
    outfield: Outfield = _optional_key(description="Outfield totals; absent for a team the feed does not track.")


class Reason(_Shape):
    code: str = Field(description="Machine-readable reason: no_frames, low_rate, dropout, late_delivery, recorder, ...")
    message: str = Field(description="Human-readable explanation.")


class EventStreamHealth(_Shape):
    """The CDF event stream's own health."""

    state: Literal["ok", "degraded", "stalled"]
    reasons: list[Reason] = Field(
        description="Empty when ok: no_events, event_gap, event_stall, event_lag, event_ahead.")
    events: int = Field(ge=0, description="Distinct events accepted (by id), count.")
    events_per_min: float | None = Field(description="Events timed within the last window of match time, per minute.")
    lag_s: float | None = Field(description="Median of how far events arrive behind the tracking, s; null offline.")
    lag_p95_s: float | None = Field(description="95th percentile of that lag, s.")
    since_last_s: float | None = Field(description="Seconds of play (the ball not known dead) since the latest "
                                                   "event, s.")
    corrections: int = Field(ge=0, description="Events sent again under their id with other content (the latest "
                                               "wins), count.")
    duplicates: int = Field(ge=0, description="Events sent again unchanged (dropped), count.")
    rejected: int = Field(ge=0, description="Events refused as invalid, count.")


class Health(_Shape):
    """Feed health: its state, why, and the counters behind it."""

    state: Literal["ok", "degraded", "stalled"]
    reasons: list[Reason] = Field(description="Empty when ok.")
    fps_observed: float = Field(ge=0, description="Frames per second received over the rate window, 1/s.")
    fps_nominal: int = Field(gt=0, description="Frame rate of the set-up, 1/s.")
    dropout: float = Field(ge=0, le=1, description="Share of expected samples of players on the pitch missing.")
    lag_s: float | None = Field(description="Median arrival lag behind the frame timestamps, s; null when unknown.")
    lag_p95_s: float | None = Field(description="95th percentile of the arrival lag, s; null when unknown.")
    late: int = Field(ge=0, description="Frames dropped for arriving after a later frame, count.")
    duplicates: int = Field(ge=0, description="Frames dropped as repeats of an applied frame id, count.")
    rejected: int = Field(ge=0, description="Frames refused as invalid, count.")
    jumps: int = Field(ge=0, description="Implausible position steps (> 12.5 m/s) rejected, count.")
    frames: int = Field(ge=0, description="Frames applied, count.")
    coverage: dict[str, float] = Field(description="Per player id: credited samples / samples on the pitch, 0-1.")
    hr_coverage: dict[str, float | None] = _optional_key(description="Per player on the pitch: heart-rate samples "
                                                                     "over the last minute / expected "
                                                                     "(a strap dropping out shows here).")
    hr_rejected: int = _optional_key(ge=0, description="Heart-rate samples refused (implausible, jumps, bad shape), "
                                                       "count.")
    hr_duplicates: int = _optional_key(ge=0, description="Heart-rate samples dropped as repeats, count.")
    hr_late: int = _optional_key(ge=0, description="Heart-rate samples dropped as older than the player's last, count.")
    events: EventStreamHealth = _optional_key(description="The CDF event stream's health; present once the match "
                                                          "has one.")


class SnapshotBody(_Shape):
    """The full state of a match (also ``GET /api/matches/{id}/snapshot``)."""

    players: dict[str, Player] = Field(description="Per player id.")
    teams: dict[str, Team] = Field(description="Per team id.")
    health: Health


# -- messages ------------------------------------------------------------------------------------
class Envelope(_Shape):
    """Fields every message carries; the body's fields sit beside them."""

    match_id: ID
    seq: int = Field(ge=0, description="Position in this subscription's stream: one more per message; 0 on errors.")
    match_time_s: float = Field(ge=0, description="Match clock of the state the message reflects, s.")
    period: Period | None = Field(description="Current period; null before the first frame.")
    # mypy reads no Literal of a name
    v: Literal[CONTRACT_VERSION] = Field(  # type: ignore[valid-type]
        description="Contract major version; within it fields are only added, never removed or renamed.")


class SnapshotMessage(SnapshotBody, Envelope):
    """The full state: on connect, and on resync."""

    type: Literal["snapshot"]
    resync: Literal[True] = _optional_key(description="Present (true) when it replaces messages "
                                                      "a resume could not deliver.")


class HealthMessage(Envelope):
    """The feed-health state or the kinds of its reasons changed."""

    type: Literal["health"]
    health: Health


class PeriodMessage(Envelope):
    """A period started or ended."""

    type: Literal["period"]
    event: Literal["start", "end"]
    frame_id: int | None = Field(description="Frame that started (or ended) the period, when known.")


class AlertMessage(Envelope):
    """A player crossed a configured rule."""

    type: Literal["alert"]
    rule: str = Field(description="Rule id from the configuration ([alerts] rules).")
    kind: str = Field(description="Kind of rule: drop_off_peak, drop_off_baseline, load_budget, ...")
    player_id: ID
    team_id: ID
    figure: str = Field(description="The figure the rule watches.")
    value: float = Field(description="The player's value of that figure (its unit).")
    limit: float = Field(description="The limit it crossed (same unit).")
    level: float = _optional_key(description="Load budgets only: the share of the budget this alert marks.")
    message: str = Field(description="Human-readable text.")


class ReportMessage(Envelope):
    """A report is ready."""

    type: Literal["report"]
    kind: Literal["half_time", "full_time"]
    url: str = Field(description="Where to fetch it (path on this server).")


class ErrorMessage(Envelope):
    """A bad frame (ingest socket) or a refused subscription (live socket, then closed with 1008)."""

    type: Literal["error"]
    code: str = Field(description="Machine-readable: bad_json, duplicate, late, unknown_team, unknown_match, "
                                  "bad_request, too_many_subscribers, not_stored, ...")
    message: str = Field(description="Human-readable explanation.")
    frame_id: int = _optional_key(description="The frame's id, when it could be read.")
    line: int = _optional_key(description="Line number within an HTTP batch.")


def partial(model: type[BaseModel], suffix: str = "Delta") -> type[BaseModel]:
    """The same shape with every field optional and nullable (a delta: changed leaves only;
    null means the key went away). Nested models become partial too."""
    cache: dict[type, type[BaseModel]] = {}

    def conv(tp: Any) -> Any:
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            return make(tp)
        origin = typing.get_origin(tp)
        args = typing.get_args(tp)
        if origin is Annotated:
            return Annotated[(conv(args[0]), *tp.__metadata__)]
        if origin in (Union, types.UnionType):
            # a Union of a run-time tuple has no X | Y spelling
            return Union[tuple(conv(a) for a in args)]  # noqa: UP007
        if origin is dict:
            return types.GenericAlias(dict, (args[0], conv(args[1]) | None))
        return tp

    def make(m: type[BaseModel]) -> type[BaseModel]:
        if m not in cache:
            fields: dict[str, Any] = {}
            for name, info in m.model_fields.items():
                tp = conv(info.annotation)
                if info.metadata:  # keep the bounds (ge, le, pattern) of the full shape
                    tp = Annotated[(tp, *info.metadata)]
                fields[name] = (tp | None, Field(None, description=info.description))
            extra = m.model_config.get("json_schema_extra")
            cache[m] = create_model(f"{m.__name__}{suffix}", __base__=_Shape, __doc__=m.__doc__, **fields)
            if extra:
                cache[m].model_config["json_schema_extra"] = extra
                cache[m].model_rebuild(force=True)
        return cache[m]

    return make(model)


PlayerDelta = partial(Player)
TeamDelta = partial(Team)
HealthDelta = partial(Health)


class DeltaMessage(Envelope):
    """Only the leaves that changed since the previous message to this view: a partial snapshot.
    Apply it by merging nested objects; a null value means the key went away."""

    type: Literal["delta"]
    # models made at run time by partial(): mypy cannot read them as types
    players: dict[str, PlayerDelta | None] | None = None  # type: ignore[valid-type]
    teams: dict[str, TeamDelta | None] | None = None  # type: ignore[valid-type]
    health: HealthDelta | None = None  # type: ignore[valid-type]


MESSAGES: dict[str, type[Envelope]] = {
    "snapshot": SnapshotMessage,
    "delta": DeltaMessage,
    "health": HealthMessage,
    "period": PeriodMessage,
    "alert": AlertMessage,
    "report": ReportMessage,
    "error": ErrorMessage,
}

# built at run time from MESSAGES: a value for TypeAdapter, not an annotation (and with no X | Y spelling)
Message: Any = Annotated[Union[tuple(MESSAGES.values())], Field(discriminator="type")]  # noqa: UP007


# -- JSON Schema --------------------------------------------------------------------------------------
def _tidy(node: Any) -> None:
    """Drop what pydantic adds but the wire does not mean: property titles and defaults
    (an absent field is just absent)."""
    if isinstance(node, dict):
        node.pop("default", None)
        for prop in (node.get("properties") or {}).values():
            if isinstance(prop, dict):
                prop.pop("title", None)
        for v in node.values():
            _tidy(v)
    elif isinstance(node, list):
        for v in node:
            _tidy(v)


def _document(schema: dict[str, Any], name: str) -> dict[str, Any]:
    _tidy(schema)
    return {"$schema": JSON_SCHEMA_DIALECT, "$comment": f"pacewire contract v{CONTRACT_VERSION}: {name}", **schema}


def json_schemas() -> dict[str, dict[str, Any]]:
    """Every published JSON Schema by name: one per message type, ``snapshot_body`` and
    ``message`` (any message, chosen by ``type``)."""
    from pydantic import TypeAdapter

    out = {kind: _document(model.model_json_schema(), kind) for kind, model in MESSAGES.items()}
    out["snapshot_body"] = _document(SnapshotBody.model_json_schema(), "snapshot_body")
    union = TypeAdapter(Message).json_schema()
    union["title"] = "Message"
    union["description"] = "Any message on /live/{match_id} (and error messages on /ingest/{match_id})."
    out["message"] = _document(union, "message")
    return out


def strict(schema: dict[str, Any]) -> dict[str, Any]:
    """A copy with every described object closed (``additionalProperties: false``)."""
    s = copy.deepcopy(schema)

    def walk(node: Any) -> None:
        if isinstance(node, dict):
            if node.get("type") == "object" and ("properties" in node or "patternProperties" in node) \
                    and "additionalProperties" not in node:
                node["additionalProperties"] = False
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)

    walk(s)
    return s


def dump(schema: dict[str, Any]) -> str:
    return json.dumps(schema, indent=2, ensure_ascii=False) + "\n"


def write(out: Path) -> list[Path]:
    """Write every schema to ``out/NAME.json``; stale ``*.json`` files there are removed."""
    out.mkdir(parents=True, exist_ok=True)
    schemas = json_schemas()
    written = []
    for name, schema in schemas.items():
        path = out / f"{name}.json"
        path.write_text(dump(schema), encoding="utf-8")
        written.append(path)
    for old in out.glob("*.json"):
        if old.stem not in schemas:
            old.unlink()
    return written


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m pacewire.wire.schema", description=__doc__.splitlines()[0])
    p.add_argument("--out", type=Path, help="folder to write NAME.json files into (default: print `message`)")
    args = p.parse_args(argv)
    if args.out is None:
        sys.stdout.write(dump(json_schemas()["message"]))
        return 0
    for path in write(args.out):
        print(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
