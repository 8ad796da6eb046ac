"""The synthetic match with each tracking-artefact model against the same match clean.

Writes the match (replay/synth/) clean and with one artefact model at a time, runs
``pacewire analyze``'s engine over each, and compares every outfield player's top
speed, distance, high-speed running and sprint distance with the clean run. The tests use it; run as a
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
import orjson

from pacewire.analyze import analyze_folder
from pacewire.config import load_settings
from pacewire.replay import synth

# fault model -> the write_match switch that turns it on, and the feed profile it calls for
MODELS: dict[str, tuple[str, str]] = {
    "slides": ("slides", "broadcast"),
    "camera_gaps": ("camera_gaps", "broadcast"),
    "gnss": ("gnss", "wearable"),
}
FIGURES = ("max_speed_ms", "distance_m", "hsr_m", "sprint_m")
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


def positions(folder: pathlib.Path) -> tuple[list[str], list[np.ndarray]]:
    """The recording's player ids and, per period, positions (frames, players, 2), NaN where not seen
    (frames in frame-id order; the synthetic match has no frame missing here)."""
    periods: dict[str, dict[int, dict[str, tuple[float, float]]]] = {}
    for line in (folder / "tracking.jsonl").read_bytes().splitlines():
        f = orjson.loads(line)
        rows = periods.setdefault(f["period"], {})
        rows[f["frame_id"]] = {p["id"]: (p["x"], p["y"]) for side in ("home", "away")
                               for p in f["teams"][side]["players"]}
    ids = sorted({pid for rows in periods.values() for row in rows.values() for pid in row})
    out = []
    for rows in periods.values():
        xy = np.full((len(rows), len(ids), 2), np.nan)
        for k, fid in enumerate(sorted(rows)):
            for j, pid in enumerate(ids):
                if pid in rows[fid]:
                    xy[k, j] = rows[fid][pid]
        out.append(xy)
    return ids, out


def floodlight_figures(folder: pathlib.Path, fps: int, players: list[str], hold_s: float) -> dict[str, dict]:
    """floodlight 1.2.0 over the same recording: Butterworth low-pass (order 3, 1 Hz) on the positions, then
    its distance and central-difference velocity; top speed as its one-sample peak and as the highest speed
    held ``hold_s``; high-speed running where its speed is 5.5 m/s up to 7 m/s (Bradley et al. 2009), sprint
    distance from 7 m/s (Di Salvo et al. 2009), the bands of config/default.toml [speed]."""
    from floodlight import XY
    from floodlight.models.kinematics import DistanceModel, VelocityModel
    from floodlight.transforms.filter import butterworth_lowpass

    from pacewire.engine.topspeed import rolling_min

    ids, periods = positions(folder)
    hold = max(int(round(hold_s * fps)), 1)
    band = load_settings().speed
    out = {pid: {"distance_m": 0.0, "hsr_m": 0.0, "sprint_m": 0.0, "max_speed_ms": 0.0, "held_speed_ms": 0.0}
           for pid in players}
    for xy in periods:
        fl = butterworth_lowpass(XY(xy=xy.reshape(len(xy), -1), framerate=fps), order=3, Wn=1)
        dm, vm = DistanceModel(), VelocityModel()
        dm.fit(fl, difference="central")
        vm.fit(fl, difference="central")
        step, speed = dm.distance_covered().property, vm.velocity().property
        for j, pid in enumerate(ids):
            if pid not in out:
                continue
            v = np.nan_to_num(speed[:, j])
            row = out[pid]
            row["distance_m"] += float(np.nansum(step[:, j]))
            row["hsr_m"] += float(np.nansum(np.where((v >= band.hsr_ms) & (v < band.sprint_ms), step[:, j], 0.0)))
            row["sprint_m"] += float(np.nansum(np.where(v >= band.sprint_ms, step[:, j], 0.0)))
            row["max_speed_ms"] = max(row["max_speed_ms"], float(v.max()))
            if len(v) >= hold:
                row["held_speed_ms"] = max(row["held_speed_ms"], float(rolling_min(v, hold).max()))
    return out


def compare(clean: Run, faulted: Run) -> dict[str, np.ndarray]:
    """Per outfield player (clean run's order): top-speed excess (m/s), distance ratio - 1, HSR and
    sprint-distance differences (m), and the faulted top speed and the clean HSR and sprint distances."""
    ids = sorted(clean.players)
    c = {k: np.array([clean.players[i][k] for i in ids]) for k in FIGURES}
    f = {k: np.array([faulted.players[i][k] for i in ids]) for k in FIGURES}
    return {"top_speed_ms": f["max_speed_ms"], "top_speed_excess_ms": f["max_speed_ms"] - c["max_speed_ms"],
            "distance_rel": f["distance_m"] / c["distance_m"] - 1, "hsr_diff_m": f["hsr_m"] - c["hsr_m"],
            "clean_hsr_m": c["hsr_m"], "sprint_diff_m": f["sprint_m"] - c["sprint_m"], "clean_sprint_m": c["sprint_m"]}


def _worst(x: np.ndarray) -> float:
    """The value furthest from 0 (signed)."""
    return float(x[np.argmax(np.abs(x))])


def _metres(name: str, diff: np.ndarray) -> str:
    return f"{name} {np.median(diff):+6.1f} m median, {_worst(diff):+6.1f} m worst"


def summary(d: dict[str, np.ndarray]) -> str:
    """Medians and worst cases of one comparison, as a line of the report."""
    ex, dr = d["top_speed_excess_ms"], d["distance_rel"]
    return (f"top speed {np.median(d['top_speed_ms']):5.2f} median, {d['top_speed_ms'].max():5.2f} max m/s; "
            f"vs clean {np.median(ex):+5.2f} median, {ex.max():+5.2f} worst m/s | distance "
            f"{100 * np.median(dr):+5.1f}% median, {100 * _worst(dr):+5.1f}% worst | "
            f"{_metres('HSR', d['hsr_diff_m'])} | {_metres('sprint', d['sprint_diff_m'])}")


def floodlight_comparison(root: pathlib.Path, clean_folder: pathlib.Path, model: str, players: list[str],
                          fps: int) -> str:
    """floodlight's figures on the faulted recording against its own on the clean one, as a report line."""
    hold = load_settings().speed.top_speed_hold_s
    clean = floodlight_figures(clean_folder, fps, players, hold)
    faulted = floodlight_figures(root / model, fps, players, hold)

    def diff(key: str) -> np.ndarray:
        return np.array([faulted[p][key] - clean[p][key] for p in players])

    peak, held = diff("max_speed_ms"), diff("held_speed_ms")
    top = np.array([faulted[p]["max_speed_ms"] for p in players])
    dist = np.array([faulted[p]["distance_m"] / clean[p]["distance_m"] - 1 for p in players])
    return (f"top speed {np.median(top):5.2f} median, {top.max():5.2f} max m/s; peak vs clean "
            f"{np.median(peak):+5.2f} median, {peak.max():+5.2f} worst; held {hold:g} s vs clean "
            f"{np.median(held):+5.2f} median, {held.max():+5.2f} worst m/s | distance {100 * np.median(dist):+5.1f}% "
            f"median, {100 * _worst(dist):+5.1f}% worst | {_metres('HSR', diff('hsr_m'))} | "
            f"{_metres('sprint', diff('sprint_m'))}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m tests.support.artefact_runs", description=__doc__)
    ap.add_argument("--minutes", type=float, default=12.0)
    ap.add_argument("--fps", type=int, default=10)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--floodlight", action="store_true", help="also floodlight 1.2.0 on the same recordings")
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
            if args.floodlight:
                fl = floodlight_comparison(root, clean_folder, model, sorted(cleans[profile].players), args.fps)
                print(f"{'':12} floodlight: {fl}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
