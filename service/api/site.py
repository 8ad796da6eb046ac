"""What every role serves beside its data: ``/healthz``, ``/metrics``, and the bench page."""
from __future__ import annotations

from collections.abc import Awaitable, Callable
from pathlib import Path
from typing import Any

from fastapi import APIRouter, FastAPI
from fastapi.responses import FileResponse, JSONResponse, Response
from fastapi.staticfiles import StaticFiles

from pacewire.api.backend import MetricsSource

WEB = Path(__file__).resolve().parent.parent / "web"  # the bench page (static, no build step)


def ops_routes(health: Callable[[], Awaitable[dict[str, Any]]], metrics: MetricsSource | None = None) -> APIRouter:
    """``/healthz`` (liveness, what ``health`` says) and, given a source, Prometheus ``/metrics``."""
    router = APIRouter()

    @router.get("/healthz")
    async def healthz() -> JSONResponse:
        return JSONResponse(await health())

    if metrics is not None:
        source = metrics

        @router.get("/metrics")
        async def get_metrics() -> Response:
            text, media_type = source.metrics_text()
            return Response(text, media_type=media_type)

    return router


def mount_page(app: FastAPI) -> None:
    """The bench page at ``/``, its files under ``/static``."""
    app.mount("/static", StaticFiles(directory=WEB), name="static")

    @app.get("/")
    async def index() -> FileResponse:
        return FileResponse(WEB / "index.html", headers={"Cache-Control": "no-cache"})
