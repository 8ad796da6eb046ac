"""Sprints and high-speed runs of one half: when each player sets off, how fast, how hard he
accelerates and how he stops.

Runs start at a rate set by the player's position and his own appetite for them, more often
near the ball and while the game is in an intense phase, less often as he tires (fatigue), and
each run he makes lowers his chance to set off again for a few minutes (fatigue.Reserve). A run
heads for a target at a share of the player's own maximal speed: sprints mostly at 80-90 %
and seldom beyond (a player's match peak stays a little below his maximum), high-speed runs at
60-80 %. Most runs end with a hard stop; the rest ease off.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter

from pacewire.replay.synth.athletes import Capacities
from pacewire.replay.synth.ball import BallTrack
from pacewire.replay.synth.fatigue import Reserve
from pacewire.replay.synth.roles import RoleProfile

SPRINT_SHARE = (0.88, 0.035, 0.78, 0.97)  # of the player's top speed: mean, sd, clip
HSR_SHARE = (0.62, 0.78)  # of the player's top speed, uniform
FATIGUE_SLOWING = 0.2  # run speeds fall by this share of the intensity lost
SPRINT_COMMAND_S = (2.8, 4.8)  # how long the run is commanded, the acceleration included, at ...
SPRINT_REF_TOP_MS = 9.0  # ... this top speed (in proportion to it)
HSR_COMMAND_S = (1.8, 3.8)
SPRINT_DRIVE = (0.85, 1.0)  # share of the acceleration capacity used to set off
HSR_DRIVE = (0.7, 1.0)
HARD_STOP_SHARE = 0.65  # runs that end with a hard stop (Harper et al. 2019: hard decelerations are common)
HARD_STOP_MS2 = (3.2, 5.0)  # deceleration of a hard stop
STOP_S = (1.2, 2.2)  # how long a hard stop is commanded
STOP_SPEED_MS = (0.6, 2.4)  # the speed a hard stop brakes to
MIN_GAP_S = 4.0  # between the end of one run and the start of the next
EDGE_S = 6.0  # runs keep this far from the half's kick-off and whistle and from walk-offs
PHASE_SD = 0.5  # log-sd of the game's phases (intense passages), per team and per player
PHASE_TAU_S = 60.0
LIVE_SHARE = 0.6  # share of play with the ball in play: the rates are per 90 min of match


@dataclass
class Burst:
    """One planned run: frames of the half, the commanded speed and how it starts and ends."""

    slot: int
    start: int  # frame within the half
    length: int  # frames
    kind: str  # "sprint" | "hsr"
    speed: float  # m/s
    drive_ms2: float  # acceleration intended from standstill (force-velocity intercept used)
    stop_ms2: float  # deceleration of the hard stop after it, 0: the player eases off
    stop_len: int  # frames of the hard stop
    stop_speed: float  # m/s the hard stop brakes to


def _phases(rng: np.random.Generator, n: int, fps: int) -> np.ndarray:
    """Log-normal multiplier (n, 22), mean 1: intense and quiet passages of each team, and each
    player's own (Ornstein-Uhlenbeck in the log, PHASE_TAU_S)."""
    a = np.exp(-1.0 / (PHASE_TAU_S * fps))
    white = rng.standard_normal((n, 24)) * np.sqrt(1.0 - a * a)
    z = lfilter([1.0], [1.0, -a], white, axis=0, zi=(a * rng.standard_normal(24))[None, :])[0]
    log = (np.repeat(z[:, :2], 11, axis=1) + z[:, 2:]) * (PHASE_SD / np.sqrt(2.0))
    return np.exp(log - PHASE_SD**2 / 2.0)


def burst_weight(rng: np.random.Generator, n: int, fps: int, ball: BallTrack, walkoffs: list[tuple[int, int, int]],
                 prox_n: np.ndarray, intensity: np.ndarray, cap: Capacities) -> np.ndarray:
    """Relative rate (n, 22) of setting off on a run, 1 on average for a fresh player: only in
    play and EDGE_S clear of the half's edges and of walk-offs, more often near the ball and in
    intense phases, less often when tired."""
    edge = int(EDGE_S * fps)
    live = ball.in_play.astype(float)
    live[:edge] = 0.0
    live[-edge:] = 0.0
    blocked = np.zeros((n, 22), bool)
    for slot, a, b in walkoffs:
        blocked[max(a - 2 * edge, 0):min(b + edge, n), slot] = True  # a run started before it ends before it
    near = (0.5 + prox_n) / 1.5  # prox_n has mean 1
    return (live / LIVE_SHARE)[:, None] * near * intensity**1.5 * cap.burst * _phases(rng, n, fps) * ~blocked


def sample_bursts(rng: np.random.Generator, weight: np.ndarray, prof: list[RoleProfile], intensity: np.ndarray,
                  cap: Capacities, fps: int) -> list[Burst]:
    """The runs of every slot (an inhomogeneous Poisson process at the position's rates times
    ``weight``, thinned by the transient-fatigue reserve and MIN_GAP_S), sorted by start."""
    n = weight.shape[0]
    rates = np.array([[p.sprints_per90, p.hsr_per90] for p in prof]) / 5400.0  # per s of match
    cw = np.cumsum(weight, axis=0) / fps
    bursts = []
    for j in range(weight.shape[1]):
        expected = float(cw[-1, j] * rates[j].sum())
        if expected <= 0:
            continue
        onsets = np.sort(np.searchsorted(cw[:, j], rng.random(rng.poisson(expected)) * cw[-1, j]))
        p_sprint = rates[j, 0] / rates[j].sum()
        reserve = Reserve()
        free = 0
        for s in onsets.tolist():
            if s < free or rng.random() > reserve.chance(s / fps, float(intensity[s, j])):
                continue
            b = _burst(rng, j, s, "sprint" if rng.random() < p_sprint else "hsr", intensity[s, j],
                       float(cap.top_speed_ms[s, j]), float(cap.accel_ms2[s, j]), fps)
            end = s + b.length + b.stop_len
            if end >= n - int(EDGE_S * fps):
                continue
            reserve.spend(b.kind)
            bursts.append(b)
            free = end + int(MIN_GAP_S * fps)
    return sorted(bursts, key=lambda b: (b.start, b.slot))


def _burst(rng: np.random.Generator, slot: int, start: int, kind: str, intensity: float, top_ms: float,
           accel_ms2: float, fps: int) -> Burst:
    """One run of ``kind`` from frame ``start``: its speed, length, drive and stop."""
    if kind == "sprint":
        mean, sd, lo, hi = SPRINT_SHARE
        share = float(np.clip(rng.normal(mean, sd), lo, hi))
        # faster players need longer to approach their top speed (force-velocity profile)
        secs, drive = rng.uniform(*SPRINT_COMMAND_S) * top_ms / SPRINT_REF_TOP_MS, rng.uniform(*SPRINT_DRIVE)
    else:
        share = float(rng.uniform(*HSR_SHARE))
        secs, drive = rng.uniform(*HSR_COMMAND_S), rng.uniform(*HSR_DRIVE)
    speed = share * top_ms * (1.0 - FATIGUE_SLOWING * max(1.0 - intensity, 0.0))
    if rng.random() < HARD_STOP_SHARE:
        stop, stop_len, stop_speed = rng.uniform(*HARD_STOP_MS2), int(rng.uniform(*STOP_S) * fps), \
            rng.uniform(*STOP_SPEED_MS)
    else:
        stop, stop_len, stop_speed = 0.0, 0, 0.0
    return Burst(slot, start, int(secs * fps), kind, speed, drive * accel_ms2, stop, stop_len, stop_speed)


def burst_heading(rng: np.random.Generator, ball: BallTrack, frame: int, team: int, direction: float,
                  anchor: complex) -> complex:
    """Direction (unit complex) of a run starting at ``frame``: forwards when the team has the
    ball; without it, half the runs go at the ball and half back towards goal."""
    if ball.poss[frame] == team:
        return complex(direction * np.exp(1j * rng.normal(0.0, 0.6)))
    if rng.random() < 0.5:
        to_ball = complex(ball.xy[frame] - anchor)
        return to_ball / abs(to_ball) if abs(to_ball) > 1 else complex(-direction)
    return complex(-direction * np.exp(1j * rng.normal(0.0, 0.6)))
