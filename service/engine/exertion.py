"""Per-sample exertion figures: speed bands, efforts, metabolic power.

Everything here works on final kinematic samples shaped (n, players). Figures
are accumulated as integers in micro-units (µm, µJ/kg) so that sums do not
depend on how the samples were split into blocks.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

G = 9.81  # m/s^2

# Columns of the per-sample figure matrix (see ``sample_figures``).
DIST, HSR, SPRINT, ENERGY, HIPOW, N_HSR, N_SPR, N_ACC, N_DEC, VALID, SEEN = range(11)
N_FIG = 11
MICRO = 1_000_000

# Minetti et al. 2002, J Appl Physiol 93:1039: cost of running on a slope i,
# J/kg/m, valid for -0.45 <= i <= 0.45 (coefficients from i^5 down to i^0).
MINETTI_2002 = (155.4, -30.4, -43.3, 46.3, 19.5, 3.6)

# di Prampero & Osgnach 2018, Int J Sports Med 39:581: walk-run transition speed
# as a polynomial in ES (i^5 .. i^0), and the walking cost table, per ES row
# (-0.3 .. 0.4 step 0.1), polynomial in v (v^4 .. v^0), J/kg/m.
TRANSITION_2018 = (-107.05, 113.13, -1.13, -15.84, -1.7, 2.27)
WALK_ES_2018 = np.array([-0.3, -0.2, -0.1, 0.0, 0.1, 0.2, 0.3, 0.4])
WALK_COST_2018 = np.array([
    [0.28, -1.66, 3.81, -3.96, 4.01],
    [0.03, -0.15, 0.98, -2.25, 3.14],
    [0.69, -3.21, 5.94, -5.07, 2.79],
    [1.25, -6.57, 13.14, -11.15, 5.35],
    [0.68, -4.17, 10.17, -10.31, 8.66],
    [3.80, -14.91, 22.94, -14.53, 11.24],
    [44.95, -122.88, 126.94, -57.46, 21.39],
    [94.62, -213.94, 184.43, -68.49, 25.04],
])


@dataclass(frozen=True)
class ExertionParams:
    fps: int
    hsr_ms: float
    sprint_ms: float
    speed_min_n: int  # samples an HSR/sprint effort must last
    accel_min_n: int  # samples an accel/decel effort must last
    accel_ms2: float
    decel_ms2: float
    model: str  # "osgnach2010" | "diprampero2018"
    kt: float
    air_k: float
    flat_cost: float
    high_power_wkg: float


def minetti_cost(es: np.ndarray) -> np.ndarray:
    """Energy cost of running at equivalent slope ``es``, J/kg/m (Minetti et al. 2002)."""
    i = np.clip(es, -0.45, 0.45)
    return np.polyval(MINETTI_2002, i)


def minetti_pavei_cost(es: np.ndarray, flat: float = 3.6) -> np.ndarray:
    """Running cost at ES, J/kg/m (Minetti & Pavei 2018, eqs. 3-4)."""
    return np.where(es < 0, -8.34 * es + flat * np.exp(13.0 * np.minimum(es, 0.0)),
                    39.5 * es + flat * np.exp(-4.0 * np.maximum(es, 0.0)))


def walking_cost_2018(es: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Walking cost, J/kg/m: the di Prampero & Osgnach 2018 table, linear in ES between rows."""
    pos = np.clip((es - WALK_ES_2018[0]) / 0.1, 0.0, len(WALK_ES_2018) - 1.0)
    lo = np.minimum(np.floor(pos).astype(np.int64), len(WALK_ES_2018) - 2)
    frac = pos - lo
    c_lo = sum(WALK_COST_2018[lo, k] * v ** (4 - k) for k in range(5))
    c_hi = sum(WALK_COST_2018[lo + 1, k] * v ** (4 - k) for k in range(5))
    return c_lo + (c_hi - c_lo) * frac


def metabolic_power(speed: np.ndarray, accel: np.ndarray, p: ExertionParams) -> np.ndarray:
    """Instantaneous metabolic power, W/kg.

    osgnach2010: ES = a/g, EM = sqrt(ES^2 + 1), C = Minetti(ES)·EM·KT, P = C·v
    (di Prampero et al. 2005; Osgnach et al. 2010).
    diprampero2018: ES = a/g + k·v^2/g, running cost of Minetti & Pavei 2018
    times EM, walking cost below the walk-run transition (di Prampero & Osgnach 2018).
    """
    if p.model == "osgnach2010":
        es = accel / G
        em = np.sqrt(es * es + 1.0)
        return minetti_cost(es) * em * p.kt * speed
    es = accel / G + p.air_k * speed * speed / G
    em = np.sqrt(es * es + 1.0)
    running = (speed >= np.polyval(TRANSITION_2018, es)) | (speed > 2.5)
    cost = np.where(running, minetti_pavei_cost(es, p.flat_cost), walking_cost_2018(es, speed))
    return cost * em * speed


class EffortCounter:
    """Counts runs of a condition held at least ``min_n`` samples; one run counts once.

    Columns are independent, each with its own minimum; the run length carries
    across calls, so a run split over blocks counts once.
    """

    def __init__(self, min_n: np.ndarray) -> None:
        self.min_n = np.maximum(np.asarray(min_n, np.int64), 1)
        self.carry = np.zeros(self.min_n.shape, np.int64)

    def reset(self) -> None:
        self.carry[:] = 0

    def step(self, cond: np.ndarray) -> np.ndarray:
        """``cond`` (n, C) bool → (n, C) bool marking the sample where a run reaches its minimum."""
        n = cond.shape[0]
        if n == 0:
            return cond
        rows = np.arange(1, n + 1)[:, None]
        # (1-based) row of the last False at or before each row; 0: none in this block
        last_false = np.maximum.accumulate(np.where(cond, 0, rows), axis=0)
        length = np.where(cond, rows - last_false + np.where(last_false == 0, self.carry, 0), 0)
        self.carry = length[-1].copy()
        return length == self.min_n


class Exertion:
    """Turns final kinematic samples into the figure matrix for one period."""

    def __init__(self, params: ExertionParams, n_players: int, zone_edges: np.ndarray, zone_scale: np.ndarray) -> None:
        self.p = params
        self.dt = 1.0 / params.fps
        self.n = n_players
        # band of a sample: searchsorted(zone_edges, speed / zone_scale[player])
        self.zone_edges = zone_edges
        self.inv_scale = 1.0 / zone_scale
        self.n_zones = zone_edges.shape[0] + 1
        # one counter for HSR, sprint, accel, decel runs of every player: columns (4, P)
        mins = np.repeat([params.speed_min_n, params.speed_min_n, params.accel_min_n, params.accel_min_n], n_players)
        self.efforts = EffortCounter(mins)

    def reset(self) -> None:
        self.efforts.reset()

    def step(self, valid: np.ndarray, seen: np.ndarray, speed: np.ndarray, accel: np.ndarray
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Returns (figures (n, P, N_FIG) int64 in micro-units or counts,
        zone index (n, P), metabolic power (n, P) W/kg)."""
        p = self.p
        n = speed.shape[0]
        dist_um = np.rint(speed * (self.dt * MICRO)).astype(np.int64)
        power = metabolic_power(speed, accel, p)
        power[~valid] = 0.0
        in_hsr = valid & (speed >= p.hsr_ms)
        in_spr = valid & (speed >= p.sprint_ms)
        conds = np.concatenate([in_hsr, in_spr, valid & (accel >= p.accel_ms2), valid & (accel <= p.decel_ms2)], axis=1)
        counts = self.efforts.step(conds).reshape(n, 4, self.n)
        fig = np.empty((n, self.n, N_FIG), np.int64)
        fig[..., DIST] = dist_um
        fig[..., HSR] = dist_um * (in_hsr & ~in_spr)
        fig[..., SPRINT] = dist_um * in_spr
        fig[..., ENERGY] = np.rint(power * (self.dt * MICRO))
        fig[..., HIPOW] = dist_um * (power > p.high_power_wkg)
        fig[..., N_HSR:N_DEC + 1] = counts.transpose(0, 2, 1)
        fig[..., VALID] = valid
        fig[..., SEEN] = seen
        zone = np.searchsorted(self.zone_edges, speed * self.inv_scale, side="right")
        return fig, zone, power
