"""The commands of every player over one half, vectorised over players and time:
where each one heads (formation anchor + personal wander, or a run target during
a sprint or high-speed run), at what speed (his position's locomotor profile, his
own work rate and fatigue), how hard he may accelerate and brake, how firmly he
turns, and whether he may go to the ball. The steering integrates them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter1d
from scipy.signal import lfilter

from pacewire.replay.synth.anchors import formation_offsets, team_anchors
from pacewire.replay.synth.athletes import Capacities, capacities
from pacewire.replay.synth.ball import BallTrack
from pacewire.replay.synth.bursts import Burst, burst_heading, burst_weight, sample_bursts
from pacewire.replay.synth.clubs import AWAY, HOME
from pacewire.replay.synth.fatigue import OnPitch
from pacewire.replay.synth.roles import CATEGORY_SPEEDS_MS, ROLES, STOPPAGE_PROBS, RoleProfile, slot_roles

HEADING_NOISE = 0.4  # rad per sqrt(s): random-walk wander of the heading
# Ordinary play uses part of a player's acceleration capacity: intercept of the force-velocity
# line he uses, and the braking he uses, m/s^2 (below the 3 m/s^2 of a high acceleration,
# Akenhead et al. 2013: those come from the runs of bursts.py).
PLAY_DRIVE_MS2 = 2.4
PLAY_BRAKE_MS2 = 2.0
RUN_SEGMENT_MAX_MS = 5.2  # ordinary running stays below the 5.5 m/s high-speed band


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
class HalfPlan:
    """Precomputed per-frame commands of one half for the integrator."""

    target: np.ndarray  # (n, 22) complex
    speed: np.ndarray  # (n, 22) m/s
    kappa: np.ndarray  # (n, 22) 1/s heading pull gain
    catch: np.ndarray  # (n, 22) bool, catch-up allowed
    chase: np.ndarray  # (n, 22) bool, may go to the ball
    heading_noise: np.ndarray  # (n, 22) rad per frame
    vscale: np.ndarray  # (n, 22) 0..1 multiplier of the commanded velocity (smooth starts and stops)
    drive: np.ndarray  # (n, 22) m/s^2: intercept of the force-velocity line the player uses
    brake: np.ndarray  # (n, 22) m/s^2: the deceleration he allows himself
    inv_v0: np.ndarray  # (n, 22) s/m: 1 / speed intercept of his force-velocity line
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
    drive: np.ndarray  # (n, 22) m/s^2
    brake: np.ndarray  # (n, 22) m/s^2

    def override(self, slot: int, a: int, b: int, target: np.ndarray | complex, speed: float, kappa: float) -> None:
        """Frames a..b-1 of ``slot`` head for ``target`` at ``speed``: no catch-up, no going to the ball."""
        self.target[a:b, slot] = target
        self.speed[a:b, slot] = speed
        self.kappa[a:b, slot] = kappa
        self.catch[a:b, slot] = False
        self.chase[a:b, slot] = False


def plan_half(rng: np.random.Generator, n: int, fps: int, ball: BallTrack, dirs: tuple[float, float],
              pitch: OnPitch, walkoffs: list[tuple[int, int, int]]) -> HalfPlan:
    """Build the commanded targets, speeds and effort of all 22 slots for one half.

    pitch: who plays in each slot and for how long (fatigue); walkoffs: (slot 0..21, first
    frame, last frame exclusive) of walk-off windows. The random draws come in a fixed order
    (wander, run phases, runs, locomotor segments, heading noise): the same seed gives the
    same half.
    """
    k = 22
    dt = 1.0 / fps
    roles = slot_roles()
    prof = [ROLES[r] for r in roles]
    cap = capacities(pitch.squad_index, roles)
    intensity = pitch.intensity()
    anchors = _team_shape(ball, dirs, dt)
    is_gk = np.array([r == "GK" for r in roles])
    wander_std = np.where(is_gk, 1.2, 3.5)
    wander = _ou_noise(rng, n, k, 1.0, 10.0, fps) * wander_std[None, :]
    prox = np.exp(-np.abs(anchors - ball.xy[:, None]) / 20.0)
    prox_n = prox / max(prox.mean(), 1e-9)
    weight = burst_weight(rng, n, fps, ball, walkoffs, prox_n, intensity, cap)
    bursts = sample_bursts(rng, weight, prof, intensity, cap, fps)
    speed = _locomotor_speeds(rng, n, fps, ball, prox_n, prof, intensity, cap)
    chase = np.broadcast_to(~is_gk[None, :], (n, k)).copy()
    cmd = _Commands(anchors + wander, speed, np.full((n, k), 1.2), np.ones((n, k), bool), chase,
                    np.full((n, k), PLAY_DRIVE_MS2), np.full((n, k), PLAY_BRAKE_MS2))
    _add_bursts(rng, cmd, bursts, fps, ball, anchors, dirs)
    for slot, a, b in walkoffs:  # brisk walk / jog off the pitch, to the bench
        cmd.override(slot, a, b, complex(-6.0 if slot < 11 else 6.0, -33.0), 2.5, 3.0)
    # smooth speed commands over 0.4 s so accelerations ramp
    speed = uniform_filter1d(cmd.speed, size=max(1, int(0.4 * fps)), axis=0, mode="nearest")
    heading_noise = rng.normal(0.0, HEADING_NOISE * np.sqrt(dt), size=(n, k))
    init = _kickoff_positions(anchors[0], dirs)
    vscale = _velocity_ramps(n, fps, walkoffs)
    return HalfPlan(cmd.target, speed, cmd.kappa, cmd.catch, cmd.chase, heading_noise, vscale, cmd.drive,
                    cmd.brake, cap.inv_v0, ball, dirs, init)


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


def _locomotor_speeds(rng: np.random.Generator, n: int, fps: int, ball: BallTrack, prox_n: np.ndarray,
                      prof: list[RoleProfile], intensity: np.ndarray, cap: Capacities) -> np.ndarray:
    """Commanded speed (n, 22) m/s from each position's locomotor profile.

    Players far from the ball walk more (prox_n: proximity to the ball, mean 1); each
    player's work rate scales his jog and run share, and fatigue (intensity) thins and
    slows them (Mohr et al. 2003); out of play everyone follows STOPPAGE_PROBS.
    """
    k = len(prof)
    base = np.array([p.probs for p in prof])  # (k, 4)
    probs = np.empty((n, k, 4))
    probs[:] = base[None, :, :]
    effort = cap.work * intensity
    probs[:, :, :2] *= np.maximum(1.4 - 0.4 * prox_n, 0.4)[:, :, None]  # far from the ball: walk
    probs[:, :, 2] *= (0.6 + 0.4 * prox_n) * effort
    probs[:, :, 3] *= (0.3 + 0.7 * prox_n) * effort**2
    probs /= probs.sum(axis=2, keepdims=True)
    probs[~ball.in_play] = STOPPAGE_PROBS
    scale = np.array([p.speed_scale for p in prof])
    speed = _segment_speeds(rng, n, fps, probs, scale) * np.sqrt(effort)
    return np.minimum(speed, RUN_SEGMENT_MAX_MS)


def _add_bursts(rng: np.random.Generator, cmd: _Commands, bursts: list[Burst], fps: int, ball: BallTrack,
                anchors: np.ndarray, dirs: tuple[float, float]) -> None:
    """The runs (bursts.sample_bursts) written into the commands: a run target about as far
    away as the run covers, at the run's speed and drive, then the hard stop if it has one."""
    team_of = np.repeat([0, 1], 11)
    for bu in bursts:
        j, s, e = bu.slot, bu.start, bu.start + bu.length
        team = team_of[j]
        heading = burst_heading(rng, ball, s, team, dirs[team], anchors[s, j])
        run_vec = heading * bu.speed * bu.length / fps * 0.9
        run_target = anchors[s:e, j] + run_vec
        run_target = np.clip(run_target.real, -48, 48) + 1j * np.clip(run_target.imag, -31, 31)
        cmd.override(j, s, e, run_target, bu.speed, 0.8)
        cmd.drive[s:e, j] = bu.drive_ms2
        if bu.stop_len:
            f = e + bu.stop_len
            cmd.override(j, e, f, run_target[-1], bu.stop_speed, 0.8)
            cmd.brake[e:f, j] = bu.stop_ms2


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
