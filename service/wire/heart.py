"""Heart-rate samples on the wire: ``{"player_id", "timestamp", "bpm"}`` (docs/wearables.md).

The decoder never raises on bad input: every rejected sample comes back as a
:class:`FrameError` with a code and a reason naming the player and time when
known, and nothing of a rejected sample reaches the engine.
"""
from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pacewire.engine.heart import HeartParams
from pacewire.engine.types import Roster
from pacewire.wire.cdf import FrameError, Reject, decode_json_lines, parse_message, parse_timestamp

SAMPLE_KEYS = ("player_id", "timestamp", "bpm")
_KEY_SET = frozenset(SAMPLE_KEYS)


@dataclass
class HrGate:
    """Per-player state across decode calls: last accepted sample, hr_jump streak."""

    n: int
    last_t: np.ndarray = field(init=False)  # (P,) s, -inf before a first sample
    last_bpm: np.ndarray = field(init=False)  # (P,) NaN before a first sample
    streak: np.ndarray = field(init=False)  # (P,) hr_jump rejections in a row since the last accepted sample

    def __post_init__(self) -> None:
        self.last_t = np.full(self.n, -math.inf)
        self.last_bpm = np.full(self.n, math.nan)
        self.streak = np.zeros(self.n, np.int64)

    def checkpoint(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return self.last_t.copy(), self.last_bpm.copy(), self.streak.copy()

    def restore(self, cp: tuple[np.ndarray, np.ndarray, np.ndarray]) -> None:
        """Undo admissions since ``checkpoint()`` (samples that could not be recorded)."""
        self.last_t, self.last_bpm, self.streak = (a.copy() for a in cp)


@dataclass
class HrResult:
    player: np.ndarray  # (S,) int64 roster index
    t: np.ndarray  # (S,) float64 UTC seconds since the epoch
    bpm: np.ndarray  # (S,) float64
    errors: list[FrameError]
    rejected: int = 0  # bad shape, implausible_bpm, hr_jump
    duplicates: int = 0
    late: int = 0
    accepted: list[int] = field(default_factory=list)  # input positions of the accepted samples

    def __len__(self) -> int:
        return int(self.player.shape[0])

    @staticmethod
    def empty(errors: list[FrameError] | None = None, rejected: int = 0) -> HrResult:
        return HrResult(np.zeros(0, np.int64), np.zeros(0, np.float64), np.zeros(0, np.float64),
                        errors if errors is not None else [], rejected)

    @staticmethod
    def merge(results: list[HrResult]) -> HrResult:
        if len(results) == 1:
            return results[0]
        return HrResult(np.concatenate([r.player for r in results]), np.concatenate([r.t for r in results]),
                        np.concatenate([r.bpm for r in results]), [e for r in results for e in r.errors],
                        sum(r.rejected for r in results), sum(r.duplicates for r in results),
                        sum(r.late for r in results))


class HrDecoder:
    """Decodes heart-rate samples for one match; gates them per player."""

    def __init__(self, roster: Roster, params: HeartParams, recorded: bool = False) -> None:
        """``recorded``: the samples were accepted live (a recording): the hr_jump rule is not
        applied again, since a sample let in by its reset would be refused by a fresh gate."""
        self.roster = roster
        self.p = params
        self.recorded = recorded
        self.gate = HrGate(roster.n)

    def decode_lines(self, lines: Iterable[bytes | str], first_line: int = 1) -> HrResult:
        """JSON Lines (one sample per line); blank lines are skipped."""
        return decode_json_lines(self.decode_objects, lines, first_line)

    def decode_message(self, data: bytes | str) -> HrResult:
        """One WebSocket message: a sample object or a JSON array of samples."""
        objs = parse_message(data)
        if isinstance(objs, FrameError):
            return HrResult.empty([objs], rejected=1)
        return self.decode_objects(objs)

    def decode_objects(self, objs: Sequence[Any], lines: Sequence[int] | None = None) -> HrResult:
        players: list[int] = []
        ts: list[float] = []
        bpms: list[float] = []
        res = HrResult.empty()
        errors = res.errors
        gate = self.gate
        for k, obj in enumerate(objs):
            line = lines[k] if lines is not None else None
            try:
                i, t, bpm = self._check(obj)
                last_t = gate.last_t[i]
                if t <= last_t:
                    pid, stamp = obj["player_id"], obj["timestamp"]
                    if t == last_t:
                        res.duplicates += 1
                        errors.append(FrameError("duplicate", f"player {pid!r} already has a sample at {stamp}",
                                                 None, line))
                    else:
                        res.late += 1
                        errors.append(FrameError("late", f"sample of player {pid!r} at {stamp} is older than "
                                                         "that player's last accepted sample", None, line))
                    continue
                if not self.recorded:
                    self._jump(i, t, bpm, obj)
            except Reject as rej:
                res.rejected += 1
                errors.append(FrameError(rej.code, rej.message, None, line))
                continue
            except Exception as exc:  # a shape no rule above foresaw: still a clear rejection
                res.rejected += 1
                errors.append(FrameError("bad_value", f"sample could not be read: {type(exc).__name__}: {exc}",
                                         None, line))
                continue
            res.accepted.append(k)
            players.append(i)
            ts.append(t)
            bpms.append(bpm)
            gate.last_t[i], gate.last_bpm[i], gate.streak[i] = t, bpm, 0
        if players:
            res.player = np.asarray(players, np.int64)
            res.t = np.asarray(ts, np.float64)
            res.bpm = np.asarray(bpms, np.float64)
        return res

    def _check(self, obj: Any) -> tuple[int, float, float]:
        """Shape, types, roster and plausibility; returns (roster index, t, bpm)."""
        if type(obj) is not dict:
            raise Reject("bad_type", f"a heart-rate sample must be a JSON object, got {type(obj).__name__}")
        for key in SAMPLE_KEYS:
            if key not in obj:
                raise Reject("missing_field", f"missing required field {key!r}")
        extra = [key for key in obj if key not in _KEY_SET]
        if extra:
            raise Reject("bad_value", f"unknown field(s) {', '.join(repr(x) for x in extra[:5])}; "
                                       f"a sample holds only {', '.join(SAMPLE_KEYS)}")
        pid = obj["player_id"]
        if type(pid) is not str:
            raise Reject("bad_type", f"player_id must be a string, got {type(pid).__name__}")
        i = self.roster.index.get(pid)
        if i is None:
            raise Reject("unknown_player", f"player {pid!r} is not in the match sheet")
        try:
            t = parse_timestamp(obj["timestamp"])
        except (OverflowError, OSError, ValueError):  # a valid date-time outside the epoch range
            raise Reject("bad_timestamp", f"timestamp {obj['timestamp']!r} is out of range") from None
        bpm = obj["bpm"]
        if type(bpm) not in (int, float):  # bool is not a number here
            raise Reject("bad_type", f"player {pid!r}: bpm must be a number, got {type(bpm).__name__}")
        if type(bpm) is float and not math.isfinite(bpm):
            raise Reject("bad_value", f"player {pid!r}: bpm {bpm!r} is not a finite number")
        if not self.p.min_bpm <= bpm <= self.p.max_bpm:
            raise Reject("implausible_bpm", f"player {pid!r}: bpm {bpm!r} is outside "
                                             f"[{self.p.min_bpm:g}, {self.p.max_bpm:g}]")
        return i, t, float(bpm)

    def _jump(self, i: int, t: float, bpm: float, obj: dict[str, Any]) -> None:
        """hr_jump: a change faster than max_jump_bpm_s per second (at least 1 s)
        from the last accepted sample; after jump_reset of them in a row the next
        sample is accepted, since the old level was the outlier (docs/wearables.md)."""
        gate = self.gate
        last = gate.last_bpm[i]
        if last != last or gate.streak[i] >= self.p.jump_reset:
            return
        dt = t - gate.last_t[i]
        limit = self.p.max_jump_bpm_s * max(dt, 1.0)
        if abs(bpm - last) > limit:
            gate.streak[i] += 1
            raise Reject("hr_jump", f"player {obj['player_id']!r}: bpm {obj['bpm']!r} at {obj['timestamp']} differs "
                                     f"from the last accepted {last:g} by more than {limit:g} "
                                     f"({self.p.max_jump_bpm_s:g} bpm/s over {dt:.3g} s)")
