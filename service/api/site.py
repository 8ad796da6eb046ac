"""What every role serves beside its data: ``/healthz``, ``/metrics``, and the bench page."""
from __future__ import annotations

from collections.abc import Awaitable, Callable
from pathlib import Path
from typing import Any

from fastapi import APIRouter, FastAPI
from fastapi.responses import FileResponse, JSONResponse, Response
from fastapi.staticfiles import StaticFiles

from pacewire.api.backend import MetricsSource
from pacewire.config import Settings
from pacewire.wire.rules import DropOffPeak

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


def page_settings(settings: Settings) -> dict[str, Any]:
    """The thresholds the page marks figures by, from the same config values the reports use: low
    coverage (a share of frames) and the share of the player's own peak window under which the first
    drop-off rule against the peak alerts, its window and the time on the pitch it needs (None when no such
    rule is configured)."""
    peak = next((r for r in settings.alerts.rules if isinstance(r, DropOffPeak)), None)
    return {"low_coverage": settings.reports.low_coverage,
            "peak_share": None if peak is None else peak.share,
            "peak_window_min": None if peak is None else peak.window_min,
            "peak_min_on_pitch_min": None if peak is None else peak.min_on_pitch_min}


def mount_page(app: FastAPI, settings: dict[str, Any] | None = None) -> None:
    """The bench page at ``/``, its files under ``/static``, its thresholds at ``/page-settings.json``."""
    app.mount("/static", StaticFiles(directory=WEB), name="static")
    shown = dict(settings or {})

    @app.get("/page-settings.json")
    async def get_page_settings() -> JSONResponse:
        return JSONResponse(shown, headers={"Cache-Control": "no-cache"})

    @app.get("/")
    async def index() -> FileResponse:
        return FileResponse(WEB / "index.html", headers={"Cache-Control": "no-cache"})
