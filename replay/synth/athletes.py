"""The players as athletes: each squad member's own maximal speed, acceleration capacity,
work rate and appetite for high-speed running.

Each fictional player keeps his capacities in every match and for every seed (they are drawn
from a fixed stream per club), so a fast winger is fast in every demo match; the position he
plays sets the mean his draws spread around (roles.ROLES).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pacewire.replay.synth.clubs import CLUBS
from pacewire.replay.synth.roles import ROLES

# Spread of the players' own maximal speeds around their position's mean, km/h, and their
# range: outfielders about 29-35 km/h, goalkeepers slower (common practice; from memory).
TOP_SPEED_SD_KMH = 2.2
GK_TOP_SPEED_SD_KMH = 1.0
TOP_SPEED_RANGE_KMH = (28.5, 36.0)
GK_TOP_SPEED_RANGE_KMH = (23.0, 27.0)
# Acceleration capacity from standstill (intercept of a linear force-velocity profile,
# Samozino et al. 2016), m/s^2: mean, sd, clip. Match maxima from standstill are about
# 6 m/s^2 (Sonderegger et al. 2016).
ACCEL_MS2 = (5.8, 0.35, 5.0, 6.5)
# The force-velocity line reaches zero a little above the speed a player reaches in a sprint.
V0_OVER_TOP = 1.08
WORK_SD = 0.04  # between-player spread of the jog and run share (common practice: CV ~5% of distance)
# between-player spread of the high-speed running rate (Bradley et al. 2009: sd 14-18% of a position's mean)
BURST_SD = 0.15
SQUAD_SEED = 0x5EED  # the fixed stream the squads' capacities come from


@dataclass
class Capacities:
    """The capacities of the player in each slot at each frame of a half, (n, 22) each."""

    top_speed_ms: np.ndarray  # the player's own maximal speed, m/s
    accel_ms2: np.ndarray  # force-velocity intercept, m/s^2
    inv_v0: np.ndarray  # 1 / force-velocity speed intercept, s/m
    work: np.ndarray  # multiplier of the jog and run share
    burst: np.ndarray  # multiplier of the sprint and high-speed run rates


def squad_draws(club_index: int) -> np.ndarray:
    """Standard normal draws (squad size, 4) of one club: top speed, acceleration, work, bursts."""
    club = CLUBS[club_index]
    return np.random.default_rng([SQUAD_SEED, club_index]).standard_normal((len(club.squad), 4))


def capacities(squad_index: np.ndarray, roles: list[str]) -> Capacities:
    """Capacities (n, 22) of the player in each slot, for ``squad_index`` (n, 22): squad index
    of the player in each slot (home 0..10, away 11..21) at each frame."""
    z = np.concatenate([squad_draws(t)[squad_index[:, 11 * t:11 * t + 11]] for t in (0, 1)], axis=1)
    gk = np.array(roles) == "GK"
    mean = np.array([ROLES[r].top_speed_kmh for r in roles])
    sd = np.where(gk, GK_TOP_SPEED_SD_KMH, TOP_SPEED_SD_KMH)
    lo = np.where(gk, GK_TOP_SPEED_RANGE_KMH[0], TOP_SPEED_RANGE_KMH[0])
    hi = np.where(gk, GK_TOP_SPEED_RANGE_KMH[1], TOP_SPEED_RANGE_KMH[1])
    top = np.clip(mean + sd * z[..., 0], lo, hi) / 3.6
    a_mean, a_sd, a_lo, a_hi = ACCEL_MS2
    accel = np.clip(a_mean + a_sd * z[..., 1], a_lo, a_hi)
    work = 1.0 + WORK_SD * np.clip(z[..., 2], -2.5, 2.5)
    burst = np.maximum(1.0 + BURST_SD * z[..., 3], 0.5)
    return Capacities(top, accel, 1.0 / (V0_OVER_TOP * top), work, burst)
