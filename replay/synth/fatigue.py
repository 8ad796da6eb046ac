"""Fatigue: how the intensity a player can sustain falls with his time on the pitch.

Three parts (Mohr et al. 2003; Bradley et al. 2009; Bradley & Noakes 2013):

* over the match: intensity falls with the minutes a player has played, so the second half
  is run a little slower than the first and high-intensity running in the last 15 minutes
  is well below the first 15;
* late in each half: a further drop that the half-time break resets;
* transient: after a cluster of sprints and high-speed runs a player needs minutes to
  recover, so the 5 minutes after his most intense 5 minutes hold less high-intensity
  running than his match average (``Reserve``, used where the runs are planned).

Substitutes come on fresh: their minutes count from their entry, and they start with a little
extra intensity (Bradley et al. 2014: substitutes cover more high-intensity running than
the players they replace).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MATCH_DROP = 0.2  # intensity lost by the end of 95 minutes played (quadratic in the minutes)
HALF_DROP = 0.14  # further loss at the end of a 47-minute half (quadratic in its minutes)
FULL_MATCH_MIN = 95.0
HALF_MIN = 47.5
SUB_FRESH = 0.25  # substitutes' extra intensity when they come on
# Transient fatigue, two compartments: each run adds to a fast "load" (RESERVE_LOAD_TAU_S),
# which feeds a slow "fatigue" (RESERVE_TAU_S); the chance to set off on a planned run is
# 1 / (1 + (fatigue / (RESERVE_HALF intensity))^RESERVE_STEEP). The fatigue lags the load, so an intense
# passage is run in full and the minutes after it are quieter (Mohr et al. 2003; Bradley &
# Noakes 2013: the drop lasts about 5 minutes).
RESERVE_LOAD_TAU_S = 120.0
RESERVE_TAU_S = 300.0
RESERVE_COST = {"sprint": 1.0, "hsr": 0.4}  # load units a run adds
RESERVE_HALF = 1.7  # fatigue at which the chance is halved
RESERVE_STEEP = 4.0  # steeper (6) cut the running after a peak to about a third of the match mean


def intensity(minutes_on: np.ndarray, half_minutes_on: np.ndarray, substitute: np.ndarray) -> np.ndarray:
    """Sustainable intensity (n, 22), 1 for a fresh player.

    minutes_on: minutes of play since the player came on (the break not counted);
    half_minutes_on: minutes of play since he came on or the half began, whichever is later;
    substitute: True for a player who came on as a substitute.
    """
    match = 1.0 - MATCH_DROP * (minutes_on / FULL_MATCH_MIN) ** 2
    half = 1.0 - HALF_DROP * (half_minutes_on / HALF_MIN) ** 2
    return match * half * np.where(substitute, 1.0 + SUB_FRESH, 1.0)


@dataclass
class Reserve:
    """The transient fatigue of one player: ``load`` and ``fatigue`` (units, see RESERVE_TAU_S)
    at time ``t_s``."""

    load: float = 0.0
    fatigue: float = 0.0
    t_s: float = 0.0

    def chance(self, t_s: float, capacity: float = 1.0) -> float:
        """Chance to set off on a planned run at time ``t_s`` (s, increasing) for a player whose
        sustainable intensity is ``capacity`` (1 fresh): a tired player tolerates less fatigue."""
        dt = t_s - self.t_s
        fast, slow = np.exp(-dt / RESERVE_LOAD_TAU_S), np.exp(-dt / RESERVE_TAU_S)
        # dF/dt = (L - F) / RESERVE_TAU_S with L decaying: the exact step
        share = RESERVE_LOAD_TAU_S / (RESERVE_TAU_S - RESERVE_LOAD_TAU_S)
        self.fatigue = float(self.fatigue * slow + self.load * share * (slow - fast))
        self.load = float(self.load * fast)
        self.t_s = t_s
        return 1.0 / (1.0 + (self.fatigue / (RESERVE_HALF * capacity)) ** RESERVE_STEEP)

    def spend(self, kind: str) -> None:
        self.load += RESERVE_COST[kind]


@dataclass
class OnPitch:
    """Who plays in each slot at each frame of a half and for how long, (n, 22) each."""

    squad_index: np.ndarray  # squad index of the player in the slot
    minutes_on: np.ndarray  # minutes of play since he came on
    half_minutes_on: np.ndarray  # minutes of play since he came on or the half began
    substitute: np.ndarray  # bool: he came on as a substitute

    def intensity(self) -> np.ndarray:
        """Sustainable intensity (n, 22) of the players (see ``intensity``)."""
        return intensity(self.minutes_on, self.half_minutes_on, self.substitute)


def on_pitch(squad_index: np.ndarray, entry: np.ndarray, start: int, n: int, fps: int) -> OnPitch:
    """The slots' players over the half of frame slots start..start+n-1.

    squad_index: (S, 22) for the whole match; entry: (S, 22) the slot where the player in
    each slot came on (0 for starters). Slots count play only, so minutes skip the break.
    """
    f = np.arange(start, start + n)[:, None]
    e = entry[start:start + n]
    per_min = 1.0 / (fps * 60.0)
    return OnPitch(squad_index[start:start + n], (f - e) * per_min, (f - np.maximum(e, start)) * per_min, e > 0)
