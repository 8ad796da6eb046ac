"""``pacewire serve --role ROLE --redis URL``: one role of a scaled deployment on uvicorn.

Every role serves ``/healthz`` on its port, so one supervisor check fits all.
"""
from __future__ import annotations

import argparse
import asyncio
import sys
import time
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from pathlib import Path
from typing import Any

from fastapi import FastAPI

from pacewire.api.app import build_app
from pacewire.api.auth import Tokens
from pacewire.api.contract import contract_routes
from pacewire.api.ingest import ingest_routes
from pacewire.api.reads import read_routes
from pacewire.api.site import ops_routes, page_settings
from pacewire.config import ConfigError, Settings
from pacewire.live.server import load, serve
from pacewire.scale.settings import ScaleSettings
from pacewire.tasks import cancel

ROLES = ("all", "ingest", "aggregator", "gateway", "recorder")


def _worker_app(name: str, make: Callable[[], Any]) -> FastAPI:
    """A role whose work is a background loop: the loop in the lifespan, /healthz beside it."""
    state: dict[str, Any] = {}

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        worker = state["worker"] = make()
        task = asyncio.create_task(worker.run(), name=name)
        yield
        await cancel([task])

    async def health() -> dict[str, Any]:
        w = state.get("worker")
        return {"status": "ok", "role": name, "owner": getattr(w, "owner", None),
                "matches": sorted(getattr(w, "matches", {})), "time": time.time()}

    return build_app(f"pacewire {name}", [ops_routes(health)], lifespan)


def ingest_app(redis: Any, settings: Settings, tokens: Tokens) -> FastAPI:
    """Set-up, frames, events and heart rate into Redis Streams."""
    from pacewire.scale.ingest import RedisIngest

    backend = RedisIngest(redis, settings)
    app = build_app("pacewire ingest", [ingest_routes(backend, tokens, settings.server), ops_routes(backend.health)])
    app.state.store = backend.store
    return app


def gateway_app(redis: Any, settings: Settings, scale: ScaleSettings, tokens: Tokens) -> FastAPI:
    """Reads and live streams from what the aggregators publish; the bench page."""
    from pacewire.scale.gateway import Gateway, RedisReads

    gw = Gateway(redis, settings, scale)
    backend = RedisReads(gw)

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        await gw.start()
        yield
        await gw.stop()

    routers = [read_routes(backend, tokens, settings.server), contract_routes(settings.server),
               ops_routes(backend.health)]
    app = build_app("pacewire gateway", routers, lifespan, page=True, page_settings=page_settings(settings))
    app.state.gateway = gw
    return app


def run_role(args: argparse.Namespace) -> int:
    from pacewire.scale import keys
    from pacewire.scale.settings import scale_settings

    if not args.redis:
        print(f"pacewire: --role {args.role} needs --redis URL (e.g. redis://127.0.0.1:6379/0)", file=sys.stderr)
        return 2
    settings = load(args)
    if settings is None:
        return 2
    try:
        scale = scale_settings(settings)
    except ConfigError as exc:
        print(f"pacewire: {exc}", file=sys.stderr)
        return 2
    redis = keys.connect(args.redis, scale.redis_timeout_s, scale.redis_connections)
    data = Path(args.data)
    tokens = Tokens(args.ingest_token or None, args.view_token or None)
    app: FastAPI
    if args.role == "ingest":
        app = ingest_app(redis, settings, tokens)
    elif args.role == "gateway":
        app = gateway_app(redis, settings, scale, tokens)
    elif args.role == "aggregator":
        from pacewire.scale.aggregator import Aggregator
        app = _worker_app("aggregator", lambda: Aggregator(redis, settings, scale, data))
    else:
        from pacewire.scale.recorder import StreamRecorder
        app = _worker_app("recorder", lambda: StreamRecorder(redis, scale, data))
    return serve(app, args, settings, f"pacewire {args.role} on http://{args.host}:{args.port}/ (Redis {args.redis})")
