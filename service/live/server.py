"""``pacewire serve``: the app on uvicorn."""
from __future__ import annotations

import argparse
import logging
import os
import sys
from pathlib import Path
from typing import Any

from pacewire.config import ConfigError, Settings, load_settings

DEFAULT_PORT = 8750


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--host", default="127.0.0.1", help="address to bind (default 127.0.0.1: this machine only)")
    p.add_argument("--port", type=int, default=DEFAULT_PORT)
    p.add_argument("--data", default="data", help="data folder: recordings, reports, history (default ./data)")
    p.add_argument("--config", help="a TOML file overriding config/default.toml")
    p.add_argument("--ingest-token", default=os.environ.get("PACEWIRE_INGEST_TOKEN"),
                   help="token for set-up and ingest (or env PACEWIRE_INGEST_TOKEN)")
    p.add_argument("--view-token", default=os.environ.get("PACEWIRE_VIEW_TOKEN"),
                   help="token for live and snapshot reads (or env PACEWIRE_VIEW_TOKEN)")
    p.add_argument("--log-level", default="info", choices=["debug", "info", "warning", "error"])
    p.add_argument("--role", default="all", choices=["all", "ingest", "aggregator", "gateway", "recorder"],
                   help="all (default): everything in this process; else one role over Redis (README: league scale)")
    p.add_argument("--redis", default=os.environ.get("PACEWIRE_REDIS"), help="Redis URL for the scaled roles")


def load(args: argparse.Namespace) -> Settings | None:
    """The settings of ``--config`` (None after printing why they cannot be read), and logging set up."""
    try:
        settings = load_settings(args.config)
    except ConfigError as exc:
        print(f"pacewire: {exc}", file=sys.stderr)
        return None
    logging.basicConfig(level=args.log_level.upper(), format="%(asctime)s %(name)s %(levelname)s %(message)s")
    return settings


def serve(app: Any, args: argparse.Namespace, settings: Settings, banner: str) -> int:
    """Run ``app`` on uvicorn until it is stopped (Ctrl-C or a signal: a graceful shutdown)."""
    import uvicorn

    config = uvicorn.Config(app, host=args.host, port=args.port, ws_max_size=settings.server.max_message_bytes,
                            log_level=args.log_level, lifespan="on", ws_ping_interval=20, ws_ping_timeout=20,
                            # compressing every message once per socket cost most of the fan-out
                            # time (measured, tests/bench/bench_live.py); deltas are small anyway
                            ws_per_message_deflate=False)
    print(banner, flush=True)
    try:
        uvicorn.Server(config).run()
    except KeyboardInterrupt:  # the signal uvicorn re-raises after its graceful shutdown
        pass
    return 0


def run(args: argparse.Namespace) -> int:
    """The single process (``--role all``); the other roles run from :mod:`pacewire.scale.roles`."""
    from pacewire.live.app import ServerOptions, create_app

    settings = load(args)
    if settings is None:
        return 2
    opts = ServerOptions(Path(args.data), settings, args.ingest_token or None, args.view_token or None)
    return serve(create_app(opts), args, settings,
                 f"pacewire serving on http://{args.host}:{args.port}/ (data in {opts.data_dir.resolve()})")
