"""The commands of every player over one half, vectorised over players and time:
where each one heads (formation anchor + personal wander, or a run target during
a sprint or high-speed burst), at what speed (a role's locomotor profile), how
firmly, and whether he may go to the ball. The steering integrates them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter1d
from scipy.signal import lfilter

from pacewire.replay.synth.anchors import formation_offsets, team_anchors
from pacewire.replay.synth.ball import BallTrack
from pacewire.replay.synth.clubs import AWAY, HOME
from pacewire.replay.synth.roles import (
    CATEGORY_SPEEDS_MS,
    HSR_COMMAND_S,
    HSR_SPEED_MS,
    ROLES,
    SPRINT_COMMAND_S,
    SPRINT_SPEED_MS,
    STOPPAGE_PROBS,
    RoleProfile,
    slot_roles,
)

HEADING_NOISE = 0.4  # rad per sqrt(s): random-walk wander of the heading


def _ou_noise(rng: np.random.Generator, n: int, k: int, std: float, tau_s: float, fps: int) -> np.ndarray:
    """Ornstein-Uhlenbeck wander, (n, k) complex, stationary std ``std`` m."""
    a = np.exp(-1.0 / (tau_s * fps))
    b = std * np.sqrt(1.0 - a * a)
    white = rng.normal(size=(n, k)) + 1j * rng.normal(size=(n, k))
    start = (rng.normal(size=k) + 1j * rng.normal(size=k)) * std / np.sqrt(2.0)
    out = lfilter([b / np.sqrt(2.0)], [1.0, -a], white, axis=0, zi=(a * start)[None, :])[0]
    return out


def _segment_speeds(rng: np.random.Generator, n: int, fps: int, probs_at: np.ndarray,
                    scale: np.ndarray) -> np.ndarray:
    """Commanded speed (n, k) from random-duration locomotor segments.

    probs_at: (n, k, 4) category probabilities at every frame; a segment takes
    the probabilities at its first frame. Segment durations ~ gamma, mean 3.5 s.
    """
    k = probs_at.shape[1]
    n_seg = int(n / fps / 3.5 * 1.6) + 8
    dur = rng.gamma(2.0, 1.75, size=(n_seg, k))
    starts = np.concatenate([np.zeros((1, k)), np.cumsum(dur, axis=0)[:-1]]) * fps
    start_frames = np.minimum(starts.astype(np.int64), n - 1)
    cols = np.arange(k)[None, :]
    p = probs_at[start_frames, cols]  # (n_seg, k, 4)
    u = rng.random(size=(n_seg, k, 1))
    cat = (u > np.cumsum(p, axis=2)).sum(axis=2).clip(0, 3)
    lo = CATEGORY_SPEEDS_MS[cat, 0]
    hi = CATEGORY_SPEEDS_MS[cat, 1]
    seg_speed = (lo + (hi - lo) * rng.random(size=(n_seg, k))) * scale[None, :]
    frames = np.arange(n)
    out = np.empty((n, k))
    for j in range(k):  # per player: map frames to their segment
        idx = np.searchsorted(starts[:, j], frames, side="right") - 1
        out[:, j] = seg_speed[idx, j]
    return out


@dataclass
class Burst:
    slot: int
    start: int  # frame within the half
    length: int  # frames
    speed: float  # m/s


def _spread_count(rng: np.random.Generator, mean: float) -> int:
    """A count near ``mean`` (within +-15%, stochastic rounding): less spread than Poisson."""
    x = mean * rng.uniform(0.85, 1.15)
    return int(np.floor(x) + (rng.random() < x - np.floor(x)))


def _sample_bursts(rng: np.random.Generator, weight: np.ndarray, sprint90: np.ndarray, hsr90: np.ndarray,
                   fps: int, min_gap_s: float = 4.0) -> list[Burst]:
    """Sprint and high-speed bursts of every slot, never overlapping.

    Onset density is proportional to ``weight`` (n, k); the counts are near
    sprint90 / hsr90 per 90 min (see _spread_count). Candidate onsets are
    drawn from the density and accepted in random order when their window
    (burst + min_gap_s either side) is still free, which keeps the accepted
    onsets close to the density (occupancy stays low).
    """
    n, k = weight.shape
    gap = int(min_gap_s * fps)
    bursts = []
    for j in range(k):
        cw = np.cumsum(weight[:, j])
        if cw[-1] <= 0:
            continue
        n_sprint = _spread_count(rng, sprint90[j] * n / fps / 5400.0)
        n_hsr = _spread_count(rng, hsr90[j] * n / fps / 5400.0)
        kinds = [(SPRINT_SPEED_MS, SPRINT_COMMAND_S)] * n_sprint + [(HSR_SPEED_MS, HSR_COMMAND_S)] * n_hsr
        cand = np.searchsorted(cw, rng.random(3 * len(kinds) + 4) * cw[-1]).tolist()
        taken = np.zeros(n + 1, bool)
        i = 0
        for s in cand:
            if i == len(kinds):
                break
            speed_rng, dur_rng = kinds[i]
            length = int(rng.uniform(*dur_rng) * fps)
            a, b = max(s - gap, 0), s + length + gap
            if b >= n or taken[a:b].any():
                continue
            taken[a:b] = True
            bursts.append(Burst(j, s, length, float(rng.uniform(*speed_rng))))
            i += 1
    return sorted(bursts, key=lambda b: (b.start, b.slot))


@dataclass
class HalfPlan:
    """Precomputed per-frame commands of one half for the integrator."""

    target: np.ndarray  # (n, 22) complex
    speed: np.ndarray  # (n, 22) m/s
    kappa: np.ndarray  # (n, 22) 1/s heading pull gain
    catch: np.ndarray  # (n, 22) bool, catch-up allowed
    chase: np.ndarray  # (n, 22) bool, may go to the ball
    heading_noise: np.ndarray  # (n, 22) rad per frame
    vscale: np.ndarray  # (n, 22) 0..1 multiplier of the commanded velocity (smooth starts and stops)
    ball: BallTrack
    dirs: tuple[float, float]
    init_pos: np.ndarray  # (22,) complex


@dataclass
class _Commands:
    """The per-frame commands of the 22 slots while a half is planned (see HalfPlan)."""

    target: np.ndarray  # (n, 22) complex
    speed: np.ndarray  # (n, 22) m/s
    kappa: np.ndarray  # (n, 22) 1/s
    catch: np.ndarray  # (n, 22) bool
    chase: np.ndarray  # (n, 22) bool

    def override(self, slot: int, a: int, b: int, target: np.ndarray | complex, speed: float, kappa: float) -> None:
        """Frames a..b-1 of ``slot`` head for ``target`` at ``speed``: no catch-up, no going to the ball."""
        self.target[a:b, slot] = target
        self.speed[a:b, slot] = speed
        self.kappa[a:b, slot] = kappa
        self.catch[a:b, slot] = False
        self.chase[a:b, slot] = False


def plan_half(rng: np.random.Generator, n: int, fps: int, ball: BallTrack, dirs: tuple[float, float],
              half_index: int, walkoffs: list[tuple[int, int, int]]) -> HalfPlan:
    """Build the commanded targets and speeds of all 22 slots for one half.

    walkoffs: (slot 0..21, first frame, last frame exclusive) of walk-off windows.
    The random draws come in a fixed order (wander, locomotor segments, bursts,
    heading noise): the same seed gives the same half.
    """
    k = 22
    dt = 1.0 / fps
    roles = slot_roles()
    prof = [ROLES[r] for r in roles]
    anchors = _team_shape(ball, dirs, dt)
    is_gk = np.array([r == "GK" for r in roles])
    wander_std = np.where(is_gk, 1.2, 3.5)
    wander = _ou_noise(rng, n, k, 1.0, 10.0, fps) * wander_std[None, :]
    speed, prox_n, fatigue = _locomotor_speeds(rng, n, fps, ball, anchors, prof, half_index)
    chase = np.broadcast_to(~is_gk[None, :], (n, k)).copy()
    cmd = _Commands(anchors + wander, speed, np.full((n, k), 1.2), np.ones((n, k), bool), chase)
    weight = _burst_weight(n, fps, ball, walkoffs, prox_n, fatigue)
    _add_bursts(rng, cmd, fps, ball, anchors, dirs, prof, weight)
    for slot, a, b in walkoffs:  # brisk walk / jog off the pitch, to the bench
        cmd.override(slot, a, b, complex(-6.0 if slot < 11 else 6.0, -33.0), 2.5, 3.0)
    # smooth speed commands over 0.4 s so accelerations ramp
    speed = uniform_filter1d(cmd.speed, size=max(1, int(0.4 * fps)), axis=0, mode="nearest")
    heading_noise = rng.normal(0.0, HEADING_NOISE * np.sqrt(dt), size=(n, k))
    init = _kickoff_positions(anchors[0], dirs)
    vscale = _velocity_ramps(n, fps, walkoffs)
    return HalfPlan(cmd.target, speed, cmd.kappa, cmd.catch, cmd.chase, heading_noise, vscale, ball, dirs, init)


def _team_shape(ball: BallTrack, dirs: tuple[float, float], dt: float) -> np.ndarray:
    """Formation anchors (n, 22) complex of both teams (home 0..10, away 11..21).

    The team shape follows a lagged ball (1.5 s) and a smoothed possession share
    (2 s), so it does not jump with every pass.
    """
    a_ball = np.exp(-dt / 1.5)
    lag_ball = lfilter([1 - a_ball], [1, -a_ball], ball.xy, zi=[a_ball * ball.xy[0]])[0]
    a_pos = np.exp(-dt / 2.0)
    share_home = lfilter([1 - a_pos], [1, -a_pos], (ball.poss == 0).astype(float),
                         zi=[a_pos * float(ball.poss[0] == 0)])[0]
    return np.concatenate([
        team_anchors(lag_ball, share_home, dirs[0], formation_offsets(HOME)),
        team_anchors(lag_ball, 1.0 - share_home, dirs[1], formation_offsets(AWAY)),
    ], axis=1)


def _locomotor_speeds(rng: np.random.Generator, n: int, fps: int, ball: BallTrack, anchors: np.ndarray,
                      prof: list[RoleProfile], half_index: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Commanded speed (n, 22) m/s from each role's locomotor profile.

    Players far from the ball walk more, and intensity falls late in each half
    (Mohr et al. 2003); out of play everyone follows STOPPAGE_PROBS. Also returns
    the proximity to the ball (n, 22; anchor based, mean 1) and the fatigue
    factor (n,), which the bursts use too.
    """
    k = len(prof)
    prox = np.exp(-np.abs(anchors - ball.xy[:, None]) / 20.0)
    prox_n = prox / max(prox.mean(), 1e-9)
    frac = np.arange(n) / n
    fatigue = (1.0 - 0.40 * frac**2) * (0.97 if half_index == 1 else 1.0)
    jog_fatigue = 1.0 - 0.25 * frac**2

    base = np.array([p.probs for p in prof])  # (k, 4)
    probs = np.empty((n, k, 4))
    probs[:] = base[None, :, :]
    probs[:, :, :2] *= np.maximum(1.4 - 0.4 * prox_n, 0.4)[:, :, None]  # far from the ball: walk
    probs[:, :, 2] *= (0.6 + 0.4 * prox_n) * jog_fatigue[:, None]
    probs[:, :, 3] *= (0.3 + 0.7 * prox_n) * fatigue[:, None]
    probs /= probs.sum(axis=2, keepdims=True)
    probs[~ball.in_play] = STOPPAGE_PROBS
    scale = np.array([p.speed_scale for p in prof])
    speed = _segment_speeds(rng, n, fps, probs, scale) * (1.0 - 0.10 * frac**2)[:, None]
    return speed, prox_n, fatigue


def _burst_weight(n: int, fps: int, ball: BallTrack, walkoffs: list[tuple[int, int, int]], prox_n: np.ndarray,
                  fatigue: np.ndarray) -> np.ndarray:
    """Onset density (n, 22) of the bursts: only in play and 6 s clear of the half's
    edges and of walk-offs, more often near the ball, fewer late in the half."""
    edge = int(6 * fps)
    live = ball.in_play.astype(float)
    live[:edge] = 0.0
    live[-edge:] = 0.0
    blocked = np.zeros((n, 22), bool)
    for slot, a, b in walkoffs:
        blocked[max(a - edge, 0):min(b + edge, n), slot] = True
    return live[:, None] * fatigue[:, None] * (0.5 + prox_n) * ~blocked


def _add_bursts(rng: np.random.Generator, cmd: _Commands, fps: int, ball: BallTrack, anchors: np.ndarray,
                dirs: tuple[float, float], prof: list[RoleProfile], weight: np.ndarray) -> None:
    """Sprint and high-speed runs (_sample_bursts) written into the commands: a run
    target about as far away as the burst covers, at the burst speed."""
    sprint90 = np.array([p.sprints_per90 for p in prof])
    hsr90 = np.array([p.hsr_per90 for p in prof])
    team_of = np.repeat([0, 1], 11)
    for bu in _sample_bursts(rng, weight, sprint90, hsr90, fps):
        j, s, e = bu.slot, bu.start, bu.start + bu.length
        team = team_of[j]
        heading = _burst_heading(rng, ball, s, team, dirs[team], anchors[s, j])
        run_vec = heading * bu.speed * bu.length / fps * 0.9
        run_target = anchors[s:e, j] + run_vec
        run_target = np.clip(run_target.real, -48, 48) + 1j * np.clip(run_target.imag, -31, 31)
        cmd.override(j, s, e, run_target, bu.speed, 0.8)


def _burst_heading(rng: np.random.Generator, ball: BallTrack, frame: int, team: int, direction: float,
                   anchor: complex) -> complex:
    """Direction (unit complex) of a run starting at ``frame``: forwards when the team
    has the ball; without it, half the runs go at the ball and half back towards goal."""
    if ball.poss[frame] == team:
        return direction * np.exp(1j * rng.normal(0.0, 0.6))
    if rng.random() < 0.5:
        to_ball = ball.xy[frame] - anchor
        return to_ball / abs(to_ball) if abs(to_ball) > 1 else -direction
    return -direction * np.exp(1j * rng.normal(0.0, 0.6))


def _kickoff_positions(anchors: np.ndarray, dirs: tuple[float, float]) -> np.ndarray:
    """Positions (22,) complex at kick-off: the anchors, every player in his own half."""
    init = anchors.copy()
    for team in (0, 1):
        sl = slice(11 * team, 11 * team + 11)
        xn = init[sl].real * dirs[team]
        init[sl] = np.minimum(xn, -1.0) * dirs[team] + 1j * init[sl].imag
    return init


def _smoothstep(x: np.ndarray) -> np.ndarray:
    """0 below 0, 1 above 1, 3x^2 - 2x^3 in between."""
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _velocity_ramps(n: int, fps: int, walkoffs: list[tuple[int, int, int]], ramp_s: float = 1.5) -> np.ndarray:
    """Velocity command multiplier (n, 22): players start and stop smoothly.

    Ramps up over ``ramp_s`` after kick-off, down over the last ``ramp_s`` of
    the half (the whistle), down before a player leaves at a substitution and
    up again for the substitute, so no stint begins or ends with a jolt.
    """
    t = np.arange(n) / fps
    half = _smoothstep(t / ramp_s) * _smoothstep((n / fps - t) / ramp_s)
    out = np.repeat(half[:, None], 22, axis=1)
    for slot, _a, b in walkoffs:
        sub_t = b / fps
        out[:, slot] *= np.where(t < sub_t, _smoothstep((sub_t - t) / ramp_s), _smoothstep((t - sub_t) / ramp_s))
    return out
