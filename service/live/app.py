"""The single-process app: every route, over the matches this process runs."""
from __future__ import annotations

import asyncio
import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from dataclasses import dataclass
from pathlib import Path

from fastapi import FastAPI

from pacewire.api.app import build_app
from pacewire.api.auth import Tokens
from pacewire.api.contract import contract_routes
from pacewire.api.files import file_routes
from pacewire.api.ingest import ingest_routes
from pacewire.api.reads import read_routes
from pacewire.api.site import ops_routes, page_settings
from pacewire.config import Settings
from pacewire.live.backend import LocalBackend
from pacewire.live.matches import Matches
from pacewire.live.metrics import Metrics
from pacewire.store import history
from pacewire.tasks import cancel

log = logging.getLogger("pacewire.app")


@dataclass(frozen=True)
class ServerOptions:
    data_dir: Path
    settings: Settings
    ingest_token: str | None = None
    view_token: str | None = None


def create_app(opts: ServerOptions) -> FastAPI:
    metrics = Metrics()
    matches = Matches(opts.data_dir, opts.settings, metrics.hooks())
    backend = LocalBackend(matches, metrics)
    tokens = Tokens(opts.ingest_token, opts.view_token)
    limits = opts.settings.server

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        opts.data_dir.mkdir(parents=True, exist_ok=True)
        if opts.settings.history.enabled:
            try:  # the schema once, before any report is stored
                await asyncio.to_thread(history.prepare, opts.data_dir / opts.settings.history.path)
            except (history.HistoryError, OSError) as exc:
                log.error("the history database is not usable: %s", exc)
        pending = matches.index_all()  # no engine work: /healthz answers at once
        log.info("%d finished matches indexed, %d to rebuild", len(matches.archived), len(pending))
        tasks = [asyncio.create_task(matches.rebuild_pending(), name="rebuild"),
                 asyncio.create_task(matches.archive_loop(), name="archive")]
        yield
        await cancel(tasks)
        await matches.stop_all()

    routers = [ingest_routes(backend, tokens, limits), read_routes(backend, tokens, limits),
               file_routes(backend, tokens, limits), contract_routes(limits), ops_routes(backend.health, backend)]
    app = build_app("pacewire", routers, lifespan, page=True, page_settings=page_settings(opts.settings))
    app.state.matches = matches
    app.state.metrics = metrics
    return app
