"""Figures per N-minute block of the match clock, from each period's per-second bins.

Used for intensity over time in reports (5-minute blocks) and for match
history and baselines (15-minute blocks). Pure: reads a MatchState, returns
new arrays (nothing returned shares memory with the state).

Rates are per minute on the pitch inside the block: a player's on-pitch time
in a block is the overlap of the block with his first-to-last seen span of
the period (common practice: a substitute's rate counts from his entry).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np

from pacewire.engine import exertion as ex
from pacewire.engine.match import CLOCK_START_MIN, MatchState

_U = 1e-6  # micro-units to units


@dataclass(frozen=True)
class BlockSeries:
    """Per-block sums: ``sums[b, p, figure]`` (int64 micro-units or counts,
    columns of :mod:`pacewire.engine.exertion`), players in roster order."""

    block_min: int
    keys: tuple[str, ...]  # "block_0_15", ...; a stoppage-time block is "block_45+" (split mode)
    periods: tuple[str, ...]  # period of each block
    start_s: np.ndarray  # (B,) match clock at the block start, s
    stop_s: np.ndarray  # (B,) match clock at the end of the block's data, s
    sums: np.ndarray  # (B, P, N_FIG) int64
    onpitch_s: np.ndarray  # (B, P) seconds on the pitch inside the block
    player_ids: tuple[str, ...]

    def __len__(self) -> int:
        return len(self.keys)

    def total_m(self, fig: int) -> np.ndarray:
        """(B, P) metres (DIST, HSR, SPRINT, HIPOW) or counts (N_* columns)."""
        scale = _U if fig in (ex.DIST, ex.HSR, ex.SPRINT, ex.ENERGY, ex.HIPOW) else 1.0
        return self.sums[..., fig] * scale

    def per_min(self, fig: int) -> np.ndarray:
        """(B, P) figure per minute on the pitch; NaN where the player was not on it."""
        minutes = self.onpitch_s / 60.0
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(minutes > 0, self.total_m(fig) / np.where(minutes > 0, minutes, 1.0), np.nan)

    def group_per_min(self, fig: int, mask: np.ndarray) -> np.ndarray:
        """(B,) figure per player-minute over the players in ``mask`` (team outfield)."""
        total = self.total_m(fig)[:, mask].sum(axis=1)
        minutes = self.onpitch_s[:, mask].sum(axis=1) / 60.0
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(minutes > 0, total / np.where(minutes > 0, minutes, 1.0), np.nan)


def _period_blocks(period: str, length_min: int, block_min: int, done_s: int, stoppage: str
                   ) -> list[tuple[int, int, str]]:
    """(first second, stop second, key) of one period's blocks that hold data."""
    c0 = CLOCK_START_MIN[period]
    n_nominal = max(math.ceil(length_min / block_min), 1)
    out = []
    for b in range(n_nominal):
        m0, m1 = b * block_min, min((b + 1) * block_min, length_min)
        s1 = m1 * 60
        if b == n_nominal - 1 and stoppage == "merge":
            s1 = max(s1, done_s)
        out.append((m0 * 60, s1, f"block_{c0 + m0}_{c0 + m1}"))
    if stoppage == "split" and done_s > length_min * 60:
        out.append((length_min * 60, done_s, f"block_{c0 + length_min}+"))
    return [o for o in out if o[0] < done_s]


def block_series(state: MatchState, block_min: int, stoppage: Literal["merge", "split"] = "merge") -> BlockSeries:
    """Figures of every ``block_min``-minute block of the match clock so far.

    ``stoppage="merge"``: the last block of a period takes its stoppage time
    (keys as in the snapshot's fixed blocks: block_30_45 holds 30'-45'+).
    ``stoppage="split"``: stoppage time is a block of its own (block_45+).
    Periods with no nominal length (shootout) are left out.
    """
    fps = state.fps
    n = state.n
    keys, periods, starts, stops, sums, onp = [], [], [], [], [], []
    for per in state.periods:
        length = state.params.period_min[per.index]
        bins = per.bins
        if length <= 0 or bins.complete == 0:
            continue
        clock0 = CLOCK_START_MIN[per.name] * 60
        first = np.where(per.first_seen >= 0, per.first_seen / fps, np.inf)
        last_end = np.where(per.last_seen >= 0, (per.last_seen + 1) / fps, -np.inf)
        for s0, s1, key in _period_blocks(per.name, length, block_min, bins.complete, stoppage):
            data_end = s0 + bins.covered_s(s0, s1)
            lo = np.maximum(first, s0)
            hi = np.minimum(last_end, data_end)
            keys.append(key)
            periods.append(per.name)
            starts.append(clock0 + s0)
            stops.append(clock0 + data_end)
            sums.append(bins.span(s0, s1))
            onp.append(np.clip(hi - lo, 0.0, None))
    b = len(keys)
    return BlockSeries(
        block_min=block_min, keys=tuple(keys), periods=tuple(periods),
        start_s=np.array(starts, float), stop_s=np.array(stops, float),
        sums=np.stack(sums) if b else np.zeros((0, n, ex.N_FIG), np.int64),
        onpitch_s=np.stack(onp) if b else np.zeros((0, n)),
        player_ids=tuple(p.id for p in state.roster.players),
    )


def window_coverage(state: MatchState, minutes: int) -> np.ndarray:
    """(P,) credited samples ÷ on-pitch samples over the last ``minutes`` of complete
    seconds of the current period (the coverage of a "last N min" window); 0 where
    the player was not on the pitch in it."""
    cur = state.current
    if cur is None:
        return np.zeros(state.n)
    fps = state.fps
    bins = cur.bins
    stop = bins.complete
    start = max(stop - minutes * 60, 0)
    valid = bins.span(start, stop)[:, ex.VALID]
    end_slot = min(stop * fps, bins.end_slot)
    lo = np.maximum(cur.first_seen, start * fps)
    hi = np.minimum(cur.last_seen + 1, end_slot)
    onp = np.where(cur.first_seen >= 0, np.clip(hi - lo, 0, None), 0)
    return np.where(onp > 0, np.minimum(valid / np.maximum(onp, 1), 1.0), 0.0)


def clock_block(period: str | None, match_time_s: float, block_min: int, length_min: int) -> str | None:
    """Key of the merge-mode block (as in :func:`block_series`) that holds ``match_time_s``."""
    if period is None or length_min <= 0:
        return None
    clock0 = CLOCK_START_MIN[period]
    into = max(match_time_s / 60.0 - clock0, 0.0)
    n_nominal = max(math.ceil(length_min / block_min), 1)
    b = min(int(into // block_min), n_nominal - 1)
    return f"block_{clock0 + b * block_min}_{clock0 + min((b + 1) * block_min, length_min)}"
