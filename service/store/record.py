"""A stored match: each player's figures per scope, from a snapshot and its 15-minute blocks.

Scopes: ``match``; each period (``first_half``, ...); each block of the
match clock (``block_0_15`` ... ``block_75_90``, the last block of a period
holding its stoppage time); each peak window (``peak_5min``, ...).
Block rates are per minute on the pitch in the block (pacewire.engine.blocks).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pacewire.engine import exertion as ex
from pacewire.engine.baseline import robust_band  # noqa: F401  (the history's spread; re-exported)
from pacewire.engine.blocks import BlockSeries

SOURCES = ("live", "replay", "import")  # import: post-processed data, never in a baseline
TOTALS = ("distance_m", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels", "decels", "energy_jkg",
          "high_power_m", "m_per_min", "metabolic_power_wkg", "minutes", "max_speed_ms", "coverage")
PEAK = ("distance_m", "hsr_m", "sprint_m", "m_per_min", "start_s")
_BLOCK_COLS = (("distance_m", ex.DIST), ("hsr_m", ex.HSR), ("sprint_m", ex.SPRINT), ("hsr_efforts", ex.N_HSR),
               ("sprints", ex.N_SPR), ("accels", ex.N_ACC), ("decels", ex.N_DEC), ("energy_jkg", ex.ENERGY),
               ("high_power_m", ex.HIPOW))


@dataclass(frozen=True)
class MatchRecord:
    key: str  # the history's name for the match (the match id unless imported under another)
    match_id: str
    source: str  # live | replay | import
    kickoff_t: float | None  # epoch s of the first frame
    match_time_s: float
    frames: int
    origin: str  # where it came from: "live service" or a folder
    teams: tuple[tuple[str, str, str, int | None], ...]  # (team id, name, side, score)
    players: tuple[tuple[str, str, str, int, bool, float, float], ...]  # id, team, name, jersey, gk, minutes, coverage
    figures: tuple[tuple[str, str, str, float], ...]  # player id, scope, figure, value


def _rate(total: float | None, minutes: float | None) -> float | None:
    return round(total / minutes, 3) if total is not None and minutes else None


def match_record(snapshot: dict[str, Any], blocks: BlockSeries, source: str, key: str | None = None,
                 kickoff_t: float | None = None, origin: str = "") -> MatchRecord:
    """The rows to store for one match (``blocks``: 15-minute series, merge mode)."""
    if source not in SOURCES:
        raise ValueError(f"source must be one of {', '.join(SOURCES)}")
    figures: list[tuple[str, str, str, float]] = []
    players = []

    def add(pid: str, scope: str, values: dict[str, Any], names: tuple[str, ...]) -> None:
        for name in names:
            v = values.get(name)
            if v is not None and not isinstance(v, bool):
                figures.append((pid, scope, name, float(v)))

    for pid, p in snapshot["players"].items():
        players.append((pid, p["team_id"], p.get("name") or "", int(p["jersey_number"]), bool(p["is_goalkeeper"]),
                        float(p["minutes"]), float(p["coverage"])))
        if not p["minutes"]:
            continue
        add(pid, "match", {**p, "hsr_m_per_min": _rate(p["hsr_m"], p["minutes"])}, TOTALS + ("hsr_m_per_min",))
        for name, per in (p.get("periods") or {}).items():
            add(pid, name, {**per, "hsr_m_per_min": _rate(per["hsr_m"], per["minutes"])}, TOTALS + ("hsr_m_per_min",))
        for wkey, win in (p.get("windows") or {}).items():
            if wkey.startswith("peak_") and win is not None:
                add(pid, wkey, win, PEAK)
    index = {pid: i for i, pid in enumerate(blocks.player_ids)}
    dist_rate = blocks.per_min(ex.DIST)
    hsr_rate = blocks.per_min(ex.HSR)
    for b, scope in enumerate(blocks.keys):
        for pid, i in index.items():
            onp = float(blocks.onpitch_s[b, i])
            if onp <= 0:
                continue
            vals = {name: round(float(blocks.total_m(col)[b, i]), 3) for name, col in _BLOCK_COLS}
            vals["minutes"] = round(onp / 60.0, 3)
            vals["m_per_min"] = round(float(dist_rate[b, i]), 3)
            vals["hsr_m_per_min"] = round(float(hsr_rate[b, i]), 3)
            add(pid, scope, vals, tuple(vals))
    teams = tuple((tid, t.get("name") or "", t.get("side") or "", t.get("score"))
                  for tid, t in snapshot["teams"].items())
    return MatchRecord(
        key=key or snapshot["match_id"], match_id=snapshot["match_id"], source=source, kickoff_t=kickoff_t,
        match_time_s=float(snapshot["match_time_s"]), frames=int(snapshot["health"].get("frames") or 0),
        origin=origin, teams=teams, players=tuple(players), figures=tuple(figures))
