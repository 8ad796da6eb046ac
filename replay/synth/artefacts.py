"""Tracking artefacts injected into the written positions, each model off by default:

* ``slides``: re-acquisition slides of broadcast-derived tracking. Every 12-28 s per
  player the track re-locks onto him from 3-8 m away and glides back over 0.4-0.8 s,
  in steps that shrink (the first ones several metres per 0.1 s at 10 fps); plus
  0.15 m of position jitter on every sample.
* ``camera_gaps``: the player leaves the camera view for 2-6 s every 45-120 s and is
  picked up again 3-8 m off, gliding back as above; the same jitter.
* ``gnss``: GNSS units at 10 Hz: white jitter, a slowly wandering error of about 0.7 m
  RMS (position RMSE about 0.96 m for GPS; Linke et al. 2018, PLoS ONE 13:e0199519) and
  multipath excursions of 1-4 m every 20-60 s per player, lasting 0.8-3.4 s.

The magnitudes are our own model of what such feeds show, not a provider's
specification. Every slide, gap and excursion is listed in faults.json with its
frames and player; jitter and the wandering error, on every sample, are listed once
per model (``frame_ids`` empty, their size in ``sd_m``).

The model constants are module attributes read at call time, so a test can change them.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator

import numpy as np

from pacewire.replay.synth.match import SynthMatch

SLIDE_EVERY_S = (12.0, 28.0)  # time between two re-acquisition slides of a player
SLIDE_OFFSET_M = (3.0, 8.0)  # how far off the track re-locks
SLIDE_GLIDE_S = (0.4, 0.8)  # how long it takes to glide back onto the player
BROADCAST_JITTER_M = 0.15  # sd per axis of broadcast-derived positions
CAMERA_GAP_EVERY_S = (45.0, 120.0)  # time between two camera-view gaps of a player (about 5 % of his time hidden)
CAMERA_GAP_S = (2.0, 6.0)  # how long the player is out of the camera view
GNSS_JITTER_M = 0.10  # sd per axis of the white part of a 10 Hz GNSS position
GNSS_WANDER_M = 0.5  # sd per axis of the slowly wandering part (about 0.7 m RMS in all)
GNSS_WANDER_S = 5.0  # its time constant (two first-order low-pass stages)
MULTIPATH_EVERY_S = (20.0, 60.0)  # time between two multipath excursions of a player
MULTIPATH_OFFSET_M = (1.0, 4.0)
MULTIPATH_RISE_S = (0.1, 0.3)  # off the player ...
MULTIPATH_HOLD_S = (0.5, 2.5)  # ... held there ...
MULTIPATH_FALL_S = (0.2, 0.6)  # ... and back
EDGE_S = 2.0  # artefacts stay this far from the period edges and the substitutions
# The positions written stay inside the CDF validator's bounds (|x| <= 65, |y| <= 42.5).
X_LIMIT, Y_LIMIT = 64.5, 42.0

Record = Callable[..., None]  # (kind, first slot, duration_s, frame_ids, player id, **extra)


def clip_to_validator(p: np.ndarray) -> np.ndarray:
    """Complex positions kept inside the CDF validator's bounds."""
    return np.clip(p.real, -X_LIMIT, X_LIMIT) + 1j * np.clip(p.imag, -Y_LIMIT, Y_LIMIT)


class ArtefactPlanner:
    """Places the artefacts of one match per player, on top of the feed faults already planned
    (``busy``: slots taken by them, for every player) and away from the period edges and each
    player's substitution."""

    def __init__(self, rng: np.random.Generator, m: SynthMatch, busy: np.ndarray, record: Record) -> None:
        tl = m.timeline
        self.rng, self.m, self.fps = rng, m, tl.fps
        self.record = record
        self.shift = np.zeros((tl.n_slots, 22), complex)
        self.hidden: dict[int, set[int]] = {}
        edge = int(round(EDGE_S * self.fps))
        free = ~busy.copy()
        for start, n in tl.halves:
            free[start:start + edge] = False
            free[max(start + n - edge, start):start + n] = False
        self.free = np.repeat(free[:, None], 22, axis=1)
        for s in m.subs:
            col = 11 * s.team + s.slot
            self.free[max(s.frame - s.walk_frames - edge, 0):s.frame + edge, col] = False

    def _slots(self, every_s: tuple[float, float]) -> Iterator[tuple[int, int]]:
        """(column, slot) of each artefact: per player, draws of ``every_s`` seconds apart."""
        n_slots = self.shift.shape[0]
        for col in range(22):
            t = self.rng.uniform(0.0, every_s[1])
            while (f := int(round(t * self.fps))) < n_slots:
                yield col, f
                t += self.rng.uniform(*every_s)

    def _take(self, col: int, f: int, length: int) -> bool:
        """Slots f..f+length-1 of ``col``, if all free (then taken, with a 1 s margin after)."""
        stop = f + length
        if stop > self.free.shape[0] or not self.free[f:stop, col].all():
            return False
        self.free[f:min(stop + self.fps, self.free.shape[0]), col] = False
        return True

    def _glide(self, col: int, f: int) -> tuple[int, float]:
        """A re-lock 3-8 m off at slot f gliding back onto the player: (its slot count, the offset
        in m). The offset falls as (1 - u)^2 over the glide: the steps shrink as it settles."""
        dist = float(self.rng.uniform(*SLIDE_OFFSET_M))
        offset = dist * np.exp(1j * self.rng.uniform(0.0, 2 * np.pi))
        n = max(int(round(self.rng.uniform(*SLIDE_GLIDE_S) * self.fps)), 1)
        u = np.arange(n) / n
        self.shift[f:f + n, col] += offset * (1.0 - u) ** 2
        return n, dist

    def jitter(self, sd_m: float, source: str) -> None:
        """White position noise on every sample of every player, sd per axis."""
        self.shift += self.rng.normal(0.0, sd_m, self.shift.shape) + 1j * self.rng.normal(0.0, sd_m, self.shift.shape)
        self.record("jitter", 0, self.shift.shape[0] / self.fps, [], None, sd_m=sd_m, source=source)

    def slides(self) -> None:
        """Re-acquisition slides (SLIDE_*)."""
        longest = int(np.ceil(SLIDE_GLIDE_S[1] * self.fps))
        for col, f in self._slots(SLIDE_EVERY_S):
            if not self._take(col, f, longest):
                continue
            n, dist = self._glide(col, f)
            self.record("slide", f, n / self.fps, list(range(f, f + n)), self.m.player_at(f, col),
                        offset_m=round(dist, 2))

    def camera_gaps(self) -> None:
        """Camera-view gaps (CAMERA_GAP_*), each ended by a slide at re-entry."""
        longest = int(np.ceil((CAMERA_GAP_S[1] + SLIDE_GLIDE_S[1]) * self.fps))
        for col, f in self._slots(CAMERA_GAP_EVERY_S):
            if not self._take(col, f, longest):
                continue
            gap = max(int(round(self.rng.uniform(*CAMERA_GAP_S) * self.fps)), 1)
            for g in range(f, f + gap):
                self.hidden.setdefault(g, set()).add(col)
            pid = self.m.player_at(f, col)
            self.record("camera_gap", f, gap / self.fps, list(range(f, f + gap)), pid)
            n, dist = self._glide(col, f + gap)
            self.record("reentry_slide", f + gap, n / self.fps, list(range(f + gap, f + gap + n)), pid,
                        offset_m=round(dist, 2))

    def gnss(self) -> None:
        """GNSS jitter, the wandering error and multipath excursions (GNSS_*, MULTIPATH_*)."""
        self.jitter(GNSS_JITTER_M, "gnss")
        self.shift += GNSS_WANDER_M * self._wander()
        self.record("gnss_wander", 0, self.shift.shape[0] / self.fps, [], None, sd_m=GNSS_WANDER_M,
                    time_constant_s=GNSS_WANDER_S)
        longest = int(np.ceil((MULTIPATH_RISE_S[1] + MULTIPATH_HOLD_S[1] + MULTIPATH_FALL_S[1]) * self.fps))
        for col, f in self._slots(MULTIPATH_EVERY_S):
            if not self._take(col, f, longest):
                continue
            rise, hold, fall = (max(int(round(self.rng.uniform(*r) * self.fps)), 1)
                                for r in (MULTIPATH_RISE_S, MULTIPATH_HOLD_S, MULTIPATH_FALL_S))
            dist = self.rng.uniform(*MULTIPATH_OFFSET_M)
            offset = dist * np.exp(1j * self.rng.uniform(0.0, 2 * np.pi))
            shape = np.concatenate([np.arange(1, rise + 1) / rise, np.ones(hold), 1.0 - np.arange(1, fall) / fall])
            self.shift[f:f + len(shape), col] += offset * shape
            self.record("multipath", f, len(shape) / self.fps, list(range(f, f + len(shape))),
                        self.m.player_at(f, col), offset_m=round(float(dist), 2))

    def _wander(self) -> np.ndarray:
        """(slots, 22) complex, unit sd per axis: white noise through two first-order low-pass
        stages of time constant GNSS_WANDER_S (a smooth error: it bends the path, not the steps)."""
        n = self.shift.shape[0]
        white = self.rng.normal(0.0, 1.0, (n, 22, 2))
        freq = np.fft.rfftfreq(n, 1.0 / self.fps)
        gain = 1.0 / (1.0 + 2j * np.pi * freq * GNSS_WANDER_S) ** 2
        smooth = np.fft.irfft(np.fft.rfft(white, axis=0) * gain[:, None, None], n, axis=0)
        smooth /= smooth.std(axis=0, keepdims=True)
        return smooth[..., 0] + 1j * smooth[..., 1]
