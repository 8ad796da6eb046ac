"""Player trajectories for tests: positions in pitch metres (origin at the centre spot), built with
numpy so every test knows its input exactly. The movement is fictional; no real player is meant."""
from __future__ import annotations

from collections.abc import Iterable

import numpy as np
from numpy.typing import ArrayLike

FPS = 25


def speeds(parts: Iterable[tuple[float, float]], fps: int = FPS) -> np.ndarray:
    """Speed per frame (m/s) of a run at piecewise-constant speeds, parts ``[(m/s, seconds), ...]``."""
    return np.concatenate([np.full(int(round(seconds * fps)), v) for v, seconds in parts])


def ramped(parts: Iterable[tuple[float, float]], tau_s: float = 1.0, fps: int = FPS) -> np.ndarray:
    """Speed per frame (m/s) that follows piecewise-constant target speeds ``[(m/s, seconds), ...]``
    through a first-order lag of time constant ``tau_s``: a sprint start v = v_max (1 - exp(-t/tau))
    (Furusawa et al. 1927), whose acceleration (v_target - v) / tau falls linearly with speed as a
    sprinter's does (Samozino et al. 2016): a path a player can run, unlike a step in speed."""
    target = speeds(parts, fps)
    k = 1.0 - np.exp(-1.0 / (tau_s * fps))
    out = np.empty_like(target)
    v = 0.0 if not len(target) else target[0]
    for i, goal in enumerate(target.tolist()):  # a few thousand frames per test path
        v += (goal - v) * k
        out[i] = v
    return out


def distance(v: np.ndarray, fps: int = FPS) -> np.ndarray:
    """Path length (m) of a run at speeds ``v`` (m/s per frame): 0 at its start, then one value
    after each frame (len(v) + 1 values)."""
    return np.concatenate([[0.0], np.cumsum(v) / fps])


def round_circle(path_m: np.ndarray, radius: float) -> np.ndarray:
    """Positions (T, 2) after running ``path_m`` metres (one value per frame) round a circle of
    ``radius`` metres about the centre spot, from (radius, 0) anticlockwise."""
    angle = path_m / radius
    return np.stack([radius * np.cos(angle), radius * np.sin(angle)], -1)


def drawn_rates(players: int, low: float, high: float, seed: int) -> np.ndarray:
    """(players, 2) rates (rad/s) for ``sway``, drawn uniformly from [low, high), x then y per player."""
    return np.random.default_rng(seed).uniform(low, high, (players, 2))


def sway(seconds: float, players: int, amplitude: ArrayLike, rate: ArrayLike, centre: ArrayLike = 0.0,
         y_turn: int = 1, fps: int = FPS) -> np.ndarray:
    """Positions (T, P, 2), T = int(seconds * fps): player p sways on two sinusoids,
    x = ax sin(fx t + p) + cx and y = ay cos(fy t + y_turn p) + cy (t in s, amplitudes and
    centres in m, rates in rad/s). ``amplitude``, ``rate`` and ``centre`` broadcast to (P, 2):
    one (x, y) pair for every player or one per player."""
    t = np.arange(int(seconds * fps)) / fps
    amp, rates, mid = (np.broadcast_to(np.asarray(v, dtype=float), (players, 2)) for v in (amplitude, rate, centre))
    xy = np.zeros((t.size, players, 2))
    for p in range(players):
        xy[:, p, 0] = amp[p, 0] * np.sin(rates[p, 0] * t + p) + mid[p, 0]
        xy[:, p, 1] = amp[p, 1] * np.cos(rates[p, 1] * t + y_turn * p) + mid[p, 1]
    return xy
