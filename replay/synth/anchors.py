"""Formation anchors: where each player of a team would stand for a ball position
and possession state (the team shape follows the ball)."""

from __future__ import annotations

import numpy as np

from pacewire.replay.synth.clubs import FORMATIONS, HALF_LENGTH_M, Club


def formation_offsets(club: Club) -> np.ndarray:
    """Formation slot offsets (11,) complex, metres, attacking +x."""
    return np.array([complex(x, y) for _, x, y in FORMATIONS[club.formation]])


def team_anchors(ball: np.ndarray, poss_share: np.ndarray, direction: float, offsets: np.ndarray) -> np.ndarray:
    """Formation anchors of one team, metres, complex, shape (M, 11).

    ball: (M,) complex ball (or lagged ball) position in pitch coordinates.
    poss_share: (M,) in [0, 1], 1 when the team has the ball.
    direction: +1 if the team attacks +x in this half, else -1 (the frame is
    rotated by 180 degrees, so y flips too).
    """
    b = ball * direction
    ps = poss_share[:, None]
    bx = np.clip(0.6 * b.real + 4.0 * poss_share - 5.0 * (1.0 - poss_share), -24.0, 26.0)[:, None]
    depth = 0.85 + 0.25 * ps
    width = 0.85 + 0.20 * ps
    ax = bx + offsets.real[None, :] * depth
    ay = offsets.imag[None, :] * width + 0.35 * b.imag[:, None]
    # players near the ball are drawn towards it (support / pressure), far ones hold shape
    pull = 0.35 * np.exp(-np.hypot(ax - b.real[:, None], ay - b.imag[:, None]) / 15.0)
    ax = np.clip(ax + pull * (b.real[:, None] - ax), -49.0, 49.0)
    ay = np.clip(ay + pull * (b.imag[:, None] - ay), -31.0, 31.0)
    # goalkeeper: stays near goal, edges out when the ball is far away
    ax[:, 0] = np.clip(-50.3 + 0.13 * (b.real + HALF_LENGTH_M), -50.3, -36.0)
    ay[:, 0] = np.clip(0.22 * b.imag, -6.0, 6.0)
    return (ax + 1j * ay) * direction
