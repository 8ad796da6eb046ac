"""Synthetic demo match generator: a fictional match written as a CDF folder.

Everything here is invented: the clubs, the venue, the players and the match.
The output is a CDF v0.3.2 recording folder (DESIGN §3):

* ``meta.json``      CDF meta (match id, teams, fps, pitch 105 x 68 m, periods)
* ``match.json``     CDF match sheet (rosters with position groups, result,
  goals, substitutions, cards, officials, vendor)
* ``tracking.jsonl.gz`` (or ``tracking.jsonl``) one CDF tracking frame per line
* ``faults.json``    the feed faults deliberately injected (empty list if none)

``--wearables`` writes the one-team GNSS + heart-rate variant of the same match
(docs/wearables.md): the home team only (the away team keeps its id and name,
no players), each player entry with ``lat``/``long`` as well as ``x``/``y``, no
ball, a pitch calibration under ``venue.gnss_pitch``, heart-rate profiles on the
sheet, and ``hr.jsonl`` (1 Hz samples; see plan_wearables).

Coordinates are metres with the origin at the centre spot, x along the
touchlines (|x| <= 52.5) and y along the goal lines (|y| <= 34). The home team
attacks +x in the first half and the teams change ends at half-time.

Movement model
--------------
The ball is generated first as a chain of actions (passes, carries, shots,
stoppages). Each team's formation anchors follow the (lagged) ball and the
possession state; every player then steers, at ``fps``, towards a moving
target (anchor + personal wander, or a run target during a burst) with a
commanded speed drawn from a role-specific locomotor profile plus random
high-speed and sprint bursts. Velocity follows the command through a
second-order model: a first-order velocity response (time constant
``TAU_S``), a speed-dependent forward acceleration limit (linear
force-velocity profile; Samozino et al. 2016), a deceleration limit, a total
acceleration limit and a hard speed cap; planned braking and a stopping rule
keep everyone inside the lines, and velocity commands ramp up and down at
kick-off, the whistle and substitutions. The nearest outfield player of each
team goes to the ball (receiver/carrier and presser). Intensity falls late in
each half (Mohr et al. 2003). Role targets: total distance (Bradley et al.
2009; Osgnach et al. 2010), sprint counts (Di Salvo et al. 2009).

Frame ids
---------
``frame_id`` is the slot index of the frame in the recording: it counts from 0
at kick-off, every 1/fps seconds of play, and the second half continues where
the first half stopped (the half-time break has no slots). When the feed
outage fault is on, the 20 s of slots inside the outage are simply not
written, so ``frame_id`` skips over the outage (timestamps jump by the same
amount).
"""

from __future__ import annotations

import argparse
import gzip
import pathlib
import queue
import sys
import threading
import time
from dataclasses import dataclass, field

import numpy as np
import orjson
from scipy.ndimage import uniform_filter1d
from scipy.signal import lfilter, savgol_filter

__all__ = ["write_match", "simulate_match", "plan_wearables", "movement_stats", "main"]

# --------------------------------------------------------------------------
# Fixed scenario constants
# --------------------------------------------------------------------------
PITCH_LENGTH_M = 105.0
PITCH_WIDTH_M = 68.0
HALF_LENGTH_M = PITCH_LENGTH_M / 2.0  # 52.5
HALF_WIDTH_M = PITCH_WIDTH_M / 2.0  # 34.0

KICKOFF = np.datetime64("2026-03-14T15:00:00.000", "ms")
HALF_TIME_BREAK_S = 15 * 60
# A full match is 45+2 and 45+4 minutes: `minutes` scales both halves.
FULL_MATCH_MIN = 95.0
FIRST_HALF_SHARE = 47.0 / 95.0
OUTAGE_S = 20.0

MATCH_ID = "pw_synth_match"
CDF_VERSION = "0.3.2"
VENDOR = "pacewire synth"

# Kinematic limits of the steering model (m/s, m/s^2, s)
TAU_S = 0.35  # velocity response time constant
A0_MS2 = 5.5  # forward acceleration from standstill (force-velocity intercept)
V0_MS = 10.0  # force-velocity speed intercept
DECEL_MAX_MS2 = 5.0
TURN_RESERVE_MS2 = 3.0  # share of the acceleration budget kept for turning
ACCEL_MAX_MS2 = 5.5  # total |a| of the model (checks allow 6)
SPEED_CAP_MS = 9.7  # hard cap (checks allow 10.5)
CATCH_UP_MAX_MS = 5.5  # below the 7.0 m/s sprint threshold on purpose
CATCH_UP_GAIN = 0.30  # 1/s: extra speed per metre beyond CATCH_UP_FROM_M from the target
CATCH_UP_FROM_M = 8.0
CHASE_MAX_MS = 6.0
PRESS_MAX_MS = 5.5
HEADING_NOISE = 0.4  # rad per sqrt(s): random-walk wander of the heading
BRAKE_MS2 = 2.5  # planned braking towards the touchlines / goal lines
X_SOFT_M = 51.4  # where braking aims to stop (inside the pitch)
Y_SOFT_M = 33.0
X_STOP_M = 52.1  # players always stop before these (hard braking)
Y_STOP_M = 33.6
X_HARD_M = 52.45  # final safety clip
Y_HARD_M = 33.95

# Locomotor categories: stand, walk, jog, run (speed ranges in m/s).
CATEGORY_SPEEDS_MS = np.array([[0.1, 0.6], [1.0, 1.9], [2.1, 3.6], [3.8, 5.3]])
STOPPAGE_PROBS = np.array([0.35, 0.57, 0.08, 0.0])
SPRINT_SPEED_MS = (7.6, 9.3)
SPRINT_COMMAND_S = (4.0, 7.0)  # 2-5 s at speed plus ~2 s to get there
HSR_SPEED_MS = (5.7, 6.8)
HSR_COMMAND_S = (2.5, 5.0)


@dataclass(frozen=True)
class RoleProfile:
    """Per-role locomotor profile (in play).

    probs: time share of stand/walk/jog/run segments; speed_scale multiplies the
    category speeds; sprints_per90 and hsr_per90 are burst counts per 90 min.
    """

    probs: tuple[float, float, float, float]
    speed_scale: float
    sprints_per90: float
    hsr_per90: float


# Role differences: central midfielders cover most distance, centre-backs least
# (Bradley et al. 2009); wide players sprint most (Di Salvo et al. 2009), every
# outfield role at least ~25 sprints per 90 min. speed_scale was calibrated so
# that full-match outfield players land at 10.2-11.9 km per 90 min (Osgnach et
# al. 2010: 10,950 +- 1,044 m) when measured with a centred 1 s cubic
# Savitzky-Golay fit, as pacewire's engine does; goalkeepers at ~5 km.
ROLES: dict[str, RoleProfile] = {
    "GK": RoleProfile((0.42, 0.48, 0.09, 0.01), 0.90, 1.5, 4.0),
    "CB": RoleProfile((0.14, 0.50, 0.28, 0.08), 0.93, 31.0, 15.0),
    "FB": RoleProfile((0.10, 0.48, 0.31, 0.11), 0.92, 34.0, 25.0),
    "CM": RoleProfile((0.07, 0.45, 0.35, 0.13), 0.835, 32.0, 28.0),
    "WM": RoleProfile((0.09, 0.46, 0.33, 0.12), 0.84, 38.0, 28.0),
    "W": RoleProfile((0.10, 0.47, 0.31, 0.12), 0.81, 40.0, 25.0),
    "CF": RoleProfile((0.13, 0.50, 0.28, 0.09), 0.78, 34.0, 22.0),
}
POSITION_ROLE = {
    "GK": "GK", "LCB": "CB", "RCB": "CB", "CB": "CB", "LB": "FB", "RB": "FB",
    "LCM": "CM", "RCM": "CM", "CM": "CM", "CDM": "CM", "LM": "WM", "RM": "WM",
    "LW": "W", "RW": "W", "LCF": "CF", "RCF": "CF", "CF": "CF",
}
POSITION_GROUP = {
    "GK": "GK", "LCB": "DF", "RCB": "DF", "CB": "DF", "LB": "DF", "RB": "DF",
    "LCM": "MF", "RCM": "MF", "CM": "MF", "CDM": "MF", "LM": "MF", "RM": "MF",
    "LW": "FW", "RW": "FW", "LCF": "FW", "RCF": "FW", "CF": "FW",
}

# Formation slots in the team's attacking frame (attacking +x; +y is the left
# side): (position, x offset from the block centre, y) in metres.
FORMATIONS: dict[str, list[tuple[str, float, float]]] = {
    "4-4-2": [
        ("GK", 0.0, 0.0),
        ("LB", -14.0, 22.0), ("LCB", -18.0, 8.0), ("RCB", -18.0, -8.0), ("RB", -14.0, -22.0),
        ("LM", -1.0, 22.0), ("LCM", -3.0, 7.0), ("RCM", -3.0, -7.0), ("RM", -1.0, -22.0),
        ("LCF", 12.0, 6.0), ("RCF", 12.0, -6.0),
    ],
    "4-3-3": [
        ("GK", 0.0, 0.0),
        ("LB", -14.0, 22.0), ("LCB", -18.0, 8.0), ("RCB", -18.0, -8.0), ("RB", -14.0, -22.0),
        ("CM", -7.0, 0.0), ("LCM", 0.0, 13.0), ("RCM", 0.0, -13.0),
        ("LW", 12.0, 22.0), ("CF", 14.0, 0.0), ("RW", 12.0, -22.0),
    ],
}


@dataclass(frozen=True)
class Club:
    """An invented club: ids, names, formation, squad (starters then bench)."""

    team_id: str
    name: str
    short: str
    colour: str
    formation: str
    coach: tuple[str, str]
    # (jersey, first name, last name, position); first 11 follow the formation
    squad: tuple[tuple[int, str, str, str], ...]
    # substitutions: (fraction of the second half, starter index out, bench index in)
    subs: tuple[tuple[float, int, int], ...]


HOME = Club(
    team_id="t_quillhaven",
    name="Quillhaven Tide",
    short="QHT",
    colour="#1D4E89",
    formation="4-4-2",
    coach=("Maren", "Ostrowell"),
    squad=(
        (1, "Oren", "Falkmoor", "GK"), (3, "Tavi", "Brennock", "LB"),
        (5, "Jory", "Hallowmere", "LCB"), (4, "Cael", "Duskinford", "RCB"),
        (2, "Emrys", "Wendlecote", "RB"), (11, "Perrin", "Soskell", "LM"),
        (8, "Idrin", "Marrowby", "LCM"), (6, "Lazlo", "Quennet", "RCM"),
        (7, "Tobin", "Achterly", "RM"), (10, "Anselm", "Pikering", "LCF"),
        (9, "Rurik", "Vandersloe", "RCF"),
        (13, "Helmer", "Grausby", "GK"), (15, "Kestrel", "Imbry", "DF"),
        (14, "Oswin", "Tarrant-Velle", "MF"), (17, "Fenwick", "Ludmore", "MF"),
        (19, "Dace", "Orrinhall", "FW"),
    ),
    subs=((0.27, 8, 14), (0.54, 9, 15), (0.73, 1, 12)),
)
AWAY = Club(
    team_id="t_corvane",
    name="Corvane Vale Rovers",
    short="CVR",
    colour="#B33A1B",
    formation="4-3-3",
    coach=("Ilse", "Braddenholt"),
    squad=(
        (1, "Sindre", "Korvath", "GK"), (3, "Albin", "Stroudley", "LB"),
        (6, "Mattias", "Eldergrove", "LCB"), (5, "Ruan", "Pellowick", "RCB"),
        (2, "Corin", "Vasquell", "RB"), (4, "Teodor", "Hesketh-Lune", "CM"),
        (8, "Yannic", "Obelmont", "LCM"), (10, "Ludo", "Farrowdale", "RCM"),
        (11, "Essa", "Moranth", "LW"), (9, "Bram", "Quillon", "CF"),
        (7, "Niall", "Ashcombe-Rye", "RW"),
        (12, "Gisli", "Thornquay", "GK"), (16, "Pim", "Ravelstoke", "DF"),
        (18, "Arlo", "Dennimore", "MF"), (20, "Wystan", "Cobbelry", "FW"),
        (21, "Eero", "Lanthorne", "FW"),
    ),
    subs=((0.375, 6, 13), (0.65, 9, 14)),
)
CLUBS = (HOME, AWAY)
OFFICIALS = (
    ("o_ref", "Halvard", "Mistelburn", "main_referee"),
    ("o_ar1", "Sunniva", "Okkerlund", "assistant_referee"),
    ("o_ar2", "Teague", "Brambury", "assistant_referee"),
    ("o_4th", "Orla", "Fennimore", "fourth_official"),
)
VENUE = {"id": "v_lanternmoor", "name": "Lanternmoor Park", "turf": "grass"}


def player_id(club: Club, jersey: int) -> str:
    """Stable player id: club short code and jersey, such as ``qht_07``."""
    return f"{club.short.lower()}_{jersey:02d}"


# --------------------------------------------------------------------------
# Timeline
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Timeline:
    """Frame layout: halves of n1 and n2 slots at fps; times in seconds."""

    fps: int
    n1: int
    n2: int

    @property
    def n_slots(self) -> int:
        return self.n1 + self.n2

    @property
    def halves(self) -> tuple[tuple[int, int], tuple[int, int]]:
        """(first slot, slot count) of each half."""
        return (0, self.n1), (self.n1, self.n2)

    def frame_ms(self) -> np.ndarray:
        """Time of every slot, integer ms after the first kick-off."""
        ms1 = np.round(np.arange(self.n1) * 1000.0 / self.fps).astype("int64")
        ms2 = self.second_half_start_ms() + np.round(np.arange(self.n2) * 1000.0 / self.fps).astype("int64")
        return np.concatenate([ms1, ms2])

    def timestamps(self) -> list[str]:
        """RFC 3339 UTC timestamps (ms precision, ``Z``) of every slot."""
        strings = np.datetime_as_string(KICKOFF + self.frame_ms().astype("timedelta64[ms]"), unit="ms")
        return [s + "Z" for s in strings.tolist()]

    def first_half_end_ms(self) -> int:
        """End of the first half, ms after kick-off (end of its last frame)."""
        return int(round(self.n1 * 1000.0 / self.fps))

    def second_half_start_ms(self) -> int:
        """Second half kick-off, ms after the first kick-off."""
        return self.first_half_end_ms() + HALF_TIME_BREAK_S * 1000

    def second_half_end_ms(self) -> int:
        return self.second_half_start_ms() + int(round(self.n2 * 1000.0 / self.fps))


def make_timeline(minutes: float, fps: int) -> Timeline:
    """Split ``minutes`` of play into the two halves (47:48 share, as 45+2 / 45+4)."""
    if minutes <= 0 or fps <= 0:
        raise ValueError("minutes and fps must be positive")
    total = minutes * 60.0
    n1 = max(1, int(round(total * FIRST_HALF_SHARE * fps)))
    n2 = max(1, int(round(total * fps)) - n1)
    return Timeline(fps=int(fps), n1=n1, n2=n2)


def iso_ms(ms_after_kickoff: int) -> str:
    """RFC 3339 UTC string of a time given in ms after the first kick-off."""
    return str(np.datetime_as_string(KICKOFF + np.timedelta64(int(ms_after_kickoff), "ms"), unit="ms")) + "Z"


# --------------------------------------------------------------------------
# Formation anchors
# --------------------------------------------------------------------------
def formation_offsets(club: Club) -> np.ndarray:
    """Formation slot offsets (11,) complex, metres, attacking +x."""
    return np.array([complex(x, y) for _, x, y in FORMATIONS[club.formation]])


def team_anchors(ball: np.ndarray, poss_share: np.ndarray, direction: float, offsets: np.ndarray) -> np.ndarray:
    """Formation anchors of one team, metres, complex, shape (M, 11).

    ball: (M,) complex ball (or lagged ball) position in pitch coordinates.
    poss_share: (M,) in [0, 1], 1 when the team has the ball.
    direction: +1 if the team attacks +x in this half, else -1 (the frame is
    rotated by 180 degrees, so y flips too).
    """
    b = ball * direction
    ps = poss_share[:, None]
    bx = np.clip(0.6 * b.real + 4.0 * poss_share - 5.0 * (1.0 - poss_share), -24.0, 26.0)[:, None]
    depth = 0.85 + 0.25 * ps
    width = 0.85 + 0.20 * ps
    ax = bx + offsets.real[None, :] * depth
    ay = offsets.imag[None, :] * width + 0.35 * b.imag[:, None]
    # players near the ball are drawn towards it (support / pressure), far ones hold shape
    pull = 0.35 * np.exp(-np.hypot(ax - b.real[:, None], ay - b.imag[:, None]) / 15.0)
    ax = np.clip(ax + pull * (b.real[:, None] - ax), -49.0, 49.0)
    ay = np.clip(ay + pull * (b.imag[:, None] - ay), -31.0, 31.0)
    # goalkeeper: stays near goal, edges out when the ball is far away
    ax[:, 0] = np.clip(-50.3 + 0.13 * (b.real + HALF_LENGTH_M), -50.3, -36.0)
    ay[:, 0] = np.clip(0.22 * b.imag, -6.0, 6.0)
    return (ax + 1j * ay) * direction


# --------------------------------------------------------------------------
# Ball
# --------------------------------------------------------------------------
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


def _clip_pitch(p: complex, mx: float = 52.4, my: float = 33.9) -> complex:
    """Clip a complex position into the rectangle |x| <= mx, |y| <= my."""
    return complex(min(max(p.real, -mx), mx), min(max(p.imag, -my), my))


class _BallScript:
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

    def stoppage(self, dur: float, restart: complex | None = None) -> None:
        """Ball out of play for ``dur`` s; optionally carried to a restart spot."""
        if restart is not None and abs(restart - self.p) > 1.0:
            carry = min(dur * 0.5, abs(restart - self.p) / 3.0 + 1.0)
            self.add(carry, "carry", restart, False)
            dur -= carry
        self.add(max(dur, 0.5), "still", self.p, False)

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
        late = self.t / self.half_s  # more and longer stoppages late in a half
        out = rng.random() < 0.05 + 0.04 * late
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
            self.stoppage(rng.uniform(6.0, 22.0) * (1.0 + 0.4 * late))
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


# --------------------------------------------------------------------------
# Scenario: rosters, substitutions, goals, cards
# --------------------------------------------------------------------------
@dataclass(frozen=True)
class Substitution:
    team: int
    slot: int  # 0..10 within the team
    out_index: int  # squad index
    in_index: int
    frame: int  # global slot index of the first frame of the sub-on player
    walk_frames: int  # frames of the walk-off before `frame`


@dataclass(frozen=True)
class GoalEvent:
    team: int
    frame: int  # global slot of the shot
    scorer_slot: int
    assist_slot: int | None


@dataclass
class SynthMatch:
    """The simulated match before it is written: arrays over all slots."""

    timeline: Timeline
    positions: np.ndarray  # (S, 22) complex, metres; slot order home 0..10, away 11..21
    squad_index: np.ndarray  # (S, 22) int: index into the club's squad of the player in the slot
    ball_xy: np.ndarray  # (S,) complex
    ball_z: np.ndarray
    ball_in_play: np.ndarray
    ball_poss: np.ndarray
    subs: list[Substitution]
    goals: list[GoalEvent]
    cards: list[tuple[int, int, int]]  # (team, frame, slot)
    slot_roles: list[str] = field(default_factory=list)


def _scale(minutes: float) -> float:
    """Duration scale of scripted stoppages (1 for a full match)."""
    return float(np.clip(minutes / FULL_MATCH_MIN, 0.25, 1.0))


def plan_substitutions(tl: Timeline) -> list[Substitution]:
    """Substitutions of both clubs, at fixed fractions of the second half."""
    start2, n2 = tl.halves[1]
    walk = int(round(min(25.0, max(6.0, 0.1 * n2 / tl.fps)) * tl.fps))  # walk-off window
    subs = []
    for team, club in enumerate(CLUBS):
        for frac, out_i, in_i in club.subs:
            frame = start2 + int(round(frac * n2))
            subs.append(Substitution(team, out_i, out_i, in_i, frame, walk))
    return sorted(subs, key=lambda s: s.frame)


def plan_goals(rng: np.random.Generator, tl: Timeline, subs: list[Substitution]) -> list[tuple[int, int]]:
    """Goal (team, frame) pairs; the expected count scales with the playing time."""
    share = min(1.0, tl.n_slots / tl.fps / 60.0 / FULL_MATCH_MIN)
    counts = [min(3, int(rng.poisson(1.5 * share))), min(3, int(rng.poisson(1.1 * share)))]
    busy = [(s.frame - s.walk_frames - 10 * tl.fps, s.frame + 10 * tl.fps) for s in subs]
    goals = []
    for team, k in enumerate(counts):
        for _ in range(k):
            for _attempt in range(50):
                half = int(rng.integers(0, 2))
                start, n = tl.halves[half]
                frame = start + int(rng.uniform(0.1, 0.9) * n)
                clash = any(a <= frame <= b for a, b in busy)
                if not clash:
                    busy.append((frame - 20 * tl.fps, frame + 20 * tl.fps))
                    goals.append((team, frame))
                    break
    return sorted(goals, key=lambda g: g[1])


# --------------------------------------------------------------------------
# Player commands (vectorised over players and time)
# --------------------------------------------------------------------------
def _ou_noise(rng: np.random.Generator, n: int, k: int, std: float, tau_s: float, fps: int) -> np.ndarray:
    """Ornstein-Uhlenbeck wander, (n, k) complex, stationary std ``std`` m."""
    a = np.exp(-1.0 / (tau_s * fps))
    b = std * np.sqrt(1.0 - a * a)
    white = rng.normal(size=(n, k)) + 1j * rng.normal(size=(n, k))
    start = (rng.normal(size=k) + 1j * rng.normal(size=k)) * std / np.sqrt(2.0)
    out = lfilter([b / np.sqrt(2.0)], [1.0, -a], white, axis=0, zi=(a * start)[None, :])[0]
    return out


def _segment_speeds(rng: np.random.Generator, n: int, fps: int, probs_at: np.ndarray,
                    scale: np.ndarray) -> np.ndarray:
    """Commanded speed (n, k) from random-duration locomotor segments.

    probs_at: (n, k, 4) category probabilities at every frame; a segment takes
    the probabilities at its first frame. Segment durations ~ gamma, mean 3.5 s.
    """
    k = probs_at.shape[1]
    n_seg = int(n / fps / 3.5 * 1.6) + 8
    dur = rng.gamma(2.0, 1.75, size=(n_seg, k))
    starts = np.concatenate([np.zeros((1, k)), np.cumsum(dur, axis=0)[:-1]]) * fps
    start_frames = np.minimum(starts.astype(np.int64), n - 1)
    cols = np.arange(k)[None, :]
    p = probs_at[start_frames, cols]  # (n_seg, k, 4)
    u = rng.random(size=(n_seg, k, 1))
    cat = (u > np.cumsum(p, axis=2)).sum(axis=2).clip(0, 3)
    lo = CATEGORY_SPEEDS_MS[cat, 0]
    hi = CATEGORY_SPEEDS_MS[cat, 1]
    seg_speed = (lo + (hi - lo) * rng.random(size=(n_seg, k))) * scale[None, :]
    frames = np.arange(n)
    out = np.empty((n, k))
    for j in range(k):  # per player: map frames to their segment
        idx = np.searchsorted(starts[:, j], frames, side="right") - 1
        out[:, j] = seg_speed[idx, j]
    return out


@dataclass
class Burst:
    slot: int
    start: int  # frame within the half
    length: int  # frames
    speed: float  # m/s


def _spread_count(rng: np.random.Generator, mean: float) -> int:
    """A count near ``mean`` (within +-15%, stochastic rounding): less spread than Poisson."""
    x = mean * rng.uniform(0.85, 1.15)
    return int(np.floor(x) + (rng.random() < x - np.floor(x)))


def _sample_bursts(rng: np.random.Generator, weight: np.ndarray, sprint90: np.ndarray, hsr90: np.ndarray,
                   fps: int, min_gap_s: float = 4.0) -> list[Burst]:
    """Sprint and high-speed bursts of every slot, never overlapping.

    Onset density is proportional to ``weight`` (n, k); the counts are near
    sprint90 / hsr90 per 90 min (see _spread_count). Candidate onsets are
    drawn from the density and accepted in random order when their window
    (burst + min_gap_s either side) is still free, which keeps the accepted
    onsets close to the density (occupancy stays low).
    """
    n, k = weight.shape
    gap = int(min_gap_s * fps)
    bursts = []
    for j in range(k):
        cw = np.cumsum(weight[:, j])
        if cw[-1] <= 0:
            continue
        n_sprint = _spread_count(rng, sprint90[j] * n / fps / 5400.0)
        n_hsr = _spread_count(rng, hsr90[j] * n / fps / 5400.0)
        kinds = [(SPRINT_SPEED_MS, SPRINT_COMMAND_S)] * n_sprint + [(HSR_SPEED_MS, HSR_COMMAND_S)] * n_hsr
        cand = np.searchsorted(cw, rng.random(3 * len(kinds) + 4) * cw[-1]).tolist()
        taken = np.zeros(n + 1, bool)
        i = 0
        for s in cand:
            if i == len(kinds):
                break
            speed_rng, dur_rng = kinds[i]
            length = int(rng.uniform(*dur_rng) * fps)
            a, b = max(s - gap, 0), s + length + gap
            if b >= n or taken[a:b].any():
                continue
            taken[a:b] = True
            bursts.append(Burst(j, s, length, float(rng.uniform(*speed_rng))))
            i += 1
    return sorted(bursts, key=lambda b: (b.start, b.slot))


@dataclass
class HalfPlan:
    """Precomputed per-frame commands of one half for the integrator."""

    target: np.ndarray  # (n, 22) complex
    speed: np.ndarray  # (n, 22) m/s
    kappa: np.ndarray  # (n, 22) 1/s heading pull gain
    catch: np.ndarray  # (n, 22) bool, catch-up allowed
    chase: np.ndarray  # (n, 22) bool, may go to the ball
    heading_noise: np.ndarray  # (n, 22) rad per frame
    vscale: np.ndarray  # (n, 22) 0..1 multiplier of the commanded velocity (smooth starts and stops)
    ball: BallTrack
    dirs: tuple[float, float]
    init_pos: np.ndarray  # (22,) complex


def plan_half(rng: np.random.Generator, n: int, fps: int, ball: BallTrack, dirs: tuple[float, float],
              half_index: int, walkoffs: list[tuple[int, int, int]]) -> HalfPlan:
    """Build the commanded targets and speeds of all 22 slots for one half.

    walkoffs: (slot 0..21, first frame, last frame exclusive) of walk-off windows.
    """
    k = 22
    dt = 1.0 / fps
    roles = [POSITION_ROLE[pos] for club in CLUBS for pos, _, _ in FORMATIONS[club.formation]]
    prof = [ROLES[r] for r in roles]
    # team shape follows a lagged ball (1.5 s) and a smoothed possession share (2 s)
    a_ball = np.exp(-dt / 1.5)
    lag_ball = lfilter([1 - a_ball], [1, -a_ball], ball.xy, zi=[a_ball * ball.xy[0]])[0]
    a_pos = np.exp(-dt / 2.0)
    share_home = lfilter([1 - a_pos], [1, -a_pos], (ball.poss == 0).astype(float),
                         zi=[a_pos * float(ball.poss[0] == 0)])[0]
    anchors = np.concatenate([
        team_anchors(lag_ball, share_home, dirs[0], formation_offsets(HOME)),
        team_anchors(lag_ball, 1.0 - share_home, dirs[1], formation_offsets(AWAY)),
    ], axis=1)
    is_gk = np.array([r == "GK" for r in roles])
    wander_std = np.where(is_gk, 1.2, 3.5)
    wander = _ou_noise(rng, n, k, 1.0, 10.0, fps) * wander_std[None, :]
    target = anchors + wander

    # proximity to the ball (anchor based) and fatigue late in the half (Mohr et al. 2003)
    prox = np.exp(-np.abs(anchors - ball.xy[:, None]) / 20.0)
    prox_n = prox / max(prox.mean(), 1e-9)
    frac = np.arange(n) / n
    fatigue = (1.0 - 0.40 * frac**2) * (0.97 if half_index == 1 else 1.0)
    jog_fatigue = 1.0 - 0.25 * frac**2

    base = np.array([p.probs for p in prof])  # (k, 4)
    probs = np.empty((n, k, 4))
    probs[:] = base[None, :, :]
    probs[:, :, :2] *= np.maximum(1.4 - 0.4 * prox_n, 0.4)[:, :, None]  # far from the ball: walk
    probs[:, :, 2] *= (0.6 + 0.4 * prox_n) * jog_fatigue[:, None]
    probs[:, :, 3] *= (0.3 + 0.7 * prox_n) * fatigue[:, None]
    probs /= probs.sum(axis=2, keepdims=True)
    probs[~ball.in_play] = STOPPAGE_PROBS
    scale = np.array([p.speed_scale for p in prof])
    speed = _segment_speeds(rng, n, fps, probs, scale) * (1.0 - 0.10 * frac**2)[:, None]

    kappa = np.full((n, k), 1.2)
    catch = np.ones((n, k), bool)
    chase = np.broadcast_to(~is_gk[None, :], (n, k)).copy()

    # bursts only in play, more often near the ball, fewer late in the half
    edge = int(6 * fps)
    live = ball.in_play.astype(float)
    live[:edge] = 0.0
    live[-edge:] = 0.0
    blocked = np.zeros((n, k), bool)
    for slot, a, b in walkoffs:
        blocked[max(a - edge, 0):min(b + edge, n), slot] = True
    weight = live[:, None] * fatigue[:, None] * (0.5 + prox_n) * ~blocked
    sprint90 = np.array([p.sprints_per90 for p in prof])
    hsr90 = np.array([p.hsr_per90 for p in prof])
    team_of = np.repeat([0, 1], 11)
    for bu in _sample_bursts(rng, weight, sprint90, hsr90, fps):
        j, s, e = bu.slot, bu.start, bu.start + bu.length
        team = team_of[j]
        d = dirs[team]
        attacking = ball.poss[s] == team
        if attacking:
            heading = d * np.exp(1j * rng.normal(0.0, 0.6))
        elif rng.random() < 0.5:
            to_ball = ball.xy[s] - anchors[s, j]
            heading = to_ball / abs(to_ball) if abs(to_ball) > 1 else -d
        else:
            heading = -d * np.exp(1j * rng.normal(0.0, 0.6))
        run_vec = heading * bu.speed * bu.length / fps * 0.9
        run_target = anchors[s:e, j] + run_vec
        target[s:e, j] = np.clip(run_target.real, -48, 48) + 1j * np.clip(run_target.imag, -31, 31)
        speed[s:e, j] = bu.speed
        kappa[s:e, j] = 0.8
        catch[s:e, j] = False
        chase[s:e, j] = False

    for slot, a, b in walkoffs:
        bench = complex(-6.0 if slot < 11 else 6.0, -33.0)
        target[a:b, slot] = bench
        speed[a:b, slot] = 2.5  # brisk walk / jog off the pitch
        kappa[a:b, slot] = 3.0
        catch[a:b, slot] = False
        chase[a:b, slot] = False

    # smooth speed commands over 0.4 s so accelerations ramp
    speed = uniform_filter1d(speed, size=max(1, int(0.4 * fps)), axis=0, mode="nearest")
    heading_noise = rng.normal(0.0, HEADING_NOISE * np.sqrt(dt), size=(n, k))
    # kick-off: every player in his own half
    init = anchors[0].copy()
    for team in (0, 1):
        sl = slice(11 * team, 11 * team + 11)
        xn = init[sl].real * dirs[team]
        init[sl] = np.minimum(xn, -1.0) * dirs[team] + 1j * init[sl].imag
    vscale = _velocity_ramps(n, fps, walkoffs)
    return HalfPlan(target, speed, kappa, catch, chase, heading_noise, vscale, ball, dirs, init)


def _smoothstep(x: np.ndarray) -> np.ndarray:
    """0 below 0, 1 above 1, 3x^2 - 2x^3 in between."""
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _velocity_ramps(n: int, fps: int, walkoffs: list[tuple[int, int, int]], ramp_s: float = 1.5) -> np.ndarray:
    """Velocity command multiplier (n, 22): players start and stop smoothly.

    Ramps up over ``ramp_s`` after kick-off, down over the last ``ramp_s`` of
    the half (the whistle), down before a player leaves at a substitution and
    up again for the substitute, so no stint begins or ends with a jolt.
    """
    t = np.arange(n) / fps
    half = _smoothstep(t / ramp_s) * _smoothstep((n / fps - t) / ramp_s)
    out = np.repeat(half[:, None], 22, axis=1)
    for slot, _a, b in walkoffs:
        sub_t = b / fps
        out[:, slot] *= np.where(t < sub_t, _smoothstep((sub_t - t) / ramp_s), _smoothstep((t - sub_t) / ramp_s))
    return out


# --------------------------------------------------------------------------
# Integrator (time loop; vectorised over players and over both halves)
# --------------------------------------------------------------------------
def chase_commands(ball: BallTrack, dirs: tuple[float, float]) -> tuple[np.ndarray, ...]:
    """Per-frame ball-chasing commands of the two teams of one half.

    Returns goal point (n, 2) complex, speed limit (n, 2) m/s, feed-forward
    velocity (n, 2) complex m/s and active flag (n, 2): the team in possession
    goes to where the ball will be controlled (and walks to it for a restart),
    the other team presses from 2 m goal-side, only while the ball is in play.
    """
    n = len(ball.xy)
    goal = np.empty((n, 2), complex)
    vmax = np.empty((n, 2))
    ff = np.zeros((n, 2), complex)
    active = np.empty((n, 2), bool)
    bt = ball.target
    for team in (0, 1):
        has = ball.poss == team
        to_goal = complex(-dirs[team] * HALF_LENGTH_M, 0.0) - bt
        press = bt + 2.0 * to_goal / (np.abs(to_goal) + 1e-9)
        goal[:, team] = np.where(has, bt, press)
        vmax[:, team] = np.where(has, np.where(ball.in_play, CHASE_MAX_MS, 2.5), PRESS_MAX_MS)
        ff[:, team] = np.where(has, ball.target_vel, 0.0)
        active[:, team] = ball.in_play | has
    return goal, vmax, ff, active


def _pad(a: np.ndarray, n: int) -> np.ndarray:
    """Pad along axis 0 to length n by repeating the last row."""
    if len(a) >= n:
        return a
    return np.concatenate([a, np.repeat(a[-1:], n - len(a), axis=0)])


def _stop_before_lines(p: np.ndarray, v: np.ndarray, a: np.ndarray) -> np.ndarray:
    """Acceleration (complex, m/s^2) that stops each player before the lines.

    Per axis, a player moving towards a line at speed u with room r left must
    decelerate by at least u^2 / 2r; where the planned acceleration does not,
    that axis is overridden and the other axis is cut back to keep |a| within
    ACCEL_MAX_MS2 (the along-the-line motion gives way).
    """
    ax, ay = a.real.copy(), a.imag.copy()
    for comp, p_ax, v_ax, lim in ((ax, p.real, v.real, X_STOP_M), (ay, p.imag, v.imag, Y_STOP_M)):
        sgn = np.sign(v_ax)
        room = np.maximum(lim - p_ax * sgn, 0.05)
        need = v_ax * v_ax / (2.0 * room)
        brake = (need > 0.5) & (comp * sgn > -need)
        comp[brake] = -need[brake] * sgn[brake]
        comp[:] = np.clip(comp, -ACCEL_MAX_MS2, ACCEL_MAX_MS2)
    # keep |a| in budget: the axis that was not forced gives way
    over = np.hypot(ax, ay) > ACCEL_MAX_MS2
    if over.any():
        fx = np.abs(ax) >= np.abs(ay)
        big, small = np.where(fx, ax, ay), np.where(fx, ay, ax)
        small = np.sign(small) * np.sqrt(np.maximum(ACCEL_MAX_MS2**2 - big * big, 0.0))
        ax = np.where(over, np.where(fx, big, small), ax)
        ay = np.where(over, np.where(fx, small, big), ay)
    return ax + 1j * ay


def integrate(plans: list[HalfPlan], fps: int) -> list[np.ndarray]:
    """Second-order steering of all players of all halves at once.

    The halves are independent (both start from a kick-off), so they run side by
    side as extra columns: one Python step per frame of the longest half,
    numpy over 22 x halves players. Returns positions (n_half, 22) complex (m)
    for each half.
    """
    lengths = [len(p.speed) for p in plans]
    n = max(lengths)
    dt = 1.0 / fps
    cat = lambda f: np.concatenate([_pad(f(p), n) for p in plans], axis=1)  # noqa: E731
    target = cat(lambda p: p.target)
    speed = cat(lambda p: p.speed)
    kdt = cat(lambda p: p.kappa * dt)
    gcatch = cat(lambda p: p.catch * CATCH_UP_GAIN)
    chase_ok = cat(lambda p: p.chase)
    noise = cat(lambda p: p.heading_noise)
    vscale = cat(lambda p: p.vscale)
    ball_pairs = np.stack([_pad(p.ball.target, n) for p in plans], axis=1)  # (n, halves)
    col_half = np.repeat(np.arange(len(plans)), 22)
    cmds = [chase_commands(p.ball, p.dirs) for p in plans]
    c_goal = np.concatenate([_pad(c[0], n) for c in cmds], axis=1)
    c_vmax = np.concatenate([_pad(c[1], n) for c in cmds], axis=1)
    c_ff = np.concatenate([_pad(c[2], n) for c in cmds], axis=1)
    c_active = np.concatenate([_pad(c[3], n) for c in cmds], axis=1)

    k = target.shape[1]
    groups = k // 11
    ar = np.arange(groups)
    pos = np.concatenate([p.init_pos for p in plans]).astype(complex)
    vel = np.zeros(k, complex)
    theta = np.angle(target[0] - pos)
    cur = np.zeros(groups, np.int64)
    have = np.zeros(groups, bool)
    out = np.empty((n, k), complex)
    two_b = 2.0 * BRAKE_MS2
    inv_tau = 1.0 / TAU_S
    amax2 = ACCEL_MAX_MS2**2
    h = np.exp(1j * theta)
    room = np.empty((4, k))
    mn, mx = np.minimum, np.maximum  # ufuncs: much cheaper than np.clip on short arrays
    for t in range(n):
        d = target[t] - pos
        dist = np.abs(d) + 1e-9
        u = d / dist
        w = mn(mx((dist - 1.5) * 0.25, 0.0), 1.0)  # heading pull grows from 1.5 m to 5.5 m off target
        z = u * np.conj(h)
        theta = theta + kdt[t] * w * np.arctan2(z.imag, z.real) + noise[t]
        s = speed[t]
        c = mn(mx(gcatch[t] * (dist - CATCH_UP_FROM_M), 0.0), CATCH_UP_MAX_MS)
        h = np.exp(1j * theta)
        vd = s * h + c * u
        vd = vd * mn(1.0, mx(s, c) / (np.abs(vd) + 1e-9))
        # the nearest eligible player of each team goes to the ball (with hysteresis)
        db = np.where(chase_ok[t], np.abs(ball_pairs[t][col_half] - pos), np.inf).reshape(groups, 11)
        jmin = db.argmin(axis=1)
        dmin = db[ar, jmin]
        dcur = np.where(have, db[ar, cur], np.inf)
        cur = np.where(dmin < dcur - 2.0, jmin, cur)
        have = c_active[t] & (db[ar, cur] < np.inf)
        if have.any():
            g = ar[have]
            cols = g * 11 + cur[have]
            e = c_goal[t, g] - pos[cols]
            de = np.abs(e) + 1e-9
            v = c_ff[t, g] + e * (mn(c_vmax[t, g], 0.9 * de) / de)
            v = v * mn(1.0, CHASE_MAX_MS / (np.abs(v) + 1e-9))
            vd[cols] = v
            turn = np.abs(v) > 0.2
            theta[cols[turn]] = np.angle(v[turn])
            h[cols[turn]] = v[turn] / np.abs(v[turn])
        # plan braking before the lines, from the position predicted TAU_S ahead
        xp = pos.real + vel.real * TAU_S
        yp = pos.imag + vel.imag * TAU_S
        np.subtract(X_SOFT_M, xp, out=room[0])
        np.add(X_SOFT_M, xp, out=room[1])
        np.subtract(Y_SOFT_M, yp, out=room[2])
        np.add(Y_SOFT_M, yp, out=room[3])
        np.sqrt(mx(room, 0.0, out=room) * two_b, out=room)
        vd = (mn(mx(vd.real, -room[1]), room[0]) + 1j * mn(mx(vd.imag, -room[3]), room[2])) * vscale[t]
        # bounded acceleration: force-velocity limit forward, a deceleration limit,
        # and the total limit; speed changes get the budget first, except a reserve
        # for turning
        a = (vd - vel) * inv_tau
        sp = np.abs(vel)
        uv = vel / (sp + 1e-9)
        at = (a * np.conj(uv)).real
        an = a - at * uv
        # turning (and braking along a touchline) always keeps up to TURN_RESERVE_MS2
        at_room = np.sqrt(amax2 - mn(np.abs(an), TURN_RESERVE_MS2) ** 2)
        at = mn(mx(at, -mn(DECEL_MAX_MS2, at_room)), mn(A0_MS2 * mx(1.0 - sp * (1.0 / V0_MS), 0.0), at_room))
        an_max = np.sqrt(mx(amax2 - at * at, 0.0))
        an = an * mn(1.0, an_max / (np.abs(an) + 1e-12))
        a = at * uv + an
        near = (np.abs(xp) > X_SOFT_M - 3.0) | (np.abs(yp) > Y_SOFT_M - 3.0)
        if near.any():
            idx = np.flatnonzero(near)
            a[idx] = _stop_before_lines(pos[idx], vel[idx], a[idx])
        vel = vel + a * dt
        vel = vel * mn(1.0, SPEED_CAP_MS / (np.abs(vel) + 1e-12))
        pos = pos + vel * dt
        out[t] = pos
    # safety only: braking keeps players inside, this clip should never bite
    out = np.clip(out.real, -X_HARD_M, X_HARD_M) + 1j * np.clip(out.imag, -Y_HARD_M, Y_HARD_M)
    return [out[:ln, 22 * i:22 * (i + 1)] for i, ln in enumerate(lengths)]


# --------------------------------------------------------------------------
# Whole match
# --------------------------------------------------------------------------
def simulate_match(minutes: float = 95, fps: int = 25, seed: int = 0) -> SynthMatch:
    """Simulate the fictional match (no files). Deterministic for a seed."""
    rng = np.random.default_rng(seed)
    tl = make_timeline(minutes, fps)
    scale = _scale(minutes)
    subs = plan_substitutions(tl)
    goal_plan = plan_goals(rng, tl, subs)
    offsets = (formation_offsets(HOME), formation_offsets(AWAY))
    positions = np.empty((tl.n_slots, 22), complex)
    ball_parts = []
    scored: list[tuple[int, int]] = []
    plans = []
    for h, (start, n) in enumerate(tl.halves):
        dirs = (1.0, -1.0) if h == 0 else (-1.0, 1.0)
        forced = []
        walkoffs = []
        for s in subs:
            if start <= s.frame < start + n:
                a = max(s.frame - s.walk_frames, start)
                stop_from = (s.frame - start - s.walk_frames // 2) / fps  # ball out for the change
                forced.append((stop_from, (s.frame - start) / fps + max(2.0, 6.0 * scale)))
                walkoffs.append((11 * s.team + s.slot, a - start, s.frame - start))
        goals = [((f - start) / fps, team) for team, f in goal_plan if start <= f < start + n]
        script = _BallScript(rng, n / fps, dirs, offsets, scale)
        segs = script.run(kickoff_team=h, forced=forced, goals=goals)
        scored += [(team, min(start + int(round(t * fps)), start + n - 1)) for t, team in script.goal_times]
        ball = rasterize_ball(segs, n, fps)
        plans.append(plan_half(rng, n, fps, ball, dirs, h, walkoffs))
        ball_parts.append(ball)
    for (start, n), part in zip(tl.halves, integrate(plans, fps)):
        positions[start:start + n] = part
    squad_index = np.tile(np.arange(11), (tl.n_slots, 2))
    for s in subs:
        squad_index[s.frame:, 11 * s.team + s.slot] = s.in_index
    goals = _goal_events(rng, sorted(scored, key=lambda g: g[1]), squad_index)
    cards = _cards(rng, tl)
    roles = [POSITION_ROLE[pos] for club in CLUBS for pos, _, _ in FORMATIONS[club.formation]]
    return SynthMatch(
        timeline=tl,
        positions=positions,
        squad_index=squad_index,
        ball_xy=np.concatenate([b.xy for b in ball_parts]),
        ball_z=np.concatenate([b.z for b in ball_parts]),
        ball_in_play=np.concatenate([b.in_play for b in ball_parts]),
        ball_poss=np.concatenate([b.poss for b in ball_parts]),
        subs=subs,
        goals=goals,
        cards=cards,
        slot_roles=roles,
    )


def _goal_events(rng: np.random.Generator, plan: list[tuple[int, int]], squad_index: np.ndarray) -> list[GoalEvent]:
    """Pick scorers (forwards/midfielders on the pitch) and assisters."""
    events = []
    for team, frame in plan:
        club = CLUBS[team]
        groups = [POSITION_GROUP.get(club.squad[squad_index[frame, 11 * team + s]][3], club.squad[squad_index[frame, 11 * team + s]][3]) for s in range(11)]
        attackers = [s for s in range(1, 11) if groups[s] in ("FW", "MF")]
        scorer = int(rng.choice(attackers))
        others = [s for s in range(1, 11) if s != scorer]
        assist = int(rng.choice(others)) if rng.random() < 0.75 else None
        events.append(GoalEvent(team, frame, scorer, assist))
    return events


def _cards(rng: np.random.Generator, tl: Timeline) -> list[tuple[int, int, int]]:
    """Yellow cards (two in a full match, scaled with the playing time): (team, frame, outfield slot)."""
    share = min(1.0, tl.n_slots / tl.fps / 60.0 / FULL_MATCH_MIN)
    out = []
    for _ in range(int(round(2 * share))):
        team = int(rng.integers(0, 2))
        frame = int(rng.integers(int(0.1 * tl.n_slots), int(0.95 * tl.n_slots)))
        out.append((team, frame, int(rng.integers(1, 11))))
    return sorted(out, key=lambda c: c[1])


# --------------------------------------------------------------------------
# Faults
# --------------------------------------------------------------------------
@dataclass
class FaultPlan:
    """Injected faults, in slot indices (frame ids)."""

    outage: set[int] = field(default_factory=set)
    hidden: dict[int, set[int]] = field(default_factory=dict)  # frame -> hidden column indices (0..21)
    jumps: dict[int, tuple[int, complex]] = field(default_factory=dict)  # frame -> (column, new position)
    duplicates: set[int] = field(default_factory=set)
    swaps: set[int] = field(default_factory=set)  # frame f: written as f+1 then f
    records: list[dict] = field(default_factory=list)


def _fault_counts(minutes: float) -> dict[str, int]:
    """How many faults of each kind for a recording of ``minutes``."""
    return {
        "dropout": max(4, int(round(minutes / 8.0))),
        "jump": max(3, int(round(minutes / 20.0))),
        "duplicate": max(3, int(round(minutes / 20.0))),
        "out_of_order": max(3, int(round(minutes / 20.0))),
    }


def plan_faults(rng: np.random.Generator, m: SynthMatch, minutes: float, *, outage: bool, dropouts: bool,
                duplicates: bool, out_of_order: bool, jumps: bool) -> FaultPlan:
    """Choose non-overlapping fault windows (at least 1 s apart, away from period edges and subs)."""
    tl = m.timeline
    fps = tl.fps
    busy = np.zeros(tl.n_slots, bool)
    margin = fps  # 1 s
    for start, n in tl.halves:
        busy[start:start + 2 * fps] = True
        busy[max(start + n - 2 * fps, start):start + n] = True
    for s in m.subs:
        busy[max(s.frame - s.walk_frames - 2 * fps, 0):s.frame + 2 * fps] = True
    fp = FaultPlan()
    ts = tl.timestamps()

    def take(length: int) -> int | None:
        for _ in range(200):
            f = int(rng.integers(0, tl.n_slots - length))
            if not busy[max(f - margin, 0):f + length + margin].any():
                busy[max(f - margin, 0):f + length + margin] = True
                return f
        return None

    def pid(frame: int, col: int) -> str:
        team = col // 11
        return player_id(CLUBS[team], CLUBS[team].squad[m.squad_index[frame, col]][0])

    half_of = np.repeat([0, 1], [tl.n1, tl.n2])
    period_name = ("first_half", "second_half")
    if outage:
        length = int(round(OUTAGE_S * fps))
        fits = [h for h, (s, n) in enumerate(tl.halves) if n >= length + 8 * fps]
        if fits:
            cs = np.concatenate([[0], np.cumsum(busy)])
            starts = []
            for h in fits:
                f0, f1 = tl.halves[h][0] + 4 * fps, sum(tl.halves[h]) - length - 4 * fps
                cand = np.arange(f0, max(f0, f1))
                starts += cand[cs[cand + length + margin] - cs[cand - margin] == 0].tolist()
            if starts:  # clear of substitutions and period edges
                f = int(rng.choice(starts))
                h = int(half_of[f])
            else:
                h = int(rng.choice(fits))
                s, n = tl.halves[h]
                f = s + int(rng.uniform(0.3, 0.6) * (n - length))
            busy[max(f - margin, 0):f + length + margin] = True
            fp.outage = set(range(f, f + length))
            fp.records.append({
                "kind": "outage", "period": period_name[h], "time": ts[f], "duration_s": OUTAGE_S,
                "frame_ids": list(range(f, f + length)), "player_id": None,
                "last_frame_before": f - 1, "first_frame_after": f + length,
            })
    counts = _fault_counts(minutes)
    if dropouts:
        for _ in range(counts["dropout"]):
            dur = float(rng.uniform(0.5, 3.0))
            length = max(1, int(round(dur * fps)))
            f = take(length)
            if f is None:
                continue
            col = int(rng.integers(0, 22))
            for g in range(f, f + length):
                fp.hidden.setdefault(g, set()).add(col)
            fp.records.append({
                "kind": "dropout", "period": period_name[half_of[f]], "time": ts[f],
                "duration_s": length / fps, "frame_ids": list(range(f, f + length)), "player_id": pid(f, col),
            })
    if jumps:
        for _ in range(counts["jump"]):
            f = take(1)
            if f is None:
                continue
            col = int(rng.integers(0, 22))
            p = m.positions[f, col]
            for _try in range(32):
                dist = float(rng.uniform(15.0, 30.0))
                new = p + dist * np.exp(1j * rng.uniform(0, 2 * np.pi))
                if abs(new.real) <= 52.0 and abs(new.imag) <= 33.5:
                    break
            else:
                continue
            fp.jumps[f] = (col, new)
            fp.records.append({
                "kind": "jump", "period": period_name[half_of[f]], "time": ts[f], "duration_s": 1.0 / fps,
                "frame_ids": [f], "player_id": pid(f, col), "displacement_m": round(float(abs(new - p)), 2),
            })
    if duplicates:
        for _ in range(counts["duplicate"]):
            f = take(1)
            if f is None:
                continue
            fp.duplicates.add(f)
            fp.records.append({
                "kind": "duplicate", "period": period_name[half_of[f]], "time": ts[f], "duration_s": 0.0,
                "frame_ids": [f], "player_id": None,
            })
    if out_of_order:
        for _ in range(counts["out_of_order"]):
            f = take(2)
            if f is None or half_of[f] != half_of[f + 1]:
                continue
            fp.swaps.add(f)
            fp.records.append({
                "kind": "out_of_order", "period": period_name[half_of[f]], "time": ts[f], "duration_s": 2.0 / fps,
                "frame_ids": [f, f + 1], "player_id": None, "written_order": [f + 1, f],
            })
    fp.records.sort(key=lambda r: (r["frame_ids"][0], r["kind"]))
    return fp


# --------------------------------------------------------------------------
# Wearables variant (docs/wearables.md): one team, GNSS fixes, heart rate
# --------------------------------------------------------------------------
# The centre spot of the wearables ground: open sea in the North Atlantic, so the
# location is plainly fictional. The bearing of +x (clockwise from north) is arbitrary.
GNSS_CENTRE = (47.5, -30.0)
GNSS_BEARING_DEG = 24.0
LATLON_DECIMALS = 7  # 1e-7 degree is about 1.1 cm of latitude, 0.75 cm of longitude here

# Heart-rate profiles of the home squad by jersey: (hr_max_bpm, hr_rest_bpm, sex).
# Invented; HRmax ~180-205 and HRrest ~40-60 bpm are usual for professional
# players (from memory). The competition is a men's league, so all are male.
HOME_HR_PROFILES: dict[int, tuple[int, int, str]] = {
    1: (186, 54, "male"), 3: (197, 47, "male"), 5: (191, 51, "male"), 4: (189, 56, "male"),
    2: (201, 44, "male"), 11: (199, 49, "male"), 8: (194, 42, "male"), 6: (192, 50, "male"),
    7: (203, 46, "male"), 10: (190, 53, "male"), 9: (195, 48, "male"), 13: (184, 58, "male"),
    15: (196, 52, "male"), 14: (198, 45, "male"), 17: (193, 55, "male"), 19: (200, 47, "male"),
}
# Jerseys whose resting heart rate the club never measured: left off the sheet, so
# the demo shows the "omitted, and why" path (the simulation still uses the value above).
HR_REST_UNKNOWN = frozenset({5})

# Heart-rate model (1 Hz). Target = HRrest + %HRR(v) x (HRmax - HRrest), with
# %HRR(v) = HRR_FLOOR + HRR_SPAN (1 - exp(-v / HRR_SPEED_MS)) rising with the running
# speed v (m/s) averaged over the second: heart rate rises with running speed and
# levels off near maximal speeds (common practice); the constants put an outfield
# player's match mean near 80-85 % HRmax (Stolen et al. 2005, Sports Med 35:501).
HRR_FLOOR = 0.40
HRR_SPAN = 0.60
HRR_SPEED_MS = 2.5
HRR_SEATED = 0.20  # on the bench, after being substituted, in the half-time break (from memory)
HRR_WARM_UP = 0.55  # warming up: substitutes before they come on, everyone before each kick-off (from memory)
WARM_UP_S = 300.0  # warm-up before coming on, in a full match (scaled like stoppages)
# First-order lag towards the target, per player: rising faster than falling
# (heart-rate on-kinetics ~20-40 s at the onset of running, slower recovery; from memory).
HR_TAU_UP_S = (25.0, 40.0)
HR_TAU_DOWN_S = (40.0, 60.0)
# Cardiovascular drift: a slow rise at the same running over each half
# (Coyle & Gonzalez-Alonso 2001, Exerc Sport Sci Rev 29:88); the half-time break resets it.
HR_DRIFT_BPM = (3.0, 6.0)
HR_NOISE_BPM = 1.2  # chest-strap measurement noise, sd (from memory: ~1-2 bpm)
# Faults of the heart-rate channel and of the units.
HR_DROPOUT_S = (60.0, 90.0)  # one strap loses contact
HR_SPIKE_BPM = 255  # one implausible sample (the server rejects > 230 bpm)
UNIT_LATE_S = 180.0  # one unit switched on late, in a full match (scaled like stoppages)
HR_EDGE_S = 5.0  # HR faults stay this far inside a period


def hr_lag(target: np.ndarray, start: np.ndarray, tau_up: np.ndarray, tau_down: np.ndarray,
           dt_s: float = 1.0) -> np.ndarray:
    """Heart rate (bpm) following ``target`` (G, P) bpm through a first-order lag.

    Each step moves the rate a share 1 - exp(-dt/tau) of the way to the target,
    with tau_up (s) while the target is above the rate and tau_down (s) below it.
    start: (P,) bpm before the first step. A loop per second (not per frame): the
    asymmetric lag has no closed form.
    """
    a_up = 1.0 - np.exp(-dt_s / np.asarray(tau_up, float))
    a_down = 1.0 - np.exp(-dt_s / np.asarray(tau_down, float))
    out = np.empty(target.shape)
    hr = np.asarray(start, float).copy()
    for k in range(target.shape[0]):
        gap = target[k] - hr
        hr = hr + gap * np.where(gap > 0, a_up, a_down)
        out[k] = hr
    return out


def hrr_of_speed(speed_ms: np.ndarray) -> np.ndarray:
    """Target share of the heart-rate reserve (0-1) at a running speed (m/s); see HRR_FLOOR."""
    return HRR_FLOOR + HRR_SPAN * (1.0 - np.exp(-np.asarray(speed_ms, float) / HRR_SPEED_MS))


@dataclass
class WearablesPlan:
    """What the wearables variant adds to a simulated match (home team only)."""

    unit_on: np.ndarray  # (S, 11) bool: the unit of the home player in each slot streams
    samples: list[tuple[int, str, int]]  # (ms after kick-off, player id, bpm), time-ordered
    records: list[dict]  # unit_late, hr_dropout, hr_spike (faults.json)
    profiles: dict[str, tuple[int, int, str]]  # player id -> (hr_max_bpm, hr_rest_bpm, sex)


def _home_speed(m: SynthMatch) -> np.ndarray:
    """Speed (S, 11) m/s in each home slot, from frame-to-frame steps within each half."""
    fps = m.timeline.fps
    out = np.empty((m.timeline.n_slots, 11))
    for start, n in m.timeline.halves:
        p = m.positions[start:start + n, :11]
        step = np.abs(np.diff(p, axis=0)) * fps
        out[start + 1:start + n] = step
        out[start] = step[0] if n > 1 else 0.0
    return out


def plan_wearables(m: SynthMatch, seed: int, faults: bool = True) -> WearablesPlan:
    """Units and heart rate of the home team: who streams when, 1 Hz samples, HR faults.

    Deterministic for a seed (its own random stream, so the tracking of the match
    is the normal demo's). Heart rate follows each player's running speed through
    the lag (hr_lag), plus cardiovascular drift over each half and strap noise,
    rounded to whole bpm. Samples exist while a player's unit is on and he is on
    the pitch in a period (the break is not streamed). One unit starts late
    (UNIT_LATE_S), one strap drops out (HR_DROPOUT_S) and one sample is a spike
    (HR_SPIKE_BPM); ``faults`` False leaves these three out.
    """
    rng = np.random.default_rng([seed, 2])
    tl = m.timeline
    fps = tl.fps
    n_slots = tl.n_slots
    scale = _scale(tl.n_slots / fps / 60.0)
    squad = HOME.squad
    n_squad = len(squad)
    ids = [player_id(HOME, j) for j, _, _, _ in squad]
    hr_max = np.array([HOME_HR_PROFILES[j][0] for j, _, _, _ in squad], float)
    hr_rest = np.array([HOME_HR_PROFILES[j][1] for j, _, _, _ in squad], float)
    who = m.squad_index[:, :11]  # squad index of the home player in each slot
    rows = np.arange(n_slots)[:, None]
    frame_ms = tl.frame_ms()
    halves_ms = ((0, tl.first_half_end_ms()), (tl.second_half_start_ms(), tl.second_half_end_ms()))
    ts = tl.timestamps()
    half_of = np.repeat([0, 1], [tl.n1, tl.n2])
    period_name = ("first_half", "second_half")
    records: list[dict] = []

    # one unit switched on late: an outfield starter who plays the whole match
    home_subbed = {s.slot for s in m.subs if s.team == 0}
    steady = [s for s in range(1, 11) if s not in home_subbed]
    late_slot = int(rng.choice(steady))
    late_n = min(int(round(UNIT_LATE_S * scale * fps)), tl.n1 - fps) if faults else 0
    unit_on = np.ones((n_slots, 11), bool)
    unit_on[:late_n, late_slot] = False
    if late_n > 0:
        records.append({
            "kind": "unit_late", "period": "first_half", "time": ts[0], "duration_s": late_n / fps,
            "frame_ids": list(range(late_n)), "player_id": ids[late_slot],
        })

    # running speed of each squad member per second of the match clock (NaN: not on the pitch)
    speed = _home_speed(m)
    n_sec = int(tl.second_half_end_ms() // 1000) + 2
    sec = np.repeat(frame_ms // 1000, 11).reshape(n_slots, 11)
    flat = (sec * n_squad + who).ravel()
    sums = np.bincount(flat, weights=speed.ravel(), minlength=n_sec * n_squad).reshape(n_sec, n_squad)
    counts = np.bincount(flat, minlength=n_sec * n_squad).reshape(n_sec, n_squad)
    present = counts > 0
    hrr = np.full((n_sec, n_squad), HRR_SEATED)
    hrr[present] = hrr_of_speed(sums[present] / counts[present])
    warm = int(round(WARM_UP_S * scale))
    for q in range(11, n_squad):  # substitutes warm up before they come on
        on = np.flatnonzero(present[:, q])
        if on.size:
            hrr[max(on[0] - warm, 0):on[0], q] = HRR_WARM_UP
    kick2 = tl.second_half_start_ms() // 1000
    hrr[max(kick2 - warm, 0):kick2, :] = HRR_WARM_UP  # back out before the second half
    target = hr_rest + hrr * (hr_max - hr_rest)
    tau_up = rng.uniform(*HR_TAU_UP_S, size=n_squad)
    tau_down = rng.uniform(*HR_TAU_DOWN_S, size=n_squad)
    hr = hr_lag(target, hr_rest + HRR_WARM_UP * (hr_max - hr_rest), tau_up, tau_down)
    # cardiovascular drift: grows over each half in proportion to the time played in it
    drift = rng.uniform(*HR_DRIFT_BPM, size=n_squad)
    grid_ms = np.arange(n_sec) * 1000
    for h0, h1 in halves_ms:
        inside = (grid_ms >= h0) & (grid_ms < h1)
        hr[inside] += ((grid_ms[inside] - h0) / (h1 - h0))[:, None] * drift[None, :]
    hr = np.minimum(hr, hr_max)

    # 1 Hz samples, each unit on its own sub-second phase, while the unit streams
    on_q = np.zeros((n_slots, n_squad), bool)
    on_q[rows, who] = unit_on
    phase = rng.integers(0, 1000, size=n_squad)
    noise = rng.normal(0.0, HR_NOISE_BPM, size=(n_sec, n_squad))
    t = grid_ms[:, None] + phase[None, :]  # (n_sec, n_squad) ms after kick-off
    frame = np.full(t.shape, -1)
    for (h0, h1), (f0, n) in zip(halves_ms, tl.halves):
        inside = (t >= h0) & (t < h1)
        frame[inside] = f0 + np.minimum((t[inside] - h0) * fps // 1000, n - 1)
    valid = frame >= 0
    valid[valid] = on_q[frame[valid], np.nonzero(valid)[1]]
    bpm = np.rint(hr + noise).astype(np.int64)

    # strap dropout: a steady player, in the longer half, clear of its edges
    drop_slot = int(rng.choice([s for s in steady if s != late_slot]))
    h = int(np.argmax([h1 - h0 for h0, h1 in halves_ms]))
    h0, h1 = halves_ms[h]
    room_ms = h1 - h0 - 2 * HR_EDGE_S * 1000
    length_ms = int(min(rng.uniform(*HR_DROPOUT_S) * 1000, room_ms))
    if faults and length_ms >= 10_000:
        start_ms = int(h0 + HR_EDGE_S * 1000 + rng.uniform(0, room_ms - length_ms))
        col = t[:, drop_slot]
        lost = valid[:, drop_slot] & (col >= start_ms) & (col < start_ms + length_ms)
        kept = np.flatnonzero(valid[:, drop_slot] & ~lost)
        idx = np.flatnonzero(lost)
        if idx.size:
            before, after = kept[kept < idx[0]], kept[kept > idx[-1]]
            valid[idx, drop_slot] = False
            records.append({
                "kind": "hr_dropout", "period": period_name[h], "time": iso_ms(int(col[idx[0]])),
                "duration_s": (int(col[idx[-1]]) - int(col[idx[0]])) / 1000.0 + 1.0, "frame_ids": [],
                "player_id": ids[drop_slot], "samples_missing": int(idx.size),
                "last_sample_before": iso_ms(int(col[before[-1]])) if before.size else None,
                "first_sample_after": iso_ms(int(col[after[0]])) if after.size else None,
            })

    # one implausible spike, for another steady player, inside a period
    spike_slot = int(rng.choice([s for s in steady if s not in (late_slot, drop_slot)]))
    col = t[:, spike_slot]
    inner = np.zeros(n_sec, bool)
    for h0, h1 in halves_ms:
        inner |= (col >= h0 + HR_EDGE_S * 1000) & (col < h1 - HR_EDGE_S * 1000)
    cand = np.flatnonzero(valid[:, spike_slot] & inner)
    if faults and cand.size:
        k = int(rng.choice(cand))
        bpm[k, spike_slot] = HR_SPIKE_BPM
        f = int(frame[k, spike_slot])
        records.append({
            "kind": "hr_spike", "period": period_name[half_of[f]], "time": iso_ms(int(col[k])), "duration_s": 0.0,
            "frame_ids": [], "player_id": ids[spike_slot], "bpm": HR_SPIKE_BPM,
        })

    k_idx, q_idx = np.nonzero(valid)
    order = np.lexsort((q_idx, t[k_idx, q_idx]))
    samples = [(int(t[k, q]), ids[q], int(bpm[k, q])) for k, q in zip(k_idx[order], q_idx[order])]
    profiles = {ids[q]: HOME_HR_PROFILES[j] for q, (j, _, _, _) in enumerate(squad)}
    return WearablesPlan(unit_on, samples, records, profiles)


# --------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------
def _player_entry(club: Club, idx: int, starter: bool, played: bool, position: str) -> dict:
    """Match-sheet player object."""
    jersey, first, last, pos = club.squad[idx]
    group = POSITION_GROUP.get(pos, pos)
    return {
        "id": player_id(club, jersey),
        "team_id": club.team_id,
        "jersey_number": jersey,
        "first_name": first,
        "last_name": last,
        "short_name": f"{first[0]}. {last}",
        "is_starter": starter,
        "has_played": played,
        "position_group": group,
        "position": position,
        "is_captain": idx == 5,
    }


def build_meta(m: SynthMatch) -> dict:
    """CDF meta object."""
    tl = m.timeline
    e1, s2, e2 = tl.first_half_end_ms(), tl.second_half_start_ms(), tl.second_half_end_ms()
    teams = {}
    for side, club in zip(("home", "away"), CLUBS):
        teams[side] = {
            "id": club.team_id,
            "name": club.name,
            "jersey_colour": club.colour,
            "players": [
                {"id": player_id(club, j), "team_id": club.team_id, "jersey_number": j,
                 "is_starter": i < 11, "first_name": f, "last_name": l}
                for i, (j, f, l, _) in enumerate(club.squad)
            ],
        }
    return {
        "competition": {"id": "c_pacewire_demo", "name": "Pacewire Demo League (fictional)", "type": "mens"},
        "season": {"id": "s_2025_26", "name": "2025/26"},
        "match": {
            "id": MATCH_ID,
            "kickoff_time": iso_ms(0),
            "periods": [
                {"period": "first_half", "play_direction": "left_right", "start_time": iso_ms(0),
                 "end_time": iso_ms(e1), "frame_id_start": 0, "frame_id_end": tl.n1 - 1,
                 "left_team_id": HOME.team_id, "right_team_id": AWAY.team_id},
                {"period": "second_half", "play_direction": "right_left", "start_time": iso_ms(s2),
                 "end_time": iso_ms(e2), "frame_id_start": tl.n1, "frame_id_end": tl.n_slots - 1,
                 "left_team_id": AWAY.team_id, "right_team_id": HOME.team_id},
            ],
            "whistles": [
                {"type": "first_half", "sub_type": "start", "time": iso_ms(0)},
                {"type": "first_half", "sub_type": "end", "time": iso_ms(e1)},
                {"type": "second_half", "sub_type": "start", "time": iso_ms(s2)},
                {"type": "second_half", "sub_type": "end", "time": iso_ms(e2)},
            ],
            "round": "1",
            "scheduled_kickoff_time": iso_ms(0),
        },
        "teams": teams,
        "venue": {"id": VENUE["id"], "name": VENUE["name"], "pitch_length": PITCH_LENGTH_M,
                  "pitch_width": PITCH_WIDTH_M, "turf": VENUE["turf"]},
        "meta": {
            "video": None,
            "tracking": {"version": "0.1.0", "name": VENDOR, "fps": int(tl.fps), "collection_timing": "live"},
            "landmarks": None,
            "ball": None,
            "event": None,
            "meta": {"version": "0.1.0", "name": VENDOR},
            "cdf": {"version": CDF_VERSION},
        },
        "officials": [{"id": i, "first_name": f, "last_name": l, "short_name": f"{f[0]}. {l}", "type": t}
                      for i, f, l, t in OFFICIALS],
    }


def build_sheet(m: SynthMatch) -> dict:
    """CDF match sheet (with the post-match fields the validator requires)."""
    tl = m.timeline
    ts = tl.timestamps()
    half_of = lambda f: "first_half" if f < tl.n1 else "second_half"  # noqa: E731
    teams = {}
    for t, (side, club) in enumerate(zip(("home", "away"), CLUBS)):
        slot_pos = [p for p, _, _ in FORMATIONS[club.formation]]
        came_on = {s.in_index: slot_pos[s.slot] for s in m.subs if s.team == t}
        players = [_player_entry(club, i, True, True, slot_pos[i]) for i in range(11)]
        for i in range(11, len(club.squad)):
            players.append(_player_entry(club, i, False, i in came_on, came_on.get(i, "SUB")))
        teams[side] = {"id": club.team_id, "short_name": club.short, "formation": club.formation,
                       "players": players,
                       "coaches": [{"id": f"c_{club.team_id[2:]}", "first_name": club.coach[0],
                                    "last_name": club.coach[1]}]}

    def pid(team: int, frame: int, slot: int) -> str:
        club = CLUBS[team]
        return player_id(club, club.squad[m.squad_index[frame, 11 * team + slot]][0])

    score = [0, 0]
    half_score = {"first_half": [0, 0], "second_half": [0, 0]}
    goals = []
    for g in m.goals:
        score[g.team] += 1
        for h in ("first_half", "second_half"):
            if h == "second_half" or half_of(g.frame) == "first_half":
                half_score[h] = list(score)
        goals.append({
            "time": ts[g.frame], "period": half_of(g.frame), "team_id": CLUBS[g.team].team_id,
            "player_id": pid(g.team, g.frame, g.scorer_slot),
            "assist_id": None if g.assist_slot is None else pid(g.team, g.frame, g.assist_slot),
            "is_own_goal": False, "is_penalty": False, "score": {"home": score[0], "away": score[1]},
        })
    half_score["second_half"] = list(score)
    winner = None if score[0] == score[1] else CLUBS[0 if score[0] > score[1] else 1].team_id
    subs = [{
        "team_id": CLUBS[s.team].team_id, "in_time": ts[s.frame], "period": half_of(s.frame),
        "in_player_id": player_id(CLUBS[s.team], CLUBS[s.team].squad[s.in_index][0]),
        "out_time": ts[s.frame],
        "out_player_id": player_id(CLUBS[s.team], CLUBS[s.team].squad[s.out_index][0]),
    } for s in m.subs]
    cards = [{"team_id": CLUBS[t].team_id, "time": ts[f], "period": half_of(f),
              "player_id": pid(t, f, slot), "type": "yellow_card"} for t, f, slot in m.cards]
    return {
        "match": {
            "id": MATCH_ID,
            "status": {"is_neutral": False, "has_extratime": False, "has_shootout": False},
            "result": {
                "final": {"home": score[0], "away": score[1], "winning_team_id": winner},
                "first_half": {"home": half_score["first_half"][0], "away": half_score["first_half"][1]},
                "second_half": {"home": half_score["second_half"][0], "away": half_score["second_half"][1]},
            },
        },
        "teams": teams,
        "officials": [{"id": i, "first_name": f, "last_name": l, "short_name": f"{f[0]}. {l}", "type": t}
                      for i, f, l, t in OFFICIALS],
        "events": {"goals": goals, "substitutions": subs, "cards": cards},
        "meta": {"vendor": VENDOR},
    }


def _frame_lines(m: SynthMatch, fp: FaultPlan, block: int = 4096, gnss=None):
    """Yield the JSON lines (bytes, with ``\\n``) in file order, faults applied.

    Positions are rounded to the centimetre; arrays become Python lists one
    block of frames at a time, which keeps memory flat for a full match.
    gnss: a ``PitchProjection`` for the wearables variant: home players only,
    each with ``lat``/``long`` (LATLON_DECIMALS) projected from the written x/y,
    the away team empty and no ball (wearables see none).
    """
    tl = m.timeline
    ts = tl.timestamps()
    xs = np.round(m.positions.real, 2)
    ys = np.round(m.positions.imag, 2)
    for f, (col, p) in fp.jumps.items():
        xs[f, col] = round(p.real, 2)
        ys[f, col] = round(p.imag, 2)
    ids = [[player_id(club, club.squad[i][0]) for i in range(len(club.squad))] for club in CLUBS]
    bx_all = np.round(m.ball_xy.real, 2)
    by_all = np.round(m.ball_xy.imag, 2)
    bz_all = np.round(m.ball_z, 2)
    team_ids = [c.team_id for c in CLUBS]
    match = {"id": MATCH_ID}
    no_hidden: set[int] = set()
    held = None
    for b0 in range(0, tl.n_slots, block):
        b1 = min(b0 + block, tl.n_slots)
        bxs, bys, squad = xs[b0:b1].tolist(), ys[b0:b1].tolist(), m.squad_index[b0:b1].tolist()
        if gnss is not None:
            lat, lon = gnss.to_gnss(xs[b0:b1, :11], ys[b0:b1, :11])
            blat, blon = np.round(lat, LATLON_DECIMALS).tolist(), np.round(lon, LATLON_DECIMALS).tolist()
        bx, by, bz = bx_all[b0:b1].tolist(), by_all[b0:b1].tolist(), bz_all[b0:b1].tolist()
        live, poss = m.ball_in_play[b0:b1].tolist(), m.ball_poss[b0:b1].tolist()
        for i, f in enumerate(range(b0, b1)):
            if f in fp.outage:
                continue
            hidden = fp.hidden.get(f, no_hidden)
            row_x, row_y, row_s = bxs[i], bys[i], squad[i]
            period = "first_half" if f < tl.n1 else "second_half"
            if gnss is not None:
                row_lat, row_lon = blat[i], blon[i]
                home = [{"id": ids[0][row_s[c]], "x": row_x[c], "y": row_y[c], "lat": row_lat[c], "long": row_lon[c]}
                        for c in range(11) if c not in hidden]
                frame = {"frame_id": f, "timestamp": ts[f], "period": period, "match": match,
                         "teams": {"home": {"id": team_ids[0], "players": home},
                                   "away": {"id": team_ids[1], "players": []}}}
            else:
                teams = {}
                for team, side in ((0, "home"), (1, "away")):
                    cols = range(11 * team, 11 * team + 11)
                    teams[side] = {"id": team_ids[team], "players": [
                        {"id": ids[team][row_s[c]], "x": row_x[c], "y": row_y[c]} for c in cols if c not in hidden]}
                frame = {
                    "frame_id": f, "timestamp": ts[f], "period": period, "match": match, "teams": teams,
                    "ball": {"x": bx[i], "y": by[i], "z": bz[i], "status": live[i], "poss_team_id": team_ids[poss[i]]},
                }
            line = orjson.dumps(frame) + b"\n"
            if f in fp.swaps:
                held = line
                continue
            yield line
            if held is not None:
                yield held
                held = None
            if f in fp.duplicates:
                yield line


def write_match(out: pathlib.Path, minutes: float = 95, fps: int = 25, seed: int = 0, faults: bool = True,
                compress: bool = True, *, outage: bool = True, dropouts: bool = True, duplicates: bool = True,
                out_of_order: bool = True, jumps: bool = True, wearables: bool = False) -> pathlib.Path:
    """Write the fictional demo match as a CDF folder and return the folder.

    out: folder (created). minutes: total playing time (95 = 45+2 and 45+4 min;
    both halves are scaled, the second half kicks off 15 min after the first
    ended). fps: frames per second (integer). seed: numpy Generator seed; the
    same arguments give byte-identical files. faults: master switch of the
    injected feed faults; each kind can also be switched off on its own
    (outage, dropouts, duplicates, out_of_order, jumps). compress: write
    ``tracking.jsonl.gz`` (gzip level 6, no name or time in the header) instead
    of ``tracking.jsonl``.

    frame_id is the slot index (from 0 at kick-off, continuing through the
    second half); the 20 s feed outage removes its slots, so frame ids skip
    over it. faults.json lists every injected fault with its kind, period,
    time (timestamp of its first frame), duration_s, frame_ids and player_id.

    wearables: the one-team GNSS + heart-rate variant of the same match
    (docs/wearables.md; see write_wearables_files).
    """
    out = pathlib.Path(out)
    out.mkdir(parents=True, exist_ok=True)
    m = simulate_match(minutes, fps, seed)
    rng = np.random.default_rng([seed, 1])
    on = bool(faults)
    fp = plan_faults(rng, m, minutes, outage=on and outage, dropouts=on and dropouts,
                     duplicates=on and duplicates, out_of_order=on and out_of_order, jumps=on and jumps)
    for stale in ("tracking.jsonl", "tracking.jsonl.gz", "hr.jsonl", "hr.jsonl.gz"):
        (out / stale).unlink(missing_ok=True)
    if wearables:
        return write_wearables_files(out, m, fp, seed, minutes, compress, faults=on)
    opts = orjson.OPT_INDENT_2
    (out / "meta.json").write_bytes(orjson.dumps(build_meta(m), option=opts) + b"\n")
    (out / "match.json").write_bytes(orjson.dumps(build_sheet(m), option=opts) + b"\n")
    faults_doc = {"match_id": MATCH_ID, "seed": int(seed), "fps": int(fps), "minutes": float(minutes),
                  "faults": fp.records}
    (out / "faults.json").write_bytes(orjson.dumps(faults_doc, option=opts) + b"\n")
    path = out / ("tracking.jsonl.gz" if compress else "tracking.jsonl")
    _write_lines(path, _frame_lines(m, fp), compress)
    return out


def gnss_calibration():
    """The wearables ground's corner calibration (a ``GnssPitch``): the demo pitch at GNSS_CENTRE."""
    from pacewire.wire.gnss import rectangle

    return rectangle(GNSS_CENTRE[0], GNSS_CENTRE[1], PITCH_LENGTH_M, PITCH_WIDTH_M, GNSS_BEARING_DEG)


def build_wearables_meta(m: SynthMatch, cal) -> dict:
    """The CDF meta of the wearables variant: the same match, the away squad unknown,
    the venue with its GNSS calibration (``venue.gnss_pitch``, corner form)."""
    meta = build_meta(m)
    meta["teams"]["away"]["players"] = []
    meta["venue"]["gnss_pitch"] = cal.model_dump(exclude_none=True)
    return meta


def build_wearables_sheet(m: SynthMatch, profiles: dict[str, tuple[int, int, str]]) -> dict:
    """The match sheet of the wearables variant: home players with their heart-rate profile
    (pacewire extension fields), the away team without players, home events only
    (goals stay: they make the result)."""
    sheet = build_sheet(m)
    home_id = HOME.team_id
    for p in sheet["teams"]["home"]["players"]:
        hr_max, hr_rest, sex = profiles[p["id"]]
        p["hr_max_bpm"] = hr_max
        if p["jersey_number"] not in HR_REST_UNKNOWN:
            p["hr_rest_bpm"] = hr_rest
        p["sex"] = sex
    sheet["teams"]["away"]["players"] = []
    events = sheet["events"]
    events["substitutions"] = [s for s in events["substitutions"] if s["team_id"] == home_id]
    events["cards"] = [c for c in events["cards"] if c["team_id"] == home_id]
    return sheet


def write_wearables_files(out: pathlib.Path, m: SynthMatch, fp: FaultPlan, seed: int, minutes: float,
                          compress: bool, faults: bool = True) -> pathlib.Path:
    """Write the one-team GNSS + heart-rate variant of match ``m`` into ``out``.

    meta.json with ``venue.gnss_pitch``; match.json with heart-rate profiles and
    no away players; tracking frames of the home team only with lat/long and x/y,
    no ball; hr.jsonl with the 1 Hz samples {"player_id", "timestamp", "bpm"},
    time-ordered; faults.json with the home team's feed faults plus unit_late,
    hr_dropout and hr_spike (plan_wearables).
    """
    cal = gnss_calibration()
    from pacewire.wire.gnss import PitchProjection

    wear = plan_wearables(m, seed, faults=faults)
    # the away team is not tracked: its feed faults do not exist; the late unit hides its player
    fp.hidden = {f: {c for c in cols if c < 11} for f, cols in fp.hidden.items()}
    fp.jumps = {f: j for f, j in fp.jumps.items() if j[0] < 11}
    for f, c in zip(*np.nonzero(~wear.unit_on)):
        fp.hidden.setdefault(int(f), set()).add(int(c))
    away = {player_id(AWAY, j) for j, _, _, _ in AWAY.squad}
    records = [r for r in fp.records if r["player_id"] not in away] + wear.records
    records.sort(key=lambda r: (r["time"], r["kind"]))
    opts = orjson.OPT_INDENT_2
    (out / "meta.json").write_bytes(orjson.dumps(build_wearables_meta(m, cal), option=opts) + b"\n")
    (out / "match.json").write_bytes(orjson.dumps(build_wearables_sheet(m, wear.profiles), option=opts) + b"\n")
    faults_doc = {"match_id": MATCH_ID, "seed": int(seed), "fps": int(m.timeline.fps), "minutes": float(minutes),
                  "variant": "wearables", "faults": records}
    (out / "faults.json").write_bytes(orjson.dumps(faults_doc, option=opts) + b"\n")
    path = out / ("tracking.jsonl.gz" if compress else "tracking.jsonl")
    _write_lines(path, _frame_lines(m, fp, gnss=PitchProjection.from_calibration(cal)), compress)
    _write_lines(out / "hr.jsonl", _hr_lines(wear.samples), False)
    return out


def _hr_lines(samples: list[tuple[int, str, int]]):
    """JSON lines (bytes, with ``\\n``) of heart-rate samples (ms after kick-off, player id, bpm)."""
    ms = np.array([t for t, _, _ in samples], dtype=np.int64).astype("timedelta64[ms]")
    stamps = np.datetime_as_string(KICKOFF + ms, unit="ms").tolist()
    for (_, pid, bpm), stamp in zip(samples, stamps):
        yield orjson.dumps({"player_id": pid, "timestamp": stamp + "Z", "bpm": bpm}) + b"\n"


def _write_lines(path: pathlib.Path, lines, compress: bool) -> None:
    """Write lines in chunks; gzip (level 6, no name, mtime 0) runs in a thread.

    zlib releases the GIL, so compressing one chunk overlaps with building the
    next one. Chunking is fixed (4096 lines), so the bytes are reproducible.
    """
    with open(path, "wb") as raw:
        if not compress:
            buf: list[bytes] = []
            for line in lines:
                buf.append(line)
                if len(buf) >= 4096:
                    raw.write(b"".join(buf))
                    buf.clear()
            raw.write(b"".join(buf))
            return
        sink = gzip.GzipFile(filename="", mode="wb", fileobj=raw, compresslevel=6, mtime=0)
        chunks: queue.Queue[bytes | None] = queue.Queue(maxsize=4)
        errors: list[BaseException] = []

        def drain() -> None:
            try:
                while (chunk := chunks.get()) is not None:
                    sink.write(chunk)
            except BaseException as exc:  # surfaced in the caller below
                errors.append(exc)
                while chunks.get() is not None:
                    pass

        worker = threading.Thread(target=drain, name="synth-gzip", daemon=True)
        worker.start()
        try:
            buf = []
            for line in lines:
                buf.append(line)
                if len(buf) >= 4096:
                    chunks.put(b"".join(buf))
                    buf.clear()
            chunks.put(b"".join(buf))
        finally:
            chunks.put(None)
            worker.join()
        if errors:
            raise errors[0]
        sink.close()


# --------------------------------------------------------------------------
# Statistics (plain numpy check of the generated movement)
# --------------------------------------------------------------------------
def _runs(mask: np.ndarray, min_len: int) -> int:
    """Number of runs of True at least ``min_len`` long in a 1-D mask."""
    padded = np.concatenate([[False], mask, [False]])
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    lengths = edges[1::2] - edges[0::2]
    return int((lengths >= min_len).sum())


def movement_stats(m: SynthMatch) -> dict[str, dict[str, float]]:
    """Per-role distance per 90 min (km), sprints per 90, max speed, max |accel|.

    Kinematics: centred Savitzky-Golay fit (1 s window, cubic) of the positions,
    speed and acceleration from the same fit (common practice). A sprint is
    >= 7.0 m/s held >= 1 s (Di Salvo et al. 2009 band; duration by common
    practice). Figures are pooled over each player stint of a role.
    """
    fps = m.timeline.fps
    win = fps + 1 - fps % 2  # odd window of about 1 s
    per_role: dict[str, list[tuple[float, float, float, float, float]]] = {}
    for start, n in m.timeline.halves:
        who = m.squad_index[start:start + n]
        for col in range(22):
            for sq in np.unique(who[:, col]):
                sel = who[:, col] == sq
                if sel.sum() < 3 * win:
                    continue
                p = m.positions[start:start + n, col][sel]
                xy = np.column_stack([p.real, p.imag])
                vel = savgol_filter(xy, win, 3, deriv=1, delta=1.0 / fps, axis=0)
                acc = savgol_filter(xy, win, 3, deriv=2, delta=1.0 / fps, axis=0)
                sp = np.hypot(vel[:, 0], vel[:, 1])
                row = (sp.sum() / fps, _runs(sp >= 7.0, fps), sp.max(), np.hypot(acc[:, 0], acc[:, 1]).max(),
                       sel.sum() / fps)
                per_role.setdefault(m.slot_roles[col], []).append(row)
    out = {}
    for role, rows in per_role.items():
        arr = np.array(rows)
        dist, spr, vmax, amax, secs = arr.T
        out[role] = {
            "km_per90": float(dist.sum() / secs.sum() * 5400.0 / 1000.0),
            "sprints_per90": float(spr.sum() / secs.sum() * 5400.0),
            "max_speed_ms": float(vmax.max()),
            "max_accel_ms2": float(amax.max()),
            "players": float(len(rows)),
        }
    return out


# --------------------------------------------------------------------------
# CLI
# --------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="pacewire synth", description="Write the fictional synthetic demo match as a CDF folder.")
    p.add_argument("--out", required=True, type=pathlib.Path, help="output folder")
    p.add_argument("--minutes", type=float, default=95.0, help="playing time in minutes (95 = 45+2 and 45+4)")
    p.add_argument("--fps", type=int, default=25, help="frames per second")
    p.add_argument("--seed", type=int, default=0, help="random seed (same seed, same bytes)")
    p.add_argument("--no-faults", action="store_true", help="inject no feed faults at all")
    p.add_argument("--no-outage", action="store_true", help="no 20 s feed outage")
    p.add_argument("--no-dropouts", action="store_true", help="no single-player dropouts")
    p.add_argument("--no-duplicates", action="store_true", help="no duplicated frames")
    p.add_argument("--no-out-of-order", action="store_true", help="no swapped adjacent frames")
    p.add_argument("--no-jumps", action="store_true", help="no single-frame position jumps")
    p.add_argument("--no-compress", action="store_true", help="write tracking.jsonl instead of .jsonl.gz")
    p.add_argument("--wearables", action="store_true",
                   help="the one-team GNSS + heart-rate variant (docs/wearables.md): home players only with "
                        "lat/long, no ball, hr.jsonl")
    p.add_argument("--stats", action="store_true", help="also print per-role movement statistics")
    return p


def main(argv: list[str] | None = None) -> int:
    """``pacewire synth``: write the demo match; returns the exit code."""
    args = build_parser().parse_args(argv)
    t0 = time.perf_counter()
    folder = write_match(args.out, minutes=args.minutes, fps=args.fps, seed=args.seed, faults=not args.no_faults,
                         compress=not args.no_compress, outage=not args.no_outage, dropouts=not args.no_dropouts,
                         duplicates=not args.no_duplicates, out_of_order=not args.no_out_of_order,
                         jumps=not args.no_jumps, wearables=args.wearables)
    n_faults = len(orjson.loads((folder / "faults.json").read_bytes())["faults"])
    kind = "the wearables variant in " if args.wearables else ""
    print(f"wrote {kind}{folder} ({args.minutes:g} min at {args.fps} fps, seed {args.seed}, {n_faults} faults) "
          f"in {time.perf_counter() - t0:.1f} s")
    if args.stats:
        stats = movement_stats(simulate_match(args.minutes, args.fps, args.seed))
        for role, s in sorted(stats.items()):
            print(f"{role:3s} km/90 {s['km_per90']:6.2f}  sprints/90 {s['sprints_per90']:5.1f}  "
                  f"vmax {s['max_speed_ms']:5.2f} m/s  |a|max {s['max_accel_ms2']:4.2f} m/s2  n={int(s['players'])}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
