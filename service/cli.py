"""The ``pacewire`` command."""
from __future__ import annotations

import argparse
import os
import sys

import orjson

from pacewire.errors import PacewireError


def _analyze(args: argparse.Namespace) -> int:
    from pacewire.analyze import StrictError, analyze_folder, print_table
    from pacewire.config import load_settings
    from pacewire.wire.cdf import FrameError

    def report(err: FrameError) -> None:
        where = f"line {err.line}" if err.line is not None else f"frame {err.frame_id}"
        print(f"pacewire: {where}: {err.code}: {err.message}", file=sys.stderr)

    try:
        result = analyze_folder(args.folder, load_settings(args.config), strict=args.strict, on_error=report)
    except StrictError as exc:
        print(f"pacewire: {exc} (--strict)", file=sys.stderr)
        return 1
    for err in result.event_errors:
        print(f"pacewire: event.jsonl line {err.line}: {err.code}: {err.message}", file=sys.stderr)
    snap = result.snapshot()
    if args.json:
        from pacewire.wire.messages import snapshot_message

        msg = snapshot_message(snap["match_id"], snap)
        sys.stdout.buffer.write(orjson.dumps(msg, option=orjson.OPT_INDENT_2) + b"\n")
    else:
        print_table(snap)
    return 0


def _serve(args: argparse.Namespace) -> int:
    if args.role == "all":
        from pacewire.live.server import run
        return run(args)
    from pacewire.scale.roles import run_role
    return run_role(args)


def build_parser() -> argparse.ArgumentParser:
    from pacewire import __version__

    parser = argparse.ArgumentParser(prog="pacewire", description="Live exertion service for football.")
    parser.add_argument("--version", action="version", version=f"pacewire {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("analyze", help="run the engine over a CDF folder and print the final figures")
    p.add_argument("folder")
    p.add_argument("--json", action="store_true", help="print the final snapshot message as JSON")
    p.add_argument("--config", help="a TOML file overriding config/default.toml")
    p.add_argument("--strict", action="store_true", help="exit non-zero on the first bad line")
    p.set_defaults(func=_analyze)

    for name, text in (("synth", "write the synthetic demo match as a CDF folder"),
                       ("replay", "stream a CDF folder into a server at X times real time"),
                       ("import", "convert a recording kloppy reads into a CDF folder")):
        sub.add_parser(name, help=text, add_help=False)

    from pacewire.live import server

    p = sub.add_parser("serve", help="run the live service")
    server.add_arguments(p)
    p.set_defaults(func=_serve)

    from pacewire.replay import demo

    p = sub.add_parser("demo", help="generate the demo match, serve it and replay it")
    demo.add_arguments(p)
    p.set_defaults(func=demo.run)

    from pacewire.reports import offline
    from pacewire.store import commands as history_commands

    p = sub.add_parser("report", help="build the half-time and full-time reports of a recording")
    offline.add_arguments(p)
    p.set_defaults(func=offline.cli_report)

    p = sub.add_parser("history", help="match history: import a recording, list what is stored")
    history_commands.add_arguments(p)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    # these parse their own options
    if argv and argv[0] == "synth":
        from pacewire.replay.synth import main as synth_main
        return synth_main(argv[1:])
    if argv and argv[0] == "replay":
        from pacewire.replay.player import main as replay_main
        return replay_main(argv[1:])
    if argv and argv[0] == "import":
        from pacewire.replay.importer import main as import_main
        return import_main(argv[1:])
    args = build_parser().parse_args(argv)
    try:
        return int(args.func(args))
    except PacewireError as exc:  # bad input or an unusable setting: the message says which
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # the reader went away (``| head``): nothing left to say
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except OSError as exc:  # a file or folder the command needs (not found, not writable)
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
