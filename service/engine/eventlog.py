"""The event stream as the engine keeps it: ball-context marks per event, the latest version of
each event winning.

The wire layer (:mod:`pacewire.wire.events`) turns each CDF event into a few marks ``(time,
team, effect)``; the engine knows nothing of event types. An event is known by its key (the
order in which its id was first seen); a correction replaces every mark of its key. Marks sort by
time, then key, then their order within the event: the order depends on the final events and, for
events stamped at the same instant, on the order their ids first arrived in (the provider's
sequence, which the recorded event.jsonl keeps), never on how the stream was split or corrected.
"""
from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field

import numpy as np

from pacewire.engine.types import PERIODS

# Effects of a mark.
ACTIVITY = 0  # the event stream is alive at this time (every event)
ON_BALL = 1  # the team has the ball
RESTART = 2  # play restarts with the team on the ball (the ball is back in play)
DEAD = 3  # the ball is out of play
LOOSE = 4  # neither team is known to have the ball (a clearance, a block, a parried save)
SHOT = 5  # the team shot (possession sequences by outcome)

Mark = tuple[float, int, int]  # (UTC s, team index 0/1 or -1, effect)


@dataclass
class PeriodMarks:
    """The marks of one period in order: time (UTC s), team, effect."""

    t: np.ndarray
    team: np.ndarray
    effect: np.ndarray


@dataclass
class EventLog:
    """Every accepted event's marks by key; appended rows, the rows of replaced versions masked."""

    _t: list[float] = field(default_factory=list)
    _key: list[int] = field(default_factory=list)
    _seq: list[int] = field(default_factory=list)  # version number of the row's event
    _team: list[int] = field(default_factory=list)
    _effect: list[int] = field(default_factory=list)
    _period: list[int] = field(default_factory=list)
    current: dict[int, tuple[int, int, float]] = field(default_factory=dict)  # key -> (version, period, time)
    versions: list[int] = field(default_factory=lambda: [0] * len(PERIODS))  # per period: bumps on a change
    _sorted: dict[int, tuple[int, PeriodMarks]] = field(default_factory=dict)
    _times: tuple[int, np.ndarray] | None = None  # (_n when made, times) of times()
    _n: int = 0

    def __len__(self) -> int:
        return len(self.current)

    def put(self, key: int, period: int, t: float, marks: Iterable[Mark]) -> None:
        """Event ``key`` (its latest version) at ``t`` in ``period`` with these marks."""
        self._n += 1
        old = self.current.get(key)
        if old is not None:
            self.versions[old[1]] += 1
        self.current[key] = (self._n, period, t)
        self.versions[period] += 1
        for mt, team, effect in marks:
            self._t.append(mt)
            self._key.append(key)
            self._seq.append(self._n)
            self._team.append(team)
            self._effect.append(effect)
            self._period.append(period)

    def times(self) -> np.ndarray:
        """Times (UTC s) of the current version of every event (cached until an event comes)."""
        if self._times is None or self._times[0] != self._n:
            self._times = (self._n, np.fromiter((v[2] for v in self.current.values()), float, len(self.current)))
        return self._times[1]

    def period(self, index: int) -> PeriodMarks:
        """The marks of a period in order (time, key, order within the event); cached per version."""
        hit = self._sorted.get(index)
        if hit is not None and hit[0] == self.versions[index]:
            return hit[1]
        keys = np.asarray(self._key, np.int64)
        latest = np.zeros(max(self.current, default=-1) + 1, np.int64)
        latest[list(self.current)] = [v[0] for v in self.current.values()]
        t_all = np.asarray(self._t, float)
        live = np.flatnonzero((np.asarray(self._period, np.int8) == index)
                              & (np.asarray(self._seq, np.int64) == latest[keys]))
        order = live[np.lexsort((live, keys[live], t_all[live]))]  # an event's rows were appended in its order
        out = PeriodMarks(t_all[order], np.asarray(self._team, np.int8)[order],
                          np.asarray(self._effect, np.int8)[order])
        self._sorted[index] = (self.versions[index], out)
        return out
