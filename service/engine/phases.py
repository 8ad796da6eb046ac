"""Game phases per team and per second of play, and the figures they partition.

Each second of a period gets one phase per team, from the state at its middle:

* ``dead_ball`` while the ball is out of play;
* in play, for the team with the ball ``attack`` (organised possession), or
  ``attacking_transition`` during the first ``transition_s`` of a possession won from the
  other team in open play; for the other team ``defence`` or ``defensive_transition``;
* ``unknown`` when the ball is in play but neither team is known to have it (a loose ball), or
  when nothing tells whether the ball is in play.

Possession comes from the event stream's marks (:mod:`pacewire.engine.eventlog`) while the
latest event is at most ``stale_s`` old, else from the tracking's ``ball.poss_team_id``; whether
the ball is in play comes from the tracking's ``ball.status`` where frames carry it, else from the
events (a dead ball they report lasts until play restarts, up to ``dead_stale_s``). No consensus
exists on how long a transition lasts (Eusebio et al. 2024, a review); the default is common practice.
Effective playing time (ball in play) follows Altmann et al. 2023.

The labels are recomputed from the final data whenever a second completes or an event changes,
so a correction relabels exactly the seconds it affects; the figures per phase are sums of the
per-second bins (:mod:`pacewire.engine.windows`) over runs of equal labels, so every second's
figures land in exactly one phase and the phases partition the totals. Possession sequences (a
team's spells of possession in play) are grouped by whether the team shot during them (Bradley &
Ade 2018 on reading physical output by tactical context).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pacewire.engine import exertion as ex
from pacewire.engine.eventlog import DEAD, LOOSE, ON_BALL, RESTART, SHOT, EventLog, PeriodMarks
from pacewire.engine.period import Period
from pacewire.engine.types import BALL_IN, BALL_OUT, BALL_UNKNOWN, NO_TEAM
from pacewire.engine.windows import SecondBins

# Label codes of a (second, team); LOOSE_BALL and NO_CONTEXT are both reported as "unknown".
ATTACK, DEFENCE, ATT_TRANSITION, DEF_TRANSITION, DEAD_BALL, LOOSE_BALL, NO_CONTEXT = range(7)
N_CODES = 7
PHASES = ("attack", "defence", "attacking_transition", "defensive_transition", "dead_ball", "unknown")
IN_PLAY_CODES = np.array([True, True, True, True, False, True, False])
_NO_INFO = -2  # no event has said who has the ball


@dataclass(frozen=True)
class PhaseParams:
    transition_s: float  # a possession won in open play is a transition for this long, s
    stale_s: float  # events older than this no longer tell who has the ball or whether it is in play, s
    dead_stale_s: float  # ... but a dead ball they reported stays dead this long without a restart, s
    loose_s: float  # a loose ball up to this long keeps the possession going, s


@dataclass(frozen=True)
class Labels:
    """One period's labels over seconds [0, S)."""

    codes: np.ndarray  # (S, 2) int8: label code per second and team
    in_play: np.ndarray  # (S,) int8: BALL_IN, BALL_OUT, BALL_UNKNOWN
    poss: np.ndarray  # (S,) int8: team with the ball in play, NO_TEAM otherwise
    spell: np.ndarray  # (S,) int64: possession spell of each second with a team on the ball, -1 otherwise


def _tracking(ball_poss: np.ndarray, last_slot: int, n: int, fps: int) -> tuple[np.ndarray, np.ndarray]:
    """Ball state and possession at the middle slot of seconds [0, n) (unknown where no frame came)."""
    mid = np.arange(n) * fps + fps // 2
    got = mid <= last_slot
    bp = ball_poss[np.minimum(mid, max(last_slot, 0))]
    return (np.where(got, bp[:, 0], BALL_UNKNOWN).astype(np.int8),
            np.where(got, bp[:, 1], NO_TEAM).astype(np.int8))


def _from_events(marks: PeriodMarks, t0: float, n: int, p: PhaseParams) -> tuple[np.ndarray, np.ndarray]:
    """What the events say at the middle of seconds [0, n): (team on the ball: 0/1, NO_TEAM for a loose
    ball, _NO_INFO; dead: 1, 0, -1 unknown). Events older than ``stale_s`` say nothing, but a dead ball
    stays dead until the next event, for up to ``dead_stale_s`` (a stoppage brings no events)."""
    if not len(marks.t):
        return np.full(n, _NO_INFO, np.int8), np.full(n, -1, np.int8)
    te = marks.t - t0
    rows = np.arange(len(te))
    eff = marks.effect
    owns = (eff == ON_BALL) | (eff == RESTART) | (eff == LOOSE)
    last_own = np.maximum.accumulate(np.where(owns, rows, -1))
    team_ff = np.where(last_own >= 0, np.where(eff[last_own] == LOOSE, NO_TEAM, marks.team[last_own]), _NO_INFO)
    plays = owns & (eff != LOOSE) | (eff == DEAD)
    last_play = np.maximum.accumulate(np.where(plays, rows, -1))
    dead_ff = np.where(last_play >= 0, (eff[last_play] == DEAD).astype(np.int8), -1)
    mids = np.arange(n) + 0.5
    i = np.searchsorted(te, mids, side="right") - 1
    j = np.maximum(i, 0)
    age = np.where(i >= 0, mids - te[j], np.inf)
    fresh = age <= p.stale_s
    dead = dead_ff[j]
    told = fresh | (dead == 1) & (age <= p.dead_stale_s)
    return (np.where(fresh, team_ff[j], _NO_INFO).astype(np.int8), np.where(told, dead, -1).astype(np.int8))


def period_labels(ball_poss: np.ndarray, last_slot: int, t0: float, fps: int, n: int, marks: PeriodMarks,
                  p: PhaseParams) -> Labels:
    """Labels of seconds [0, n) of a period whose slot 0 is at ``t0`` (UTC s)."""
    trk_ball, trk_poss = _tracking(ball_poss, last_slot, n, fps)
    ev_team, ev_dead = _from_events(marks, t0, n, p)
    in_play = np.where(trk_ball != BALL_UNKNOWN, trk_ball,
                       np.where(ev_dead < 0, BALL_UNKNOWN, np.where(ev_dead == 1, BALL_OUT, BALL_IN))).astype(np.int8)
    poss = np.where(ev_team != _NO_INFO, ev_team, trk_poss).astype(np.int8)
    poss = np.where(in_play == BALL_IN, poss, NO_TEAM).astype(np.int8)
    valid = poss >= 0
    s = np.arange(n)
    # the last second before each one with a team on the ball, unless the ball went dead (or out of
    # sight) since or it was loose for longer than loose_s
    before = np.concatenate([[-1], np.maximum.accumulate(np.where(valid, s, -1))[:-1]]) if n else s
    broken = np.concatenate([[-1], np.maximum.accumulate(np.where(in_play != BALL_IN, s, -1))[:-1]]) if n else s
    keeps = (before >= 0) & (before > broken) & (s - before - 1 <= p.loose_s)
    prev_team = np.where(keeps, poss[np.maximum(before, 0)], NO_TEAM)
    start = valid & (prev_team != poss)
    won = start & (prev_team >= 0)  # the other team had it, in open play: a transition begins
    start_at = np.maximum.accumulate(np.where(start, s, -1)) if n else s
    transition = valid & (start_at >= 0) & won[np.maximum(start_at, 0)] & (s - start_at < p.transition_s)
    spell = np.where(valid, np.cumsum(start) - 1, -1)
    codes = np.empty((n, 2), np.int8)
    for k in (0, 1):
        ours = poss == k
        codes[:, k] = np.select(
            [in_play == BALL_OUT, in_play == BALL_UNKNOWN, ~valid, ours & transition, ours, transition],
            [DEAD_BALL, NO_CONTEXT, LOOSE_BALL, ATT_TRANSITION, ATTACK, DEF_TRANSITION], DEFENCE)
    return Labels(codes, in_play, poss, spell)


def code_sums(bins: SecondBins, team: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Figure sums per label code over complete seconds [0, len(codes)): (N_CODES, N_FIG, columns),
    each column summed under its team's labels, over runs of equal labels."""
    n = codes.shape[0]
    out = np.zeros((N_CODES, ex.N_FIG, len(team)), np.int64)
    if n == 0 or not len(team):
        return out
    for k in (0, 1):
        cols = np.flatnonzero(team == k)
        if not len(cols):
            continue
        lab = codes[:, k]
        cuts = np.flatnonzero(lab[1:] != lab[:-1]) + 1
        edges = np.concatenate([[0], cuts, [n]])
        runs = np.diff(bins.cum(edges)[:, :, cols], axis=0)  # (runs, N_FIG, cols)
        run_code = lab[edges[:-1]]
        for c in np.unique(run_code).tolist():
            out[c][:, cols] += runs[run_code == c].sum(axis=0)
    return out


def shot_spells(labels: Labels, marks: PeriodMarks, t0: float, team: int) -> np.ndarray:
    """Ids of ``team``'s spells during which it shot (a shot up to 2 s after the spell's last second counts:
    the ball is often dead by the middle of the shot's second)."""
    n = len(labels.poss)
    shots = marks.t[(marks.effect == SHOT) & (marks.team == team)] - t0
    shots = shots[(shots >= 0) & (shots < n + 2)]  # shots of the seconds labelled (and just after)
    if not len(shots) or n == 0:
        return np.zeros(0, np.int64)
    sec = np.minimum(np.floor(shots).astype(np.int64), n - 1)
    ours = np.maximum.accumulate(np.where(labels.poss == team, np.arange(n), -1))
    last = ours[sec]
    ok = (last >= 0) & (sec - last <= 2)
    return np.unique(labels.spell[last[ok]])


def _run_sums(bins: SecondBins, mask: np.ndarray, rows: list[int], cols: np.ndarray) -> np.ndarray:
    """Sums of figure ``rows`` over the seconds where ``mask`` holds, summed over ``cols``: (len(rows),)."""
    if not mask.any():
        return np.zeros(len(rows))
    edge = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    starts, stops = np.flatnonzero(edge == 1), np.flatnonzero(edge == -1)
    cum = bins.cum(np.concatenate([starts, stops]))[:, rows][:, :, cols].sum(axis=2)  # (2 runs, len(rows))
    return (cum[len(starts):] - cum[:len(starts)]).sum(axis=0)


def sequence_sums(bins: SecondBins, labels: Labels, marks: PeriodMarks, t0: float, team: int,
                  outfield: np.ndarray) -> np.ndarray:
    """``team``'s possession sequences of one period by outcome: rows (shot, no shot) of [spells,
    seconds, outfield distance µm, HSR µm, outfield samples seen], over complete seconds (seconds as
    float: an ended period's last second may be short)."""
    out = np.zeros((2, 5))
    n = len(labels.poss)
    ours = labels.poss == team
    if n == 0 or not ours.any():
        return out
    cols = np.flatnonzero(outfield)
    shot = np.isin(labels.spell, shot_spells(labels, marks, t0, team)) & ours
    short = max(n * bins.fps - bins.end_slot, 0) / bins.fps  # the part of the last second not played
    for row, sel in ((0, shot), (1, ours & ~shot)):
        out[row, 0] = len(np.unique(labels.spell[sel]))
        out[row, 1] = sel.sum() - (short if sel[-1] else 0.0)
        out[row, 2:] = _run_sums(bins, sel, [ex.DIST, ex.HSR, ex.SEEN], cols)
    return out


@dataclass(frozen=True)
class PeriodPhases:
    labels: Labels
    sums: np.ndarray  # (N_CODES, N_FIG, columns) over complete seconds
    sequences: np.ndarray  # (2 teams, 2 outcomes, 5), see sequence_sums


@dataclass(frozen=True)
class PhaseTotals:
    """A match's figures by phase, roster-wide, with the second in progress counted under the label
    of the second before it (its own label comes once it is complete)."""

    player: np.ndarray  # (P, N_CODES, N_FIG) int64 sums per label code
    team_s: np.ndarray  # (2, N_CODES) float: seconds of match time per label code
    sequences: np.ndarray | None  # (2, 2, 5) per team, see sequence_sums; None without events


def period_phases(per: Period, log: EventLog, p: PhaseParams, fps: int, gk: np.ndarray,
                  cache: dict[int, tuple[tuple[int, int, int], PeriodPhases]]) -> PeriodPhases:
    """A period's labels, sums and sequences over its complete seconds; cached until a second completes
    or one of its events changes."""
    key = (per.bins.complete, log.versions[per.index], len(per.cols))
    hit = cache.get(per.index)
    if hit is not None and hit[0] == key:
        return hit[1]
    marks = log.period(per.index)
    labels = period_labels(per.ball_poss, per.last_slot, per.t0, fps, per.bins.complete, marks, p)
    sums = code_sums(per.bins, per.team, labels.codes)
    outfield = ~gk[per.cols]
    seqs = np.stack([sequence_sums(per.bins, labels, marks, per.t0, k, outfield & (per.team == k)) for k in (0, 1)])
    out = PeriodPhases(labels, sums, seqs)
    cache[per.index] = (key, out)
    return out


def match_phases(periods: list[Period], log: EventLog, p: PhaseParams, fps: int, n: int, gk: np.ndarray,
                 cache: dict[int, tuple[tuple[int, int, int], PeriodPhases]]) -> PhaseTotals:
    """Every period's phases summed, roster-wide."""
    player = np.zeros((n, N_CODES, ex.N_FIG), np.int64)
    team_s = np.zeros((2, N_CODES))
    seqs = np.zeros((2, 2, 5))
    for per in periods:
        pp = period_phases(per, log, p, fps, gk, cache)
        player[per.cols] += pp.sums.transpose(2, 0, 1)
        for k in (0, 1):
            team_s[k] += np.bincount(pp.labels.codes[:, k], minlength=N_CODES)
        seqs += pp.sequences
        codes = pp.labels.codes
        last = codes[-1] if len(codes) else np.array([NO_CONTEXT, NO_CONTEXT])
        # the second in progress (or the part of the last one an ended period did not play)
        frac = (per.bins.end_slot - per.bins.complete * fps) / fps
        if frac > 0:
            player[per.cols, last[per.team]] += per.bins.in_progress().T
        if frac > 0 or len(codes):
            team_s[[0, 1], last] += frac
    return PhaseTotals(player, team_s, seqs if len(log) else None)
