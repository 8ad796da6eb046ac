"""The steering model: integrates the players' commands (plans) into paths.

Velocity follows the command through a second-order model: a first-order
velocity response (time constant TAU_S), a forward acceleration limit that falls
with speed (each player's linear force-velocity profile, Samozino et al. 2016,
scaled by how hard he means to go), a deceleration limit (how hard he means to
brake, up to DECEL_MAX_MS2), a total acceleration limit and a hard speed cap;
planned braking and a stopping rule keep everyone inside the lines. The nearest
outfield player of each team goes to the ball (receiver/carrier and presser).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from pacewire.replay.synth.ball import BallTrack
from pacewire.replay.synth.clubs import HALF_LENGTH_M
from pacewire.replay.synth.plans import HalfPlan

# Kinematic limits of the steering model (m/s, m/s^2, s)
TAU_S = 0.35  # velocity response time constant
DECEL_MAX_MS2 = 5.0
TURN_RESERVE_MS2 = 3.0  # share of the acceleration budget kept for turning
ACCEL_MAX_MS2 = 5.5  # total |a| of the model (checks allow 6)
SPEED_CAP_MS = 9.9  # hard cap (checks allow 10.5); each player's own top speed bounds his commands
CATCH_UP_MAX_MS = 5.0  # below the 5.5 m/s high-speed band on purpose: high speed comes from the runs
CATCH_UP_GAIN = 0.30  # 1/s: extra speed per metre beyond CATCH_UP_FROM_M from the target
CATCH_UP_FROM_M = 8.0
CHASE_MAX_MS = 5.2
PRESS_MAX_MS = 5.0
CHASE_DRIVE_MS2 = 3.2  # force-velocity intercept a player uses going to the ball
BRAKE_MS2 = 2.5  # planned braking towards the touchlines / goal lines
X_SOFT_M = 51.4  # where braking aims to stop (inside the pitch)
Y_SOFT_M = 33.0
X_STOP_M = 52.1  # players always stop before these (hard braking)
Y_STOP_M = 33.6
X_HARD_M = 52.45  # final safety clip
Y_HARD_M = 33.95
_INV_TAU = 1.0 / TAU_S
_AMAX2 = ACCEL_MAX_MS2**2
_TWO_B = 2.0 * BRAKE_MS2


def chase_commands(ball: BallTrack, dirs: tuple[float, float]) -> tuple[np.ndarray, ...]:
    """Per-frame ball-chasing commands of the two teams of one half.

    Returns goal point (n, 2) complex, speed limit (n, 2) m/s, feed-forward
    velocity (n, 2) complex m/s and active flag (n, 2): the team in possession
    goes to where the ball will be controlled (and walks to it for a restart),
    the other team presses from 2 m goal-side, only while the ball is in play.
    """
    n = len(ball.xy)
    goal = np.empty((n, 2), complex)
    vmax = np.empty((n, 2))
    ff = np.zeros((n, 2), complex)
    active = np.empty((n, 2), bool)
    bt = ball.target
    for team in (0, 1):
        has = ball.poss == team
        to_goal = complex(-dirs[team] * HALF_LENGTH_M, 0.0) - bt
        press = bt + 2.0 * to_goal / (np.abs(to_goal) + 1e-9)
        goal[:, team] = np.where(has, bt, press)
        vmax[:, team] = np.where(has, np.where(ball.in_play, CHASE_MAX_MS, 2.5), PRESS_MAX_MS)
        ff[:, team] = np.where(has, ball.target_vel, 0.0)
        active[:, team] = ball.in_play | has
    return goal, vmax, ff, active


def _pad(a: np.ndarray, n: int) -> np.ndarray:
    """Pad along axis 0 to length n by repeating the last row."""
    if len(a) >= n:
        return a
    return np.concatenate([a, np.repeat(a[-1:], n - len(a), axis=0)])


def _stop_before_lines(p: np.ndarray, v: np.ndarray, a: np.ndarray) -> np.ndarray:
    """Acceleration (complex, m/s^2) that stops each player before the lines.

    Per axis, a player moving towards a line at speed u with room r left must
    decelerate by at least u^2 / 2r; where the planned acceleration does not,
    that axis is overridden and the other axis is cut back to keep |a| within
    ACCEL_MAX_MS2 (the along-the-line motion gives way).
    """
    ax, ay = a.real.copy(), a.imag.copy()
    for comp, p_ax, v_ax, lim in ((ax, p.real, v.real, X_STOP_M), (ay, p.imag, v.imag, Y_STOP_M)):
        sgn = np.sign(v_ax)
        room = np.maximum(lim - p_ax * sgn, 0.05)
        need = v_ax * v_ax / (2.0 * room)
        brake = (need > 0.5) & (comp * sgn > -need)
        comp[brake] = -need[brake] * sgn[brake]
        comp[:] = np.clip(comp, -ACCEL_MAX_MS2, ACCEL_MAX_MS2)
    # keep |a| in budget: the axis that was not forced gives way
    over = np.hypot(ax, ay) > ACCEL_MAX_MS2
    if over.any():
        fx = np.abs(ax) >= np.abs(ay)
        big, small = np.where(fx, ax, ay), np.where(fx, ay, ax)
        small = np.sign(small) * np.sqrt(np.maximum(ACCEL_MAX_MS2**2 - big * big, 0.0))
        ax = np.where(over, np.where(fx, big, small), ax)
        ay = np.where(over, np.where(fx, small, big), ay)
    return ax + 1j * ay


@dataclass
class _Columns:
    """The plans of all halves side by side, each padded to the longest half: one
    column per player and half (22 per half), one per team and half for the ball."""

    target: np.ndarray  # (n, 22 h) complex, m
    speed: np.ndarray  # (n, 22 h) m/s
    kdt: np.ndarray  # (n, 22 h) heading pull per frame (kappa dt)
    gcatch: np.ndarray  # (n, 22 h) catch-up gain, 1/s (0: no catch-up)
    chase_ok: np.ndarray  # (n, 22 h) bool, may go to the ball
    noise: np.ndarray  # (n, 22 h) heading noise, rad per frame
    vscale: np.ndarray  # (n, 22 h) velocity command multiplier
    drive: np.ndarray  # (n, 22 h) force-velocity intercept used, m/s^2
    brake: np.ndarray  # (n, 22 h) deceleration allowed, m/s^2
    inv_v0: np.ndarray  # (n, 22 h) 1 / force-velocity speed intercept, s/m
    ball_target: np.ndarray  # (n, h) complex: where the ball will next be controlled
    col_half: np.ndarray  # (22 h,) the half of each player column
    c_goal: np.ndarray  # (n, 2 h) chase_commands: goal point, complex
    c_vmax: np.ndarray  # (n, 2 h) speed limit, m/s
    c_ff: np.ndarray  # (n, 2 h) feed-forward velocity, complex m/s
    c_active: np.ndarray  # (n, 2 h) bool


def _columns(plans: list[HalfPlan], n: int, dt: float) -> _Columns:
    """Stack the plans of the halves as columns of ``n`` frames."""
    def cat(f: Callable[[HalfPlan], np.ndarray]) -> np.ndarray:
        return np.concatenate([_pad(f(p), n) for p in plans], axis=1)

    cmds = [chase_commands(p.ball, p.dirs) for p in plans]
    c_goal, c_vmax, c_ff, c_active = (np.concatenate([_pad(c[i], n) for c in cmds], axis=1) for i in range(4))
    return _Columns(
        target=cat(lambda p: p.target), speed=cat(lambda p: p.speed), kdt=cat(lambda p: p.kappa * dt),
        gcatch=cat(lambda p: p.catch * CATCH_UP_GAIN), chase_ok=cat(lambda p: p.chase),
        noise=cat(lambda p: p.heading_noise), vscale=cat(lambda p: p.vscale), drive=cat(lambda p: p.drive),
        brake=cat(lambda p: np.minimum(p.brake, DECEL_MAX_MS2)), inv_v0=cat(lambda p: p.inv_v0),
        ball_target=np.stack([_pad(p.ball.target, n) for p in plans], axis=1),
        col_half=np.repeat(np.arange(len(plans)), 22),
        c_goal=c_goal, c_vmax=c_vmax, c_ff=c_ff, c_active=c_active,
    )


def integrate(plans: list[HalfPlan], fps: int) -> list[np.ndarray]:
    """Second-order steering of all players of all halves at once.

    The halves are independent (both start from a kick-off), so they run side by
    side as extra columns: one Python step per frame of the longest half,
    numpy over 22 x halves players. Returns positions (n_half, 22) complex (m)
    for each half.
    """
    lengths = [len(p.speed) for p in plans]
    n = max(lengths)
    dt = 1.0 / fps
    cols = _columns(plans, n, dt)
    k = cols.target.shape[1]
    pos = np.concatenate([p.init_pos for p in plans]).astype(complex)
    vel = np.zeros(k, complex)
    theta = np.angle(cols.target[0] - pos)
    h = np.exp(1j * theta)
    chasers = _BallChasers(k // 11)
    room = np.empty((4, k))  # scratch of _brake_room
    out = np.empty((n, k), complex)
    for t in range(n):
        vd, theta, h = _steer(pos, theta, h, cols.target[t], cols.kdt[t], cols.noise[t], cols.speed[t],
                              cols.gcatch[t])
        chasers.pick(pos, cols.ball_target[t][cols.col_half], cols.chase_ok[t], cols.c_active[t])
        drive = chasers.steer(pos, vd, theta, h, cols.c_goal[t], cols.c_vmax[t], cols.c_ff[t], cols.drive[t])
        vd, xp, yp = _brake_room(vd, pos, vel, room)
        a = _bounded_accel(vd * cols.vscale[t], vel, drive, cols.brake[t], cols.inv_v0[t])
        pos, vel = _move(pos, vel, a, xp, yp, dt)
        out[t] = pos
    # safety only: braking keeps players inside, this clip should never bite
    out = np.clip(out.real, -X_HARD_M, X_HARD_M) + 1j * np.clip(out.imag, -Y_HARD_M, Y_HARD_M)
    return [out[:ln, 22 * i:22 * (i + 1)] for i, ln in enumerate(lengths)]


# The steps of one frame. np.minimum / np.maximum: much cheaper than np.clip on short arrays.
def _steer(pos: np.ndarray, theta: np.ndarray, h: np.ndarray, target: np.ndarray, kdt: np.ndarray,
           noise: np.ndarray, speed: np.ndarray, gcatch: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Desired velocity (complex m/s) towards the target, with the new heading angle and
    its unit vector: the heading turns towards the target and wanders; far off target a
    catch-up speed is added along the direct line."""
    d = target - pos
    dist = np.abs(d) + 1e-9
    u = d / dist
    w = np.minimum(np.maximum((dist - 1.5) * 0.25, 0.0), 1.0)  # heading pull grows from 1.5 m to 5.5 m off target
    z = u * np.conj(h)
    theta = theta + kdt * w * np.arctan2(z.imag, z.real) + noise
    c = np.minimum(np.maximum(gcatch * (dist - CATCH_UP_FROM_M), 0.0), CATCH_UP_MAX_MS)
    h = np.exp(1j * theta)
    vd = speed * h + c * u
    vd = vd * np.minimum(1.0, np.maximum(speed, c) / (np.abs(vd) + 1e-9))
    return vd, theta, h


class _BallChasers:
    """The nearest eligible player of each team (and half) goes to the ball; another
    player takes over only when he is 2 m nearer (hysteresis)."""

    def __init__(self, groups: int) -> None:
        self.ar = np.arange(groups)
        self.cur = np.zeros(groups, np.int64)  # chaser of each group, 0..10
        self.have = np.zeros(groups, bool)

    def pick(self, pos: np.ndarray, ball: np.ndarray, chase_ok: np.ndarray, active: np.ndarray) -> None:
        """Choose the chasers for this frame; ball: the ball target of each player's half."""
        ar = self.ar
        db = np.where(chase_ok, np.abs(ball - pos), np.inf).reshape(len(ar), 11)
        jmin = db.argmin(axis=1)
        dmin = db[ar, jmin]
        dcur = np.where(self.have, db[ar, self.cur], np.inf)
        self.cur = np.where(dmin < dcur - 2.0, jmin, self.cur)
        self.have = active & (db[ar, self.cur] < np.inf)

    def steer(self, pos: np.ndarray, vd: np.ndarray, theta: np.ndarray, h: np.ndarray, goal: np.ndarray,
              vmax: np.ndarray, ff: np.ndarray, drive: np.ndarray) -> np.ndarray:
        """Send the chasers to their team's chase goal (chase_commands), in place: their desired
        velocity, and their heading when they move. Returns the drive (force-velocity intercept,
        m/s^2) of every player: a chaser's is at least CHASE_DRIVE_MS2."""
        if not self.have.any():
            return drive
        g = self.ar[self.have]
        cols = g * 11 + self.cur[self.have]
        e = goal[g] - pos[cols]
        de = np.abs(e) + 1e-9
        v = ff[g] + e * (np.minimum(vmax[g], 0.9 * de) / de)
        v = v * np.minimum(1.0, CHASE_MAX_MS / (np.abs(v) + 1e-9))
        vd[cols] = v
        turn = np.abs(v) > 0.2
        theta[cols[turn]] = np.angle(v[turn])
        h[cols[turn]] = v[turn] / np.abs(v[turn])
        drive = drive.copy()
        drive[cols] = np.maximum(drive[cols], CHASE_DRIVE_MS2)
        return drive


def _brake_room(vd: np.ndarray, pos: np.ndarray, vel: np.ndarray,
                room: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Desired velocity cut to what planned braking (BRAKE_MS2) can stop before the soft
    lines, judged from the position predicted TAU_S ahead (also returned, x and y)."""
    xp = pos.real + vel.real * TAU_S
    yp = pos.imag + vel.imag * TAU_S
    np.subtract(X_SOFT_M, xp, out=room[0])
    np.add(X_SOFT_M, xp, out=room[1])
    np.subtract(Y_SOFT_M, yp, out=room[2])
    np.add(Y_SOFT_M, yp, out=room[3])
    np.sqrt(np.maximum(room, 0.0, out=room) * _TWO_B, out=room)
    vx = np.minimum(np.maximum(vd.real, -room[1]), room[0])
    vy = np.minimum(np.maximum(vd.imag, -room[3]), room[2])
    return vx + 1j * vy, xp, yp


def _bounded_accel(vd: np.ndarray, vel: np.ndarray, drive: np.ndarray, brake: np.ndarray,
                   inv_v0: np.ndarray) -> np.ndarray:
    """Acceleration (complex m/s^2) towards the desired velocity, bounded.

    Forward: the player's force-velocity line, ``drive`` (1 - speed / V0), so the
    acceleration he can reach falls as his speed rises; braking: ``brake``; and the
    total limit. Speed changes get the budget first, except a reserve for turning.
    """
    a = (vd - vel) * _INV_TAU
    sp = np.abs(vel)
    uv = vel / (sp + 1e-9)
    at = (a * np.conj(uv)).real
    an = a - at * uv
    # turning (and braking along a touchline) always keeps up to TURN_RESERVE_MS2
    at_room = np.sqrt(_AMAX2 - np.minimum(np.abs(an), TURN_RESERVE_MS2) ** 2)
    forward = np.minimum(drive * np.maximum(1.0 - sp * inv_v0, 0.0), at_room)
    at = np.minimum(np.maximum(at, -np.minimum(brake, at_room)), forward)
    an_max = np.sqrt(np.maximum(_AMAX2 - at * at, 0.0))
    an = an * np.minimum(1.0, an_max / (np.abs(an) + 1e-12))
    return at * uv + an


def _move(pos: np.ndarray, vel: np.ndarray, a: np.ndarray, xp: np.ndarray, yp: np.ndarray,
          dt: float) -> tuple[np.ndarray, np.ndarray]:
    """One step of ``dt`` s: players near the lines (predicted xp, yp) brake hard enough
    to stop before them, then velocity (capped at SPEED_CAP_MS) and position advance."""
    near = (np.abs(xp) > X_SOFT_M - 3.0) | (np.abs(yp) > Y_SOFT_M - 3.0)
    if near.any():
        idx = np.flatnonzero(near)
        a[idx] = _stop_before_lines(pos[idx], vel[idx], a[idx])
    vel = vel + a * dt
    vel = vel * np.minimum(1.0, SPEED_CAP_MS / (np.abs(vel) + 1e-12))
    return pos + vel * dt, vel
