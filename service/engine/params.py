"""The engine's parameters for one match: plain values and numpy arrays, fixed for the match.

The engine reads no settings file: :func:`pacewire.params.match_params` builds these
from the settings and the roster, and :class:`pacewire.engine.match.MatchState` takes
them. Frozen, so one object can serve every copy of a state; they are checkpointed with it.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from pacewire.engine.eventhealth import EventHealthParams
from pacewire.engine.exertion import ExertionParams
from pacewire.engine.health import HealthParams
from pacewire.engine.heart import HeartParams, HeartProfile
from pacewire.engine.kinematics import KinematicParams
from pacewire.engine.phases import PhaseParams
from pacewire.engine.precision import WIRE, Precision


@dataclass(frozen=True, eq=False)
class SpeedZones:
    """Speed bands (pacewire default: absolute edges in m/s; relative: % of each player's max speed).

    A sample's band is ``searchsorted(edges, speed / scale[player], side="right")``."""

    mode: Literal["absolute", "relative"]
    edges: np.ndarray  # (Z - 1,) float: m/s (absolute) or % of max speed (relative)
    scale: np.ndarray  # (P,) float, roster order: 1 (absolute) or max speed / 100, m/s (relative)
    names: tuple[str, ...]  # (Z,) the snapshot's zone keys, lowest band first


@dataclass(frozen=True)
class WindowParams:
    """Lengths of the snapshot's windows, minutes (common practice for live monitoring)."""

    last_min: tuple[int, ...]  # rolling "last N minutes" of the current period
    peak_min: tuple[int, ...]  # peak demands: best rolling window of each length (Fereday et al. 2020)
    block_min: int  # fixed blocks of each period; the last takes the stoppage time


@dataclass(frozen=True, eq=False)
class MatchParams:
    """Everything :class:`pacewire.engine.match.MatchState` needs besides the roster."""

    kinematics: KinematicParams
    exertion: ExertionParams
    health: HealthParams
    heart: HeartParams
    heart_profiles: tuple[HeartProfile, ...]  # roster order
    zones: SpeedZones
    windows: WindowParams
    period_min: tuple[int, ...]  # nominal length of each period in PERIODS order, minutes (Laws of the Game); 0: none
    on_pitch_timeout_s: float  # s: a longer gap in a player's samples counts as off the pitch (common practice)
    phases: PhaseParams
    event_health: EventHealthParams
    # digits of the snapshot's figures: the wire contract (service/wire/schema.py states them), not a setting
    precision: Precision = WIRE

    def fits(self, n_players: int, fps: int) -> bool:
        """Built for a roster of ``n_players`` at ``fps`` frames per second."""
        return (self.kinematics.fps == fps and self.exertion.fps == fps and len(self.heart_profiles) == n_players
                and self.zones.scale.shape == (n_players,))
