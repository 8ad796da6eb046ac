"""MatchState: a match's roster, periods, players and team totals.

``step(block)`` applies frames; the figures depend only on the frames, never
on how they were split into blocks. :func:`pacewire.engine.snapshot.build_snapshot`
turns a state into the snapshot body the service publishes: ``players``,
``teams``, ``health``.
"""
from __future__ import annotations

import copy
import math
from functools import partial
from itertools import pairwise
from typing import Any

import numpy as np

from pacewire.engine import exertion as ex
from pacewire.engine.eventhealth import EventFeed
from pacewire.engine.eventlog import EventLog
from pacewire.engine.exertion import Exertion
from pacewire.engine.health import FeedHealth
from pacewire.engine.heart import HeartRate
from pacewire.engine.kinematics import Final, Track
from pacewire.engine.params import MatchParams
from pacewire.engine.period import Period
from pacewire.engine.phases import DEAD_BALL, PeriodPhases, PhaseTotals, match_phases
from pacewire.engine.topspeed import TopSpeed
from pacewire.engine.types import BALL_IN, BALL_OUT, BALL_UNKNOWN, NO_TEAM, Block, Roster
from pacewire.engine.windows import SecondBins

# Football clock: minute at which each period starts (Laws of the Game).
CLOCK_START_MIN = {"first_half": 0, "second_half": 45, "first_half_extratime": 90,
                   "second_half_extratime": 105, "shootout": 120}
# Ball contexts of a team, in the snapshot's order (see MatchState._context).
CONTEXTS = ("in_possession", "out_of_possession", "out_of_play")
_DIST_HSR = slice(ex.DIST, ex.HSR + 1)  # distance and HSR rows of the figure sums
# In the per-block path, reductions and gathers call the ufunc or method directly: the
# ndarray.all()/max() and np.take()/np.searchsorted() wrappers cost about a microsecond of Python each.
_all = partial(np.logical_and.reduce, axis=None)
assert ex.HSR == ex.DIST + 1


def _widen(a: np.ndarray, k: int, fill: Any, axis: int = 0) -> np.ndarray:
    shape = list(a.shape)
    shape[axis] = k
    return np.concatenate([a, np.full(shape, fill, a.dtype)], axis=axis)


class MatchState:
    """All figures of one match, from its frames."""

    _snapshot_cache: dict[Any, Any]  # pacewire.engine.snapshot's, set by its first snapshot of this state

    def __init__(self, roster: Roster, params: MatchParams) -> None:
        if not params.fits(roster.n, roster.fps):
            raise ValueError(f"parameters built for another roster than {roster.match_id!r}")
        self.roster = roster
        self.params = params
        fps = roster.fps
        self.fps = fps
        self.n = roster.n
        self.team = roster.team_of()
        self.gk = roster.goalkeepers()
        self.peak_s = [m * 60 for m in params.windows.peak_min]
        self.timeout_slots = int(round(params.on_pitch_timeout_s * fps))
        self.periods: list[Period] = []
        self.has_ball = False
        self.frames = 0
        self.last_frame_id: int | None = None
        self.last_t: float | None = None
        self.health = FeedHealth(params.health, fps_nominal=fps)
        # on-pitch state set by match events (substitutions, red cards) over what frames suggest
        self.forced_off = np.zeros(self.n, bool)
        self.forced_on = np.zeros(self.n, bool)
        # heart rate (docs/wearables.md): made with the first accepted sample
        self.heart: HeartRate | None = None
        self.hr_rejected = self.hr_duplicates = self.hr_late = 0
        # the CDF event stream: marks by event, its health, and the phases cached per period
        self.event_log = EventLog()
        self.event_feed = EventFeed(params.event_health)
        self._phases: dict[int, tuple[tuple[int, int, int], PeriodPhases]] = {}

    # -- input ---------------------------------------------------------------------
    @property
    def current(self) -> Period | None:
        return self.periods[-1] if self.periods else None

    def ingest(self, result: Any, now: float | None = None) -> None:
        """Count a decoder result's drops and apply its block.

        ``now``: arrival wall-clock time (live); None uses the frames' own
        time (offline), which measures no arrival lag.
        """
        h = self.health
        h.rejected += result.rejected
        h.duplicates += result.duplicates
        h.late += result.late
        h.resent += result.resent
        b = result.block
        if len(b):
            h.on_frames(float(b.t[-1]) if now is None else now, b.t, len(b), measure_lag=now is not None,
                        periods=b.period)
            self.step(b)

    def step(self, block: Block) -> None:
        """Apply a block of accepted frames (from :class:`pacewire.wire.cdf.FrameDecoder`)."""
        n = len(block)
        if n == 0:
            return
        self.frames += n
        self.last_frame_id = int(block.frame_id[-1])
        self.last_t = float(block.t[-1])
        if not self.has_ball and (block.ball != BALL_UNKNOWN).any():
            self.has_ball = True
        period = block.period
        if _all(period == period[0]):
            self._step_period(block)
        else:
            bounds = (np.flatnonzero(period[1:] != period[:-1]) + 1).tolist()
            for a, b in pairwise([0, *bounds, n]):
                self._step_period(block.take(slice(a, b)))
        if self.heart is not None:
            self._settle_heart()

    def ingest_heart(self, result: Any) -> None:
        """Count a heart-rate decoder result's drops and add its accepted samples
        (:class:`pacewire.wire.heart.HrResult`)."""
        self.hr_rejected += result.rejected
        self.hr_duplicates += result.duplicates
        self.hr_late += result.late
        if len(result):
            self.add_heart(result.player, result.t, result.bpm)

    def add_heart(self, player: np.ndarray, t: np.ndarray, bpm: np.ndarray) -> None:
        """Accepted heart-rate samples (roster index, UTC s, bpm); they count in a
        period once tracking has reached their time."""
        if self.heart is None:
            self.heart = HeartRate(self.params.heart, self.params.heart_profiles)
        self.heart.add(player, t, bpm)
        self._settle_heart()

    def ingest_events(self, result: Any, now: float | None = None) -> None:
        """Count an event decoder result's refusals and apply its accepted events
        (:class:`pacewire.wire.events.EventResult`); ``now``: arrival wall-clock time (live), which
        measures how far the events run behind the tracking."""
        feed = self.event_feed
        feed.rejected += result.rejected
        feed.duplicates += result.duplicates
        self.add_events([(e.key, e.period, e.t, e.marks) for e in result.events])
        feed.corrections += sum(e.correction for e in result.events)
        if now is not None and result.events:
            ref = self.last_t if self.last_t is not None else now
            feed.on_events(now, [ref - e.t for e in result.events])

    def add_events(self, events: list[tuple[int, int, float, Any]]) -> None:
        """Accepted events: (key, period index, time UTC s, marks); a key seen before is replaced."""
        for key, period, t, marks in events:
            self.event_log.put(key, period, t, marks)
        self.event_feed.accepted += len(events)

    def phases(self) -> PhaseTotals:
        """Figures by game phase (:mod:`pacewire.engine.phases`)."""
        return match_phases(self.periods, self.event_log, self.params.phases, self.fps, self.n, self.gk, self._phases)

    def event_stream(self, now: float | None) -> dict[str, Any] | None:
        """The event stream's health figures (None when the match has none): state, reasons, events,
        events per minute of play over the window, lag, seconds of play since the last event, counts."""
        feed = self.event_feed
        if not feed.used:
            return None
        times = self.event_log.times()
        since = self._play_since(self._latest_event(times)) if len(times) else None
        lag, lag95 = feed.lag(now)
        state, reasons = feed.evaluate(since, lag)
        window = feed.params.window_s
        recent = int(((times > self.last_t - window) & (times <= self.last_t)).sum()) if self.last_t else 0
        return {"state": state, "reasons": reasons, "events": len(self.event_log),
                "events_per_min": round(recent * 60.0 / window, 1) if self.last_t else None,
                "lag_s": None if lag is None else round(lag, 2),
                "lag_p95_s": None if lag95 is None else round(lag95, 2),
                "since_last_s": None if since is None else round(since, 1), "corrections": feed.corrections,
                "duplicates": feed.duplicates, "rejected": feed.rejected}

    def _latest_event(self, times: np.ndarray) -> float:
        """Time (UTC s) of the latest event not stamped ahead of play by more than the lag limit (such an
        event does not show the stream alive now); the start of play when every event is."""
        if self.last_t is None or not self.periods:
            return float(times.max())
        shown = times[times <= self.last_t + self.event_feed.params.max_lag_s]
        return float(shown.max()) if len(shown) else self.periods[0].t0

    def _play_since(self, t: float) -> float:
        """Seconds of play (the ball not known to be dead) from ``t`` (UTC s) to the latest frame: the
        complete seconds after ``t``'s by their labels, the time beyond them as play."""
        self.phases()  # the labels up to date
        total = 0.0
        for per in self.periods:
            end = (per.last_slot + 1) / self.fps  # s after the period's first frame
            if per.t0 + end <= t:
                continue
            codes = self._phases[per.index][1].labels.codes[:, 0]
            first = max(math.floor(t - per.t0) + 1, 0)
            total += float((codes[first:] != DEAD_BALL).sum()) + max(end - max(len(codes), first), 0.0)
        return total

    def _settle_heart(self) -> None:
        if self.heart is None or self.last_t is None:
            return
        fps = self.fps
        spans = [(p.index, p.t0, p.t0 + (p.last_slot + 1) / fps) for p in self.periods]
        self.heart.settle(spans, self.last_t)

    def _step_period(self, b: Block) -> None:
        idx = int(b.period[0])
        cur = self.current
        if cur is None or cur.index != idx:
            if cur is not None and not cur.ended:
                self._end(cur)
            cur = self._start(idx, float(b.t[0]))
        slots = b.slot
        first, last = int(slots[0]), int(slots[-1])
        if last >= cur.ball_poss.shape[0]:
            cap = max(2 * cur.ball_poss.shape[0], last + 1)
            more = np.full((cap - cur.ball_poss.shape[0], 2), (BALL_UNKNOWN, NO_TEAM), np.int8)
            cur.ball_poss = np.concatenate([cur.ball_poss, more])
        at = slice(first, last + 1) if last - first + 1 == len(slots) else slots
        cur.ball_poss[at, 0] = b.ball
        cur.ball_poss[at, 1] = b.poss
        cur.last_slot = last
        xy = b.xy
        if not cur.in_order:
            xy = xy.take(cur.order, axis=1)  # players seen so far, then the others (take: 4x fancy indexing)
            m = len(cur.cols)
            if m < self.n and not _all(np.isnan(xy[:, m:, 0])):
                self._grow(cur, cur.unseen[~np.isnan(xy[:, m:, 0]).all(axis=0)])
                xy = b.xy.take(cur.order, axis=1)
            xy = xy[:, : len(cur.cols)]
        for fin in cur.track.feed(slots, xy):
            self._apply(cur, fin)

    def _start(self, idx: int, t0: float) -> Period:
        zones = self.params.zones
        per = Period(
            index=idx, t0=t0, n=self.n, track=Track(self.params.kinematics, 0),
            exertion=Exertion(self.params.exertion, 0, zones.edges, zones.scale[:0]),
            bins=SecondBins(self.fps, self.n, self.peak_s),
            ball_poss=np.full((1024, 2), (BALL_UNKNOWN, NO_TEAM), np.int8),
            cols=np.zeros(0, np.int64), unseen=np.arange(self.n), order=np.arange(self.n), team=self.team[:0],
            c_sums=np.zeros((ex.N_FIG, 0), np.int64), c_zones=np.zeros((0, zones.edges.shape[0] + 1), np.int64),
            c_poss=np.zeros((0, 4, 2), np.int64), poss_pend=np.zeros((2, 0), np.int64),
            top=TopSpeed(self.params.exertion.top_hold_n, 0), c_artefacts=np.zeros(0, np.int64),
            c_first_seen=np.zeros(0, np.int64), c_last_seen=np.zeros(0, np.int64), c_off_slots=np.zeros(0, np.int64),
            c_last_valid=np.zeros(0, np.int64), c_last_speed=np.zeros(0),
        )
        self.periods.append(per)
        return per

    def _grow(self, per: Period, new: np.ndarray) -> None:
        """Columns for players seen for the first time in the period (``new``: roster indices)."""
        k = len(new)
        per.cols = np.concatenate([per.cols, new])
        per.unseen = per.unseen[~np.isin(per.unseen, new)]
        per.team = self.team[per.cols]
        per.track.grow(k)
        per.exertion.grow(self.params.zones.scale[new])
        per.bins.grow(new)
        per.c_sums = _widen(per.c_sums, k, 0, axis=1)
        per.c_zones = _widen(per.c_zones, k, 0)
        per.c_poss = _widen(per.c_poss, k, 0)
        per.poss_pend = _widen(per.poss_pend, k, 0, axis=1)
        per.top.grow(k)
        per.c_first_seen = _widen(per.c_first_seen, k, -1)
        per.c_last_seen = _widen(per.c_last_seen, k, -1)
        per.c_off_slots = _widen(per.c_off_slots, k, 0)
        per.c_last_valid = _widen(per.c_last_valid, k, -1)
        per.c_last_speed = _widen(per.c_last_speed, k, 0.0)
        per.c_artefacts = _widen(per.c_artefacts, k, 0)
        per.full_upto = -1
        per.order = np.concatenate([per.cols, per.unseen])
        per.zone_bin = np.arange(len(per.cols)) * per.c_zones.shape[1]
        per.in_order = len(per.cols) == self.n and bool((per.cols == np.arange(self.n)).all())

    def _end(self, per: Period) -> None:
        for fin in per.track.close():
            self._apply(per, fin)
        per.bins.finish()
        per.ended = True

    def end_period(self) -> None:
        """The current period is over (whistle, or the feed moved on)."""
        cur = self.current
        if cur is not None and not cur.ended:
            self._end(cur)

    def reopen_period(self, name: str) -> None:
        """The current period ``name`` goes on after all (an ended match reopened by a period start):
        its later frames count in it again, as after a flush."""
        cur = self.current
        if cur is not None and cur.ended and cur.name == name:
            cur.ended = False

    def finish(self) -> None:
        """End of the recording: finalise everything still pending."""
        self.end_period()

    def flush(self) -> None:
        """Finalise the current tail now (one-sided fits); later frames of the
        same period start a new stretch. Prefer :meth:`provisional` live: it
        leaves the figures of later frames unchanged."""
        cur = self.current
        if cur is not None and not cur.ended:
            for fin in cur.track.close():
                self._apply(cur, fin)

    def provisional(self) -> MatchState:
        """A copy with the tail finalised (one-sided fits), for showing a stalled
        feed's figures in full; this state itself is untouched, so frames that
        come later give exactly the figures an offline pass gives. The copy
        shares this state's feed-health bookkeeping."""
        twin = copy.deepcopy(self, {id(self.health): self.health})  # the feed health is shared, not copied
        twin.freeze()
        return twin

    def freeze(self) -> None:
        """Finalise the tail and count the second in progress as complete, as a period end
        does, without ending the period: for a view no frame will follow (a stalled feed's
        copy, a cut at a match time), so its windows equal an offline pass over the same frames."""
        self.flush()
        cur = self.current
        if cur is not None and not cur.ended:
            cur.bins.finish()

    # -- accumulation ----------------------------------------------------------------
    def _apply(self, per: Period, fin: Final) -> None:
        n = len(fin)
        end = fin.slot0 + n
        full = fin.full
        fig, zone = per.exertion.step(fin.valid, fin.seen, fin.speed, fin.accel, full, fin.artefact)
        if fin.artefact is not None:
            per.c_artefacts += np.add.reduce(fin.artefact, axis=0)
        total = per.bins.add(fin.slot0, fig)
        per.c_sums += total
        m = len(per.cols)
        nz = per.c_zones.shape[1]
        zone += per.zone_bin  # one bin per (player, band)
        per.c_zones += np.bincount(zone.ravel(), weights=fig[ex.DIST].ravel(), minlength=nz * m
                                   ).reshape(m, nz).astype(np.int64)
        per.top.add(fin.slot0, fin.speed)
        # latest credited sample
        if full:
            per.c_last_valid.fill(end - 1)
            per.c_last_speed[:] = fin.speed[-1]
        else:
            cols = np.arange(m)
            last_row = n - 1 - np.argmax(fin.valid[::-1], axis=0)
            got = fin.valid[last_row, cols]
            per.c_last_valid = np.where(got, fin.slot0 + last_row, per.c_last_valid)
            per.c_last_speed = np.where(got, fin.speed[last_row, cols], per.c_last_speed)
        if full and per.full_upto == fin.slot0:
            per.c_last_seen.fill(end - 1)  # everyone seen up to here and on: no gap, no first sighting
        else:
            self._onpitch(per, fin.seen, fin.slot0)
        per.full_upto = end if full else -1
        if self.has_ball:
            self._possession(per, fin, fig, total)

    def _onpitch(self, per: Period, seen: np.ndarray, slot0: int) -> None:
        """On the pitch from first to last seen sample; gaps longer than the
        on-pitch timeout count as off the pitch (substituted, sent off)."""
        n = seen.shape[0]
        anyseen = seen.any(axis=0)
        if not anyseen.any():
            return
        first_row = np.argmax(seen, axis=0)
        last_row = n - 1 - np.argmax(seen[::-1], axis=0)
        # gap before this chunk's first seen sample, from the last one seen before it
        lead = np.where(anyseen & (per.c_last_seen >= 0), slot0 + first_row - per.c_last_seen - 1, 0)
        off = np.where(lead > self.timeout_slots, lead, 0)
        if not seen[:, anyseen].all():
            # gaps inside the chunk (rare: dropouts): previous seen row of each seen row
            rows = np.arange(n)[:, None]
            prev = np.maximum.accumulate(np.where(seen, rows, -1), axis=0)
            prev = np.vstack([np.full((1, seen.shape[1]), -1), prev[:-1]])
            gap = np.where(seen & (prev >= 0), rows - prev - 1, 0)
            off = off + np.where(gap > self.timeout_slots, gap, 0).sum(axis=0)
        per.c_off_slots += off
        per.c_first_seen = np.where((per.c_first_seen < 0) & anyseen, slot0 + first_row, per.c_first_seen)
        per.c_last_seen = np.where(anyseen, slot0 + last_row, per.c_last_seen)

    @staticmethod
    def _context(ball: int, poss: int, team: int) -> int:
        """Ball context of a team: 0 in possession, 1 out of possession, 2 out of play, 3 unknown."""
        if ball == BALL_OUT:
            return 2
        if ball != BALL_IN or poss == NO_TEAM:
            return 3
        return 0 if poss == team else 1

    @staticmethod
    def _settle_possession(per: Period) -> None:
        if per.poss_ctx is not None:
            per.add_pending(per.c_poss)
            per.poss_ctx = per.poss_code = None
            per.poss_pend[:] = 0

    def _possession(self, per: Period, fin: Final, fig: np.ndarray, total: np.ndarray) -> None:
        """Distance and HSR split by ball context: in possession, out of possession, out of play.
        ``total``: the block's sums (N_FIG, C)."""
        bp = per.ball_poss[fin.slot0: fin.slot0 + len(fin)]
        code = bp.view(np.int16)  # ball state and possession of a slot as one number
        c0 = code[0, 0]
        if _all(code == c0):
            # one context per team over the whole block (the usual case): the block's sums wait
            # with those of earlier blocks until the context changes
            if c0 == per.poss_code:
                per.poss_pend += total[_DIST_HSR]
                return
            self._settle_possession(per)
            b0, p0 = int(bp[0, 0]), int(bp[0, 1])
            per.poss_ctx = (self._context(b0, p0, 0), self._context(b0, p0, 1))
            per.poss_code = int(c0)
            per.poss_pend[:] = total[_DIST_HSR]
            return
        self._settle_possession(per)
        ball = bp[:, 0:1]
        poss = bp[:, 1:2]
        own = poss == per.team[None, :]
        # context 0 in, 1 out of possession, 2 out of play, 3 unknown
        in_play = np.where(own, 0, np.where(poss == NO_TEAM, 3, 1))
        ctx = np.where(ball == BALL_OUT, 2, np.where(ball != BALL_IN, 3, in_play))
        m = ctx.shape[1]
        flat = (np.arange(m) * 4 + ctx).ravel()
        size = 4 * m
        d = np.bincount(flat, weights=fig[ex.DIST].ravel(), minlength=size).reshape(m, 4)
        h = np.bincount(flat, weights=fig[ex.HSR].ravel(), minlength=size).reshape(m, 4)
        per.c_poss[:, :3, 0] += d[:, :3].astype(np.int64)
        per.c_poss[:, :3, 1] += h[:, :3].astype(np.int64)

    # -- output ------------------------------------------------------------------------
    def match_time_s(self) -> float:
        cur = self.current
        if cur is None:
            return 0.0
        return CLOCK_START_MIN[cur.name] * 60.0 + max(cur.last_slot, 0) / self.fps

    def period_name(self) -> str | None:
        cur = self.current
        return cur.name if cur is not None else None

    @property
    def jumps(self) -> int:
        return sum(p.track.jumps for p in self.periods)

    def on_pitch(self) -> np.ndarray:
        cur = self.current
        if cur is None or cur.ended:
            return np.zeros(self.n, bool)
        recent = (cur.last_seen >= 0) & (cur.last_slot - cur.last_seen <= self.timeout_slots)
        return (recent | self.forced_on) & ~self.forced_off

    def substitute(self, off: str | None, on: str | None) -> None:
        """A substitution (or a red card: ``on`` None) from the match events."""
        if off is not None:
            i = self.roster.index[off]
            self.forced_off[i], self.forced_on[i] = True, False
        if on is not None:
            i = self.roster.index[on]
            self.forced_on[i], self.forced_off[i] = True, False

    def artefacts(self) -> np.ndarray:
        """Seen samples removed as tracking artefacts, whole match, per player."""
        return sum((p.artefacts for p in self.periods), np.zeros(self.n, np.int64))

    def coverage(self) -> np.ndarray:
        """Credited samples ÷ samples on the pitch, whole match, per player."""
        valid = sum((p.sums[:, ex.VALID] for p in self.periods), np.zeros(self.n, np.int64))
        onp = sum((p.onpitch_slots() for p in self.periods), np.zeros(self.n, np.int64))
        return np.where(onp > 0, np.minimum(valid / np.maximum(onp, 1), 1.0), 0.0)

    def dropout(self) -> float:
        """Share of expected samples of players on the pitch missing over the rate window."""
        cur = self.current
        if cur is None or cur.bins.complete == 0:
            return 0.0
        on = self.on_pitch()
        if not on.any():
            return 0.0
        w = max(int(self.params.health.rate_window_s), 1)
        stop = cur.bins.complete
        start = max(stop - w, 0)
        seen = cur.bins.span(start, stop)[:, ex.SEEN]
        span = np.minimum(stop - np.maximum(start, cur.first_seen // self.fps), stop - start)
        expected = (np.clip(span, 0, None) * self.fps)[on].sum()
        if expected <= 0:
            return 0.0
        return float(max(0.0, 1.0 - seen[on].sum() / expected))
