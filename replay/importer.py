"""``pacewire import``: recordings in the formats kloppy reads → a CDF folder.

kloppy is an optional extra (``pip install pacewire[import]``); without it the
command says how to install it. The conversion itself is in
:mod:`pacewire.replay.kloppy_cdf`.
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


class ImportErrorKloppy(RuntimeError):
    """kloppy is missing or could not read the source."""


def _loader(fmt: str) -> Callable[..., Any]:
    try:
        import importlib
        module = importlib.import_module(FORMATS[fmt][0])
    except ModuleNotFoundError as exc:
        if exc.name and exc.name.split(".")[0] == "kloppy":
            raise ImportErrorKloppy("pacewire import needs kloppy: pip install 'pacewire[import]' "
                                    "(or pip install kloppy)") from None
        raise
    return getattr(module, FORMATS[fmt][1])


def load_dataset(source: Path, fmt: str, meta: Path | None = None, sample_rate: float | None = None) -> Any:
    """Load a tracking recording with kloppy, in CDF coordinates."""
    from pacewire.replay.kloppy_cdf import to_cdf_coordinates

    if fmt not in FORMATS:
        raise ValueError(f"unknown format {fmt!r}: one of {', '.join(sorted(FORMATS))}")
    load = _loader(fmt)
    _, _, src_kw, meta_kw = FORMATS[fmt]
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
    return to_cdf_coordinates(dataset)


def import_recording(source: Path, fmt: str, out: Path, meta: Path | None = None, match_id: str | None = None) -> Path:
    from pacewire.replay.kloppy_cdf import write_folder

    dataset = load_dataset(source, fmt, meta)
    return write_folder(dataset, out, match_id)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="pacewire import",
                                description="Convert a recording kloppy reads into a CDF folder.")
    p.add_argument("source", type=Path, help="the tracking data file (for metrica_csv: the home team's file)")
    p.add_argument("--format", required=True, choices=sorted(FORMATS))
    p.add_argument("--meta", type=Path, help="the provider's metadata file (for metrica_csv: the away team's file)")
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
    n = sum(1 for _ in open(folder / "tracking.jsonl", "rb"))
    print(f"wrote {folder} ({n} frames)")
    return 0
