"""How far live figures run below post-processed ones: a live recording against the provider's
post-processed recording of the same match (``pacewire history compare``).

Both recordings go through the same engine; per outfield player who played at
least ``min_minutes`` in both, each figure's deficit is (post - live) / post,
in percent (positive: live ran below). Figures: distance, high-speed running,
sprint distance, accelerations and decelerations, and distance in each speed
band. Over the players: the median and the spread (1.4826 × median absolute
deviation, a robust standard deviation; Rousseeuw & Croux 1993), as the
baselines use. Goalkeepers are left out (common practice: their running is
not comparable with the outfield's, and tiny totals make ratios unstable).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pacewire.engine.baseline import robust_band

FIGURES = ("distance_m", "hsr_m", "sprint_m", "accels", "decels")


@dataclass(frozen=True)
class Deficit:
    figure: str  # a snapshot figure, or ``zones.{band}``
    median_pct: float  # live below post, % of post
    spread_pct: float  # percentage points
    players: int  # players with the figure above zero in the post-processed recording


def _values(p: dict[str, Any]) -> dict[str, float]:
    out = {f: float(p.get(f) or 0.0) for f in FIGURES}
    out.update({f"zones.{k}": float(v or 0.0) for k, v in (p.get("zones") or {}).items()})
    return out


def deficits(live: dict[str, Any], post: dict[str, Any], min_minutes: float) -> list[Deficit]:
    """Per figure, the live snapshot's deficit against the post-processed one over their shared outfield
    players (``players`` of two snapshot bodies)."""
    per: dict[str, list[float]] = {}
    for pid, q in post["players"].items():
        p = live["players"].get(pid)
        if p is None or q["is_goalkeeper"] or min(p["minutes"], q["minutes"]) < min_minutes:
            continue
        lv = _values(p)
        for fig, pv in _values(q).items():
            if pv > 0:
                per.setdefault(fig, []).append(100.0 * (pv - lv.get(fig, 0.0)) / pv)
    out = []
    for fig, vals in per.items():  # FIGURES, then the speed bands lowest first (the snapshot's order)
        med, spread = robust_band(vals)
        out.append(Deficit(fig, med, spread, len(vals)))
    return out
