"""Data out: the matches served, a match's snapshot and report listing, ``WS /live/{id}``."""
from __future__ import annotations

import asyncio

from fastapi import APIRouter, Request, WebSocket, WebSocketDisconnect
from fastapi.responses import JSONResponse, Response

from pacewire.api.auth import Tokens, accept
from pacewire.api.backend import ReadBackend, Subscription
from pacewire.api.errors import ApiError, known, refuse
from pacewire.api.requests import MatchIdParam, StreamParams
from pacewire.config import Server
from pacewire.errors import PacewireError
from pacewire.tasks import cancel


def read_routes(backend: ReadBackend, tokens: Tokens, limits: Server) -> APIRouter:
    router = APIRouter()

    @router.get("/api/matches")
    async def list_matches(request: Request) -> JSONResponse:
        tokens.check(request, write=False)
        return JSONResponse({"matches": await backend.list_matches()})

    @router.get("/api/matches/{match_id}/snapshot")
    async def get_snapshot(request: Request, match_id: str = MatchIdParam) -> Response:
        tokens.check(request, write=False)
        return Response(known(await backend.snapshot(match_id), match_id), media_type="application/json")

    @router.get("/api/matches/{match_id}/reports")
    async def get_reports(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        tokens.check(request, write=False)
        return JSONResponse({"match_id": match_id, "reports": known(await backend.report_listing(match_id), match_id)})

    @router.websocket("/live/{match_id}")
    async def ws_live(ws: WebSocket, match_id: str = MatchIdParam) -> None:
        if not await accept(ws, tokens, write=False):
            return
        try:
            roster = known(await backend.roster(match_id), match_id)
            params = StreamParams.parse(ws.query_params, roster, limits.default_every_s, limits.max_every_s)
            sub = await backend.subscribe(match_id, params, ws.send_text)
        except PacewireError as exc:
            await refuse(ws, match_id, ApiError.of(exc))
            return
        await _follow(ws, sub)

    return router


async def _follow(ws: WebSocket, sub: Subscription) -> None:
    """Pump the subscriber's messages until the client goes."""
    pump = asyncio.create_task(sub.pump())
    try:
        while True:
            msg = await ws.receive()
            if msg["type"] == "websocket.disconnect":
                break
    except (WebSocketDisconnect, RuntimeError):
        pass
    finally:
        sub.close()
        await cancel([pump])
