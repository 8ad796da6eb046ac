"""Helpers for the bench-page browser tests: a fictional feed with varied load, and Chromium.

Everything here is invented: clubs, players and movement. The movement is a
smooth random walk per player (jogging with high-speed and sprint bursts)
folded into the pitch, so speeds and accelerations stay plausible and the
figures differ between players (the page has something to sort).
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from scipy.ndimage import uniform_filter1d

from tests.support import cdf_build as cb

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync"]

FPS = 10  # a wearables-like rate keeps the replay, and the restart that re-reads it, quick
N_HOME = N_AWAY = 11
IDS = cb.player_ids(N_HOME, N_AWAY)
GOALKEEPERS = ("h1", "a1")
LOW_COVERAGE = "a7"  # unseen for long stretches: coverage well under 0.8

# invented names (no real person intended)
NAMES = {
    "h": ["Orrin Baske", "Teodor Wyle", "Caspar Lunde", "Mika Farrow", "Idris Kettle", "Jonas Pemberly", "Rafe Odum",
          "Luca Strand", "Benno Hask", "Elior Vance", "Sami Torvik"],
    "a": ["Piet Marrow", "Aurel Dacey", "Colm Ravensby", "Niko Halden", "Ferran Ostle", "Yusuf Brell", "Emil Tansy",
          "Daan Crofte", "Levi Amsell", "Tobin Quaye", "Otis Wendle"],
}


def sheet() -> dict[str, Any]:
    """A live match sheet with the invented names above."""
    out = cb.sheet(N_HOME, N_AWAY, gk=GOALKEEPERS)
    for side, prefix in (("home", "h"), ("away", "a")):
        for i, p in enumerate(out["teams"][side]["players"]):
            first, last = NAMES[prefix][i].split(" ")
            p["first_name"], p["last_name"] = first, last
    out["teams"]["home"]["name"], out["teams"]["away"]["name"] = "Harbour Town", "Quarry Lane"
    return out


def _fold(v: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Reflect a coordinate into [lo, hi] (a triangle wave): speed is unchanged, no jumps."""
    span = hi - lo
    u = np.mod(v - lo, 2 * span)
    return lo + np.where(u > span, 2 * span - u, u)


def trajectories(seconds: float, seed: int = 7) -> np.ndarray:
    """Positions (T, 22, 2) in metres at FPS: jogging with bursts, per-player intensity."""
    rng = np.random.default_rng(seed)
    T, P = int(round(seconds * FPS)), len(IDS)
    dt = 1.0 / FPS
    base = rng.uniform(1.6, 3.4, P)
    base[[IDS.index(g) for g in GOALKEEPERS]] = 0.8
    speed = np.repeat(base[None, :], T, axis=0)
    # a slow swing in jogging pace, different per player
    t = np.arange(T)[:, None] * dt
    speed *= 1.0 + 0.35 * np.sin(t * rng.uniform(0.05, 0.2, P) + rng.uniform(0, 6.3, P))
    burst_rate = rng.uniform(0.01, 0.05, P)  # bursts per second
    for p in range(P):
        if IDS[p] in GOALKEEPERS:
            continue
        n = rng.poisson(burst_rate[p] * seconds)
        for start in rng.uniform(0, seconds - 6, n):
            k0, k1 = int(start * FPS), int((start + rng.uniform(1.5, 5.0)) * FPS)
            speed[k0:k1, p] = rng.choice([6.2, 7.6, 8.4])  # high-speed running or sprinting
    speed = uniform_filter1d(speed, size=FPS, axis=0, mode="nearest")  # 1 s ramp: plausible accelerations
    heading = np.cumsum(rng.normal(0, 0.025, (T, P)), axis=0) + rng.uniform(0, 6.3, P)
    vel = np.stack([np.cos(heading), np.sin(heading)], axis=-1) * speed[..., None]
    start = np.stack([rng.uniform(-40, 40, P), rng.uniform(-25, 25, P)], axis=-1)
    xy = start[None] + np.cumsum(vel * dt, axis=0)
    xy[..., 0] = _fold(xy[..., 0], -51.0, 51.0)
    xy[..., 1] = _fold(xy[..., 1], -32.5, 32.5)
    # one player tracked badly: unseen 9 s out of every 20
    j = IDS.index(LOW_COVERAGE)
    hidden = (np.arange(T) % (20 * FPS)) >= 11 * FPS
    xy[hidden, j] = np.nan
    return xy


@dataclass
class Feed:
    """A fictional two-period match, handed out in order; later parts can be shifted in time
    (a live provider that resumes after an outage stamps its frames with the current time)."""

    match_id: str = "m_bench"
    first_half_s: float = 150.0
    second_half_s: float = 100.0
    spare_s: float = 30.0  # frames kept for the live part of the tests
    frames: list[dict[str, Any]] = field(default_factory=list)
    cursor: int = 0
    shift_s: float = 0.0

    def __post_init__(self) -> None:
        xy = trajectories(self.first_half_s + self.second_half_s + self.spare_s)
        n1 = int(self.first_half_s * FPS)
        first = cb.frames(xy[:n1], IDS, N_HOME, FPS, self.match_id, "first_half")
        # the second half starts after a 15-minute break; its frame ids continue
        second = cb.frames(xy[n1:], IDS, N_HOME, FPS, self.match_id, "second_half",
                           t0=self.first_half_s + 900.0, frame0=n1)
        self.frames = first + second

    def setup_body(self) -> dict[str, Any]:
        return {"meta": cb.meta(self.match_id, fps=FPS), "sheet": sheet()}

    @property
    def bulk_count(self) -> int:
        """Frames before the live part."""
        return len(self.frames) - int(self.spare_s * FPS)

    def take(self, n: int) -> list[dict[str, Any]]:
        out = []
        for f in self.frames[self.cursor:self.cursor + n]:
            f = dict(f)
            if self.shift_s:
                ts = datetime.fromisoformat(f["timestamp"].replace("Z", "+00:00")) + timedelta(seconds=self.shift_s)
                f["timestamp"] = ts.strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"
            out.append(f)
        self.cursor += len(out)
        return out


def chromium_missing_reason() -> str | None:
    if not CHROMIUM.exists():
        return (f"{CHROMIUM} is missing: install it with `apt-get install -y chromium` "
                "(.ci/run does this); the bench page browser tests did NOT run")
    try:
        import playwright  # noqa: F401
    except ImportError:
        return "playwright is not installed (pip install -e '.[test]'); the bench page browser tests did NOT run"
    return None


def in_ci() -> bool:
    return os.environ.get("CI", "").lower() == "true"


def require_chromium() -> None:
    """Skip the calling test without Chromium or Playwright; in CI (CI=true), where the browser
    tests must run, fail instead."""
    import pytest

    reason = chromium_missing_reason()
    if reason is not None:
        if in_ci():
            pytest.fail("CI=true and " + reason)
        pytest.skip(reason)


def launch(pw: Any) -> Any:
    """Debian's Chromium, headless, through a started Playwright (never a downloaded browser)."""
    return pw.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
