"""``pacewire synth`` (also ``python -m pacewire.replay.synth``): the command line."""

from __future__ import annotations

import argparse
import pathlib
import time

import orjson

from pacewire.replay.synth.folder import write_match, write_twin
from pacewire.replay.synth.match import simulate_match
from pacewire.replay.synth.stats import movement_stats


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="pacewire synth",
                                description="Write the fictional synthetic demo match as a CDF folder.")
    p.add_argument("--out", required=True, type=pathlib.Path, help="output folder")
    p.add_argument("--minutes", type=float, default=95.0, help="playing time in minutes (95 = 45+2 and 45+4)")
    p.add_argument("--fps", type=int, default=25, help="frames per second")
    p.add_argument("--seed", type=int, default=0, help="random seed (same seed, same bytes)")
    p.add_argument("--no-faults", action="store_true", help="inject no feed faults at all")
    p.add_argument("--no-outage", action="store_true", help="no 20 s feed outage")
    p.add_argument("--no-dropouts", action="store_true", help="no single-player dropouts")
    p.add_argument("--no-duplicates", action="store_true", help="no duplicated frames")
    p.add_argument("--no-out-of-order", action="store_true", help="no swapped adjacent frames")
    p.add_argument("--no-jumps", action="store_true", help="no single-frame position jumps")
    p.add_argument("--slides", action="store_true",
                   help="add re-acquisition slides and broadcast jitter (tracking artefacts, off by default)")
    p.add_argument("--camera-gaps", action="store_true",
                   help="add camera-view gaps of 2-6 s ending in a slide at re-entry, and broadcast jitter")
    p.add_argument("--gnss-errors", action="store_true",
                   help="add GNSS jitter, a wandering position error and multipath excursions")
    p.add_argument("--no-compress", action="store_true", help="write tracking.jsonl instead of .jsonl.gz")
    p.add_argument("--no-events", action="store_true", help="write no event.jsonl (the CDF event stream)")
    p.add_argument("--no-event-gap", action="store_true", help="no 90 s hole in the event stream")
    p.add_argument("--no-event-lag", action="store_true", help="no 3 minutes of events arriving 20 s late")
    p.add_argument("--no-corrections", action="store_true", help="no events sent wrong, then corrected by id")
    p.add_argument("--wearables", action="store_true",
                   help="the one-team GNSS + heart-rate variant (docs/wearables.md): home players only with "
                        "lat/long, no ball, hr.jsonl")
    p.add_argument("--twin", type=pathlib.Path, metavar="FOLDER",
                   help="also write the match's post-processed twin there: the same movement with no feed fault "
                        "and no artefact, its meta saying post_match (for pacewire history compare)")
    p.add_argument("--stats", action="store_true", help="also print per-role movement statistics")
    return p


def main(argv: list[str] | None = None) -> int:
    """``pacewire synth``: write the demo match; returns the exit code."""
    args = build_parser().parse_args(argv)
    t0 = time.perf_counter()
    folder = write_match(args.out, minutes=args.minutes, fps=args.fps, seed=args.seed, faults=not args.no_faults,
                         compress=not args.no_compress, outage=not args.no_outage, dropouts=not args.no_dropouts,
                         duplicates=not args.no_duplicates, out_of_order=not args.no_out_of_order,
                         jumps=not args.no_jumps, wearables=args.wearables, slides=args.slides,
                         camera_gaps=args.camera_gaps, gnss=args.gnss_errors, events=not args.no_events,
                         event_gap=not args.no_event_gap, event_lag=not args.no_event_lag,
                         corrections=not args.no_corrections)
    n_faults = len(orjson.loads((folder / "faults.json").read_bytes())["faults"])
    kind = "the wearables variant in " if args.wearables else ""
    print(f"wrote {kind}{folder} ({args.minutes:g} min at {args.fps} fps, seed {args.seed}, {n_faults} faults) "
          f"in {time.perf_counter() - t0:.1f} s")
    if args.twin is not None:
        twin = write_twin(args.twin, minutes=args.minutes, fps=args.fps, seed=args.seed, compress=not args.no_compress)
        print(f"wrote the post-processed twin {twin} (no feed faults, no artefacts, post_match)")
    if args.stats:
        stats = movement_stats(simulate_match(args.minutes, args.fps, args.seed))
        for role, s in sorted(stats.items()):
            print(f"{role:3s} km/90 {s['km_per90']:6.2f}  sprints/90 {s['sprints_per90']:5.1f}  "
                  f"vmax {s['max_speed_ms']:5.2f} m/s  |a|max {s['max_accel_ms2']:4.2f} m/s2  n={int(s['players'])}")
    return 0
