"""Restart with a season on disk: time to /healthz, time to the live match's snapshot, RSS, with 5 and 40
finished matches beside one unfinished match.

Fictional synthetic matches (``pacewire.replay.synth``, no faults, 25 Hz): one finished match of
``FIN_MIN`` minutes is replayed at max speed into a real ``pacewire serve`` and archived there (its
``final.json``); an unfinished match is replayed 15 s into its second half. The data folder of each run
holds N copies of the finished match (renamed) and the unfinished one. A real server is started on it:

* ``restart_healthz_s_N``: from starting the process to ``/healthz`` answering 200 (includes the
  interpreter's start);
* ``restart_live_snapshot_s_N``: to the unfinished match's snapshot answering (it is rebuilt first);
* ``restart_settled_s_N``: to every rebuild being done (``/healthz`` ``recovering`` 0);
* ``restart_rss_mb_N``: the server's RSS once every rebuild is done (``/healthz`` ``recovering`` 0).

Baseline, measured in the same run on the same folders with the archive files removed: every finished
match is then rebuilt at start (from its recording, after its ``checkpoint.npz`` when the live run wrote
one) and kept in memory, as every restart did before
finished matches were archived (``[archive] grace_s`` set to an hour so none leaves memory while
measured). ratio = value / baseline. Quick: 1-minute finished matches instead of 3.

    python -m tests.bench.bench_restart [--quick]
"""
from __future__ import annotations

import asyncio
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import httpx  # noqa: E402

from pacewire.replay.player import replay  # noqa: E402
from pacewire.replay.synth import write_match  # noqa: E402
from tests.support.live_server import LiveServer  # noqa: E402

SRC, LIVE = "f_src", "m_live"
PREP = "[archive]\ngrace_s = 0.5\ncheck_s = 0.2\n"
HOLD = "[archive]\ngrace_s = 3600.0\n"  # nothing leaves memory while measured
COUNTS = (5, 40)


def _wait(check, limit_s: float = 600.0) -> None:
    deadline = time.monotonic() + limit_s
    while not check():
        if time.monotonic() > deadline:
            raise RuntimeError("benchmark step did not finish")
        time.sleep(0.05)


def _entry(srv: LiveServer, mid: str) -> dict | None:
    rows = httpx.get(f"{srv.http}/api/matches", timeout=60).json()["matches"]
    return next((r for r in rows if r["match_id"] == mid), None)


def prepare(base: Path, fin_min: float) -> tuple[Path, Path]:
    """An archived finished match folder and an unfinished match folder, both written by a real server."""
    finished = write_match(base / "synth_fin", minutes=fin_min, fps=25, seed=5, faults=False)
    live = write_match(base / "synth_live", minutes=2, fps=25, seed=6, faults=False)
    srv = LiveServer(base / "prep", config_text=PREP).start()
    try:
        asyncio.run(replay(finished, f"{srv.ws}/ingest/{SRC}", None))
        _wait(lambda: bool((_entry(srv, SRC) or {}).get("archived")))
        asyncio.run(replay(live, f"{srv.ws}/ingest/{LIVE}", None, until_s=2715.0))
        time.sleep(1.5)  # the recorder's fsync interval
    finally:
        srv.stop()
    return base / "prep" / "matches" / SRC, base / "prep" / "matches" / LIVE


def season(data: Path, src: Path, live: Path, n: int, archived: bool) -> None:
    """``n`` copies of the finished match (ids of the same length, so recorded sizes hold) and the live one."""
    shutil.copytree(live, data / "matches" / LIVE)
    for k in range(n):
        mid = f"f{k:04d}"
        dst = data / "matches" / mid
        shutil.copytree(src, dst)
        for path in dst.rglob("*"):
            if path.suffix in (".json", ".jsonl", ".csv", ".html"):
                path.write_bytes(path.read_bytes().replace(SRC.encode(), mid.encode()))
        if not archived:
            (dst / "final.json").unlink()
            (dst / "export.csv").unlink()


def rss_mb(pid: int) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def restart(data: Path) -> dict[str, float]:
    srv = LiveServer(data, config_text=HOLD)
    t0 = time.perf_counter()
    srv.start(timeout=900.0)
    healthz = time.perf_counter() - t0
    try:
        r = httpx.get(f"{srv.http}/api/matches/{LIVE}/snapshot", timeout=900)
        r.raise_for_status()
        snapshot = time.perf_counter() - t0
        _wait(lambda: httpx.get(f"{srv.http}/healthz", timeout=60).json()["recovering"] == 0)
        settled = time.perf_counter() - t0
        assert srv.proc is not None
        return {"healthz": healthz, "snapshot": snapshot, "settled": settled, "rss": rss_mb(srv.proc.pid)}
    finally:
        srv.stop()


def measure(quick: bool) -> dict[tuple[int, bool], dict[str, float]]:
    out = {}
    with tempfile.TemporaryDirectory(prefix="pw-restart-") as tmp:
        base = Path(tmp)
        src, live = prepare(base, 1.0 if quick else 3.0)
        for n in COUNTS:
            for archived in (True, False):
                data = base / f"d{n}{'a' if archived else 'r'}"
                season(data, src, live, n, archived)
                out[(n, archived)] = restart(data)
    return out


def run(quick: bool) -> dict[str, dict]:
    got = measure(quick)
    out = {}
    names = {"healthz": ("restart_healthz_s", "s"), "snapshot": ("restart_live_snapshot_s", "s"),
             "settled": ("restart_settled_s", "s"), "rss": ("restart_rss_mb", "MB")}
    for n in COUNTS:
        for key, (name, unit) in names.items():
            v, b = got[(n, True)][key], got[(n, False)][key]
            out[f"{name}_{n}"] = {"value": round(v, 2), "unit": unit, "baseline": round(b, 2),
                                  "ratio": round(v / b, 3) if b else None}
        print(f"bench_restart: {n} finished matches: archived {got[(n, True)]}, rebuilt {got[(n, False)]}",
              file=sys.stderr)
    return out


if __name__ == "__main__":
    import json

    print(json.dumps(run("--quick" in sys.argv), indent=2))
