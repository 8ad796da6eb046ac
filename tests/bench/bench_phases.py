"""What the event stream costs the engine and its snapshots.

The fictional synthetic match (replay/synth/) with its CDF event stream, decoded once; then the engine
fed its frames in 1 s blocks with a snapshot after each (the live shape: one delta a second), with the
events (added as they fall due) and without them (the baseline, same run: the phases then come from the
frames' ball fields). ``events_x_snapshots``: the ratio of the two; ``events_per_s``: the decoder's
throughput on the match's event lines.

    python -m tests.bench.bench_phases [--quick]
"""
from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one-core figures (set before numpy loads)

from pacewire.analyze import new_match  # noqa: E402
from pacewire.config import load_settings  # noqa: E402
from pacewire.engine.snapshot import build_snapshot  # noqa: E402
from pacewire.replay import synth  # noqa: E402
from pacewire.wire.events import EventDecoder  # noqa: E402
from pacewire.wire.recording import open_recording  # noqa: E402


def _run(folder: Path, with_events: bool) -> float:
    """Seconds to feed the match in 1 s blocks with a snapshot after each block."""
    rec = open_recording(folder)
    state, dec = new_match(rec.meta, rec.sheet, load_settings())
    events = EventDecoder(state.roster).decode_lines(rec.event_lines()) if with_events else None
    pending = sorted(events.events, key=lambda e: e.t) if events is not None else []
    lines = list(rec.lines())
    fps = state.fps
    t0 = time.perf_counter()
    k = 0
    for i in range(0, len(lines), fps):
        res = dec.decode_lines(lines[i:i + fps])
        state.ingest(res)
        if pending and state.last_t is not None:
            due = [e for e in pending[k:] if e.t <= state.last_t]
            if due:
                events.events = due
                state.ingest_events(events)
                k += len(due)
        build_snapshot(state)
    state.finish()
    build_snapshot(state)
    return time.perf_counter() - t0


def run(quick: bool) -> dict[str, dict]:
    minutes = 10 if quick else 45
    with tempfile.TemporaryDirectory() as tmp:
        folder = synth.write_match(Path(tmp) / "m", minutes=minutes, fps=25, seed=3, compress=False)
        base = min(_run(folder, False) for _ in range(2))
        with_ev = min(_run(folder, True) for _ in range(2))
        rec = open_recording(folder)
        lines = list(rec.event_lines())
        t0 = time.perf_counter()
        EventDecoder(new_match(rec.meta, rec.sheet, load_settings())[0].roster).decode_lines(lines)
        dec_s = time.perf_counter() - t0
    return {
        "events_x_snapshots": {"value": round(with_ev / base, 3), "unit": "x", "baseline": round(base, 3),
                               "ratio": round(with_ev / base, 3)},
        "events_per_s": {"value": round(len(lines) / dec_s), "unit": "events/s", "baseline": None, "ratio": None},
    }


if __name__ == "__main__":
    for key, e in run("--quick" in sys.argv).items():
        print(f"{key}: {e['value']} {e['unit']} (baseline {e['baseline']})")
