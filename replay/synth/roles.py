"""Locomotor profiles of the playing positions: how much each position stands, walks, jogs
and runs, how often it sprints and runs at high speed, how fast its players are, and which
position each formation slot plays."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pacewire.replay.synth.clubs import CLUBS, FORMATIONS

# Locomotor categories: stand, walk, jog, run (speed ranges in m/s, before a role's speed_scale).
CATEGORY_SPEEDS_MS = np.array([[0.1, 0.6], [1.0, 1.9], [2.1, 3.6], [3.8, 5.0]])
STOPPAGE_PROBS = np.array([0.35, 0.57, 0.08, 0.0])


@dataclass(frozen=True)
class RoleProfile:
    """Per-position locomotor profile (in play).

    probs: time share of stand/walk/jog/run segments; speed_scale multiplies the
    category speeds; sprints_per90 and hsr_per90 are the planned sprint and
    high-speed runs per 90 min of a fresh player (fatigue and recovery thin them
    out); top_speed_kmh is the mean of the players' own maximal speeds.
    """

    probs: tuple[float, float, float, float]
    speed_scale: float
    sprints_per90: float
    hsr_per90: float
    top_speed_kmh: float


# Central midfielders cover the most distance, centre-backs the least; wide midfielders run
# the most at high speed and sprint the most, centre-backs the least (Bradley et al. 2009;
# Di Salvo et al. 2009). Players' maximal speeds: outfielders about 29-35 km/h, wide players
# and forwards the fastest, goalkeepers slower (common practice; from memory). The burst
# rates and speed scales were calibrated so that pacewire's engine measures the per-position
# ranges tests/replay/test_synth.py checks.
ROLES: dict[str, RoleProfile] = {
    "GK": RoleProfile((0.42, 0.48, 0.09, 0.01), 0.90, 1.5, 13.0, 25.0),
    "CB": RoleProfile((0.14, 0.50, 0.28, 0.08), 1.0, 22.0, 74.0, 31.5),
    "FB": RoleProfile((0.10, 0.48, 0.31, 0.11), 0.95, 38.0, 123.0, 32.3),
    "CM": RoleProfile((0.07, 0.45, 0.35, 0.13), 0.88, 29.0, 125.0, 31.3),
    "WM": RoleProfile((0.09, 0.46, 0.33, 0.12), 0.92, 45.0, 151.0, 32.8),
    "FW": RoleProfile((0.13, 0.50, 0.28, 0.09), 0.83, 40.0, 118.0, 32.7),
}
POSITION_NAMES = {"GK": "goalkeeper", "CB": "centre-back", "FB": "full-back", "CM": "central midfielder",
                  "WM": "wide midfielder", "FW": "forward"}
# The wingers of a 4-3-3 play the wide midfielders' running role (common practice: one wide role).
POSITION_ROLE = {
    "GK": "GK", "LCB": "CB", "RCB": "CB", "CB": "CB", "LB": "FB", "RB": "FB",
    "LCM": "CM", "RCM": "CM", "CM": "CM", "CDM": "CM", "LM": "WM", "RM": "WM",
    "LW": "WM", "RW": "WM", "LCF": "FW", "RCF": "FW", "CF": "FW",
}


def slot_roles() -> list[str]:
    """The role of each of the 22 slots (home 0..10, away 11..21), from the formations."""
    return [POSITION_ROLE[pos] for club in CLUBS for pos, _, _ in FORMATIONS[club.formation]]
