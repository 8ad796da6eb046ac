"""``pacewire serve --role ROLE --redis URL``: one role of a scaled deployment on uvicorn.

Every role serves ``/healthz`` on its port, so one supervisor check fits all.
"""
from __future__ import annotations

import argparse
import asyncio
import logging
import sys
import time
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

ROLES = ("all", "ingest", "aggregator", "gateway", "recorder")


def _worker_app(name: str, make: Any) -> Any:
    """A role whose work is a background loop: the loop in the lifespan, /healthz beside it."""
    from fastapi import FastAPI
    from fastapi.responses import JSONResponse

    state: dict[str, Any] = {}

    @asynccontextmanager
    async def lifespan(app: FastAPI):  # noqa: ANN202
        worker = state["worker"] = make()
        task = asyncio.create_task(worker.run(), name=name)
        yield
        task.cancel()
        try:
            await task
        except (asyncio.CancelledError, Exception):
            pass

    app = FastAPI(title=f"pacewire {name}", lifespan=lifespan, docs_url=None, redoc_url=None)

    @app.get("/healthz")
    async def healthz() -> JSONResponse:
        w = state.get("worker")
        return JSONResponse({"status": "ok", "role": name, "owner": getattr(w, "owner", None),
                             "matches": sorted(getattr(w, "matches", {})), "time": time.time()})

    return app


def run_role(args: argparse.Namespace) -> int:
    import uvicorn

    from pacewire.config import ConfigError, load_settings
    from pacewire.scale import keys
    from pacewire.scale.settings import scale_settings

    if not args.redis:
        print(f"pacewire: --role {args.role} needs --redis URL (e.g. redis://127.0.0.1:6379/0)", file=sys.stderr)
        return 2
    try:
        settings = load_settings(args.config)
        scale = scale_settings(settings)
    except ConfigError as exc:
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2
    logging.basicConfig(level=args.log_level.upper(), format="%(asctime)s %(name)s %(levelname)s %(message)s")
    redis = keys.connect(args.redis, scale.redis_timeout_s, scale.redis_connections)
    data = Path(args.data)
    if args.role == "ingest":
        from pacewire.scale.ingest import create_ingest_app
        app = create_ingest_app(redis, settings, args.ingest_token or None)
    elif args.role == "gateway":
        from pacewire.scale.gateway import create_gateway_app
        app = create_gateway_app(redis, settings, scale, args.ingest_token or None, args.view_token or None)
    elif args.role == "aggregator":
        from pacewire.scale.aggregator import Aggregator
        app = _worker_app("aggregator", lambda: Aggregator(redis, settings, scale, data))
    else:
        from pacewire.scale.recorder import StreamRecorder
        app = _worker_app("recorder", lambda: StreamRecorder(redis, scale, data))
    config = uvicorn.Config(app, host=args.host, port=args.port, ws_max_size=settings.server.max_message_bytes,
                            log_level=args.log_level, lifespan="on", ws_ping_interval=20, ws_ping_timeout=20,
                            ws_per_message_deflate=False)  # as the single process: deflate per socket dominated fan-out
    print(f"pacewire {args.role} on http://{args.host}:{args.port}/ (Redis {args.redis})", flush=True)
    try:
        uvicorn.Server(config).run()
    except KeyboardInterrupt:  # the signal uvicorn re-raises after its graceful shutdown
        pass
    return 0
