"""Feed-health rules: frame rate, dropout, arrival lag, staleness.

Pure: the caller passes the clock in (wall-clock seconds live, frame time
offline), so the same rules run in the service, in replay and in tests.
"""
from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

import numpy as np

OK, DEGRADED, STALLED = "ok", "degraded", "stalled"


@dataclass(frozen=True)
class HealthParams:
    rate_window_s: float
    min_rate_share: float
    max_dropout: float
    max_lag_s: float
    stall_s: float


@dataclass
class FeedHealth:
    """Arrival bookkeeping for one match and the rules that turn it into a state."""

    params: HealthParams
    fps_nominal: int
    late: int = 0
    duplicates: int = 0
    rejected: int = 0
    frames: int = 0
    first_arrival: float | None = None
    last_arrival: float | None = None
    # arrival time of each frame within the rate window, s
    _arrivals: np.ndarray = field(default_factory=lambda: np.zeros(0))
    _lags: deque[tuple[float, float]] = field(default_factory=deque)
    # smallest (arrival - timestamp) over the offset window: the clock offset
    # between provider and us, which a replay or a skewed clock makes large
    _offsets: deque[tuple[float, float]] = field(default_factory=deque)
    offset_window_s: float = 60.0
    # each frame's lag above the best lag of the minute before it
    _excess: deque[tuple[float, float]] = field(default_factory=deque)

    def on_frames(self, now: float, frame_times: np.ndarray, n: int, measure_lag: bool = True) -> None:
        """``n`` frames with timestamps ``frame_times`` (s) arrived at ``now``.

        Offline (``measure_lag=False``) each frame "arrives" at its own timestamp.
        """
        if n <= 0:
            return
        self.frames += n
        arrivals = np.full(n, now) if measure_lag else np.asarray(frame_times, float)
        if self.first_arrival is None:
            self.first_arrival = float(arrivals[0])
        self.last_arrival = now
        keep = self._arrivals[self._arrivals >= now - self.params.rate_window_s]
        self._arrivals = np.concatenate([keep, arrivals[arrivals >= now - self.params.rate_window_s]])
        if measure_lag and len(frame_times):
            lag = float(now - frame_times[-1])
            self._lags.append((now, lag))
            while self._offsets and self._offsets[-1][1] >= lag:
                self._offsets.pop()  # monotonic deque: the front is the window minimum
            self._offsets.append((now, lag))
            self._excess.append((now, lag - self._offsets[0][1]))
        self._expire(now)

    def _expire(self, now: float) -> None:
        horizon = now - self.params.rate_window_s
        while self._lags and self._lags[0][0] < horizon:
            self._lags.popleft()
        while self._excess and self._excess[0][0] < horizon:
            self._excess.popleft()
        while self._offsets and self._offsets[0][0] < now - self.offset_window_s:
            self._offsets.popleft()

    def fps_observed(self, now: float) -> float:
        """Frames per second that arrived over the rate window ending at ``now``."""
        if self.first_arrival is None:
            return 0.0
        span = min(self.params.rate_window_s, max(now - self.first_arrival, 1.0 / self.fps_nominal))
        return int((self._arrivals > now - span).sum()) / span

    def lag(self, now: float) -> tuple[float | None, float | None]:
        """Median and p95 arrival lag over the rate window, s (None when not measured)."""
        self._expire(now)
        if not self._lags:
            return None, None
        lags = np.fromiter((v for _, v in self._lags), float)
        return float(np.median(lags)), float(np.percentile(lags, 95))

    def excess_lag(self, now: float) -> float | None:
        """p95 over the rate window of each frame's lag above the smallest lag of
        the minute before it (the clock offset), s. A constant offset (skewed
        clock) or a shrinking one (a fast replay) gives zero; a feed falling
        behind gives its delay."""
        self._expire(now)
        if not self._excess:
            return None
        return float(np.percentile(np.fromiter((v for _, v in self._excess), float), 95))

    def evaluate(self, now: float, dropout: float, extra_reasons: list[dict[str, str]] | None = None
                 ) -> tuple[str, list[dict[str, str]]]:
        """State and reasons (``{"code", "message"}``) at ``now``.

        Lag degrades the feed only as delay above the provider's clock offset:
        a replay or a skewed provider clock is reported in ``lag_s`` but does
        not make a steady feed look late.
        """
        p = self.params
        reasons: list[dict[str, str]] = []
        if self.last_arrival is None or self.first_arrival is None:
            return STALLED, [{"code": "no_frames", "message": "no frames received yet"}]
        idle = now - self.last_arrival
        if idle > p.stall_s:
            return STALLED, [{"code": "no_frames", "message": f"no frame for {idle:.1f} s (limit {p.stall_s:g} s)"}]
        warmed = now - self.first_arrival >= p.rate_window_s
        fps = self.fps_observed(now)
        if warmed and fps < p.min_rate_share * self.fps_nominal:
            reasons.append({"code": "low_rate", "message": f"frame rate {fps:.1f}/s below {p.min_rate_share:.0%} "
                                                          f"of nominal {self.fps_nominal}/s"})
        if dropout > p.max_dropout:
            reasons.append({"code": "dropout", "message": f"dropout {dropout:.0%} above {p.max_dropout:.0%}"})
        excess = self.excess_lag(now)
        if excess is not None and excess > p.max_lag_s:
            reasons.append({"code": "late_delivery",
                            "message": f"frames arrive {excess:.2f} s later than usual (limit {p.max_lag_s:g} s)"})
        reasons.extend(extra_reasons or [])
        return (DEGRADED if reasons else OK), reasons
