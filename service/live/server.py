"""``pacewire serve``: the app on uvicorn."""
from __future__ import annotations

import argparse
import logging
import os
import sys
from pathlib import Path

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


def run(args: argparse.Namespace) -> int:
    if getattr(args, "role", "all") != "all":
        from pacewire.scale.roles import run_role
        return run_role(args)
    import uvicorn

    from pacewire.config import ConfigError, load_settings
    from pacewire.live.app import ServerOptions, create_app

    try:
        settings = load_settings(args.config)
    except ConfigError as exc:
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2
    logging.basicConfig(level=args.log_level.upper(), format="%(asctime)s %(name)s %(levelname)s %(message)s")
    opts = ServerOptions(Path(args.data), settings, args.ingest_token or None, args.view_token or None)
    app = create_app(opts)
    config = uvicorn.Config(app, host=args.host, port=args.port, ws_max_size=settings.server.max_message_bytes,
                            log_level=args.log_level, lifespan="on", ws_ping_interval=20, ws_ping_timeout=20,
                            # compressing every message once per socket cost most of the fan-out
                            # time (measured, tests/bench/bench_live.py); deltas are small anyway
                            ws_per_message_deflate=False)
    server = uvicorn.Server(config)
    print(f"pacewire serving on http://{args.host}:{args.port}/ (data in {opts.data_dir.resolve()})", flush=True)
    server.run()
    return 0
