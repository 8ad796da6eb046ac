"""Cost of GNSS-to-pitch conversion per fix (service/wire/gnss.py; docs/wearables.md).

22 players' fixes per frame at 25 Hz over 5 minutes (quick) or a 95-minute match
(full), on a fictional 105 x 68 m ground (lat 47.5, long -30.0, bearing 23°).
Positions are smooth synthetic paths in pitch metres, turned into WGS 84 fixes
once with ``PitchProjection.to_gnss`` (not timed).

* ``gnss_us_per_fix``: ``to_pitch`` once per frame (22 fixes a call), the way a
  decoder fed one frame at a time would call it.
* ``gnss_us_per_fix_batched``: once per 1 s block of 25 frames (550 fixes a call).

Baseline, same run and same call pattern: plain numpy rotate + translate of the
frame's (or block's) x/y arrays, the part of the conversion that is not geodesy.
``ratio`` = to_pitch time / baseline time. Each timing is the best of 3.

    python -m tests.bench.bench_gnss [--quick]
"""
from __future__ import annotations

import math
import os
import sys
import time
from collections.abc import Callable
from functools import partial

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one-core figures (before numpy loads)

import numpy as np  # noqa: E402

from pacewire.wire.gnss import PitchProjection, rectangle  # noqa: E402

FPS = 25
PLAYERS = 22
REPEATS = 3


def best_of(fn: Callable[[], object], repeats: int = REPEATS) -> float:
    best = float("inf")
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def paths(frames: int, seed: int = 11) -> tuple[np.ndarray, np.ndarray]:
    """(frames, 22) x and y, m: each player an anchor plus slow and fast sinusoids, on the pitch."""
    rng = np.random.default_rng(seed)
    t = np.arange(frames)[:, None] / FPS
    out = []
    for half, amp in ((52.5, 30.0), (34.0, 20.0)):
        anchor = rng.uniform(-0.5, 0.5, PLAYERS) * half
        slow = amp * np.sin(2 * np.pi * t / rng.uniform(60, 300, PLAYERS) + rng.uniform(0, 2 * np.pi, PLAYERS))
        fast = 3.0 * np.sin(2 * np.pi * t / rng.uniform(3, 8, PLAYERS) + rng.uniform(0, 2 * np.pi, PLAYERS))
        out.append(np.clip(anchor + slow + fast, -half, half))
    return out[0], out[1]


def run(quick: bool) -> dict[str, dict]:
    frames = FPS * 60 * (5 if quick else 95)
    proj = PitchProjection.from_calibration(rectangle(47.5, -30.0, 105.0, 68.0, 23.0))
    x, y = paths(frames)
    lat, lon = proj.to_gnss(x, y)
    assert np.abs(proj.to_pitch(lat, lon)[0] - x).max() < 1e-3  # the data round-trips

    b = math.radians(17.0)
    c, s, tx, ty = math.cos(b), math.sin(b), 1.5, -2.5  # an arbitrary rigid motion of the same size of work

    def convert(step: int) -> None:
        for i in range(0, frames, step):
            proj.to_pitch(lat[i:i + step], lon[i:i + step])

    def baseline(step: int) -> None:
        for i in range(0, frames, step):
            px, py = x[i:i + step], y[i:i + step]
            px * c - py * s + tx, px * s + py * c + ty

    fixes = frames * PLAYERS
    out = {}
    for key, step in (("gnss_us_per_fix", 1), ("gnss_us_per_fix_batched", FPS)):
        conv = best_of(partial(convert, step)) / fixes * 1e6
        base = best_of(partial(baseline, step)) / fixes * 1e6
        out[key] = {"value": round(conv, 4), "unit": "µs", "baseline": round(base, 4), "ratio": round(conv / base, 2)}
    return out


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(k, v)
