"""Delta sizes on the wire: the synthetic match (22 players on the pitch) at ``every=1``, ``view=all``.

The deltas are the broadcaster's own (snapshot, the view's body, the changed leaves, the
envelope, the JSON text), one per second of match clock as a live match sends them at
``every=1``; a replay at 20x with ``every=1`` sends one per 20 s of match clock.

Entries (bytes of the message text):
* ``delta_median_bytes``: median delta, figures at their wire precision
  (pacewire.engine.precision.WIRE); baseline: the same deltas with the digits every
  figure carried before (``FINE``), measured in the same run.
* ``delta_p90_bytes``: the 90th percentile, same baseline.
* ``delta_median_bytes_20x``: one delta per 20 s of match clock (a 20x replay), same baseline.
"""
from __future__ import annotations

import dataclasses
import sys
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from pacewire.analyze import new_match
from pacewire.config import load_settings
from pacewire.engine.precision import FINE, WIRE, Precision
from pacewire.engine.snapshot import build_snapshot
from pacewire.replay.synth import write_match
from pacewire.wire.messages import changed, dumps, envelope
from pacewire.wire.recording import open_recording
from pacewire.wire.view import View


def delta_sizes(folder: Path, precision: Precision, stride_s: int, baselines: Any = None) -> list[int]:
    """Bytes of each delta a view=all stream sends, one per ``stride_s`` of match clock (with the
    players' ``baseline`` when ``baselines`` are given)."""
    settings = load_settings()
    rec = open_recording(folder)
    state, decoder = new_match(rec.meta, rec.sheet, settings)
    state.params = dataclasses.replace(state.params, precision=precision)
    view = View("all")
    prev = None
    sizes = []
    for seq, (first, lines) in enumerate(rec.batches(state.fps * stride_s)):
        state.ingest(decoder.decode_lines(lines, first_line=first))
        snap = build_snapshot(state, baselines=baselines)
        body = view.body(snap)
        if prev is not None:
            d = changed(prev, body) or {}
            sizes.append(len(dumps(envelope("delta", snap["match_id"], seq, snap["match_time_s"], snap["period"],
                                            **d))))
        prev = body
    return sizes


def _entry(value: float, baseline: float) -> dict:
    return {"value": round(value), "unit": "bytes", "baseline": round(baseline), "ratio": round(value / baseline, 3)}


def run(quick: bool) -> dict[str, dict]:
    minutes = 15.0 if quick else 95.0
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "match"
        write_match(folder, minutes=minutes, seed=2026)
        now, before = delta_sizes(folder, WIRE, 1), delta_sizes(folder, FINE, 1)
        now20, before20 = delta_sizes(folder, WIRE, 20), delta_sizes(folder, FINE, 20)
    return {
        "delta_median_bytes": _entry(float(np.median(now)), float(np.median(before))),
        "delta_p90_bytes": _entry(float(np.percentile(now, 90)), float(np.percentile(before, 90))),
        "delta_median_bytes_20x": _entry(float(np.median(now20)), float(np.median(before20))),
    }


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(k, v)
