"""``pacewire import``: recordings in the formats kloppy reads → a CDF folder.

Tracking formats write meta.json, match.json and tracking.jsonl; event formats
write the CDF event file event.jsonl into the folder (with match.json, and the
match id of the folder's meta.json when the same match's tracking is there). kloppy
is an optional extra (``pip install pacewire[import]``); without it the command
says how to install it. The conversions are in :mod:`pacewire.replay.kloppy_cdf`
(tracking) and :mod:`pacewire.replay.kloppy_events` (events).
"""
from __future__ import annotations

import argparse
import sys
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

# format name → (kloppy module, loader, keyword for SOURCE, keyword for --meta or None)
FORMATS: dict[str, tuple[str, str, str, str | None]] = {
    "epts": ("kloppy.metrica", "load_tracking_epts", "raw_data", "meta_data"),
    "metrica_csv": ("kloppy.metrica", "load_tracking_csv", "home_data", "away_data"),
    "tracab": ("kloppy.tracab", "load", "raw_data", "meta_data"),
    "secondspectrum": ("kloppy.secondspectrum", "load", "raw_data", "meta_data"),
    "sportec": ("kloppy.sportec", "load_tracking", "raw_data", "meta_data"),
    "skillcorner": ("kloppy.skillcorner", "load", "raw_data", "meta_data"),
    "hawkeye": ("kloppy.hawkeye", "load", "player_centroid_feeds", "ball_feeds"),
}
# event formats: the same shape; SOURCE is the event file
EVENT_FORMATS: dict[str, tuple[str, str, str, str | None]] = {
    "statsbomb": ("kloppy.statsbomb", "load", "event_data", "lineup_data"),
    "sportec_events": ("kloppy.sportec", "load_event", "event_data", "meta_data"),
    "metrica_events": ("kloppy.metrica", "load_event", "event_data", "meta_data"),
    "statsperform_events": ("kloppy.statsperform", "load_event", "ma3_data", "ma1_data"),
    "wyscout": ("kloppy.wyscout", "load", "event_data", None),
    "datafactory": ("kloppy.datafactory", "load", "event_data", None),
}
ALL_FORMATS = {**FORMATS, **EVENT_FORMATS}


class ImportErrorKloppy(RuntimeError):
    """kloppy is missing or could not read the source."""


def _loader(fmt: str) -> Callable[..., Any]:
    try:
        import importlib
        module = importlib.import_module(ALL_FORMATS[fmt][0])
    except ModuleNotFoundError as exc:
        if exc.name and exc.name.split(".")[0] == "kloppy":
            raise ImportErrorKloppy("pacewire import needs kloppy: pip install 'pacewire[import]' "
                                    "(or pip install kloppy)") from None
        raise
    return getattr(module, ALL_FORMATS[fmt][1])


def load_dataset(source: Path, fmt: str, meta: Path | None = None, sample_rate: float | None = None) -> Any:
    """Load a tracking recording (or, for an event format, an event dataset) with kloppy, in CDF coordinates."""
    from pacewire.replay import kloppy_cdf, kloppy_events

    if fmt not in ALL_FORMATS:
        raise ValueError(f"unknown format {fmt!r}: one of {', '.join(sorted(ALL_FORMATS))}")
    load = _loader(fmt)
    _, _, src_kw, meta_kw = ALL_FORMATS[fmt]
    kwargs: dict[str, Any] = {src_kw: str(source)}
    if meta_kw is not None:
        if meta is None:
            raise ValueError(f"format {fmt} needs --meta ({meta_kw.replace('_', ' ')})")
        kwargs[meta_kw] = str(meta)
    if sample_rate is not None:
        kwargs["sample_rate"] = sample_rate
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # kloppy warns about orientation, irrelevant to load figures
        try:
            dataset = load(**kwargs)
        except (OSError, ValueError, KeyError) as exc:
            raise ImportErrorKloppy(f"kloppy could not read {source} as {fmt}: {exc}") from exc
    if fmt in EVENT_FORMATS:
        return kloppy_events.to_cdf_coordinates(dataset)
    return kloppy_cdf.to_cdf_coordinates(dataset)


def import_recording(source: Path, fmt: str, out: Path, meta: Path | None = None, match_id: str | None = None) -> Path:
    from pacewire.replay.kloppy_cdf import write_folder

    dataset = load_dataset(source, fmt, meta)
    if fmt in EVENT_FORMATS:
        return write_events(dataset, out, match_id)
    return write_folder(dataset, out, match_id)


def write_events(dataset: Any, out: Path, match_id: str | None = None) -> Path:
    """event.jsonl (and match.json when the folder has none) from an event dataset in CDF coordinates. When
    the folder holds the same match's tracking (meta.json), its match id and its period starts are used: the
    events go on the tracking's clock by their time within the period. Otherwise the match id is
    ``match_id`` or the provider's."""
    from datetime import datetime

    import orjson

    from pacewire.replay.kloppy_cdf import CDF_PERIODS, sheet
    from pacewire.replay.kloppy_events import convert

    out.mkdir(parents=True, exist_ok=True)
    starts: dict[int, Any] = {}
    if (out / "meta.json").exists():
        meta = orjson.loads((out / "meta.json").read_bytes())
        match_id = match_id or str(meta["match"]["id"])
        ids = {name: k for k, name in CDF_PERIODS.items()}
        starts = {ids[p["period"]]: datetime.fromisoformat(p["start_time"])
                  for p in meta["match"].get("periods", []) if p.get("start_time") and p["period"] in ids}
    mid = match_id or str(dataset.metadata.game_id or "kloppy_match")
    if not (out / "match.json").exists():
        (out / "match.json").write_bytes(orjson.dumps(sheet(dataset)))
    conv = convert(dataset, mid, starts)
    with open(out / "event.jsonl", "wb") as fh:
        for line in conv.lines:
            fh.write(orjson.dumps(line) + b"\n")
    if conv.skipped:
        left = ", ".join(f"{n} {k.lower()}" for k, n in sorted(conv.skipped.items()))
        print(f"pacewire import: left out events without a player or team (no CDF form): {left}", file=sys.stderr)
    return out


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="pacewire import",
                                description="Convert a recording kloppy reads into a CDF folder.")
    p.add_argument("source", type=Path, help="the tracking data file (for metrica_csv: the home team's file), or "
                                             "the event data file for an event format")
    p.add_argument("--format", required=True, choices=sorted(ALL_FORMATS),
                   help=f"tracking: {', '.join(sorted(FORMATS))}; events: {', '.join(sorted(EVENT_FORMATS))}")
    p.add_argument("--meta", type=Path, help="the provider's metadata file (for metrica_csv: the away team's file; "
                                             "statsbomb: the lineup file; statsperform_events: the MA1 file)")
    p.add_argument("--out", required=True, type=Path, help="CDF folder to write")
    p.add_argument("--match-id", help="match id to write (default: the provider's)")
    args = p.parse_args(argv)
    if not args.source.exists():
        print(f"pacewire import: {args.source} does not exist", file=sys.stderr)
        return 2
    try:
        folder = import_recording(args.source, args.format, args.out, args.meta, args.match_id)
    except (ImportErrorKloppy, ValueError) as exc:
        print(f"pacewire import: {exc}", file=sys.stderr)
        return 2
    if args.format in EVENT_FORMATS:
        n = sum(1 for _ in open(folder / "event.jsonl", "rb"))
        print(f"wrote {folder / 'event.jsonl'} ({n} events)")
        return 0
    n = sum(1 for _ in open(folder / "tracking.jsonl", "rb"))
    print(f"wrote {folder} ({n} frames)")
    return 0
