"""The event stream's own health: how many events, how late, how often corrected, and whether it
has gone quiet while the ball is in play.

Pure: the caller passes the clock in (wall-clock seconds live) and the match-clock figures it
knows (seconds of play since the last event, events over the last minute of play), so the same
rules run in the service, in replay and in tests. A stream watched by people pauses during dead
balls; only seconds of play count towards a gap.
"""
from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

import numpy as np

from pacewire.engine.health import DEGRADED, OK, STALLED


@dataclass(frozen=True)
class EventHealthParams:
    gap_s: float  # degraded after this many seconds of play without an event
    stall_s: float  # stalled after this many
    max_lag_s: float  # degraded when the median lag behind (or ahead of) the tracking exceeds this, s
    window_s: float  # events per minute and lag are measured over this much time, s


@dataclass
class EventFeed:
    """Arrival bookkeeping of one match's event stream and the rules that turn it into a state."""

    params: EventHealthParams
    accepted: int = 0  # versions applied (first versions and corrections)
    rejected: int = 0
    duplicates: int = 0
    corrections: int = 0
    _lags: deque[tuple[float, float]] = field(default_factory=deque)  # (arrival, lag)

    @property
    def used(self) -> bool:
        """The match has an event stream (something arrived on it)."""
        return bool(self.accepted or self.rejected or self.duplicates)

    def on_events(self, now: float, lags: list[float]) -> None:
        """Events arrived at wall-clock ``now``, each ``lag`` s behind the tracking."""
        for lag in lags:
            self._lags.append((now, lag))
        self._expire(now)

    def _expire(self, now: float) -> None:
        while self._lags and self._lags[0][0] < now - self.params.window_s:
            self._lags.popleft()

    def lag(self, now: float | None) -> tuple[float | None, float | None]:
        """Median and p95 lag over the window, s (None offline or when nothing arrived in it)."""
        if now is None:
            return None, None
        self._expire(now)
        if not self._lags:
            return None, None
        lags = np.fromiter((v for _, v in self._lags), float)
        return float(np.median(lags)), float(np.percentile(lags, 95))

    def evaluate(self, since_last_s: float | None, lag_s: float | None) -> tuple[str, list[dict[str, str]]]:
        """State and reasons from the seconds of play since the last event (None: no event yet) and the
        median lag."""
        p = self.params
        if since_last_s is None:
            return STALLED, [{"code": "no_events", "message": "no event accepted yet"}]
        if since_last_s >= p.stall_s:
            return STALLED, [{"code": "event_stall", "message": f"no event for {since_last_s:.0f} s of play "
                                                               f"(limit {p.stall_s:g} s)"}]
        reasons = []
        if since_last_s >= p.gap_s:
            reasons.append({"code": "event_gap", "message": f"no event for {since_last_s:.0f} s of play "
                                                           f"(limit {p.gap_s:g} s)"})
        if lag_s is not None and lag_s > p.max_lag_s:
            reasons.append({"code": "event_lag", "message": f"events arrive {lag_s:.1f} s behind the tracking "
                                                           f"(limit {p.max_lag_s:g} s)"})
        elif lag_s is not None and lag_s < -p.max_lag_s:  # stamped ahead of play: a clock or time-zone fault
            reasons.append({"code": "event_ahead", "message": f"events are stamped {-lag_s:.1f} s ahead of the "
                                                             f"tracking (limit {p.max_lag_s:g} s)"})
        return (DEGRADED if reasons else OK), reasons
