"""A player's figures come from his own frames only: the engine works on the columns of the
players seen in a period so far, in the order they appear, and none of that may leak into
anyone's figures (late arrivals listed first, players who leave and come back, players on
the sheet never seen, any block sizes)."""
from __future__ import annotations

import numpy as np
import pytest

from pacewire.analyze import new_match
from pacewire.config import load_settings
from pacewire.engine.snapshot import build_snapshot
from tests.support import cdf_build as cb

FPS = 25
N_HOME, N_AWAY = 3, 2
SECONDS = 100


def positions(seed: int) -> np.ndarray:
    """(T, 5, 2) smooth runs at 1-7 m/s, with arrivals, departures and a return."""
    rng = np.random.default_rng(seed)
    t = np.arange(SECONDS * FPS) / FPS
    xy = np.zeros((len(t), N_HOME + N_AWAY, 2))
    for p in range(xy.shape[1]):
        for ax in range(2):
            amp, period = rng.uniform(6, 14), rng.uniform(8, 30)
            xy[:, p, ax] = rng.uniform(-20, 20) + amp * np.sin(2 * np.pi * t / period + rng.uniform(0, 6))
    xy[: 40 * FPS, 0] = np.nan  # h1 (first on the sheet) arrives after 40 s
    xy[50 * FPS: 70 * FPS, 2] = np.nan  # h3 leaves for 20 s
    xy[85 * FPS:, 4] = np.nan  # a2 leaves for good
    xy[: 3 * FPS, 3] = np.nan  # a1 arrives a little late
    return xy


def figures(xy: np.ndarray, block: int, unseen_home: int = 0) -> dict:
    """Per-player figures (everything under players.{id} except on_pitch) of one run;
    ``unseen_home`` more home players on the sheet (after the others) never appear."""
    ids = cb.player_ids(N_HOME, N_AWAY)
    bench = tuple(f"h{N_HOME + 1 + k}" for k in range(unseen_home))
    state, dec = new_match(cb.meta(), cb.sheet(N_HOME + unseen_home, N_AWAY, gk=(), bench=bench), load_settings())
    n = xy.shape[0]
    status = (np.arange(n) // (7 * FPS)) % 4 != 3
    poss = (np.arange(n) // (11 * FPS)) % 2
    lines = cb.lines(cb.frames(xy, ids, N_HOME, status=status, poss=poss))
    for i in range(0, len(lines), block):
        state.ingest(dec.decode_lines(lines[i:i + block]))
    state.finish()
    snap = build_snapshot(state)
    return {pid: {k: v for k, v in snap["players"][pid].items() if k != "on_pitch"} for pid in ids}


@pytest.mark.parametrize("block", [1, 7, 25, 400])
def test_each_players_figures_equal_those_of_a_run_with_him_alone(block):
    # source: the engine's contract (figures per player from that player's frames); compared
    # with runs where every other player is absent from the frames
    xy = positions(seed=5)
    together = figures(xy, block)
    for p, pid in enumerate(cb.player_ids(N_HOME, N_AWAY)):
        alone = np.full_like(xy, np.nan)
        alone[:, p] = xy[:, p]
        assert figures(alone, block)[pid] == together[pid], pid
    assert 0 < together["h1"]["minutes"] < together["h2"]["minutes"]  # the late arrival counts from his arrival


def test_players_on_the_sheet_never_seen_change_nothing():
    # source: the engine's contract; four substitutes on the sheet who never play sit
    # between the home and away players in roster order
    xy = positions(seed=9)
    assert figures(xy, 25, unseen_home=4) == figures(xy, 25)
