"""The synthetic match with each tracking-artefact model against the same match clean.

Writes the match (replay/synth/) clean and with one artefact model at a time, runs
``pacewire analyze``'s engine over each, and compares every outfield player's top
speed, distance and sprint distance with the clean run. The tests use it; run as a
module it prints the table (the figures reported for the artefact rules):

    .venv/bin/python -m tests.support.artefact_runs [--minutes 12] [--fps 10] [--seed 2026]
"""
from __future__ import annotations

import argparse
import pathlib
import tempfile
from dataclasses import dataclass
from typing import Any

import numpy as np

from pacewire.analyze import analyze_folder
from pacewire.config import load_settings
from pacewire.replay import synth

# fault model -> the write_match switch that turns it on, and the feed profile it calls for
MODELS: dict[str, tuple[str, str]] = {
    "slides": ("slides", "broadcast"),
    "camera_gaps": ("camera_gaps", "broadcast"),
    "gnss": ("gnss", "wearable"),
}
FIGURES = ("max_speed_ms", "distance_m", "sprint_m")
_NO_FEED_FAULTS = {"outage": False, "dropouts": False, "duplicates": False, "out_of_order": False, "jumps": False}


@dataclass
class Run:
    """Per outfield player (id -> figure -> value) and the snapshot's health."""

    players: dict[str, dict[str, float]]
    health: dict[str, Any]


def write(folder: pathlib.Path, model: str | None, minutes: float, fps: int, seed: int) -> pathlib.Path:
    """The match, clean (``model`` None) or with one artefact model and no other fault."""
    switches = {MODELS[model][0]: True} if model else {}
    return synth.write_match(folder, minutes=minutes, fps=fps, seed=seed, faults=model is not None,
                             compress=False, **_NO_FEED_FAULTS, **switches)


def analyse(folder: pathlib.Path, profile: str | None = None) -> Run:
    """Outfield players' figures (players who played) under a feed profile (None: the recording's
    own, else the config's)."""
    over = {"kinematics": {"feed_profile": profile}} if profile else None
    snap = analyze_folder(folder, load_settings(overrides=over)).snapshot()
    players = {pid: {k: float(p[k]) for k in (*FIGURES, "minutes", "coverage")}
               for pid, p in snap["players"].items() if not p["is_goalkeeper"] and p["minutes"]}
    return Run(players, snap["health"])


def compare(clean: Run, faulted: Run) -> dict[str, np.ndarray]:
    """Per outfield player (clean run's order): top-speed excess (m/s), distance ratio - 1,
    sprint-distance difference (m), and the faulted top speed and the clean sprint distance."""
    ids = sorted(clean.players)
    c = {k: np.array([clean.players[i][k] for i in ids]) for k in FIGURES}
    f = {k: np.array([faulted.players[i][k] for i in ids]) for k in FIGURES}
    return {"top_speed_ms": f["max_speed_ms"], "top_speed_excess_ms": f["max_speed_ms"] - c["max_speed_ms"],
            "distance_rel": f["distance_m"] / c["distance_m"] - 1, "sprint_diff_m": f["sprint_m"] - c["sprint_m"],
            "clean_sprint_m": c["sprint_m"]}


def summary(d: dict[str, np.ndarray]) -> str:
    """Medians and worst cases of one comparison, as a line of the report."""
    ex, dr, sd = d["top_speed_excess_ms"], d["distance_rel"], d["sprint_diff_m"]
    worst_sd = sd[np.argmax(np.abs(sd))]
    return (f"top speed {np.median(d['top_speed_ms']):5.2f} median, {d['top_speed_ms'].max():5.2f} max m/s; "
            f"vs clean {np.median(ex):+5.2f} median, {ex.max():+5.2f} worst m/s | distance "
            f"{100 * np.median(dr):+5.1f}% median, {100 * dr[np.argmax(np.abs(dr))]:+5.1f}% worst | sprint "
            f"{np.median(sd):+6.1f} m median, {worst_sd:+6.1f} m worst")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tests.support.artefact_runs", description=__doc__)
    ap.add_argument("--minutes", type=float, default=12.0)
    ap.add_argument("--fps", type=int, default=10)
    ap.add_argument("--seed", type=int, default=2026)
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        root = pathlib.Path(tmp)
        clean_folder = write(root / "clean", None, args.minutes, args.fps, args.seed)
        cleans: dict[str, Run] = {}
        print(f"{args.minutes:g}-minute synthetic match at {args.fps} fps, seed {args.seed}; outfield players")
        for model, (_, profile) in MODELS.items():
            if profile not in cleans:
                cleans[profile] = analyse(clean_folder, profile)  # the clean recording names no profile
            faulted = analyse(write(root / model, model, args.minutes, args.fps, args.seed))  # its own names it
            d = compare(cleans[profile], faulted)
            art = {"samples": faulted.health.get("artefact_samples")}
            print(f"{model:12} ({profile}, {len(d['distance_rel'])} players): {summary(d)}; "
                  f"artefact samples {art.get('samples', '-')}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
