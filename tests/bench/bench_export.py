"""Figures at an earlier match time (``export.csv?at=``) on the synthetic match, recorded as the live
service records it (plain ``tracking.jsonl``).

Entries:
* ``export_at_ms``: median time of a figures-at-a-time question once the match's checkpoints are
  built (the live service builds them at each report), over times spread across both halves;
  baseline: the same questions answered by reading the recording from the start, as before.
* ``export_index_build_s``: building the checkpoints over the whole match; baseline:
  ``pacewire analyze`` over the same recording.
"""
from __future__ import annotations

import gzip
import statistics
import sys
import tempfile
import time
from pathlib import Path

from pacewire.analyze import FiguresIndex, analyze_folder
from pacewire.config import load_settings
from pacewire.replay.synth import write_match


def _times(minutes: float) -> list[tuple[float, str]]:
    """Match clock and period of the questions: spread over both halves, stoppage time included."""
    half = minutes / 2
    first = [(f * half * 60.0, "first_half") for f in (0.2, 0.5, 0.8, 0.99)]
    second = [(45 * 60.0 + f * half * 60.0, "second_half") for f in (0.1, 0.4, 0.7, 0.95)]
    return first + second


def _median_ms(index: FiguresIndex, times: list[tuple[float, str]]) -> float:
    spent = []
    for at, period in times:
        t0 = time.perf_counter()
        index.figures(at, [], period)
        spent.append((time.perf_counter() - t0) * 1000.0)
    return statistics.median(spent)


def run(quick: bool) -> dict[str, dict]:
    minutes = 30.0 if quick else 95.0
    settings = load_settings()
    with tempfile.TemporaryDirectory() as tmp:
        folder = write_match(Path(tmp) / "match", minutes=minutes, seed=2026)
        gz = folder / "tracking.jsonl.gz"
        (folder / "tracking.jsonl").write_bytes(gzip.decompress(gz.read_bytes()))  # as the recorder writes it
        gz.unlink()
        t0 = time.perf_counter()
        analyze_folder(folder)
        analyze_s = time.perf_counter() - t0
        index = FiguresIndex(folder, settings)
        t0 = time.perf_counter()
        index.extend()
        build_s = time.perf_counter() - t0
        times = _times(minutes)
        warm = _median_ms(index, times)
        cold = _median_ms(FiguresIndex(folder, settings, every_s=1e9), times)  # no checkpoint: from the start
    return {
        "export_at_ms": {"value": round(warm, 1), "unit": "ms", "baseline": round(cold, 1),
                         "ratio": round(warm / cold, 3)},
        "export_index_build_s": {"value": round(build_s, 2), "unit": "s", "baseline": round(analyze_s, 2),
                                 "ratio": round(build_s / analyze_s, 2)},
    }


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(k, v)
