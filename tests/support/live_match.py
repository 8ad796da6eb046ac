"""The small fictional match the end-to-end tests stream: three home and two away players at 25 Hz,
the ball in play and the home team in possession throughout."""
from __future__ import annotations

from typing import Any

import numpy as np

from tests.support import cdf_build as cb
from tests.support.trajectories import FPS, drawn_rates, sway

N_HOME, N_AWAY = 3, 2
IDS = cb.player_ids(N_HOME, N_AWAY)
MATCH = "m_live"


def trajectory(seconds: float, seed: int = 0) -> np.ndarray:
    """Smooth movement of the five players (m), inside the pitch: 15 x 10 m sways, 3 m apart."""
    n = len(IDS)
    centre = np.c_[3.0 * np.arange(n), np.zeros(n)]
    return sway(seconds, n, (15.0, 10.0), drawn_rates(n, 0.1, 0.4, seed), centre=centre)


def frames(seconds: float, seed: int = 0, match_id: str = MATCH, **kw: Any) -> list[dict[str, Any]]:
    """CDF frames of ``seconds`` of the match (``kw``: cdf_build.frames' period, t0, frame0)."""
    status = np.ones(int(seconds * FPS), bool)
    poss = np.zeros(int(seconds * FPS), int)
    return cb.frames(trajectory(seconds, seed), IDS, N_HOME, match_id=match_id, status=status, poss=poss, **kw)


def setup_body(match_id: str = MATCH) -> dict[str, Any]:
    """The body of ``PUT /api/matches/{match_id}``: the live meta and the match sheet."""
    return {"meta": cb.meta(match_id), "sheet": cb.sheet(N_HOME, N_AWAY)}
