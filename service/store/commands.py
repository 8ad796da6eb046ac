"""``pacewire history import FOLDER`` and ``pacewire history list``."""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING

from pacewire.store import history
from pacewire.store.record import match_record

if TYPE_CHECKING:
    from pacewire.config import Settings


def db_path(data: str | Path, settings: Settings) -> Path:
    return Path(data) / settings.history.path


def _refuse_post_processed(folder: str) -> int:
    """Post-processed data is kept out of the history unless asked: say why."""
    print(f"pacewire: {folder} holds post-processed data (its meta does not say the tracking was collected "
          "live): such figures run a few percent above live ones, so a live match compared with them would show "
          "drops that are not there. Baselines use live and replayed matches only. Pass --allow-post-processed "
          "to store it anyway as source 'import' (listed, never in a baseline), or --source replay if it is a "
          "recording of live data.", file=sys.stderr)
    return 2


def _import(args: argparse.Namespace, settings: Settings) -> int:
    from pacewire.engine.blocks import block_series
    from pacewire.engine.snapshot import build_snapshot
    from pacewire.reports.offline import run_recording, source_of
    from pacewire.wire.cdf import SetupError
    from pacewire.wire.recording import RecordingError, open_recording

    try:
        meta = open_recording(args.folder).meta  # decide before running the engine over the whole match
        source = args.source or ("replay" if source_of(meta) == "replay" else "import")
        if source == "import" and not args.allow_post_processed:
            return _refuse_post_processed(args.folder)
        state, rec, _, _ = run_recording(args.folder, settings, progress=not args.quiet)
    except (RecordingError, SetupError, OSError) as exc:
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2
    snap = build_snapshot(state)
    record = match_record(snap, block_series(state, settings.history.block_min, "merge"), source,
                          key=args.key, kickoff_t=state.periods[0].t0 if state.periods else None,
                          origin=str(Path(args.folder).resolve()))
    path = db_path(args.data, settings)
    history.save(path, record)
    played = sum(1 for p in record.players if p[5] > 0)
    print(f"stored {record.key} ({source}, {played} players, {len(record.figures)} figures) in {path}")
    return 0


def _list(args: argparse.Namespace, settings: Settings) -> int:
    path = db_path(args.data, settings)
    if not path.exists():
        print(f"no history yet ({path})")
        return 0
    rows = history.matches(path)
    print(f"{'match':<24} {'source':<8} {'kick-off (UTC)':<17} {'clock':>6} {'played':>6}  teams")
    for r in rows:
        kick = time.strftime("%Y-%m-%d %H:%M", time.gmtime(r["kickoff_t"])) if r["kickoff_t"] else "-"
        teams = " v ".join(f"{t['name'] or t['team_id']}" + (f" {t['score']}" if t["score"] is not None else "")
                           for t in r["teams"])
        mins = int(r["match_time_s"] // 60)
        print(f"{r['match_key']:<24.24} {r['source']:<8} {kick:<17} {mins:>5}' {r['played']:>6}  {teams}")
    print(f"{len(rows)} match{'es' if len(rows) != 1 else ''} in {path}; baselines use live and replay only "
          "(import: post-processed data, never in a baseline)")
    return 0


def _compare(args: argparse.Namespace, settings: Settings) -> int:
    """Run both recordings through the engine, print how far live ran below post, store it."""
    from pacewire.engine.snapshot import build_snapshot
    from pacewire.reports.offline import run_recording
    from pacewire.store.deficit import deficits
    from pacewire.wire.cdf import SetupError
    from pacewire.wire.recording import RecordingError

    snaps = []
    try:
        for folder in (args.live, args.post):
            state, _, _, _ = run_recording(folder, settings, progress=not args.quiet)
            snaps.append(build_snapshot(state))
    except (RecordingError, SetupError, OSError) as exc:
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2
    live, post = snaps
    if live["match_id"] != post["match_id"]:
        print(f"pacewire: not the same match: {live['match_id']} (live) and {post['match_id']} (post-processed)",
              file=sys.stderr)
        return 2
    minutes = settings.history.min_minutes if args.min_minutes is None else args.min_minutes
    rows = deficits(live, post, minutes)
    if not rows:
        print(f"pacewire: no outfield player played {minutes:g} min in both recordings (--min-minutes)",
              file=sys.stderr)
        return 2
    key = args.key or live["match_id"]
    print(f"live below post-processed, {key}: % of the post-processed figure over outfield players "
          f"(>= {minutes:g} min in both); spread = 1.4826 x MAD, percentage points")
    print(f"{'figure':<22} {'players':>7} {'median %':>9} {'spread':>7}")
    for d in rows:
        print(f"{d.figure:<22} {d.players:>7} {d.median_pct:>9.2f} {d.spread_pct:>7.2f}")
    path = db_path(args.data, settings)
    history.save_deficits(path, key, live["match_id"], str(Path(args.live).resolve()),
                          str(Path(args.post).resolve()), rows)
    print(f"stored as {key} in {path}")
    return 0


def cli_history(args: argparse.Namespace) -> int:
    """``pacewire history``; errors go up to the command line, which prints them once."""
    from pacewire.config import load_settings

    settings = load_settings(args.config)
    run = {"import": _import, "list": _list, "compare": _compare}[args.history_command]
    return run(args, settings)


def add_arguments(p: argparse.ArgumentParser) -> None:
    sub = p.add_subparsers(dest="history_command", required=True)
    for name, text in (("import", "add a past recording to the history"), ("list", "show the stored matches"),
                       ("compare", "how far a live recording ran below the post-processed one of the same match")):
        q = sub.add_parser(name, help=text)
        q.add_argument("--data", default="data", help="data folder holding the history database (default ./data)")
        q.add_argument("--config", help="a TOML file overriding config/default.toml")
        if name == "import":
            q.add_argument("folder", help="a CDF folder (meta.json, match.json, tracking.jsonl[.gz])")
            q.add_argument("--as", dest="key", help="store under this name instead of the match id")
            q.add_argument("--source", choices=("replay", "import"),
                           help="where the figures came from: replay (a recording of live data) or import "
                                "(post-processed data); default: replay when the meta says the data was collected "
                                "live, import otherwise")
            q.add_argument("--allow-post-processed", action="store_true",
                           help="store post-processed data (source import); it is listed but never used in a "
                                "baseline")
            q.add_argument("--quiet", action="store_true", help="no progress bar")
        if name == "compare":
            q.add_argument("live", help="the live recording (a CDF folder)")
            q.add_argument("post", help="the provider's post-processed recording of the same match")
            q.add_argument("--as", dest="key", help="store under this name instead of the match id")
            q.add_argument("--min-minutes", type=float,
                           help="players who played at least this long in both (default history.min_minutes)")
            q.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cli_history)
