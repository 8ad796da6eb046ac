"""Feed-health rules: frame rate, dropout, arrival lag, staleness.

Pure: the caller passes the clock in (wall-clock seconds live, frame time
offline), so the same rules run in the service, in replay and in tests.

Two clocks meet here: the wall clock frames arrive on and the frames' own
timestamps. While frame time runs much faster than the wall clock (a replay,
a feed catching up) the rate is counted on the frames' clock, and the arrival
lag is not reported whenever the timestamps are not on the wall clock (a fast
feed, or an offset beyond ``max_clock_offset_s``): ``lag_note`` says why.
"""
from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

import numpy as np

OK, DEGRADED, STALLED, FINISHED = "ok", "degraded", "stalled", "finished"


@dataclass(frozen=True)
class HealthParams:
    rate_window_s: float
    min_rate_share: float
    max_dropout: float
    max_lag_s: float
    stall_s: float
    fast_feed_ratio: float = 1.5  # frame time per wall second above which the rate is counted on the frames' clock
    max_clock_offset_s: float = 60.0  # a larger offset between timestamps and wall clock: lag is not reported


@dataclass
class FeedHealth:
    """Arrival bookkeeping for one match and the rules that turn it into a state."""

    params: HealthParams
    fps_nominal: int
    late: int = 0
    duplicates: int = 0
    rejected: int = 0
    resent: int = 0  # frames sent again that the service already held
    after_end: int = 0  # frames refused because the match had ended
    finished: bool = False  # the match has ended: the feed is over, not failing
    frames: int = 0
    first_arrival: float | None = None
    last_arrival: float | None = None
    # arrival time of each frame within the rate window, s; its timestamp and period beside it
    _arrivals: np.ndarray = field(default_factory=lambda: np.zeros(0))
    _stamps: np.ndarray = field(default_factory=lambda: np.zeros(0))
    _periods: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int8))
    _lags: deque[tuple[float, float]] = field(default_factory=deque)
    # smallest (arrival - timestamp) over the offset window: the clock offset
    # between provider and us, which a replay or a skewed clock makes large
    _offsets: deque[tuple[float, float]] = field(default_factory=deque)
    offset_window_s: float = 60.0
    # each frame's lag above the best lag of the minute before it
    _excess: deque[tuple[float, float]] = field(default_factory=deque)

    def on_frames(self, now: float, frame_times: np.ndarray, n: int, measure_lag: bool = True,
                  periods: np.ndarray | None = None) -> None:
        """``n`` frames with timestamps ``frame_times`` (s) of ``periods`` (indices) arrived at ``now``.

        Offline (``measure_lag=False``) each frame "arrives" at its own timestamp.
        """
        if n <= 0:
            return
        self.frames += n
        stamps = np.asarray(frame_times, float)
        arrivals = np.full(n, now) if measure_lag else stamps
        pers = np.zeros(n, np.int8) if periods is None else np.asarray(periods, np.int8)
        if self.first_arrival is None:
            self.first_arrival = float(arrivals[0])
        self.last_arrival = now
        horizon = now - self.params.rate_window_s
        keep, new = self._arrivals >= horizon, arrivals >= horizon
        self._arrivals = np.concatenate([self._arrivals[keep], arrivals[new]])
        self._stamps = np.concatenate([self._stamps[keep], stamps[new]])
        self._periods = np.concatenate([self._periods[keep], pers[new]])
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

    def _window_of_period(self, now: float) -> tuple[np.ndarray, np.ndarray]:
        """Arrivals and timestamps of the frames in the rate window that belong to the latest period
        among them (a fast replay skips the break, which must not count as frame time)."""
        inside = self._arrivals >= now - self.params.rate_window_s
        if not inside.any():
            return self._arrivals[:0], self._stamps[:0]
        inside &= self._periods == self._periods[inside][-1]
        return self._arrivals[inside], self._stamps[inside]

    def speed(self, now: float) -> float | None:
        """Frame time covered per second of wall time over the rate window: 1 for a live feed,
        about 20 for a replay at 20x; None without frames in the window."""
        arrivals, stamps = self._window_of_period(now)
        if not len(arrivals):
            return None
        tick = 1.0 / self.fps_nominal  # each frame covers one tick of frame time, each arrival one of wall time
        return (float(stamps.max() - stamps.min()) + tick) / (max(now - float(arrivals.min()), 0.0) + tick)

    def fast(self, now: float) -> bool:
        """Frame time runs faster than ``fast_feed_ratio`` times the wall clock (a replay, a feed catching up)."""
        v = self.speed(now)
        return v is not None and v > self.params.fast_feed_ratio

    def fps_observed(self, now: float) -> float:
        """Frames per second over the rate window ending at ``now``: per second of wall time, or,
        while the feed runs fast, per second of the frames' own time (frames missing from the
        feed then still lower it; the replay's speed does not raise it)."""
        if self.first_arrival is None:
            return 0.0
        if self.fast(now):
            _, stamps = self._window_of_period(now)
            return len(stamps) / (float(stamps.max() - stamps.min()) + 1.0 / self.fps_nominal)
        span = min(self.params.rate_window_s, max(now - self.first_arrival, 1.0 / self.fps_nominal))
        return int((self._arrivals > now - span).sum()) / span

    def clock_offset(self) -> float | None:
        """Smallest arrival lag over the offset window, s: how far the provider's timestamps sit from
        the wall clock (a recording replayed today: months)."""
        return self._offsets[0][1] if self._offsets else None

    def lag_note(self, now: float) -> str | None:
        """Why the arrival lag is not reported now (the timestamps are not wall-clock time), or None."""
        if self.fast(now):
            return (f"not measured: frame time runs {self.speed(now) or 0:.1f}x faster than the wall clock "
                    "(a replay, or a feed catching up), so timestamps are not wall-clock time")
        offset = self.clock_offset()
        if offset is not None and abs(offset) > self.params.max_clock_offset_s:
            return (f"not measured: the frames' timestamps are {abs(offset):,.0f} s "
                    f"{'behind' if offset > 0 else 'ahead of'} the wall clock (a recording replayed, or a "
                    f"provider clock not set to UTC; limit {self.params.max_clock_offset_s:g} s)")
        return None

    def lag(self, now: float) -> tuple[float | None, float | None]:
        """Median and p95 arrival lag over the rate window, s (None when not measured, or when the
        timestamps are not wall-clock time: :meth:`lag_note`)."""
        self._expire(now)
        if not self._lags or self.lag_note(now) is not None:
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
        if self.finished:  # after full time no frame is due: the feed is over, not failing
            return FINISHED, list(extra_reasons or [])
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
