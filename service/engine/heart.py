"""Heart-rate accumulation: credited time, mean, zones, Edwards and Banister TRIMP.

Samples arrive already gated (``pacewire.wire.heart.HrDecoder``), per player in
time order. Each sample credits the time since the same player's previous
sample (at most ``max_gap_s``) to the period whose span holds its timestamp,
at the second ``floor(t - t0)`` of that period. Sums are int64 micro-units,
so neither the split of samples into ``add`` calls nor of ``settle`` calls
can change them (docs/wearables.md, "Heart rate").

Estimates from a chest strap or optical sensor: decisions on injury,
return-to-play and substitution stay with qualified staff.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from pacewire.engine.types import Sex

MICRO = 1_000_000
_U = 1e-6  # micro-units to units

# Columns of the per-sample / per-second sum matrix (int64 micro-units).
HR_DT = 0  # credited time, µs
HR_BPM_DT = 1  # bpm × credited time, µ(bpm·s)
HR_ZONE0 = 2  # first of N_ZONES columns: credited time in each %HRmax zone, µs
N_ZONES = 5
# TRIMP columns hold AU × 60 (weight × seconds): exact for integer weights at any
# sampling rate, where AU per sample (weight × s / 60) would round every sample.
HR_EDWARDS = HR_ZONE0 + N_ZONES  # Edwards TRIMP, µ(AU·60)
HR_BANISTER = HR_EDWARDS + 1  # Banister TRIMP, µ(AU·60)
HR_N = HR_BANISTER + 1  # samples credited to a period (a count, not micro-units)
N_HR = HR_N + 1

PROFILE_SOURCE = "match sheet or heart_rate.profiles_file"


@dataclass(frozen=True)
class HeartParams:
    """Gate and accumulation settings; defaults are docs/wearables.md's."""

    min_bpm: float = 30.0  # below: implausible_bpm
    max_bpm: float = 230.0  # above: implausible_bpm
    max_jump_bpm_s: float = 40.0  # hr_jump beyond this change per second (at least 1 s)
    jump_reset: int = 3  # after this many hr_jump rejections in a row the next sample is accepted
    max_gap_s: float = 5.0  # a longer gap since the previous sample credits nothing
    expected_hz: float = 1.0  # samples per on-pitch second for hr_coverage
    zone_edges_pct: tuple[float, ...] = (50, 60, 70, 80, 90)  # Edwards 1993 zones, % HRmax
    edwards_weights: tuple[float, ...] = (1, 2, 3, 4, 5)  # Edwards 1993
    # Banister 1991 (a, b) per sex, as commonly quoted; from memory.
    banister_male: tuple[float, float] = (0.64, 1.92)
    banister_female: tuple[float, float] = (0.86, 1.67)
    stale_s: float = 5.0  # hr_bpm is null when the player's latest sample is older than this

    def __post_init__(self) -> None:
        if len(self.zone_edges_pct) != N_ZONES or len(self.edwards_weights) != N_ZONES:
            raise ValueError(f"zone_edges_pct and edwards_weights need {N_ZONES} entries each")
        if list(self.zone_edges_pct) != sorted(self.zone_edges_pct) or self.zone_edges_pct[-1] >= 100:
            raise ValueError("zone_edges_pct must increase and stay below 100")
        if not 0 < self.min_bpm < self.max_bpm:
            raise ValueError("need 0 < min_bpm < max_bpm")
        if self.max_gap_s < 0 or self.expected_hz <= 0 or self.jump_reset < 1:
            raise ValueError("need max_gap_s >= 0, expected_hz > 0 and jump_reset >= 1")

    def zone_names(self) -> list[str]:
        """``"50-60%"`` ... ``"90-100%"``: the top zone also holds 100 % and above."""
        hi = (*self.zone_edges_pct[1:], 100)
        return [f"{lo:g}-{h:g}%" for lo, h in zip(self.zone_edges_pct, hi, strict=True)]


@dataclass(frozen=True)
class HeartProfile:
    """One player's heart-rate profile; any field may be unknown (None)."""

    hr_max_bpm: float | None = None
    hr_rest_bpm: float | None = None
    sex: Sex | None = None

    def __post_init__(self) -> None:
        for name in ("hr_max_bpm", "hr_rest_bpm"):
            v = getattr(self, name)
            if v is not None and not (math.isfinite(v) and v > 0):
                raise ValueError(f"{name} must be a positive number, got {v!r}")
        if self.hr_max_bpm is not None and self.hr_rest_bpm is not None and self.hr_rest_bpm >= self.hr_max_bpm:
            raise ValueError(f"hr_rest_bpm {self.hr_rest_bpm} must be below hr_max_bpm {self.hr_max_bpm}")
        if self.sex not in (None, "male", "female"):
            raise ValueError(f"sex must be 'male' or 'female', got {self.sex!r}")


def _missing(names: list[str]) -> str:
    said = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
    return f"needs {said} ({PROFILE_SOURCE})"


class _Bins:
    """One period's sums per second: rows[s, player, column] (int64)."""

    def __init__(self, n_players: int) -> None:
        self.rows = np.zeros((64, n_players, N_HR), np.int64)
        self.total = np.zeros((n_players, N_HR), np.int64)
        self.seconds = 0  # one past the highest second credited

    def add(self, sec: np.ndarray, player: np.ndarray, fig: np.ndarray) -> None:
        top = int(sec.max()) + 1
        if top > self.rows.shape[0]:
            grown = np.zeros((max(2 * self.rows.shape[0], top), *self.rows.shape[1:]), np.int64)
            grown[: self.rows.shape[0]] = self.rows
            self.rows = grown
        self.seconds = max(self.seconds, top)
        np.add.at(self.rows, (sec, player), fig)  # samples may land in any order: add.at is exact for int64
        np.add.at(self.total, player, fig)


class HeartRate:
    """Heart-rate figures of one match's players (index = roster index)."""

    def __init__(self, params: HeartParams, profiles: Sequence[HeartProfile]) -> None:
        self.p = params
        self.n = n = len(profiles)
        self.profiles = tuple(profiles)
        nan = math.nan
        self.hr_max = np.array([nan if q.hr_max_bpm is None else q.hr_max_bpm for q in profiles], np.float64)
        self.hr_rest = np.array([nan if q.hr_rest_bpm is None else q.hr_rest_bpm for q in profiles], np.float64)
        ab = {"male": params.banister_male, "female": params.banister_female, None: (nan, nan)}
        self.ban_a = np.array([ab[q.sex][0] for q in profiles], np.float64)
        self.ban_b = np.array([ab[q.sex][1] for q in profiles], np.float64)
        self.has_max = ~np.isnan(self.hr_max)
        self.has_banister = self.has_max & ~np.isnan(self.hr_rest) & ~np.isnan(self.ban_a)
        self.zone_names = params.zone_names()
        self._edges = np.asarray(params.zone_edges_pct, np.float64)
        self._weights = np.asarray(params.edwards_weights, np.float64)
        self._max_gap_us = int(round(params.max_gap_s * MICRO))
        self.last_t = np.full(n, nan)  # latest accepted sample, s (UTC epoch)
        self.last_bpm = np.full(n, nan)
        self.peak_bpm = np.full(n, nan)
        self.samples = 0  # accepted samples added
        # pending samples: (player, t, figures) not yet placed in a period
        self._pend_p = np.zeros(0, np.int64)
        self._pend_t = np.zeros(0, np.float64)
        self._pend_f = np.zeros((0, N_HR), np.int64)
        self.bins: dict[int, _Bins] = {}

    # -- input ---------------------------------------------------------------------
    def add(self, player: np.ndarray, t: np.ndarray, bpm: np.ndarray) -> None:
        """Accepted samples (roster index, UTC epoch s, bpm), per player in time order."""
        player = np.asarray(player, np.int64)
        t = np.asarray(t, np.float64)
        bpm = np.asarray(bpm, np.float64)
        m = player.shape[0]
        if m == 0:
            return
        # previous sample of the same player: earlier in this batch, else the last one added
        order = np.argsort(player, kind="stable")
        ps, ts = player[order], t[order]
        prev = np.empty(m)
        prev[1:] = ts[:-1]
        first = np.ones(m, bool)
        first[1:] = ps[1:] != ps[:-1]
        prev[first] = self.last_t[ps[first]]
        gap = ts - prev  # NaN before a player's first sample
        dt_us = np.empty(m, np.int64)
        dt_us[order] = np.where(np.isnan(gap), 0.0, np.rint(gap * MICRO)).astype(np.int64)
        # a first sample or a gap beyond max_gap_s credits nothing, like gaps in tracking
        dt_us = np.where((dt_us > 0) & (dt_us <= self._max_gap_us), dt_us, 0)
        self._pend_p = np.concatenate((self._pend_p, player))
        self._pend_t = np.concatenate((self._pend_t, t))
        self._pend_f = np.concatenate((self._pend_f, self._figures(player, bpm, dt_us)))
        last = np.flatnonzero(np.append(ps[1:] != ps[:-1], True))  # last sample of each player in the batch
        self.last_t[ps[last]] = ts[last]
        self.last_bpm[ps[last]] = bpm[order][last]
        np.fmax.at(self.peak_bpm, player, bpm)
        self.samples += m

    def _figures(self, player: np.ndarray, bpm: np.ndarray, dt_us: np.ndarray) -> np.ndarray:
        """Per-sample sum columns (int64 micro-units); the count HR_N is set on settling."""
        fig = np.zeros((player.shape[0], N_HR), np.int64)
        dt = dt_us.astype(np.float64)
        fig[:, HR_DT] = dt_us
        fig[:, HR_BPM_DT] = np.rint(bpm * dt)
        hr_max = self.hr_max[player]
        known = self.has_max[player]
        # zone k when bpm >= edge_k % of HRmax (compared as bpm·100 >= edge·HRmax: no division)
        above = bpm[:, None] * 100.0 >= self._edges[None, :] * np.where(known, hr_max, np.inf)[:, None]
        zone = above.sum(axis=1) - 1  # -1: below the first edge (or HRmax unknown), credits nothing
        inz = zone >= 0
        rows = np.flatnonzero(inz)
        fig[rows, HR_ZONE0 + zone[inz]] = dt_us[inz]
        # Edwards 1993: minutes in zone × weight 1..5 (here weight × µs)
        fig[rows, HR_EDWARDS] = np.rint(self._weights[zone[inz]] * dt[inz])
        # Banister 1991: Δt (min) × HRr × a·exp(b·HRr), HRr = (HR - rest)/(max - rest) in [0, 1]
        ban = self.has_banister[player]
        if ban.any():
            rest = self.hr_rest[player[ban]]
            hrr = np.clip((bpm[ban] - rest) / (hr_max[ban] - rest), 0.0, 1.0)
            a, b = self.ban_a[player[ban]], self.ban_b[player[ban]]
            fig[ban, HR_BANISTER] = np.rint(dt[ban] * hrr * a * np.exp(b * hrr))  # µs, not minutes
        return fig

    def settle(self, spans: Sequence[tuple[int, float, float]], horizon: float) -> None:
        """Place pending samples with ``t <= horizon`` in their periods.

        ``spans``: the match's periods as (period index, t0, t_end), in order;
        t0 is the time of the period's first frame slot, t_end the last
        frame's time plus one frame (for the current period, its value now).
        ``horizon``: the time up to which the spans are final (the latest
        frame's time); later samples wait. A settled sample outside every
        span (a break) credits nothing.
        """
        if self._pend_t.shape[0] == 0:
            return
        due = self._pend_t <= horizon
        if not due.any():
            return
        p, t, f = self._pend_p[due], self._pend_t[due], self._pend_f[due]
        keep = ~due
        self._pend_p, self._pend_t, self._pend_f = self._pend_p[keep], self._pend_t[keep], self._pend_f[keep]
        f[:, HR_N] = 1
        for idx, t0, t_end in spans:
            inside = (t >= t0) & (t <= t_end)
            if not inside.any():
                continue
            sec = np.floor(t[inside] - t0).astype(np.int64)
            bins = self.bins.get(idx)
            if bins is None:
                bins = self.bins[idx] = _Bins(self.n)
            bins.add(sec, p[inside], f[inside])

    @property
    def pending(self) -> int:
        """Samples waiting for tracking to reach their time."""
        return int(self._pend_t.shape[0])

    # -- sums ----------------------------------------------------------------------
    def period_sums(self, period_index: int, s0: int = 0, s1: int | None = None) -> np.ndarray:
        """Sums over the period's seconds [s0, s1) → (P, N_HR) int64."""
        bins = self.bins.get(period_index)
        if bins is None:
            return np.zeros((self.n, N_HR), np.int64)
        if s0 <= 0 and (s1 is None or s1 >= bins.seconds):
            return bins.total.copy()
        s0 = min(max(s0, 0), bins.seconds)
        s1 = bins.seconds if s1 is None else min(max(s1, s0), bins.seconds)
        return bins.rows[s0:s1].sum(axis=0)

    def match_sums(self) -> np.ndarray:
        """Sums over every period → (P, N_HR) int64."""
        out = np.zeros((self.n, N_HR), np.int64)
        for bins in self.bins.values():
            out += bins.total
        return out

    # -- figures -------------------------------------------------------------------
    def figures(self, sums: np.ndarray, onpitch_s: np.ndarray) -> dict[str, list[Any]]:
        """Columns per player from ``sums`` (P, N_HR) and on-pitch seconds (P,).

        hr_mean_bpm: time-weighted mean, bpm; hr_zones: seconds per %HRmax zone;
        trimp_edwards (Edwards 1993) and trimp_banister (Banister 1991), AU;
        hr_coverage: samples credited / (on-pitch s × expected_hz), capped at 1.
        A figure is None without credited time or when the profile lacks what
        it needs (see ``omitted``).
        """
        dt = sums[:, HR_DT]
        timed = dt > 0
        safe = np.where(timed, dt, 1).astype(np.float64)
        mean = np.round(sums[:, HR_BPM_DT] / safe, 1).tolist()
        zones = np.round(sums[:, HR_ZONE0:HR_ZONE0 + N_ZONES] * _U, 1).tolist()
        edw = np.round(sums[:, HR_EDWARDS] * (_U / 60.0), 1).tolist()
        ban = np.round(sums[:, HR_BANISTER] * (_U / 60.0), 1).tolist()
        onpitch = np.asarray(onpitch_s, np.float64)
        expected = np.where(onpitch > 0, onpitch, 1.0) * self.p.expected_hz
        cov = np.round(np.minimum(sums[:, HR_N] / expected, 1.0), 3).tolist()
        names = self.zone_names
        out: dict[str, list[Any]] = {"hr_mean_bpm": [], "hr_zones": [], "trimp_edwards": [],
                                     "trimp_banister": [], "hr_coverage": []}
        for i in range(self.n):
            t_ok, m_ok = bool(timed[i]), bool(self.has_max[i])
            out["hr_mean_bpm"].append(mean[i] if t_ok else None)
            out["hr_zones"].append(dict(zip(names, zones[i], strict=True)) if t_ok and m_ok else None)
            out["trimp_edwards"].append(edw[i] if t_ok and m_ok else None)
            out["trimp_banister"].append(ban[i] if t_ok and self.has_banister[i] else None)
            out["hr_coverage"].append(cov[i] if onpitch[i] > 0 else None)
        return out

    def now(self, latest_time: float | None = None) -> tuple[list[float | None], list[float | None]]:
        """(hr_bpm, hr_pct_max) per player; None when the player's latest sample
        is more than ``stale_s`` older than ``latest_time`` (default: the newest
        sample of any player)."""
        ref = latest_time
        if ref is None:
            ref = float(np.nanmax(self.last_t)) if self.samples else math.nan
        fresh = ~np.isnan(self.last_t) & (ref - self.last_t <= self.p.stale_s)
        bpm = np.where(fresh, self.last_bpm, np.nan)
        pct = np.round(bpm / np.where(self.has_max, self.hr_max, np.nan) * 100.0, 1)
        return _nones(np.round(bpm, 1)), _nones(pct)

    def peak(self) -> list[float | None]:
        """Highest accepted bpm per player (None before a first sample)."""
        return _nones(self.peak_bpm)

    def omitted(self) -> list[dict[str, str]]:
        """Per player, {figure: reason} for figures the profile cannot support."""
        out = []
        for q in self.profiles:
            d: dict[str, str] = {}
            if q.hr_max_bpm is None:
                for fig in ("hr_pct_max", "hr_zones", "trimp_edwards"):
                    d[fig] = _missing(["hr_max_bpm"])
            lack = [name for name, v in (("hr_max_bpm", q.hr_max_bpm), ("hr_rest_bpm", q.hr_rest_bpm), ("sex", q.sex))
                    if v is None]
            if lack:
                d["trimp_banister"] = _missing(lack)
            out.append(d)
        return out


def _nones(a: np.ndarray) -> list[float | None]:
    return [None if v != v else v for v in a.tolist()]
