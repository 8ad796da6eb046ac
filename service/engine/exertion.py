"""Per-sample exertion figures: speed bands, efforts, metabolic power.

Everything here works on final kinematic samples shaped (n, players). Figures
are whole numbers of micro-units (µm, µJ/kg) or counts, so that sums do not
depend on how the samples were split into blocks (the per-sample matrix holds
them as float64, exact below 2**53, for a fast summing product).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

G = 9.81  # m/s^2

# Columns of the per-sample figure matrix (see ``Exertion.step``, which relies on HSR, SPRINT
# and the four counts being adjacent and in this order).
# VALID counts samples credited from the player's own kept samples or bridges over plain gaps (coverage).
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
    top_hold_n: int = 1  # samples a speed must be held to count as the top speed


def minetti_cost(es: np.ndarray) -> np.ndarray:
    """Energy cost of running at equivalent slope ``es``, J/kg/m (Minetti et al. 2002)."""
    i = np.minimum(np.maximum(es, -0.45), 0.45)  # np.clip's result, without its Python wrapper
    # Horner's scheme in place, the same operations in the same order as np.polyval
    y = i * MINETTI_2002[0]
    for c in MINETTI_2002[1:-1]:
        y += c
        y *= i
    y += MINETTI_2002[-1]
    return y


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
        cost = minetti_cost(es)
        cost *= em
        cost *= p.kt
        cost *= speed
        return cost
    es = accel / G + p.air_k * speed * speed / G
    em = np.sqrt(es * es + 1.0)
    running = (speed >= np.polyval(TRANSITION_2018, es)) | (speed > 2.5)
    cost = np.where(running, minetti_pavei_cost(es, p.flat_cost), walking_cost_2018(es, speed))
    return cost * em * speed


class EffortCounter:
    """Counts runs of a condition held at least ``min_n`` samples; one run counts once.

    Columns are independent, each with its own minimum (``min_n`` broadcasts
    against the column shape); the run length carries across calls, so a run
    split over blocks counts once.
    """

    _BIG = 1 << 40  # above any run length: keeps the running maximum below positive

    def __init__(self, min_n: np.ndarray, shape: tuple[int, ...] | None = None) -> None:
        self.min_n = np.maximum(np.asarray(min_n, np.int64), 1)
        self.carry = np.zeros(self.min_n.shape if shape is None else shape, np.int64)
        self._rows: dict[tuple[int, int], np.ndarray] = {}  # (row count, ndim) -> row numbers + BIG

    def reset(self) -> None:
        self.carry[:] = 0

    def grow(self, k: int) -> None:
        """``k`` more columns on the last axis, with no run in progress."""
        self.carry = np.concatenate([self.carry, np.zeros((*self.carry.shape[:-1], k), np.int64)], axis=-1)

    def step(self, cond: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """``cond`` (n, *columns) bool → (n, *columns) marking the sample where a run reaches its
        minimum (bool, or written into ``out``)."""
        n = cond.shape[0]
        if n == 0:
            return cond
        rows = self._rows.get((n, cond.ndim))
        if rows is None:
            rows = (np.arange(n + 1, dtype=np.int64) + self._BIG).reshape(-1, *([1] * (cond.ndim - 1)))
            self._rows[(n, cond.ndim)] = rows
            if len(self._rows) > 64:  # block sizes vary live: keep a few
                self._rows = {(n, cond.ndim): rows}
        # running maximum of (row + BIG) over rows where the condition fails; row 0 stands for the
        # run carried in: its last failure lies ``carry`` rows back
        last_fail = np.empty((n + 1, *cond.shape[1:]), np.int64)
        np.subtract(self._BIG, self.carry, out=last_fail[0])
        np.multiply(rows[1:], ~cond, out=last_fail[1:])
        np.maximum.accumulate(last_fail, axis=0, out=last_fail)
        length = rows[1:] - last_fail[1:]
        self.carry = length[-1].copy()
        return np.equal(length, self.min_n, out=out)


class Exertion:
    """Turns final kinematic samples into the figure matrix for one period.

    Columns are the players seen in the period (``grow`` adds them as they appear).
    """

    def __init__(self, params: ExertionParams, n_players: int, zone_edges: np.ndarray, zone_scale: np.ndarray) -> None:
        self.p = params
        self.dt = 1.0 / params.fps
        self.n = n_players
        # band of a sample: searchsorted(zone_edges, speed / zone_scale[player])
        self.zone_edges = zone_edges
        self.inv_scale = 1.0 / zone_scale
        self.unit_scale = bool((zone_scale == 1.0).all())  # absolute bands: speed / 1 is speed
        self.n_zones = zone_edges.shape[0] + 1
        # one counter for HSR, sprint, accel, decel runs of every player: columns (4, P)
        mins = np.array([params.speed_min_n, params.speed_min_n, params.accel_min_n, params.accel_min_n])[:, None]
        self.efforts = EffortCounter(mins, (4, n_players))
        self._speed_bands = np.array([params.hsr_ms, params.sprint_ms])[:, None, None]

    def reset(self) -> None:
        self.efforts.reset()

    def grow(self, zone_scale: np.ndarray) -> None:
        """Columns for players seen for the first time (their speed-band scales)."""
        self.n += len(zone_scale)
        self.inv_scale = np.concatenate([self.inv_scale, 1.0 / zone_scale])
        self.unit_scale = self.unit_scale and bool((zone_scale == 1.0).all())
        self.efforts.grow(len(zone_scale))

    def step(self, valid: np.ndarray, seen: np.ndarray, speed: np.ndarray, accel: np.ndarray, full: bool = False,
             artefact: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Returns (figures (N_FIG, n, P) float64 holding integers: micro-units or counts,
        zone index (n, P)). ``full``: every sample valid and seen (the masks are not read).
        ``artefact``: seen samples removed as tracking artefacts (None: none); a sample bridged over
        one still credits its interpolated figures but not coverage.
        Figure-major, so each figure is one contiguous (n, P) array."""
        p = self.p
        n = speed.shape[0]
        per_um = self.dt * MICRO
        fig = np.empty((N_FIG, n, self.n))
        dist = fig[DIST]
        np.multiply(speed, per_um, out=dist)
        np.rint(dist, out=dist)
        power = metabolic_power(speed, accel, p)
        if not full:
            power[~valid] = 0.0
        energy = fig[ENERGY]
        np.multiply(power, per_um, out=energy)
        np.rint(energy, out=energy)
        np.multiply(dist, power > p.high_power_wkg, out=fig[HIPOW])
        conds = np.empty((4, n, self.n), bool)  # HSR, sprint, accel, decel
        np.greater_equal(speed, self._speed_bands, out=conds[0:2])
        np.greater_equal(accel, p.accel_ms2, out=conds[2])
        np.less_equal(accel, p.decel_ms2, out=conds[3])
        if not full:
            conds &= valid
        np.multiply(dist, conds[0:2], out=fig[HSR:SPRINT + 1])
        fig[HSR] -= fig[SPRINT]  # a sprint sample is not an HSR-band sample (sprint_ms > hsr_ms)
        self.efforts.step(conds.transpose(1, 0, 2), out=fig[N_HSR:N_DEC + 1].transpose(1, 0, 2))
        if full:
            fig[VALID:SEEN + 1] = 1.0
        else:
            if artefact is None:
                fig[VALID] = valid
            else:
                np.greater(valid, artefact, out=fig[VALID])  # valid and not an artefact
            fig[SEEN] = seen
        zone = self.zone_edges.searchsorted(speed if self.unit_scale else speed * self.inv_scale, side="right")
        return fig, zone
