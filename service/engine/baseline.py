"""Each player against his own past matches: bands from stored figures, and this match against them.

Pure: the bands come in as plain numbers (the history computes them once per
match start, :mod:`pacewire.store.history`); the comparison reads the engine
state's 15-minute blocks (:func:`pacewire.engine.blocks.block_series`, merge
mode).

Blocks follow the match clock: ``0-15``, ``15-30``, ``30-45`` (with the first
half's stoppage time), ``45-60``, ``60-75``, ``75-90`` (with the second half's
stoppage time); extra time ``90-105``, ``105-120``. The second half's clock
starts at 45:00, so its blocks never share a key with the first half's.

A band is the median of the player's stored rates over his matches, and
median ∓ ``spreads`` × spread, the spread being 1.4826 × the median absolute
deviation, a robust standard deviation (Rousseeuw & Croux 1993;
:func:`robust_band`, the computation the baseline alert rule uses), never
narrower than a share of the median per rate (:func:`make_band`). Rates are
per minute on the pitch: a block's (or the match's) total ÷ its minutes on the
pitch; the match rate sums the blocks (shoot-outs have none).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

from pacewire.engine import exertion as ex
from pacewire.engine.blocks import block_series
from pacewire.engine.match import MatchState

# published rate -> the engine columns whose sum it divides by minutes on the pitch
METRICS: dict[str, tuple[int, ...]] = {
    "m_per_min": (ex.DIST,),
    "hsr_m_per_min": (ex.HSR,),
    "sprint_m_per_min": (ex.SPRINT,),
    "accel_decel_per_min": (ex.N_ACC, ex.N_DEC),
}
# the stored figures (history scopes) whose sum each rate divides by the stored minutes
STORED: dict[str, tuple[str, ...]] = {
    "m_per_min": ("distance_m",),
    "hsr_m_per_min": ("hsr_m",),
    "sprint_m_per_min": ("sprint_m",),
    "accel_decel_per_min": ("accels", "decels"),
}
DIGITS = 2  # bands and ratios on the wire: 0.01 (m/min and counts per minute)


def robust_band(values: list[float]) -> tuple[float, float]:
    """(median, spread) with spread = 1.4826 × median absolute deviation, a robust
    standard deviation (Rousseeuw & Croux 1993)."""
    a = np.asarray(values, float)
    med = float(np.median(a))
    return med, float(1.4826 * np.median(np.abs(a - med)))


def block_label(key: str) -> str:
    """``block_45_60`` -> ``45-60`` (the wire's block names)."""
    return key.removeprefix("block_").replace("_", "-")


@dataclass(frozen=True)
class Band:
    """One rate's band over a player's past matches (units of the rate)."""

    median: float
    spread: float
    low: float
    high: float
    n: int  # matches behind it


@dataclass(frozen=True)
class PlayerBaseline:
    """A player's baseline: the matches that qualify and, when there are enough, the bands."""

    matches: int
    required: int
    match_ids: tuple[tuple[str, float | None], ...] = ()  # (match key, kick-off epoch s), newest first
    bands: dict[str, dict[str, Band]] = field(default_factory=dict)  # "match" or a block label -> rate -> band
    formed_by: dict[str, tuple[str, ...]] = field(default_factory=dict)  # scope -> match keys behind its bands

    @property
    def enough(self) -> bool:
        return self.matches >= self.required


def make_band(values: list[float], spreads: float, min_share: float = 0.0) -> Band:
    """The band of a player's stored rates. The spread is never under ``min_share`` × the median: three
    matches alike to 1 % say nothing of how much he varies (match-to-match CVs run 16-31 % for high-speed
    running and sprinting; Gregson et al. 2010), and a rate below 0 cannot be run, so the low edge stops at 0."""
    med, spread = robust_band(values)
    spread = max(spread, min_share * med)
    return Band(med, spread, max(0.0, med - spreads * spread), med + spreads * spread, len(values))


def _r(v: float) -> float:
    return round(float(v), DIGITS)


def static_body(pb: PlayerBaseline) -> dict[str, Any]:
    """The parts of ``players.{id}.baseline`` fixed for the match (no bands without enough matches)."""
    out: dict[str, Any] = {"matches": pb.matches, "required": pb.required}
    if not pb.enough:
        return out
    kick = dict(pb.match_ids)
    out["match_ids"] = [{"match_id": k, "kickoff": t} for k, t in pb.match_ids]
    bands = {scope: {m: {"median": _r(b.median), "low": _r(b.low), "high": _r(b.high)} for m, b in per.items()}
             for scope, per in pb.bands.items()}
    out["bands"] = {"match": bands.get("match", {}), "blocks": {k: v for k, v in bands.items() if k != "match"}}
    out["formed_by"] = {scope: [{"match_id": k, "kickoff": kick.get(k)} for k in keys]
                        for scope, keys in pb.formed_by.items()}
    return out


def current_rates(state: MatchState, block_min: int) -> tuple[str | None, np.ndarray, np.ndarray]:
    """(label of the latest block with data, its rates (P, M), the match's rates so far (P, M)); NaN where
    the player had no minute on the pitch. M follows :data:`METRICS`."""
    s = block_series(state, block_min, "merge")
    m = len(METRICS)
    if len(s) == 0:
        nan = np.full((state.n, m), np.nan)
        return None, nan, nan.copy()
    cols = [sum((s.total_m(c) for c in fig), np.zeros_like(s.onpitch_s)) for fig in METRICS.values()]
    totals = np.stack(cols, axis=-1)  # (B, P, M)
    minutes = s.onpitch_s / 60.0  # (B, P)

    def rate(t: np.ndarray, mins: np.ndarray) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(mins[..., None] > 0, t / np.where(mins > 0, mins, 1.0)[..., None], np.nan)

    return block_label(s.keys[-1]), rate(totals[-1], minutes[-1]), rate(totals.sum(axis=0), minutes.sum(axis=0))


def _versus(bands: dict[str, Band], values: np.ndarray) -> dict[str, Any] | None:
    out: dict[str, Any] = {}
    for j, metric in enumerate(METRICS):
        b = bands.get(metric)
        v = float(values[j])
        if b is None or not np.isfinite(v) or b.median <= 0:
            continue
        # no value beside the ratio: every rate's value changes every second, and deltas would carry it
        out[metric] = {"ratio": _r(v / b.median), "below": bool(v < b.low)}
    return out or None


def versus_body(pb: PlayerBaseline, label: str | None, block: np.ndarray, match: np.ndarray) -> dict[str, Any]:
    """``vs_baseline``: the block in progress (``block_key`` names it) and the match so far against the
    bands; ``ratio`` = value ÷ median, ``below`` = value under the band's low edge; null where the player
    has no minute on the pitch or no band."""
    return {"block_key": label,
            "block": _versus(pb.bands.get(label or "", {}), block),
            "match": _versus(pb.bands.get("match", {}), match)}


@dataclass(frozen=True)
class Baselines:
    """Every player's baseline for one match, computed once at its start."""

    players: dict[str, PlayerBaseline]
    block_min: int = 15

    @cached_property
    def _static(self) -> dict[str, dict[str, Any]]:
        return {pid: static_body(pb) for pid, pb in self.players.items()}

    def bodies(self, state: MatchState) -> list[dict[str, Any] | None]:
        """``players.{id}.baseline`` in roster order (None: the player is not in the history's answer)."""
        label, block, match = current_rates(state, self.block_min)
        out: list[dict[str, Any] | None] = []
        for i, pl in enumerate(state.roster.players):
            pb = self.players.get(pl.id)
            if pb is None:
                out.append(None)
                continue
            body = self._static[pl.id]  # shared, never mutated
            if pb.enough:
                body = {**body, "vs_baseline": versus_body(pb, label, block[i], match[i])}
            out.append(body)
        return out
