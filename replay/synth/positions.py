"""The figures of a recorded match by playing position, as pacewire's engine computes them:
what the synthetic match is checked against (published ranges per position) and what a
reader compares with the literature.

``python -m pacewire.replay.synth.positions FOLDER`` prints the per-position medians of the
full-match players and the substitutes against the players they replaced.

Figures per player (``PlayerFigures``): the snapshot's totals, the second half's distance per
minute over the first half's, high-intensity distance (>= 19.8 km/h: HSR plus sprint, the
engine's bands after Bradley et al. 2009 and Di Salvo et al. 2009) in the first and the last
15 minutes of play (Mohr et al. 2003), and in the 5 minutes after the player's most intense
5 minutes over his match average per 5 minutes (Mohr et al. 2003; Bradley & Noakes 2013).
"""

from __future__ import annotations

import argparse
import pathlib
import statistics
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import orjson

from pacewire.analyze import analyze_folder
from pacewire.engine.exertion import HSR, MICRO, SPRINT
from pacewire.engine.match import MatchState
from pacewire.replay.synth.roles import POSITION_NAMES, POSITION_ROLE

WINDOW_S = 300  # the "most intense 5 minutes" and the 5 minutes after them (Mohr et al. 2003)
EDGE_S = 900  # the first and the last 15 minutes of play (Mohr et al. 2003; Bradley et al. 2009)
FULL_MATCH_MIN = 90.0  # a player on the pitch this long counts as a full-match player


@dataclass(frozen=True)
class PlayerFigures:
    """One player's figures (distances in m, speeds in km/h, power in W/kg)."""

    player_id: str
    role: str  # GK, CB, FB, CM, WM, FW (roles.POSITION_NAMES)
    minutes: float
    distance_m: float
    m_per_min: float
    hsr_m: float
    sprint_m: float
    hsr_efforts: int
    sprints: int
    accels: int
    decels: int
    top_speed_kmh: float
    metabolic_power_wkg: float
    half2_over_half1: float  # second-half over first-half distance per minute
    hi_first15_m: float  # >= 19.8 km/h in the first 15 minutes of play
    hi_last15_m: float  # >= 19.8 km/h in the last 15 minutes of play
    after_peak_ratio: float  # >= 19.8 km/h in the 5 min after the peak 5 min over the match mean per 5 min


def player_roles(sheet: dict[str, Any]) -> dict[str, str]:
    """Role of every player who played, from the sheet's position (a substitute's is the one he took)."""
    return {p["id"]: POSITION_ROLE[p["position"]] for side in ("home", "away")
            for p in sheet["teams"][side]["players"] if p.get("has_played") and p.get("position") in POSITION_ROLE}


def _hi_per_second(state: MatchState) -> list[np.ndarray]:
    """High-intensity distance (>= 19.8 km/h), m, per second of each period: (seconds, players)."""
    out = []
    for per in state.periods:
        spans = [per.bins.span(0, s) for s in range(per.bins.complete + 1)]
        cum = np.stack([c[:, HSR] + c[:, SPRINT] for c in spans])
        out.append(np.diff(cum, axis=0) / MICRO)
    return out


def _after_peak_ratio(halves: list[np.ndarray], col: int) -> float:
    """High-intensity distance in the 5 minutes after the player's most intense 5 minutes over
    his mean per 5 minutes; only peaks followed by 5 minutes of the same half count."""
    best, after = -1.0, 0.0
    total = secs = 0.0
    for hi in halves:
        x = hi[:, col]
        total += float(x.sum())
        secs += len(x)
        if len(x) < 2 * WINDOW_S:
            continue
        cs = np.concatenate([[0.0], np.cumsum(x)])
        roll = cs[WINDOW_S:] - cs[:-WINDOW_S]  # window starting at each second
        starts = len(x) - 2 * WINDOW_S + 1
        k = int(np.argmax(roll[:starts]))
        if roll[k] > best:
            best, after = float(roll[k]), float(roll[k + WINDOW_S])
    mean = total / secs * WINDOW_S if secs else 0.0
    return after / mean if mean > 0 else float("nan")


def match_figures(folder: str | pathlib.Path) -> list[PlayerFigures]:
    """Figures of every player who played a recorded match (a CDF folder with a sheet giving
    positions), computed by the engine (``pacewire analyze``)."""
    folder = pathlib.Path(folder)
    sheet = orjson.loads((folder / "match.json").read_bytes())
    state = analyze_folder(folder).state
    from pacewire.engine.snapshot import build_snapshot

    snap = build_snapshot(state)
    halves = _hi_per_second(state)
    rows = []
    for pid, role in player_roles(sheet).items():
        p = snap["players"][pid]
        col = state.roster.index[pid]
        per = p.get("periods", {})
        h1, h2 = per.get("first_half", {}), per.get("second_half", {})
        ratio = h2["m_per_min"] / h1["m_per_min"] if h1.get("m_per_min") and h2.get("m_per_min") else float("nan")
        first = float(halves[0][:EDGE_S, col].sum()) if halves else 0.0
        last = float(halves[-1][-EDGE_S:, col].sum()) if halves else 0.0
        rows.append(PlayerFigures(
            player_id=pid, role=role, minutes=p["minutes"], distance_m=p["distance_m"], m_per_min=p["m_per_min"],
            hsr_m=p["hsr_m"], sprint_m=p["sprint_m"], hsr_efforts=p["hsr_efforts"], sprints=p["sprints"],
            accels=p["accels"], decels=p["decels"], top_speed_kmh=round(p["max_speed_ms"] * 3.6, 2),
            metabolic_power_wkg=p["metabolic_power_wkg"], half2_over_half1=ratio, hi_first15_m=first,
            hi_last15_m=last, after_peak_ratio=_after_peak_ratio(halves, col)))
    return rows


def full_match(rows: list[PlayerFigures]) -> list[PlayerFigures]:
    """The players on the pitch for (about) the whole match."""
    return [r for r in rows if r.minutes >= FULL_MATCH_MIN]


def medians(rows: list[PlayerFigures]) -> dict[str, dict[str, float]]:
    """Median of every figure by role (and ``outfield``: every role but GK), with ``players``."""
    groups: dict[str, list[PlayerFigures]] = {}
    for r in rows:
        groups.setdefault(r.role, []).append(r)
        if r.role != "GK":
            groups.setdefault("outfield", []).append(r)
    out = {}
    for role, members in groups.items():
        figs = [asdict(m) for m in members]
        keys = [k for k, v in figs[0].items() if isinstance(v, (int, float)) and k != "minutes"]
        out[role] = {k: float(statistics.median(f[k] for f in figs)) for k in keys}
        out[role]["players"] = float(len(members))
    return out


def substitutions(folder: str | pathlib.Path, rows: list[PlayerFigures]) -> list[tuple[str, str, float, float]]:
    """(substitute, replaced player, substitute's m/min, replaced player's m/min) of every substitution."""
    sheet = orjson.loads((pathlib.Path(folder) / "match.json").read_bytes())
    by_id = {r.player_id: r for r in rows}
    return [(s["in_player_id"], s["out_player_id"], by_id[s["in_player_id"]].m_per_min,
             by_id[s["out_player_id"]].m_per_min) for s in sheet["events"]["substitutions"]]


COLUMNS = (("distance_m", "dist m", 0), ("hsr_m", "HSR m", 0), ("sprint_m", "spr m", 0), ("sprints", "spr#", 0),
           ("hsr_efforts", "HSR#", 0), ("accels", "acc", 0), ("decels", "dec", 0),
           ("top_speed_kmh", "top km/h", 1), ("metabolic_power_wkg", "W/kg", 2), ("m_per_min", "m/min", 1),
           ("half2_over_half1", "h2/h1", 3), ("hi_first15_m", "HI 0-15", 0), ("hi_last15_m", "HI last15", 0),
           ("after_peak_ratio", "post-peak", 2))


def table(folder: str | pathlib.Path) -> str:
    """The per-position medians of the full-match players, then the substitutions, as text."""
    rows = match_figures(folder)
    med = medians(full_match(rows))
    lines = ["position            n  " + "  ".join(f"{h:>9}" for _, h, _ in COLUMNS)]
    for role in (*POSITION_NAMES, "outfield"):
        if role in med:
            m = med[role]
            name = POSITION_NAMES.get(role, "all outfield")
            lines.append(f"{name:<18} {int(m['players']):>2}  "
                         + "  ".join(f"{m[k]:>9.{d}f}" for k, _, d in COLUMNS))
    lines.append("substitute  replaced  m/min  m/min")
    for sub, out, a, b in substitutions(folder, rows):
        lines.append(f"{sub:<11} {out:<9} {a:>6.1f} {b:>6.1f}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m pacewire.replay.synth.positions",
                                description="Per-position medians of a recorded match's figures (full-match "
                                            "players), computed by pacewire's engine.")
    p.add_argument("folder", type=pathlib.Path, help="a CDF folder whose match.json gives positions")
    args = p.parse_args(argv)
    print(table(args.folder))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
