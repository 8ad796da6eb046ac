"""What each player's baseline costs the deltas: the synthetic match at ``every=1``, ``view=all``, with
every player's bands (three earlier synthetic matches in a history) against the same deltas without.

Entry (bytes of the message text): ``baseline_delta_median_bytes``: the median delta with the
baselines; baseline: without them, measured in the same run.
"""
from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np

from pacewire.cli import main as cli
from pacewire.engine.precision import WIRE
from pacewire.replay.synth import write_match
from pacewire.store import history
from pacewire.wire.recording import open_recording
from tests.bench.bench_deltas import delta_sizes


def run(quick: bool) -> dict[str, dict]:
    minutes = 20.0 if quick else 95.0
    with tempfile.TemporaryDirectory() as tmp:
        base = Path(tmp)
        cfg = base / "club.toml"
        cfg.write_text(f"[history]\nmin_minutes = {minutes * 0.4}\n")
        for seed in (1, 2, 3):
            past = write_match(base / f"past{seed}", minutes=minutes, seed=seed)
            cli(["history", "import", str(past), "--data", str(base), "--config", str(cfg), "--as", f"past{seed}",
                 "--quiet"])
        folder = write_match(base / "match", minutes=minutes, seed=4)
        sheet = open_recording(folder).sheet
        ids = [p["id"] for side in ("home", "away") for p in sheet["teams"][side]["players"]]
        bands = history.player_baselines(base / "history.sqlite", ids, 5, minutes * 0.4, 3, 1.5)
        with_b, without = delta_sizes(folder, WIRE, 1, bands), delta_sizes(folder, WIRE, 1)
    value, baseline = float(np.median(with_b)), float(np.median(without))
    return {"baseline_delta_median_bytes": {"value": round(value), "unit": "bytes", "baseline": round(baseline),
                                            "ratio": round(value / baseline, 3)}}


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(k, v)
