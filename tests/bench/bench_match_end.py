"""Time from a replayed match's last frame to its full-time report being listed (README: within a minute).

A fictional 95-minute match at 25 Hz (bench_engine.synth_match: 22 players on the pitch, 14 substitutes
never seen) is written as a CDF folder and streamed into a real ``pacewire serve`` (default config) by a
real ``pacewire replay --speed max`` process, twice:

* ``fulltime_after_last_frame_s``: the meta gives no period ends, and nobody sends an event: the match
  ends by itself once its nominal 45 minutes of the second half are played and no frame came for
  ``reports.period_timeout_s`` (30 s); the report is built then.
* ``fulltime_after_last_frame_ends_s``: the meta gives each period's last frame (``frame_id_end``), so the
  replay sends the ``period_end`` events; the report follows the whistle.

"Last frame": when ``GET /api/matches/{id}/feed`` first says the server holds the match's last frame
(polled every 20 ms while the replay runs); "listed": when ``GET /api/matches/{id}/reports`` first lists
the full-time report (polled every 20 ms). Baseline of the first entry: the configured
``period_timeout_s`` (the part of the wait that is the rule, not the work); ratio = value / baseline.
Quick: a 12-minute match with 5-minute halves, the first entry only.

    python -m tests.bench.bench_match_end [--quick]
"""
from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import httpx  # noqa: E402
import numpy as np  # noqa: E402

from pacewire.config import load_settings  # noqa: E402
from tests.bench.bench_engine import HALF_BREAK_S, N_BENCH, N_SIDE, synth_match  # noqa: E402
from tests.support import cdf_build as cb  # noqa: E402
from tests.support.live_server import LiveServer  # noqa: E402

FPS = 25
MATCH = "m_end_bench"


def write_match(folder: Path, minutes: float, ends: bool) -> int:
    """The match as a CDF folder; returns its last frame id."""
    m = synth_match(minutes)
    ids = [p["id"] for s in ("home", "away") for p in m.roster_sheet["teams"][s]["players"]]
    objs, frame0, t0 = [], 0, 0.0
    meta = cb.meta(match_id=MATCH, fps=FPS)
    for k, xy in enumerate(m.halves):
        n = xy.shape[0]
        objs += cb.frames(xy, ids, N_SIDE + N_BENCH, fps=FPS, match_id=MATCH, period=("first_half", "second_half")[k],
                          t0=t0, frame0=frame0, status=np.ones(n, bool), poss=(np.arange(n) // (20 * FPS)) % 2,
                          ball=xy[:, 5])
        if ends:
            meta["match"]["periods"][k].update(frame_id_start=frame0, frame_id_end=frame0 + n - 1)
        frame0 += n
        t0 += n / FPS + HALF_BREAK_S
    cb.write_folder(folder, meta, m.roster_sheet, objs)
    return frame0 - 1


def measure(minutes: float, ends: bool, config: str | None) -> dict[str, float]:
    with tempfile.TemporaryDirectory(prefix="pacewire-bench-end-") as tmp:
        folder = Path(tmp) / "match"
        last = write_match(folder, minutes, ends)
        srv = LiveServer(Path(tmp) / "data", config_text=config).start()
        try:
            seen: dict[str, float] = {}
            t0 = time.perf_counter()
            proc = subprocess.Popen([sys.executable, "-m", "pacewire.replay", str(folder), "--to",
                                     f"{srv.ws}/ingest/{MATCH}", "--speed", "max"],
                                    stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
            threading.Thread(target=_watch, args=(srv.http, last, seen), daemon=True).start()
            _, err = proc.communicate(timeout=1800)
            if proc.returncode != 0:
                raise RuntimeError(f"the replay failed: {err[-500:]}")
            deadline = time.perf_counter() + 600
            while "listed" not in seen and time.perf_counter() < deadline:
                time.sleep(0.05)
            if "listed" not in seen or "last" not in seen:
                raise RuntimeError("the full-time report was not listed within 10 minutes of the replay's end")
        finally:
            srv.stop()
    return {"after_last_s": seen["listed"] - seen["last"], "replay_s": seen["last"] - t0}


def _watch(http: str, last: int, seen: dict[str, float], every: float = 0.02) -> None:
    """Note when the server first holds frame ``last``, then when the full-time report is first listed."""
    with httpx.Client(timeout=30) as c:
        while "last" not in seen:
            try:
                r = c.get(f"{http}/api/matches/{MATCH}/feed")
                if r.status_code == 200 and r.json()["last_frame_id"] == last:
                    seen["last"] = time.perf_counter()
                    break
            except httpx.HTTPError:
                pass
            time.sleep(every)
        while True:
            reps = c.get(f"{http}/api/matches/{MATCH}/reports").json()["reports"]
            if any(e["kind"] == "full_time" for e in reps):
                seen["listed"] = time.perf_counter()
                return
            time.sleep(every)


def run(quick: bool) -> dict[str, dict]:
    timeout_s = load_settings().reports.period_timeout_s
    minutes, config = (12.0, "[periods]\nfirst_half = 5\nsecond_half = 5\n") if quick else (95.0, None)
    silent = measure(minutes, ends=False, config=config)
    out = {"fulltime_after_last_frame_s": {"value": round(silent["after_last_s"], 2), "unit": "s",
                                           "baseline": timeout_s,
                                           "ratio": round(silent["after_last_s"] / timeout_s, 3)}}
    print(f"bench_match_end: {minutes:g}-min match replayed at max speed in {silent['replay_s']:.1f} s; no event: "
          f"full-time report listed {silent['after_last_s']:.2f} s after the last frame "
          f"(period_timeout_s {timeout_s:g})", file=sys.stderr)
    if not quick:
        whistle = measure(minutes, ends=True, config=config)
        out["fulltime_after_last_frame_ends_s"] = {"value": round(whistle["after_last_s"], 2), "unit": "s",
                                                   "baseline": None, "ratio": None}
        print(f"bench_match_end: with the meta's period ends: listed {whistle['after_last_s']:.2f} s after the "
              "last frame", file=sys.stderr)
    return out


if __name__ == "__main__":
    import json

    print(json.dumps(run("--quick" in sys.argv), indent=2))
