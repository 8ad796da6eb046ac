"""The match events planned before the movement: substitutions, goals (with scorer
and assister) and yellow cards. Times are frame slots (see timeline)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pacewire.replay.synth.clubs import CLUBS, POSITION_GROUP
from pacewire.replay.synth.timeline import FULL_MATCH_MIN, Timeline


@dataclass(frozen=True)
class Substitution:
    team: int
    slot: int  # 0..10 within the team
    out_index: int  # squad index
    in_index: int
    frame: int  # global slot index of the first frame of the sub-on player
    walk_frames: int  # frames of the walk-off before `frame`


@dataclass(frozen=True)
class GoalEvent:
    team: int
    frame: int  # global slot of the shot
    scorer_slot: int
    assist_slot: int | None


def plan_substitutions(tl: Timeline) -> list[Substitution]:
    """Substitutions of both clubs, at fixed fractions of the second half."""
    start2, n2 = tl.halves[1]
    walk = int(round(min(25.0, max(6.0, 0.1 * n2 / tl.fps)) * tl.fps))  # walk-off window
    subs = []
    for team, club in enumerate(CLUBS):
        for frac, out_i, in_i in club.subs:
            frame = start2 + int(round(frac * n2))
            subs.append(Substitution(team, out_i, out_i, in_i, frame, walk))
    return sorted(subs, key=lambda s: s.frame)


def plan_goals(rng: np.random.Generator, tl: Timeline, subs: list[Substitution]) -> list[tuple[int, int]]:
    """Goal (team, frame) pairs; the expected count scales with the playing time."""
    share = min(1.0, tl.play_minutes / FULL_MATCH_MIN)
    counts = [min(3, int(rng.poisson(1.5 * share))), min(3, int(rng.poisson(1.1 * share)))]
    busy = [(s.frame - s.walk_frames - 10 * tl.fps, s.frame + 10 * tl.fps) for s in subs]
    goals = []
    for team, k in enumerate(counts):
        for _ in range(k):
            for _attempt in range(50):
                half = int(rng.integers(0, 2))
                start, n = tl.halves[half]
                frame = start + int(rng.uniform(0.1, 0.9) * n)
                clash = any(a <= frame <= b for a, b in busy)
                if not clash:
                    busy.append((frame - 20 * tl.fps, frame + 20 * tl.fps))
                    goals.append((team, frame))
                    break
    return sorted(goals, key=lambda g: g[1])


def goal_events(rng: np.random.Generator, plan: list[tuple[int, int]], squad_index: np.ndarray) -> list[GoalEvent]:
    """Pick scorers (forwards/midfielders on the pitch) and assisters."""
    events = []
    for team, frame in plan:
        club = CLUBS[team]
        positions = [club.squad[squad_index[frame, 11 * team + s]][3] for s in range(11)]
        groups = [POSITION_GROUP.get(pos, pos) for pos in positions]
        attackers = [s for s in range(1, 11) if groups[s] in ("FW", "MF")]
        scorer = int(rng.choice(attackers))
        others = [s for s in range(1, 11) if s != scorer]
        assist = int(rng.choice(others)) if rng.random() < 0.75 else None
        events.append(GoalEvent(team, frame, scorer, assist))
    return events


def plan_cards(rng: np.random.Generator, tl: Timeline) -> list[tuple[int, int, int]]:
    """Yellow cards (two in a full match, scaled with the playing time): (team, frame, outfield slot)."""
    share = min(1.0, tl.play_minutes / FULL_MATCH_MIN)
    out = []
    for _ in range(int(round(2 * share))):
        team = int(rng.integers(0, 2))
        frame = int(rng.integers(int(0.1 * tl.n_slots), int(0.95 * tl.n_slots)))
        out.append((team, frame, int(rng.integers(1, 11))))
    return sorted(out, key=lambda c: c[1])
