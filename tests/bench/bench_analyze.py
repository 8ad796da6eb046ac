"""`pacewire analyze` end to end (read + decode + engine) over the synthetic match, and its generation.

Entries:
* ``synth_full_match_s``: generating the 95-minute demo match (baseline: writing
  the same number of JSON lines with orjson alone, measured in the same run).
* ``analyze_x_realtime``: match seconds analysed per wall second (goal >= 1000);
  baseline ``read_decode_x_realtime``: reading and JSON-parsing the same file
  alone, the floor any analysis pays.
"""
from __future__ import annotations

import gzip
import sys
import tempfile
import time
from pathlib import Path

import orjson

from pacewire.analyze import analyze_folder
from pacewire.replay.synth import write_match


def _match_seconds(folder: Path) -> float:
    snap = analyze_folder(folder).snapshot()
    return max(p["minutes"] for p in snap["players"].values()) * 60.0


def run(quick: bool) -> dict[str, dict]:
    minutes = 15.0 if quick else 95.0
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "match"
        t0 = time.perf_counter()
        write_match(folder, minutes=minutes, seed=11)
        synth_s = time.perf_counter() - t0
        path = folder / "tracking.jsonl.gz"
        raw = gzip.decompress(path.read_bytes())
        lines = raw.splitlines()
        t0 = time.perf_counter()
        objs = [orjson.loads(line) for line in lines]
        parse_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        body = b"".join(orjson.dumps(o) + b"\n" for o in objs)
        gzip.compress(body, 6)
        write_s = time.perf_counter() - t0
        best = float("inf")
        for _ in range(1 if not quick else 2):
            t0 = time.perf_counter()
            analyze_folder(folder).snapshot()
            best = min(best, time.perf_counter() - t0)
        match_s = _match_seconds(folder)
    x_rt = match_s / best
    floor = match_s / parse_s
    return {
        "synth_full_match_s" if not quick else "synth_15min_s": {
            "value": round(synth_s, 2), "unit": "s", "baseline": round(write_s, 2),
            "ratio": round(synth_s / write_s, 2)},
        "analyze_x_realtime": {"value": round(x_rt, 1), "unit": "x real time", "baseline": round(floor, 1),
                               "ratio": round(x_rt / floor, 3)},
        "analyze_s": {"value": round(best, 2), "unit": "s", "baseline": round(parse_s, 2),
                      "ratio": round(best / parse_s, 2)},
    }


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(k, v)
