"""A FastAPI app from the routers a role mounts, with the one error handler."""
from __future__ import annotations

from typing import Any

from fastapi import APIRouter, FastAPI

from pacewire.api.errors import install
from pacewire.api.site import mount_page


def build_app(title: str, routers: list[APIRouter], lifespan: Any = None, page: bool = False,
              page_settings: dict[str, Any] | None = None) -> FastAPI:
    app = FastAPI(title=title, lifespan=lifespan, docs_url=None, redoc_url=None)
    install(app)
    for router in routers:
        app.include_router(router)
    if page:
        mount_page(app, page_settings)
    return app
