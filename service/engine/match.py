"""MatchState: a match's roster, periods, players and team totals.

``step(block)`` applies frames; the figures depend only on the frames, never
on how they were split into blocks. ``snapshot()`` returns the contract's
snapshot body (DESIGN §3): ``players``, ``teams``, ``health``.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from service.config import Settings
from service.engine import exertion as ex
from service.engine.exertion import Exertion, ExertionParams
from service.engine.health import FeedHealth, HealthParams
from service.engine.heart import HeartParams, HeartProfile, HeartRate
from service.engine.kinematics import Final, KinematicParams, Track
from service.engine.types import BALL_IN, BALL_OUT, BALL_UNKNOWN, NO_TEAM, PERIODS, Block, Roster
from service.engine.windows import SecondBins

# Football clock: minute at which each period starts (Laws of the Game).
CLOCK_START_MIN = {"first_half": 0, "second_half": 45, "first_half_extratime": 90,
                   "second_half_extratime": 105, "shootout": 120}
CONTEXTS = ("in_possession", "out_of_possession", "out_of_play")
_U = 1e-6  # micro-units to units


@dataclass
class _Period:
    """One period's running state."""

    index: int
    t0: float  # timestamp of slot 0, s
    track: Track
    exertion: Exertion
    bins: SecondBins
    sums: np.ndarray  # (P, N_FIG) int64
    zones: np.ndarray  # (P, Z) int64 µm
    poss: np.ndarray  # (P, 3, 2) int64 µm: context × (distance, hsr)
    max_speed: np.ndarray  # (P,) m/s
    first_seen: np.ndarray  # (P,) slot, -1 never
    last_seen: np.ndarray  # (P,) slot, -1 never
    off_slots: np.ndarray  # (P,) slots in gaps long enough to mean "off the pitch"
    last_valid: np.ndarray  # (P,) slot of the latest credited sample, -1 never
    last_speed: np.ndarray  # (P,) m/s at last_valid
    ball: np.ndarray  # (slots,) int8
    poss_team: np.ndarray  # (slots,) int8
    last_slot: int = -1  # latest slot received
    ended: bool = False

    @property
    def name(self) -> str:
        return PERIODS[self.index]

    def onpitch_slots(self) -> np.ndarray:
        return np.where(self.first_seen >= 0, self.last_seen - self.first_seen + 1 - self.off_slots, 0)


class MatchState:
    """All figures of one match, from its frames."""

    def __init__(self, roster: Roster, settings: Settings) -> None:
        self.roster = roster
        self.settings = settings
        s = settings
        fps = roster.fps
        self.fps = fps
        self.kin = KinematicParams.make(fps, s.kinematics.smooth_window_s, s.kinematics.smooth_order,
                                        s.kinematics.bridge_gap_s, s.kinematics.max_step_speed_ms,
                                        s.kinematics.jump_tolerance_m, s.kinematics.still_speed_ms)
        self.exp = ExertionParams(
            fps=fps, hsr_ms=s.speed.hsr_ms, sprint_ms=s.speed.sprint_ms,
            speed_min_n=int(round(s.efforts.speed_min_s * fps)), accel_min_n=int(round(s.efforts.accel_min_s * fps)),
            accel_ms2=s.efforts.accel_ms2, decel_ms2=s.efforts.decel_ms2, model=s.metabolic.model,
            kt=s.metabolic.kt, air_k=s.metabolic.air_k, flat_cost=s.metabolic.flat_cost_jkgm,
            high_power_wkg=s.metabolic.high_power_wkg,
        )
        self.n = roster.n
        self.team = roster.team_of()
        self.gk = roster.goalkeepers()
        self.zone_edges, self.zone_scale, self.zone_names = _zone_edges(roster, settings)
        self.peak_s = [m * 60 for m in s.windows.peak_min]
        self.timeout_slots = int(round(s.health.on_pitch_timeout_s * fps))
        self.periods: list[_Period] = []
        self.has_ball = False
        self.frames = 0
        self.last_frame_id: int | None = None
        self.last_t: float | None = None
        self.health = FeedHealth(
            HealthParams(s.health.rate_window_s, s.health.min_rate_share, s.health.max_dropout,
                         s.health.max_lag_s, s.health.stall_s),
            fps_nominal=fps,
        )
        # on-pitch state set by match events (substitutions, red cards) over what frames suggest
        self.forced_off = np.zeros(self.n, bool)
        self.forced_on = np.zeros(self.n, bool)
        # heart rate (docs/wearables.md): made with the first accepted sample
        self.heart_params = heart_params(settings)
        self.heart: HeartRate | None = None
        self.hr_rejected = self.hr_duplicates = self.hr_late = 0

    # -- input ---------------------------------------------------------------------
    @property
    def current(self) -> _Period | None:
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
        b = result.block
        if len(b):
            h.on_frames(float(b.t[-1]) if now is None else now, b.t, len(b), measure_lag=now is not None)
            self.step(b)

    def step(self, block: Block) -> None:
        """Apply a block of accepted frames (from :class:`service.wire.cdf.FrameDecoder`)."""
        n = len(block)
        if n == 0:
            return
        self.frames += n
        self.last_frame_id = int(block.frame_id[-1])
        self.last_t = float(block.t[-1])
        if (block.ball != BALL_UNKNOWN).any():
            self.has_ball = True
        bounds = np.flatnonzero(np.diff(block.period)) + 1
        for part in np.split(np.arange(n), bounds):
            self._step_period(block.take(slice(int(part[0]), int(part[-1]) + 1)))
        if self.heart is not None:
            self._settle_heart()

    def ingest_heart(self, result: Any) -> None:
        """Count a heart-rate decoder result's drops and add its accepted samples
        (:class:`service.wire.heart.HrResult`)."""
        self.hr_rejected += result.rejected
        self.hr_duplicates += result.duplicates
        self.hr_late += result.late
        if len(result):
            self.add_heart(result.player, result.t, result.bpm)

    def add_heart(self, player: np.ndarray, t: np.ndarray, bpm: np.ndarray) -> None:
        """Accepted heart-rate samples (roster index, UTC s, bpm); they count in a
        period once tracking has reached their time."""
        if self.heart is None:
            self.heart = HeartRate(self.heart_params, heart_profiles(self.roster, self.settings))
        self.heart.add(player, t, bpm)
        self._settle_heart()

    def _settle_heart(self) -> None:
        if self.last_t is None:
            return
        fps = self.fps
        spans = [(p.index, p.t0, p.t0 + (p.last_slot + 1) / fps) for p in self.periods]
        self.heart.settle(spans, self.last_t)  # type: ignore[union-attr]

    def _step_period(self, b: Block) -> None:
        idx = int(b.period[0])
        cur = self.current
        if cur is None or cur.index != idx:
            if cur is not None and not cur.ended:
                self._end(cur)
            cur = self._start(idx, float(b.t[0]))
        slots = b.slot
        last = int(slots[-1])
        if last >= cur.ball.shape[0]:
            cap = max(2 * cur.ball.shape[0], last + 1)
            cur.ball = np.concatenate([cur.ball, np.full(cap - cur.ball.shape[0], BALL_UNKNOWN, np.int8)])
            cur.poss_team = np.concatenate([cur.poss_team, np.full(cap - cur.poss_team.shape[0], NO_TEAM, np.int8)])
        cur.ball[slots] = b.ball
        cur.poss_team[slots] = b.poss
        cur.last_slot = last
        for fin in cur.track.feed(slots, b.xy):
            self._apply(cur, fin)

    def _start(self, idx: int, t0: float) -> _Period:
        n = self.n
        per = _Period(
            index=idx, t0=t0, track=Track(self.kin, n), exertion=Exertion(self.exp, n, self.zone_edges, self.zone_scale),
            bins=SecondBins(self.fps, n, self.peak_s),
            sums=np.zeros((n, ex.N_FIG), np.int64), zones=np.zeros((n, self.zone_edges.shape[0] + 1), np.int64),
            poss=np.zeros((n, 3, 2), np.int64), max_speed=np.zeros(n), first_seen=np.full(n, -1, np.int64),
            last_seen=np.full(n, -1, np.int64), off_slots=np.zeros(n, np.int64), last_valid=np.full(n, -1, np.int64),
            last_speed=np.zeros(n), ball=np.full(1024, BALL_UNKNOWN, np.int8), poss_team=np.full(1024, NO_TEAM, np.int8),
        )
        self.periods.append(per)
        return per

    def _end(self, per: _Period) -> None:
        for fin in per.track.close():
            self._apply(per, fin)
        per.bins.finish()
        per.ended = True

    def end_period(self) -> None:
        """The current period is over (whistle, or the feed moved on)."""
        cur = self.current
        if cur is not None and not cur.ended:
            self._end(cur)

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

    def provisional(self) -> "MatchState":
        """A copy with the tail finalised (one-sided fits), for showing a stalled
        feed's figures in full; this state itself is untouched, so frames that
        come later give exactly the figures an offline pass gives. The copy
        shares this state's feed-health bookkeeping."""
        import copy

        health = self.health
        self.health = None  # type: ignore[assignment]
        try:
            twin = copy.deepcopy(self)
        finally:
            self.health = health
        twin.health = health
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
    def _apply(self, per: _Period, fin: Final) -> None:
        n = len(fin)
        fig, zone, _power = per.exertion.step(fin.valid, fin.seen, fin.speed, fin.accel)
        secs = per.bins.add(fin.slot0, fig)
        per.sums += secs.sum(axis=0)
        nz = per.zones.shape[1]
        cols = np.arange(self.n)
        flat = (cols * nz + zone).ravel()
        per.zones += np.bincount(flat, weights=fig[..., ex.DIST].ravel(), minlength=nz * self.n).reshape(self.n, nz).astype(np.int64)
        np.maximum(per.max_speed, fin.speed.max(axis=0), out=per.max_speed)
        # latest credited sample
        last_row = n - 1 - np.argmax(fin.valid[::-1], axis=0)
        got = fin.valid[last_row, cols]
        per.last_valid = np.where(got, fin.slot0 + last_row, per.last_valid)
        per.last_speed = np.where(got, fin.speed[last_row, cols], per.last_speed)
        self._onpitch(per, fin.seen, fin.slot0)
        if self.has_ball:
            self._possession(per, fin, fig)

    def _onpitch(self, per: _Period, seen: np.ndarray, slot0: int) -> None:
        """On the pitch from first to last seen sample; gaps longer than the
        on-pitch timeout count as off the pitch (substituted, sent off)."""
        n = seen.shape[0]
        anyseen = seen.any(axis=0)
        if not anyseen.any():
            return
        first_row = np.argmax(seen, axis=0)
        last_row = n - 1 - np.argmax(seen[::-1], axis=0)
        # gap before this chunk's first seen sample, from the last one seen before it
        lead = np.where(anyseen & (per.last_seen >= 0), slot0 + first_row - per.last_seen - 1, 0)
        off = np.where(lead > self.timeout_slots, lead, 0)
        if not seen[:, anyseen].all():
            # gaps inside the chunk (rare: dropouts): previous seen row of each seen row
            rows = np.arange(n)[:, None]
            prev = np.maximum.accumulate(np.where(seen, rows, -1), axis=0)
            prev = np.vstack([np.full((1, self.n), -1), prev[:-1]])
            gap = np.where(seen & (prev >= 0), rows - prev - 1, 0)
            off = off + np.where(gap > self.timeout_slots, gap, 0).sum(axis=0)
        per.off_slots += off
        per.first_seen = np.where((per.first_seen < 0) & anyseen, slot0 + first_row, per.first_seen)
        per.last_seen = np.where(anyseen, slot0 + last_row, per.last_seen)

    def _possession(self, per: _Period, fin: Final, fig: np.ndarray) -> None:
        """Distance and HSR split by ball context: in possession, out of possession, out of play."""
        slots = slice(fin.slot0, fin.slot0 + len(fin))
        ball = per.ball[slots][:, None]
        poss = per.poss_team[slots][:, None]
        own = poss == self.team[None, :]
        # context 0 in, 1 out of possession, 2 out of play, 3 unknown
        ctx = np.where(ball == BALL_OUT, 2, np.where(ball != BALL_IN, 3, np.where(own, 0, np.where(poss == NO_TEAM, 3, 1))))
        flat = (np.arange(self.n) * 4 + ctx).ravel()
        size = 4 * self.n
        d = np.bincount(flat, weights=fig[..., ex.DIST].ravel(), minlength=size).reshape(self.n, 4)
        h = np.bincount(flat, weights=fig[..., ex.HSR].ravel(), minlength=size).reshape(self.n, 4)
        per.poss[:, :, 0] += d[:, :3].astype(np.int64)
        per.poss[:, :, 1] += h[:, :3].astype(np.int64)

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
        w = max(int(self.settings.health.rate_window_s), 1)
        stop = cur.bins.complete
        start = max(stop - w, 0)
        seen = cur.bins.span(start, stop)[:, ex.SEEN]
        span = np.minimum(stop - np.maximum(start, cur.first_seen // self.fps), stop - start)
        expected = (np.clip(span, 0, None) * self.fps)[on].sum()
        if expected <= 0:
            return 0.0
        return float(max(0.0, 1.0 - seen[on].sum() / expected))

    def snapshot(self, now: float | None = None, extra_reasons: list[dict[str, str]] | None = None) -> dict[str, Any]:
        """The snapshot body plus ``match_time_s`` and ``period`` (envelope fields).

        ``now``: wall-clock seconds for health (live); None evaluates at the last
        frame's time (offline: no arrival lag is known).
        """
        from service.engine.snapshot import build_snapshot  # keeps this module small

        return build_snapshot(self, now, extra_reasons)


def heart_params(s: Settings) -> HeartParams:
    h = s.heart_rate
    return HeartParams(min_bpm=h.min_bpm, max_bpm=h.max_bpm, max_jump_bpm_s=h.max_jump_bpm_s, jump_reset=h.jump_reset,
                       max_gap_s=h.max_gap_s, expected_hz=h.expected_hz, zone_edges_pct=tuple(h.zone_edges_pct),
                       edwards_weights=tuple(h.edwards_weights), banister_male=tuple(h.banister_male),
                       banister_female=tuple(h.banister_female), stale_s=h.stale_s)


def heart_profiles(roster: Roster, s: Settings) -> list[HeartProfile]:
    """Each player's profile: the match sheet's fields, else the profiles file's."""
    files = s.heart_rate.profiles
    out = []
    for p in roster.players:
        f = files.get(p.id)
        hr_max = p.hr_max_bpm if p.hr_max_bpm is not None else (f.hr_max_bpm if f else None)
        hr_rest = p.hr_rest_bpm if p.hr_rest_bpm is not None else (f.hr_rest_bpm if f else None)
        sex = p.sex if p.sex is not None else (f.sex if f else None)
        if hr_max is not None and hr_rest is not None and hr_rest >= hr_max:
            hr_rest = None  # sheet and file disagree: a resting rate above the maximum is not used
        out.append(HeartProfile(hr_max_bpm=hr_max, hr_rest_bpm=hr_rest, sex=sex))  # type: ignore[arg-type]
    return out


def _zone_edges(roster: Roster, s: Settings) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Speed band edges, per-player scale (a sample's band is searchsorted(edges,
    speed / scale)) and band names."""
    z = s.zones
    if z.mode == "absolute":
        edges = np.array(z.edges_ms, float)
        names = [f"{a:.1f}-{b:.1f}" for a, b in zip([0.0, *edges[:-1]], edges)] + [f"{edges[-1]:.1f}+"]
        return edges, np.ones(roster.n), names
    pct = np.array(z.edges_pct, float)
    vmax = np.array([z.max_speed_ms.get(p.id) or p.max_speed_ms or z.default_max_speed_ms for p in roster.players])
    names = [f"{a:g}-{b:g}%" for a, b in zip([0.0, *pct[:-1]], pct)] + [f"{pct[-1]:g}%+"]
    return pct, vmax / 100.0, names
