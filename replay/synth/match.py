"""The whole simulated match before it is written (SynthMatch), and simulate_match,
which plans the events, scripts the ball, plans and steers the players of both
halves and puts the slots together. One random stream: deterministic for a seed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from pacewire.replay.synth.anchors import formation_offsets
from pacewire.replay.synth.ball import BallScript, rasterize_ball
from pacewire.replay.synth.clubs import AWAY, CLUBS, HOME, player_id
from pacewire.replay.synth.events import (
    GoalEvent,
    Substitution,
    goal_events,
    plan_cards,
    plan_goals,
    plan_substitutions,
)
from pacewire.replay.synth.fatigue import on_pitch
from pacewire.replay.synth.plans import plan_half
from pacewire.replay.synth.roles import slot_roles
from pacewire.replay.synth.steering import integrate
from pacewire.replay.synth.timeline import Timeline, duration_scale, make_timeline


@dataclass
class SynthMatch:
    """The simulated match before it is written: arrays over all slots."""

    timeline: Timeline
    positions: np.ndarray  # (S, 22) complex, metres; slot order home 0..10, away 11..21
    squad_index: np.ndarray  # (S, 22) int: index into the club's squad of the player in the slot
    ball_xy: np.ndarray  # (S,) complex
    ball_z: np.ndarray
    ball_in_play: np.ndarray
    ball_poss: np.ndarray
    subs: list[Substitution]
    goals: list[GoalEvent]
    cards: list[tuple[int, int, int]]  # (team, frame, slot)
    slot_roles: list[str] = field(default_factory=list)

    def player_at(self, frame: int, col: int) -> str:
        """Id of the player in column ``col`` (0..21) at slot ``frame``."""
        club = CLUBS[col // 11]
        return player_id(club, club.squad[self.squad_index[frame, col]][0])


def simulate_match(minutes: float = 95, fps: int = 25, seed: int = 0) -> SynthMatch:
    """Simulate the fictional match (no files). Deterministic for a seed: the match's events and
    ball come from one random stream, the players' movement from another, so a change to how
    players move leaves the ball's script as it was."""
    rng = np.random.default_rng(seed)
    moves = np.random.default_rng([seed, 3])
    tl = make_timeline(minutes, fps)
    scale = duration_scale(minutes)
    subs = plan_substitutions(tl)
    goal_plan = plan_goals(rng, tl, subs)
    offsets = (formation_offsets(HOME), formation_offsets(AWAY))
    positions = np.empty((tl.n_slots, 22), complex)
    squad_index = np.tile(np.arange(11), (tl.n_slots, 2))
    entry = np.zeros((tl.n_slots, 22), np.int64)  # slot where the player in each slot came on
    for s in subs:
        squad_index[s.frame:, 11 * s.team + s.slot] = s.in_index
        entry[s.frame:, 11 * s.team + s.slot] = s.frame
    ball_parts = []
    scored: list[tuple[int, int]] = []
    plans = []
    for h, (start, n) in enumerate(tl.halves):
        dirs = (1.0, -1.0) if h == 0 else (-1.0, 1.0)
        forced, walkoffs = _substitution_windows(subs, start, n, fps, scale)
        half_goals = [((f - start) / fps, team) for team, f in goal_plan if start <= f < start + n]
        script = BallScript(rng, n / fps, dirs, offsets, scale)
        segs = script.run(kickoff_team=h, forced=forced, goals=half_goals)
        scored += [(team, min(start + int(round(t * fps)), start + n - 1)) for t, team in script.goal_times]
        ball = rasterize_ball(segs, n, fps)
        plans.append(plan_half(moves, n, fps, ball, dirs, on_pitch(squad_index, entry, start, n, fps), walkoffs))
        ball_parts.append(ball)
    for (start, n), part in zip(tl.halves, integrate(plans, fps), strict=True):
        positions[start:start + n] = part
    goals = goal_events(rng, sorted(scored, key=lambda g: g[1]), squad_index)
    cards = plan_cards(rng, tl)
    return SynthMatch(
        timeline=tl,
        positions=positions,
        squad_index=squad_index,
        ball_xy=np.concatenate([b.xy for b in ball_parts]),
        ball_z=np.concatenate([b.z for b in ball_parts]),
        ball_in_play=np.concatenate([b.in_play for b in ball_parts]),
        ball_poss=np.concatenate([b.poss for b in ball_parts]),
        subs=subs,
        goals=goals,
        cards=cards,
        slot_roles=slot_roles(),
    )


def _substitution_windows(subs: list[Substitution], start: int, n: int, fps: int,
                          scale: float) -> tuple[list[tuple[float, float]], list[tuple[int, int, int]]]:
    """What the substitutions in the half of slots start..start+n-1 do to it: the ball
    out of play for each change ((from, to) s of the half), and the walk-off windows
    (slot 0..21, first frame, end frame exclusive; frames of the half)."""
    forced = []
    walkoffs = []
    for s in subs:
        if start <= s.frame < start + n:
            a = max(s.frame - s.walk_frames, start)
            stop_from = (s.frame - start - s.walk_frames // 2) / fps  # ball out for the change
            forced.append((stop_from, (s.frame - start) / fps + max(2.0, 6.0 * scale)))
            walkoffs.append((11 * s.team + s.slot, a - start, s.frame - start))
    return forced, walkoffs
