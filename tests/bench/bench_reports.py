"""Time from the full-time whistle to the full-time report being listed (pacewire's target: <= 10 s).

A fictional 95-minute match at 25 Hz (bench_engine.synth_match: 22 players on
the pitch, 14 substitutes never seen; ball in play, possession alternating
every 20 s) goes to a real ``pacewire serve`` in HTTP batches as fast as the
server takes them: the first half, then the second (its first frames end the
first half: the half-time report is built then, and waited for so that it
does not overlap the measurement). The whistle is a ``period_end`` event for
the second half; ``report_ready_s`` is the time from sending it to
``GET /api/matches/{id}/reports`` first listing the full-time report (polled
every 20 ms): snapshot, block sums, charts, HTML, CSV, JSON, written to disk.

Baseline, same run: one ``build_snapshot(state)`` on that match: the server's
recording run through the engine in this process (its snapshot cache cleared
before each call; best of 3). ``ratio`` = report_ready_s / snapshot_s.
``report_build_s`` is the builder's own time as the report's index says.

    python -m tests.bench.bench_reports [--quick]
"""
from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import httpx  # noqa: E402
import numpy as np  # noqa: E402

from tests.bench.bench_engine import HALF_BREAK_S, N_BENCH, N_SIDE, synth_match  # noqa: E402
from tests.support import cdf_build as cb  # noqa: E402
from tests.support.live_server import LiveServer  # noqa: E402

FPS = 25
MATCH = "m_report_bench"
BATCH = 5000  # frames per POST
CONFIG = "[server]\nmax_message_bytes = 67108864\nmax_batch_frames = 20000\n"


def halves(minutes: float) -> list[list[bytes]]:
    """CDF frame lines of each half (JSON, as a provider sends them)."""
    m = synth_match(minutes)
    ids = [p["id"] for s in ("home", "away") for p in m.roster_sheet["teams"][s]["players"]]
    out, frame0, t0 = [], 0, 0.0
    for k, xy in enumerate(m.halves):
        n = xy.shape[0]
        status = np.ones(n, bool)
        poss = (np.arange(n) // (20 * FPS)) % 2
        objs = cb.frames(xy, ids, N_SIDE + N_BENCH, fps=FPS, match_id=MATCH, period=("first_half", "second_half")[k],
                         t0=t0, frame0=frame0, status=status, poss=poss, ball=xy[:, 5])
        out.append(cb.lines(objs))
        frame0 += n
        t0 += n / FPS + HALF_BREAK_S
    return out


def setup_body() -> dict:
    bench = tuple([f"h{i + 1}" for i in range(N_SIDE, N_SIDE + N_BENCH)] +
                  [f"a{i + 1}" for i in range(N_SIDE, N_SIDE + N_BENCH)])
    return {"meta": cb.meta(match_id=MATCH, fps=FPS),
            "sheet": cb.sheet(N_SIDE + N_BENCH, N_SIDE + N_BENCH, gk=("h1", "a1"), bench=bench)}


def wait_listed(http: str, kind: str, timeout: float = 300.0, every: float = 0.02) -> float:
    """perf_counter when ``kind`` is first listed."""
    deadline = time.perf_counter() + timeout
    with httpx.Client(timeout=10) as c:
        while time.perf_counter() < deadline:
            rep = c.get(f"{http}/api/matches/{MATCH}/reports").json()["reports"]
            if any(e["kind"] == kind for e in rep):
                return time.perf_counter()
            time.sleep(every)
    raise RuntimeError(f"the {kind} report was not listed within {timeout} s")


def snapshot_s(folder: Path, repeats: int = 3) -> float:
    from pacewire.analyze import analyze_folder
    from pacewire.engine.snapshot import build_snapshot

    state = analyze_folder(folder).state
    best = float("inf")
    for _ in range(repeats):
        state.__dict__.pop("_snapshot_cache", None)
        t = time.perf_counter()
        build_snapshot(state)
        best = min(best, time.perf_counter() - t)
    return best


def measure(minutes: float) -> dict[str, float]:
    lines = halves(minutes)
    with tempfile.TemporaryDirectory(prefix="pacewire-bench-rep-") as tmp:
        srv = LiveServer(Path(tmp) / "data", config_text=CONFIG).start()
        try:
            with httpx.Client(timeout=300) as c:
                assert c.put(f"{srv.http}/api/matches/{MATCH}", json=setup_body()).status_code == 201
                t_feed = time.perf_counter()
                for half in lines:
                    for i in range(0, len(half), BATCH):
                        r = c.post(f"{srv.http}/api/matches/{MATCH}/frames", content=b"\n".join(half[i:i + BATCH]))
                        assert r.status_code == 200 and r.json()["accepted"] == len(half[i:i + BATCH]), r.text[:300]
                feed_s = time.perf_counter() - t_feed
                wait_listed(srv.http, "half_time")
                time.sleep(0.5)  # let the engine finish the last batch (posts return once recorded)
                last = int(sum(len(h) for h in lines) - 1)
                t_whistle = time.perf_counter()
                r = c.post(f"{srv.http}/api/matches/{MATCH}/events",
                           json={"type": "period_end", "period": "second_half", "frame_id": last})
                assert r.status_code == 200, r.text
                t_listed = wait_listed(srv.http, "full_time")
                entry = next(e for e in c.get(f"{srv.http}/api/matches/{MATCH}/reports").json()["reports"]
                             if e["kind"] == "full_time")
                snapshot = c.get(f"{srv.http}/api/matches/{MATCH}/reports/full_time/snapshot.json").json()
                players = len(snapshot["players"])
        finally:
            srv.stop()
        snap = snapshot_s(srv.data / "matches" / MATCH)
    return {"report_ready_s": t_listed - t_whistle, "report_build_s": entry["build_s"], "snapshot_s": snap,
            "feed_s": feed_s, "players": players, "frames": sum(len(h) for h in lines)}


def run(quick: bool) -> dict[str, dict]:
    minutes = 10.0 if quick else 95.0  # quick: half the feed and the offline pass of the baseline
    m = measure(minutes)
    print(f"bench_reports: {minutes:g}-min match, {m['frames']} frames fed in {m['feed_s']:.1f} s; full-time report "
          f"listed {m['report_ready_s']:.2f} s after the whistle (builder {m['report_build_s']:.2f} s); one snapshot "
          f"{m['snapshot_s'] * 1000:.1f} ms", file=sys.stderr)
    return {
        "report_ready_s": {"value": round(m["report_ready_s"], 3), "unit": "s", "baseline": round(m["snapshot_s"], 5),
                           "ratio": round(m["report_ready_s"] / m["snapshot_s"], 1)},
        "report_build_s": {"value": m["report_build_s"], "unit": "s", "baseline": None, "ratio": None},
    }


if __name__ == "__main__":
    import json

    print(json.dumps(run("--quick" in sys.argv), indent=2))
