"""CDF v0.3.2 (Anzer et al. 2025) on the wire: setup models and the frame decoder.

The decoder turns JSON frames into engine blocks. It never raises on bad input:
every rejected frame comes back as a :class:`FrameError` with a code, a reason
and the frame id or line number, and nothing of a rejected frame reaches the
engine.
"""
from __future__ import annotations

import math
from bisect import bisect_right
from collections import deque
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from itertools import chain
from operator import itemgetter
from typing import Any, Literal

import numpy as np
import orjson
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from pacewire.engine.types import (
    BALL_IN,
    BALL_OUT,
    BALL_UNKNOWN,
    NO_TEAM,
    PERIOD_INDEX,
    PERIODS,
    Block,
    FeedProfile as FeedProfile,  # re-exported for the settings, which read the engine through wire
    Player,
    Roster,
)
from pacewire.errors import PacewireError, describe_validation
from pacewire.wire.gnss import CalibrationError, PitchProjection, check_venue, parse_calibration

PeriodName = Literal["first_half", "second_half", "first_half_extratime", "second_half_extratime", "shootout"]


# --- setup: the live subset of the CDF meta object and match sheet -------------------

class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class MetaTracking(_Open):
    fps: int = Field(ge=1, le=1000)
    # pacewire extension: the kind of source, whose smoothing and artefact settings apply (config/default.toml)
    feed_profile: FeedProfile | None = None


class MetaVendors(_Open):
    tracking: MetaTracking


class MetaTeam(_Open):
    id: str = Field(min_length=1, max_length=128)
    name: str | None = None


class MetaTeams(_Open):
    home: MetaTeam
    away: MetaTeam


class MetaPeriod(_Open):
    period: PeriodName
    frame_id_start: int | None = None
    frame_id_end: int | None = None


class MetaMatch(_Open):
    id: str = Field(min_length=1, max_length=128)
    periods: list[MetaPeriod] = Field(default_factory=list)


class MetaVenue(_Open):
    pitch_length: float | None = Field(default=None, gt=50, lt=130)  # 105 m when not given
    pitch_width: float | None = Field(default=None, gt=30, lt=100)  # 68 m when not given
    gnss_pitch: Any = None  # pacewire extension: GNSS pitch calibration (service/wire/gnss.py)


class CdfMeta(_Open):
    """CDF meta object; live setup needs only match.id, teams and meta.tracking.fps."""

    match: MetaMatch
    teams: MetaTeams
    meta: MetaVendors
    venue: MetaVenue = Field(default_factory=MetaVenue)


class SheetPlayer(_Open):
    id: str = Field(min_length=1, max_length=128)
    team_id: str
    jersey_number: int = Field(ge=0, le=999)
    is_starter: bool
    position_group: str | None = None
    first_name: str | None = None
    last_name: str | None = None
    short_name: str | None = None
    # pacewire extension: the player's own max speed (m/s) for relative zones.
    max_speed_ms: float | None = Field(default=None, gt=0, le=15)
    # pacewire extension: heart-rate profile (docs/wearables.md).
    hr_max_bpm: float | None = Field(default=None, ge=100, le=250)
    hr_rest_bpm: float | None = Field(default=None, ge=20, le=120)
    sex: Literal["male", "female"] | None = None

    @model_validator(mode="after")
    def _rest_below_max(self) -> SheetPlayer:
        if self.hr_max_bpm is not None and self.hr_rest_bpm is not None and self.hr_rest_bpm >= self.hr_max_bpm:
            raise ValueError(f"player {self.id!r}: hr_rest_bpm must be below hr_max_bpm")
        return self


class SheetTeam(_Open):
    id: str = Field(min_length=1, max_length=128)
    name: str | None = None
    short_name: str | None = None
    players: list[SheetPlayer] = Field(min_length=0, max_length=60)


class SheetTeams(_Open):
    home: SheetTeam
    away: SheetTeam


class CdfSheet(_Open):
    """CDF match sheet; result, goals, cards and officials are optional on input."""

    teams: SheetTeams


class MatchSetup(BaseModel):
    """Body of ``PUT /api/matches/{id}``."""

    model_config = ConfigDict(extra="forbid")
    meta: CdfMeta
    sheet: CdfSheet

    @field_validator("sheet")
    @classmethod
    def _unique_players(cls, sheet: CdfSheet) -> CdfSheet:
        seen: set[str] = set()
        for side in ("home", "away"):
            team = getattr(sheet.teams, side)
            for p in team.players:
                if p.id in seen:
                    raise ValueError(f"player id {p.id!r} appears twice in the sheet")
                if p.team_id != team.id:
                    raise ValueError(f"player {p.id!r} has team_id {p.team_id!r} "
                                     f"but is listed under {side} team {team.id!r}")
                seen.add(p.id)
        return sheet


class SetupError(PacewireError, ValueError):
    """Meta and sheet do not describe one match."""

    code = "bad_setup"


def _team_name(meta: CdfMeta, sheet: CdfSheet, side: str) -> str:
    """The sheet's team name, else the meta's, else the sheet's short name."""
    team = getattr(sheet.teams, side)
    return team.name or getattr(meta.teams, side).name or team.short_name or ""


def roster_from_setup(setup: MatchSetup, match_id: str | None = None,
                      gnss_tolerances: tuple[float, float] = (0.01, 1.0)) -> Roster:
    """Build the engine roster; the sheet's team ids must equal the meta's.
    ``gnss_tolerances``: (side, angle in degrees) for a GNSS calibration (config ``[gnss]``)."""
    meta, sheet = setup.meta, setup.sheet
    mid = match_id or meta.match.id
    if match_id is not None and meta.match.id != match_id:
        raise SetupError(f"meta.match.id {meta.match.id!r} differs from the match id {match_id!r}")
    team_ids = (meta.teams.home.id, meta.teams.away.id)
    if team_ids[0] == team_ids[1]:
        raise SetupError("home and away team ids are the same")
    if (sheet.teams.home.id, sheet.teams.away.id) != team_ids:
        raise SetupError(f"sheet team ids {(sheet.teams.home.id, sheet.teams.away.id)} "
                         f"differ from meta team ids {team_ids}")
    players = []
    for side, team in ((0, sheet.teams.home), (1, sheet.teams.away)):
        for p in team.players:
            name = p.short_name or " ".join(n for n in (p.first_name, p.last_name) if n)
            players.append(Player(
                id=p.id, team=side, jersey_number=p.jersey_number,
                is_goalkeeper=(p.position_group or "").upper() == "GK",
                is_starter=p.is_starter, name=name, max_speed_ms=p.max_speed_ms,
                hr_max_bpm=p.hr_max_bpm, hr_rest_bpm=p.hr_rest_bpm, sex=p.sex,
            ))
    names = (_team_name(meta, sheet, "home"), _team_name(meta, sheet, "away"))
    venue = meta.venue
    length, width = venue.pitch_length or 105.0, venue.pitch_width or 68.0
    cal = projection = None
    if venue.gnss_pitch is not None:
        try:
            cal = parse_calibration(venue.gnss_pitch)
            projection = PitchProjection.from_calibration(cal, *gnss_tolerances)
            length, width = check_venue(projection, venue.pitch_length, venue.pitch_width)
        except CalibrationError as exc:
            raise SetupError(f"meta.{exc}") from None
    return Roster(
        match_id=mid, team_ids=team_ids, players=tuple(players), fps=meta.meta.tracking.fps,
        pitch_length_m=length, pitch_width_m=width,
        team_names=names, feed_profile=meta.meta.tracking.feed_profile, gnss_pitch=cal, projection=projection,
        periods=tuple(sorted({p.period for p in meta.match.periods}, key=PERIOD_INDEX.__getitem__)),
    )


def parse_setup(meta: Any, sheet: Any, match_id: str | None = None,
                gnss_tolerances: tuple[float, float] = (0.01, 1.0)) -> Roster:
    """Validate raw meta + sheet dicts; raises SetupError with a readable reason."""
    try:
        setup = MatchSetup.model_validate({"meta": meta, "sheet": sheet})
    except ValidationError as exc:
        raise SetupError(describe_validation(exc)) from None
    return roster_from_setup(setup, match_id, gnss_tolerances)


def gnss_tolerances(settings: Any) -> tuple[float, float]:
    """(side, angle in degrees) of the config's ``[gnss]`` section, for :func:`parse_setup`."""
    return settings.gnss.side_tolerance, settings.gnss.angle_tolerance_deg


# --- tracking frames ------------------------------------------------------------

class FramePlayer(BaseModel):
    id: str
    x: float | None
    y: float | None


class FrameTeam(BaseModel):
    id: str | None = None
    players: list[FramePlayer]


class FrameTeams(BaseModel):
    home: FrameTeam
    away: FrameTeam


class FrameBall(BaseModel):
    x: float | None = None
    y: float | None = None
    z: float | None = None
    status: bool | None = None
    poss_team_id: str | None = None


class FrameMatch(BaseModel):
    id: str


class TrackingFrame(BaseModel):
    """One CDF tracking object (documentation and schema; the hot path is :func:`decode`)."""

    frame_id: int
    timestamp: datetime
    period: PeriodName
    match: FrameMatch
    teams: FrameTeams
    ball: FrameBall | None = None


@dataclass(frozen=True)
class FrameError:
    code: str
    message: str
    frame_id: int | None = None
    line: int | None = None

    def as_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"code": self.code, "message": self.message}
        if self.frame_id is not None:
            d["frame_id"] = self.frame_id
        if self.line is not None:
            d["line"] = self.line
        return d


# last_id, last_t, period, period_t0, last_slot, the length of recent, the number of held runs and
# the end of the last one
GateCheckpoint = tuple[int, float, int, float, int, int, int, int]
# last_id ... last_slot, recent, recent_set and the held runs' starts and ends themselves
GateState = tuple[int, float, int, float, int, deque[int], set[int], list[int], list[int]]


@dataclass
class FrameGate:
    """Ordering state across decode calls: drops duplicate, resent and late frames.

    Every accepted frame id is kept as runs of consecutive ids (a match with a few gaps
    is a few runs), so a frame sent again long after is told apart from a late one."""

    fps: int = 25
    recent_size: int = 512
    last_id: int = -1
    last_t: float = -math.inf
    period: int = -1
    period_t0: float = 0.0
    last_slot: int = -1
    recent: deque[int] = field(default_factory=deque)
    recent_set: set[int] = field(default_factory=set)
    run_starts: list[int] = field(default_factory=list)  # accepted ids: runs [start, end], increasing
    run_ends: list[int] = field(default_factory=list)

    def slot_of(self, period: int, t: float) -> int:
        """Frame slot of a frame within its period; raises Reject if it does not advance."""
        if period < self.period:
            raise Reject("bad_value", f"period {PERIODS[period]} comes after {PERIODS[self.period]}")
        if period > self.period:
            return 0
        slot = math.floor((t - self.period_t0) * self.fps + 0.5)
        if slot <= self.last_slot:
            raise Reject("bad_timestamp", "timestamp is less than one frame period after the previous frame")
        return slot

    def checkpoint(self) -> GateCheckpoint:
        return (self.last_id, self.last_t, self.period, self.period_t0, self.last_slot, len(self.recent),
                len(self.run_ends), self.run_ends[-1] if self.run_ends else -1)

    def restore(self, cp: GateCheckpoint) -> None:
        """Undo admissions since ``checkpoint()`` (frames that could not be recorded)."""
        self.last_id, self.last_t, self.period, self.period_t0, self.last_slot, n, runs, end = cp
        while len(self.recent) > n:
            self.recent_set.discard(self.recent.pop())
        del self.run_starts[runs:], self.run_ends[runs:]
        if runs:
            self.run_ends[-1] = end

    def save(self) -> GateState:
        """Everything, for :meth:`load` (checkpoint/restore undo a few admissions, not a batch)."""
        return (self.last_id, self.last_t, self.period, self.period_t0, self.last_slot, deque(self.recent),
                set(self.recent_set), list(self.run_starts), list(self.run_ends))

    def load(self, saved: GateState) -> None:
        (self.last_id, self.last_t, self.period, self.period_t0, self.last_slot, recent, recent_set, starts,
         ends) = saved
        self.recent, self.recent_set = deque(recent), set(recent_set)
        self.run_starts, self.run_ends = list(starts), list(ends)

    def held(self, frame_id: int) -> bool:
        """Whether ``frame_id`` was accepted before."""
        i = bisect_right(self.run_starts, frame_id) - 1
        return i >= 0 and frame_id <= self.run_ends[i]

    def admit(self, frame_id: int, t: float, period: int, slot: int) -> None:
        self.last_id, self.last_t = frame_id, t
        if period != self.period:
            self.period, self.period_t0 = period, t
        self.last_slot = slot
        if self.run_ends and self.run_ends[-1] == frame_id - 1:
            self.run_ends[-1] = frame_id
        else:
            self.run_starts.append(frame_id)
            self.run_ends.append(frame_id)
        self.recent.append(frame_id)
        self.recent_set.add(frame_id)
        if len(self.recent) > self.recent_size:
            self.recent_set.discard(self.recent.popleft())


@dataclass
class DecodeResult:
    block: Block
    errors: list[FrameError]
    rejected: int = 0
    duplicates: int = 0
    late: int = 0
    accepted: list[int] = field(default_factory=list)  # input positions of the accepted frames
    resent: int = 0  # frames accepted before, sent again (not recent enough to be duplicates)

    @staticmethod
    def merge(results: list[DecodeResult]) -> DecodeResult:
        if len(results) == 1:
            return results[0]
        blocks = [r.block for r in results if len(r.block)]
        block = Block.concat(blocks) if blocks else results[0].block
        return DecodeResult(block, [e for r in results for e in r.errors], sum(r.rejected for r in results),
                            sum(r.duplicates for r in results), sum(r.late for r in results),
                            resent=sum(r.resent for r in results))


class Reject(PacewireError):
    """A frame (or heart-rate sample) refused: ``code`` and ``message`` become its FrameError."""

    def __init__(self, code: str, message: str) -> None:
        self.code, self.message = code, message


_NUM = (float, int)
_NUM_SET = frozenset(_NUM)
_ID, _X, _Y = itemgetter("id"), itemgetter("x"), itemgetter("y")
_BULK_MIN = 8  # frames in a call before the players of all its frames are checked at once
_BULK_PAUSE = 8  # calls decoded frame by frame after a batch the bulk check could not take


def _refusal(exc: Exception, fid: int | None, line: int | None) -> FrameError:
    """The FrameError of a refused frame: a Reject's code and message, else ``bad_frame`` naming the fault."""
    if isinstance(exc, Reject):
        return FrameError(exc.code, exc.message, fid, line)
    return FrameError("bad_frame", f"frame could not be read: {type(exc).__name__}: {exc}", fid, line)


def _block(n_players: int, frames: list[tuple[int, float, int, int, int, int]],
           samples: list[tuple[Any, Any, Any, Any]]) -> Block:
    """The engine block of the accepted ``frames``; ``samples``: (frame rows, roster indices, x, y) runs."""
    fids, ts, periods, slots, balls, poss = zip(*frames, strict=True)
    xy = np.full((len(frames), n_players, 2), np.nan)
    for f, p, x, y in samples:
        f = np.asarray(f)
        p = np.asarray(p)
        xy[f, p, 0] = x
        xy[f, p, 1] = y
    return Block(
        frame_id=np.asarray(fids, np.int64), t=np.asarray(ts, np.float64),
        period=np.asarray(periods, np.int8), slot=np.asarray(slots, np.int64), xy=xy,
        ball=np.asarray(balls, np.int8), poss=np.asarray(poss, np.int8),
    )


def parse_timestamp(value: Any) -> float:
    if type(value) is not str or len(value) < 20 or value[10] not in "Tt ":
        raise Reject("bad_timestamp", f"timestamp {value!r} is not an RFC 3339 date-time")
    try:
        dt = datetime.fromisoformat(value)
    except ValueError:
        raise Reject("bad_timestamp", f"timestamp {value!r} is not an RFC 3339 date-time") from None
    if dt.tzinfo is None:
        raise Reject("bad_timestamp", f"timestamp {value!r} has no UTC offset")
    return dt.timestamp()


def decode_json_lines(decode_objects: Callable[[Sequence[Any], Sequence[int]], Any], lines: Iterable[bytes | str],
                      first_line: int = 1) -> Any:
    """Parse JSON Lines (blank lines skipped) and hand the objects with their line numbers to
    ``decode_objects``; lines that are not JSON become ``bad_json`` errors in its result
    (which needs ``errors``, ``rejected`` and ``accepted``, as DecodeResult has)."""
    objs: list[Any] = []
    numbers: list[int] = []
    errors: list[FrameError] = []
    for i, line in enumerate(lines, start=first_line):
        if not line.strip():
            continue
        try:
            objs.append(orjson.loads(line))
            numbers.append(i)
        except orjson.JSONDecodeError as exc:
            errors.append(FrameError("bad_json", f"not valid JSON: {exc}", None, i))
    result = decode_objects(objs, numbers)
    result.errors[:0] = errors
    result.rejected += len(errors)
    result.accepted = [numbers[k] - first_line for k in result.accepted]
    return result


def parse_message(data: bytes | str) -> list[Any] | FrameError:
    """One WebSocket message: an object or a JSON array of them, as a list; bad_json if unreadable."""
    try:
        obj = orjson.loads(data)
    except orjson.JSONDecodeError as exc:
        return FrameError("bad_json", f"not valid JSON: {exc}")
    return obj if isinstance(obj, list) else [obj]


def count_frames(data: list[bytes] | bytes | str) -> tuple[int, int | None]:
    """How many frames a batch holds (JSON Lines: its non-blank lines; a message: its array's length)
    and the first one's frame_id if it reads, for answering a batch refused whole."""
    if isinstance(data, list):
        lines = [line for line in data if line.strip()]
        first: Any = parse_message(lines[0]) if lines else None
        n = len(lines)
    else:
        first = parse_message(data)
        n = 1 if isinstance(first, FrameError) else len(first)
    obj = first[0] if isinstance(first, list) and first else None
    fid = obj.get("frame_id") if isinstance(obj, dict) else None
    return n, fid if type(fid) is int else None


class FrameDecoder:
    """Decodes CDF frames for one match into blocks for the engine."""

    def __init__(self, roster: Roster, outside_margin_m: float = 12.5, recent_ids: int = 512) -> None:
        self.roster = roster
        self.gate = FrameGate(fps=roster.fps, recent_size=recent_ids)
        # never tighter than the CDF validator (|x| <= 65, |y| <= 42.5, Anzer et al. 2025)
        self.x_lim = max(roster.pitch_length_m / 2 + outside_margin_m, 65.0)
        self.y_lim = max(roster.pitch_width_m / 2 + outside_margin_m, 42.5)
        self._team_index = {tid: i for i, tid in enumerate(roster.team_ids)}
        self.projection = roster.projection  # GNSS fixes -> pitch metres, when the set-up has a calibration
        self._projected: dict[int, tuple[float, float]] = {}  # id(player entry) -> (x, y), for one batch
        # player id -> roster index, per side: a player under the wrong team is not found
        self._side_index = tuple({p.id: i for i, p in enumerate(roster.players) if p.team == side} for side in (0, 1))
        self._bulk_pause = 0

    def decode_lines(self, lines: Iterable[bytes | str], first_line: int = 1) -> DecodeResult:
        """JSON Lines (one frame per line); blank lines are skipped."""
        return decode_json_lines(self.decode_objects, lines, first_line)

    def decode_message(self, data: bytes | str) -> DecodeResult:
        """One WebSocket message: a frame object or a JSON array of frames."""
        objs = parse_message(data)
        if isinstance(objs, FrameError):
            return DecodeResult(Block.empty(self.roster.n), [objs], rejected=1)
        return self.decode_objects(objs)

    def decode_for_record(self, data: list[bytes] | bytes | str) -> tuple[DecodeResult, list[bytes]]:
        """A batch decoded, and its accepted frames as the lines to record: JSON Lines (a list of
        lines) as they came; one websocket message as it came when it is one accepted frame, else
        each accepted frame of its array written anew."""
        if isinstance(data, list):
            res = self.decode_lines(data)
            return res, [data[i].rstrip(b"\r\n") for i in res.accepted]
        try:
            obj = orjson.loads(data)
        except orjson.JSONDecodeError as exc:
            return DecodeResult(Block.empty(self.roster.n), [FrameError("bad_json", f"not valid JSON: {exc}")],
                                rejected=1), []
        objs = obj if isinstance(obj, list) else [obj]
        res = self.decode_objects(objs)
        if not isinstance(obj, list) and res.accepted:
            return res, [data.encode() if isinstance(data, str) else bytes(data)]
        return res, [orjson.dumps(objs[i]) for i in res.accepted]

    def decode_objects(self, objs: Sequence[Any], lines: Sequence[int] | None = None) -> DecodeResult:
        if self.projection is not None and len(objs) > 1:
            self._projected = self._project_batch(objs)
        try:
            if self.projection is None and len(objs) >= _BULK_MIN and not self._bulk_pause:
                saved = self.gate.save()
                res = self._decode_objects(objs, lines, bulk=True)
                if res is not None:
                    return res
                # some player entry needs the per-player checks: decode again, frame by frame
                self.gate.load(saved)
                self._bulk_pause = _BULK_PAUSE
            elif self._bulk_pause:
                self._bulk_pause -= 1
            res = self._decode_objects(objs, lines)
            assert res is not None  # only a bulk pass gives up
            return res
        finally:
            self._projected = {}  # keyed by object ids: valid for this batch only

    def _decode_objects(self, objs: Sequence[Any], lines: Sequence[int] | None, bulk: bool = False
                        ) -> DecodeResult | None:
        """``bulk``: the players of all accepted frames are checked together at the end, and
        None comes back if any entry is not plainly good (the caller then decodes frame by
        frame, where each check names what is wrong); otherwise the result is the same."""
        plists: tuple[list[Any], list[Any]] = ([], [])
        frames: list[tuple[int, float, int, int, int, int]] = []  # accepted: (frame_id, t, period, slot, ball, poss)
        # Flat (frame, player, x, y) samples of accepted frames.
        s_f: list[int] = []
        s_p: list[int] = []
        s_x: list[float] = []
        s_y: list[float] = []
        errors: list[FrameError] = []
        res = DecodeResult(Block.empty(self.roster.n), errors)
        gate = self.gate
        for k, obj in enumerate(objs):
            line = lines[k] if lines is not None else None
            raw_fid = obj.get("frame_id") if type(obj) is dict else None
            fid_known = raw_fid if type(raw_fid) is int else None
            mark = len(s_f)
            try:
                if type(obj) is not dict:
                    raise Reject("bad_type", f"a frame must be a JSON object, got {type(obj).__name__}")
                if fid_known is None:
                    raise Reject("missing_field" if raw_fid is None else "bad_type", "frame_id must be an integer")
                fid = fid_known
                if fid < 0:
                    raise Reject("bad_value", f"frame_id {fid} is negative (CDF frame ids count from 0)")
                t = self._check_frame(obj)
                if fid <= gate.last_id:
                    errors.append(self._repeated(res, fid, line))
                    continue
                if t < gate.last_t:
                    raise Reject("bad_timestamp", "timestamp goes back in time")
                period = PERIOD_INDEX[obj["period"]]
                slot = gate.slot_of(period, t)
                row = len(frames)
                if not bulk:
                    for side in (0, 1):
                        self._players(obj["teams"][("home", "away")[side]], side, row, s_f, s_p, s_x, s_y)
                    ball, team = self._ball(obj.get("ball"))
                else:
                    try:
                        ball, team = self._ball(obj.get("ball"))
                    except Exception:
                        # frame by frame the players come first: a fault there is the one to report
                        for side in (0, 1):
                            self._players(obj["teams"][("home", "away")[side]], side, row, [], [], [], [])
                        raise
            except Exception as exc:  # a Reject, or a shape no rule above foresaw: still a clear rejection
                del s_f[mark:], s_p[mark:], s_x[mark:], s_y[mark:]
                res.rejected += 1
                errors.append(_refusal(exc, fid_known, line))
                continue
            res.accepted.append(k)
            if bulk:
                teams = obj["teams"]
                plists[0].append(teams["home"]["players"])
                plists[1].append(teams["away"]["players"])
            frames.append((fid, t, period, slot, ball, team))
            gate.admit(fid, t, period, slot)
        samples: list[tuple[Any, Any, Any, Any]] = [(s_f, s_p, s_x, s_y)] if s_f else []
        if bulk:
            got = self._players_bulk(plists)
            if got is None:
                return None
            samples = got
        if frames:
            res.block = _block(self.roster.n, frames, samples)
        return res

    def _repeated(self, res: DecodeResult, fid: int, line: int | None) -> FrameError:
        """A frame id at or below the last one applied: a duplicate if among the recent ones, resent
        if held from longer ago, else late (never seen, and a later frame came first)."""
        if fid in self.gate.recent_set:
            res.duplicates += 1
            return FrameError("duplicate", f"frame {fid} was already applied", fid, line)
        if self.gate.held(fid):
            res.resent += 1
            return FrameError("resent", f"frame {fid} is already held (sent again)", fid, line)
        res.late += 1
        return FrameError("late", f"frame {fid} arrived after frame {self.gate.last_id}", fid, line)

    def _check_frame(self, obj: dict[str, Any]) -> float:
        for key in ("timestamp", "period", "teams"):
            if key not in obj:
                raise Reject("missing_field", f"missing required field {key!r}")
        period = obj["period"]
        if type(period) is not str or period not in PERIOD_INDEX:
            raise Reject("bad_value", f"period {period!r} is not one of {', '.join(PERIODS)}")
        match = obj.get("match")
        if match is not None:
            mid = match.get("id") if type(match) is dict else None
            if mid != self.roster.match_id:
                raise Reject("wrong_match", f"match.id {mid!r} is not {self.roster.match_id!r}")
        teams = obj["teams"]
        if type(teams) is not dict or "home" not in teams or "away" not in teams:
            raise Reject("missing_field", "teams must hold 'home' and 'away'")
        for side, tid in zip(("home", "away"), self.roster.team_ids, strict=True):
            team = teams[side]
            if type(team) is not dict:
                raise Reject("bad_type", f"teams.{side} must be an object")
            got = team.get("id", tid)
            if got != tid:
                raise Reject("unknown_team", f"teams.{side}.id {got!r} is not {tid!r}")
            if type(team.get("players")) is not list:
                raise Reject("missing_field" if "players" not in team else "bad_type",
                             f"teams.{side}.players must be an array")
        return parse_timestamp(obj["timestamp"])

    def _players(self, team: dict[str, Any], side: int, row: int,
                 s_f: list[int], s_p: list[int], s_x: list[float], s_y: list[float]) -> None:
        plist = team["players"]
        if self.projection is not None:
            return self._players_gnss(plist, side, row, s_f, s_p, s_x, s_y)
        if self._players_fast(plist, side, row, s_f, s_p, s_x, s_y):
            return
        self._players_exact(plist, side, row, s_f, s_p, s_x, s_y)

    def _player(self, pl: Any, side: int) -> tuple[int, str]:
        """(roster index, id) of a player entry of team ``side``; Reject naming what is wrong."""
        if type(pl) is not dict:
            raise Reject("bad_type", "a player entry must be an object")
        pid = pl.get("id")
        if type(pid) is not str:
            raise Reject("bad_type" if "id" in pl else "missing_field", "a player entry needs a string id")
        i = self.roster.index.get(pid)
        if i is None:
            raise Reject("unknown_player", f"player {pid!r} is not in the match sheet")
        if self.roster.players[i].team != side:
            raise Reject("unknown_player", f"player {pid!r} is listed under the other team")
        return i, pid

    def _players_exact(self, plist: list[Any], side: int, row: int,
                       s_f: list[int], s_p: list[int], s_x: list[float], s_y: list[float]) -> None:
        """Per-player checks that name what is wrong."""
        x_lim, y_lim = self.x_lim, self.y_lim
        for pl in plist:
            i, pid = self._player(pl, side)
            x = pl.get("x")
            y = pl.get("y")
            if x is None or y is None:
                if pl.get("lat") is not None or pl.get("long") is not None:
                    raise Reject("no_calibration", f"player {pid!r} has lat/long but no x/y, and the match set-up "
                                                    "has no GNSS pitch calibration (meta venue.gnss_pitch)")
                if "x" not in pl or "y" not in pl:
                    raise Reject("missing_field", f"player {pid!r} lacks x or y")
                continue  # null: not seen this frame (the schema allows it)
            if type(x) not in _NUM or type(y) not in _NUM:
                raise Reject("bad_type", f"player {pid!r} x/y must be numbers")
            if not (-x_lim <= x <= x_lim and -y_lim <= y <= y_lim):
                raise Reject("out_of_pitch", f"player {pid!r} at ({x}, {y}) is far outside the pitch")
            s_f.append(row)
            s_p.append(i)
            s_x.append(x)
            s_y.append(y)

    def _players_gnss(self, plist: list[Any], side: int, row: int,
                      s_f: list[int], s_p: list[int], s_x: list[float], s_y: list[float]) -> None:
        """A match with a GNSS calibration: entries with lat/long are projected to pitch metres
        (one vectorised call per team and frame); entries without them use x/y."""
        gnss: list[tuple[int, str, float, float, int]] = []
        plain: list[Any] = []
        lat: Any  # JSON values, checked by type() below
        lon: Any
        for pl in plist:
            if type(pl) is not dict:
                raise Reject("bad_type", "a player entry must be an object")
            lat, lon = pl.get("lat"), pl.get("long")
            if lat is None and lon is None:
                plain.append(pl)
                continue
            i, pid = self._player(pl, side)
            if type(lat) not in _NUM or type(lon) not in _NUM or not (math.isfinite(lat) and math.isfinite(lon)):
                raise Reject("bad_type", f"player {pid!r} lat/long must both be numbers")
            if not (-90.0 <= lat <= 90.0 and -180.0 <= lon <= 180.0):
                raise Reject("bad_value", f"player {pid!r} at lat {lat}, long {lon} is not a WGS 84 position")
            gnss.append((i, pid, lat, lon, id(pl)))
        if plain:
            self._players_exact(plain, side, row, s_f, s_p, s_x, s_y)
        if not gnss:
            return
        done = [self._projected.get(g[4]) for g in gnss]
        known = [d for d in done if d is not None]
        if len(known) == len(done):
            xs, ys = np.array([d[0] for d in known]), np.array([d[1] for d in known])
        else:
            xs, ys = self.projection.to_pitch(np.array([g[2] for g in gnss]), np.array([g[3] for g in gnss]))
        bad = np.flatnonzero((np.abs(xs) > self.x_lim) | (np.abs(ys) > self.y_lim))
        if bad.size:
            k = int(bad[0])
            raise Reject("out_of_pitch", f"player {gnss[k][1]!r} at lat {gnss[k][2]}, long {gnss[k][3]} is "
                                          f"{float(xs[k]):.1f}, {float(ys[k]):.1f} m from the centre spot: "
                                          "far outside the pitch")
        s_f.extend([row] * len(gnss))
        s_p.extend(g[0] for g in gnss)
        s_x.extend(xs.tolist())
        s_y.extend(ys.tolist())

    def _project_batch(self, objs: Sequence[Any]) -> dict[int, tuple[float, float]]:
        """Every well-formed lat/long of a batch in one projection call (one pymap3d call per
        batch instead of per frame); entries it skips are projected, or refused, frame by frame."""
        keys: list[int] = []
        lats: list[float] = []
        lons: list[float] = []
        lat: Any  # JSON values, checked by type() below
        lon: Any
        for obj in objs:
            teams = obj.get("teams") if type(obj) is dict else None
            if type(teams) is not dict:
                continue
            for side in ("home", "away"):
                team = teams.get(side)
                plist = team.get("players") if type(team) is dict else None
                if type(plist) is not list:
                    continue
                for pl in plist:
                    if type(pl) is not dict:
                        continue
                    lat, lon = pl.get("lat"), pl.get("long")
                    if type(lat) in _NUM and type(lon) in _NUM and -90.0 <= lat <= 90.0 and -180.0 <= lon <= 180.0:
                        keys.append(id(pl))
                        lats.append(lat)
                        lons.append(lon)
        if not keys:
            return {}
        xs, ys = self.projection.to_pitch(np.array(lats), np.array(lons))
        return dict(zip(keys, zip(xs.tolist(), ys.tolist(), strict=True), strict=True))

    def _players_fast(self, plist: list[Any], side: int, row: int,
                      s_f: list[int], s_p: list[int], s_x: list[float], s_y: list[float]) -> bool:
        """The common case in bulk (no per-player branches); False sends the
        team through the exact per-player checks, which name what is wrong."""
        if not plist:
            return True
        try:
            idx = [self._side_index[side][p["id"]] for p in plist]
            xs = [p["x"] for p in plist]
            ys = [p["y"] for p in plist]
        except (KeyError, TypeError, IndexError):
            return False
        if not _NUM_SET.issuperset(map(type, xs)) or not _NUM_SET.issuperset(map(type, ys)):
            return False  # nulls (unseen) or bad types: the exact path sorts them out
        if not math.isfinite(sum(xs) + sum(ys)):
            return False  # NaN or infinity (possible from Python callers, not from JSON)
        if min(xs) < -self.x_lim or max(xs) > self.x_lim or min(ys) < -self.y_lim or max(ys) > self.y_lim:
            return False
        s_f.extend([row] * len(idx))
        s_p.extend(idx)
        s_x.extend(xs)
        s_y.extend(ys)
        return True

    def _players_bulk(self, plists: tuple[list[Any], list[Any]]) -> list[tuple[Any, Any, Any, Any]] | None:
        """(rows, roster indices, x, y) per team from the player lists of every accepted frame
        (one list per frame and team), checked as :meth:`_players_fast` checks them, by
        C-level maps and numpy instead of per-frame Python; None if any entry is not plainly
        good."""
        out = []
        for side, lists in enumerate(plists):
            flat = list(chain.from_iterable(lists))
            if not flat:
                continue
            try:
                idx = list(map(self._side_index[side].__getitem__, map(_ID, flat)))
                xs = list(map(_X, flat))
                ys = list(map(_Y, flat))
            except (KeyError, TypeError, IndexError):
                return None
            if not _NUM_SET.issuperset(map(type, xs)) or not _NUM_SET.issuperset(map(type, ys)):
                return None  # nulls (unseen) or bad types
            try:
                x = np.array(xs, np.float64)
                y = np.array(ys, np.float64)
            except OverflowError:
                return None
            # NaN and infinity fail these too
            if not ((np.abs(x) <= self.x_lim).all() and (np.abs(y) <= self.y_lim).all()):
                return None
            out.append((np.repeat(np.arange(len(lists)), list(map(len, lists))), idx, x, y))
        return out

    def _ball(self, ball: Any) -> tuple[int, int]:
        if ball is None:
            return BALL_UNKNOWN, NO_TEAM
        if type(ball) is not dict:
            raise Reject("bad_type", "ball must be an object")
        status = ball.get("status")
        if status is None:
            state = BALL_UNKNOWN
        elif type(status) is bool:
            state = BALL_IN if status else BALL_OUT
        else:
            raise Reject("bad_type", "ball.status must be a boolean")
        team = NO_TEAM
        tid = ball.get("poss_team_id")
        if tid is not None:
            if type(tid) is not str:
                raise Reject("bad_type", "ball.poss_team_id must be a string")
            team = self._team_index.get(tid, -2)
            if team == -2:
                raise Reject("unknown_team", f"ball.poss_team_id {tid!r} is neither team")
        return state, team
