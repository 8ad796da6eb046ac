"""The ball of one half: a chain of actions (passes, carries, shots, stoppages)
scripted first, then sampled at fps into per-frame arrays. The players follow it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pacewire.replay.synth.anchors import team_anchors


@dataclass
class BallSegment:
    """One piece of ball motion over [t0, t1) seconds."""

    t0: float
    t1: float
    kind: str  # roll | air | dribble | still | carry
    p0: complex
    p1: complex
    in_play: bool
    poss: int
    z_peak: float = 0.0


@dataclass
class BallTrack:
    """Per-frame ball arrays of one half."""

    xy: np.ndarray  # (T,) complex, m
    z: np.ndarray  # (T,) m
    target: np.ndarray  # (T,) complex: where the ball will next be controlled
    target_vel: np.ndarray  # (T,) complex m/s (non-zero while carried)
    in_play: np.ndarray  # (T,) bool
    poss: np.ndarray  # (T,) int (0 home, 1 away)


BALL_RADIUS_Z = 0.11
# Spells of play end in a throw-in or a foul at fairly regular intervals (gamma-distributed
# spells, shape SPELL_SHAPE); with goal kicks, goals and substitutions the ball is in play for
# about 57-62 of 95 minutes (Altmann et al. 2023: 52-55 effective minutes).
SPELL_MEAN_S = 35.0
SPELL_LATE_SHORTER = 0.25  # share by which spells are shorter at the end of a half (common practice)
SPELL_SHAPE = 8.0
THROW_IN_SHARE = 0.65  # of the spells, the rest end in a foul
THROW_IN_S = (10.0, 26.0)
FREE_KICK_S = (12.0, 28.0)


def _clip_pitch(p: complex, mx: float = 52.4, my: float = 33.9) -> complex:
    """Clip a complex position into the rectangle |x| <= mx, |y| <= my."""
    return complex(min(max(p.real, -mx), mx), min(max(p.imag, -my), my))


class BallScript:
    """Builds the ball action chain of one half (a Python loop per action)."""

    def __init__(self, rng: np.random.Generator, half_s: float, dirs: tuple[float, float],
                 offsets: tuple[np.ndarray, np.ndarray], scale: float):
        self.rng = rng
        self.half_s = half_s
        self.dirs = dirs
        self.offsets = offsets
        self.scale = scale
        self.segs: list[BallSegment] = []
        self.goal_times: list[tuple[float, int]] = []
        self.t = 0.0
        self.p = 0j
        self.poss = 0
        self.spell_end = self._spell()

    def add(self, dur: float, kind: str, p1: complex, in_play: bool, z_peak: float = 0.0) -> None:
        """Append a segment of ``dur`` seconds from the current ball position."""
        dur = max(dur, 0.04)
        self.segs.append(BallSegment(self.t, self.t + dur, kind, self.p, p1, in_play, self.poss, z_peak))
        self.t += dur
        self.p = p1

    def anchors(self, team: int) -> np.ndarray:
        """Anchors (11,) complex of a team for the current ball position."""
        share = np.array([1.0 if team == self.poss else 0.0])
        return team_anchors(np.array([self.p]), share, self.dirs[team], self.offsets[team])[0]

    def _spell(self) -> float:
        """When the spell of play starting now ends in a throw-in or a foul, s of the half:
        spells grow shorter late in a half (SPELL_LATE_SHORTER)."""
        mean = SPELL_MEAN_S * (1.0 - SPELL_LATE_SHORTER * self.t / self.half_s)
        return self.t + float(self.rng.gamma(SPELL_SHAPE, mean / SPELL_SHAPE))

    def stoppage(self, dur: float, restart: complex | None = None) -> None:
        """Ball out of play for ``dur`` s; optionally carried to a restart spot. A new spell of
        play starts after it."""
        if restart is not None and abs(restart - self.p) > 1.0:
            carry = min(dur * 0.5, abs(restart - self.p) / 3.0 + 1.0)
            self.add(carry, "carry", restart, False)
            dur -= carry
        self.add(max(dur, 0.5), "still", self.p, False)
        self.spell_end = self._spell()

    def pass_(self) -> None:
        """A pass to a team-mate, possibly out of play or intercepted, then a carry."""
        rng, team = self.rng, self.poss
        d = self.dirs[team]
        an = self.anchors(team)[1:]
        dist = np.abs(an - self.p)
        fwd = d * (an.real - self.p.real)
        w = np.exp(-dist / 14.0) * np.where(fwd > 0, 1.7, 1.0) * np.where(dist < 4.0, 0.15, 1.0)
        j = int(rng.choice(len(an), p=w / w.sum()))
        dest = an[j] + complex(rng.normal(0, 4.0), rng.normal(0, 4.0))
        late = self.t / self.half_s  # longer stoppages late in a half
        due = self.t >= self.spell_end
        out = due and rng.random() < THROW_IN_SHARE
        if out:
            side = np.sign(dest.imag) if dest.imag != 0 else 1.0
            dest = complex(dest.real, side * 33.9)
        dest = _clip_pitch(dest)
        length = abs(dest - self.p)
        lofted = length > 28.0 and rng.random() < 0.6
        if lofted:
            dur = length / rng.uniform(14.0, 20.0)
            self.add(dur, "air", dest, True, BALL_RADIUS_Z + 9.81 * dur * dur / 8.0)
        else:
            dur = 1.5 * length / rng.uniform(11.0, 19.0)
            self.add(max(dur, 0.3), "roll", dest, True)
        if out:
            self.poss = 1 - team
            self.stoppage(rng.uniform(*THROW_IN_S) * (1.0 + 0.2 * late))
            return
        if due:  # a foul on the receiver: a free kick to his team
            self.stoppage(rng.uniform(*FREE_KICK_S) * (1.0 + 0.2 * late))
            return
        attacking_third = d * self.p.real > 17.5
        if rng.random() < 0.14 + (0.10 if attacking_third else 0.0):
            self.poss = 1 - team
        self.carry()

    def carry(self) -> None:
        """The receiver carries the ball, mostly towards the goal he attacks."""
        rng = self.rng
        d = self.dirs[self.poss]
        dur = rng.uniform(0.3, 3.5)
        speed = rng.uniform(1.0, 4.5)
        heading = d * np.exp(1j * rng.uniform(-1.0, 1.0))
        end = _clip_pitch(self.p + speed * dur * heading, 50.0, 32.0)
        self.add(dur, "dribble", end, True)

    def shot(self, scores: bool = False) -> None:
        """A shot at the goal the team in possession attacks."""
        rng, team = self.rng, self.poss
        d = self.dirs[team]
        if scores:
            if d * self.p.real < 25.0:
                spot = complex(d * rng.uniform(28.0, 36.0), rng.uniform(-12.0, 12.0))
                self.add(1.5 * abs(spot - self.p) / 15.0, "roll", spot, True)
            goal = complex(d * 52.4, rng.uniform(-3.0, 3.0))
            dur = abs(goal - self.p) / 24.0
            self.add(dur, "air", goal, True, BALL_RADIUS_Z + rng.uniform(0.3, 2.0))
            self.goal_times.append((self.t, team))
            self.poss = 1 - team  # the conceding team kicks off
            self.stoppage(max(10.0, 45.0 * self.scale), restart=0j)
            return
        if rng.random() < 0.5:  # wide: goal kick
            y = rng.choice([-1.0, 1.0]) * rng.uniform(4.5, 12.0)
            goal = complex(d * 52.4, y)
            dur = abs(goal - self.p) / rng.uniform(18.0, 26.0)
            self.add(dur, "air", goal, True, BALL_RADIUS_Z + rng.uniform(0.3, 3.0))
            self.poss = 1 - team
            self.stoppage(rng.uniform(10.0, 18.0), restart=complex(d * 47.0, np.sign(y) * 6.0))
        else:  # saved and held by the goalkeeper
            keeper = complex(d * 51.0, rng.uniform(-3.0, 3.0))
            dur = abs(keeper - self.p) / rng.uniform(18.0, 26.0)
            self.add(dur, "air", keeper, True, BALL_RADIUS_Z + rng.uniform(0.2, 1.5))
            self.poss = 1 - team
            self.add(rng.uniform(2.0, 5.0), "still", self.p, True)

    def run(self, kickoff_team: int, forced: list[tuple[float, float]],
            goals: list[tuple[float, int]]) -> list[BallSegment]:
        """Generate segments until the end of the half."""
        rng = self.rng
        self.poss = kickoff_team
        forced = sorted(forced)
        goals = sorted(goals)
        while self.t < self.half_s:
            if forced and forced[0][0] <= self.t:
                start, end = forced.pop(0)
                if end > self.t:
                    self.add(end - self.t, "still", self.p, False)
                    self.spell_end = self._spell()
                continue
            if goals and goals[0][0] <= self.t:
                _, team = goals.pop(0)
                self.poss = team
                self.shot(scores=True)
                continue
            d = self.dirs[self.poss]
            if d * self.p.real > 28.0 and abs(self.p.imag) < 22.0 and rng.random() < 0.25:
                self.shot()
            else:
                self.pass_()
        return self.segs


def rasterize_ball(segs: list[BallSegment], n: int, fps: int) -> BallTrack:
    """Sample ball segments at fps into per-frame arrays."""
    xy = np.zeros(n, complex)
    z = np.full(n, BALL_RADIUS_Z)
    target = np.zeros(n, complex)
    tvel = np.zeros(n, complex)
    in_play = np.zeros(n, bool)
    poss = np.zeros(n, np.int8)
    for s in segs:
        i0 = int(np.ceil(s.t0 * fps - 1e-9))
        i1 = min(n, int(np.ceil(s.t1 * fps - 1e-9)))
        if i1 <= i0:
            continue
        u = (np.arange(i0, i1) / fps - s.t0) / (s.t1 - s.t0)
        dp = s.p1 - s.p0
        if s.kind == "roll":
            xy[i0:i1] = s.p0 + dp * (2.0 * u - u * u)
            target[i0:i1] = s.p1
        elif s.kind == "air":
            xy[i0:i1] = s.p0 + dp * u
            z[i0:i1] = BALL_RADIUS_Z + (s.z_peak - BALL_RADIUS_Z) * 4.0 * u * (1.0 - u)
            target[i0:i1] = s.p1
        elif s.kind in ("dribble", "carry"):
            xy[i0:i1] = s.p0 + dp * u
            target[i0:i1] = xy[i0:i1]
            tvel[i0:i1] = dp / (s.t1 - s.t0)
        else:  # still
            xy[i0:i1] = s.p0
            target[i0:i1] = s.p0
        in_play[i0:i1] = s.in_play
        poss[i0:i1] = s.poss
    return BallTrack(xy, z, target, tvel, in_play, poss)
