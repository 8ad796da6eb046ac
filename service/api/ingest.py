"""Data in: match set-up, frames, match events and heart rate, over HTTP and websockets.

Every write is answered only once what was accepted is stored (the recording,
or Redis); a refusal names what to fix, and a batch that could not be stored is
answered ``not_stored`` so the provider sends it again.
"""
from __future__ import annotations

from fastapi import APIRouter, Request, WebSocket, WebSocketDisconnect
from fastapi.responses import JSONResponse

from pacewire.api.auth import Tokens, accept
from pacewire.api.backend import IngestBackend, MatchWriter
from pacewire.api.errors import ApiError, error_text, known, refuse
from pacewire.api.requests import MatchIdParam, json_lines, parse_json, read_body
from pacewire.config import Server
from pacewire.errors import PacewireError
from pacewire.events import EventError
from pacewire.wire.match_id import check_match_id


def ingest_routes(backend: IngestBackend, tokens: Tokens, limits: Server) -> APIRouter:
    router = APIRouter()

    async def writing(request: Request, match_id: str) -> tuple[MatchWriter, bytes]:
        """The opening of every provider POST: token, match, body."""
        tokens.check(request, write=True)
        writer = known(await backend.writer(match_id), match_id)
        return writer, await read_body(request, limits.max_message_bytes)

    @router.put("/api/matches/{match_id}")
    async def put_match(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        tokens.check(request, write=True)
        data = parse_json(await read_body(request, limits.max_message_bytes))
        if not isinstance(data, dict) or set(data) != {"meta", "sheet"}:
            raise ApiError(422, "bad_setup", 'body must be {"meta": CDF meta, "sheet": CDF match sheet}')
        roster, created = await backend.setup(check_match_id(match_id), data["meta"], data["sheet"])
        return JSONResponse({"match_id": match_id, "created": created, "players": roster.n, "fps": roster.fps},
                            status_code=201 if created else 200)

    @router.post("/api/matches/{match_id}/frames")
    async def post_frames(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        writer, body = await writing(request, match_id)
        out = await writer.frames(json_lines(body, limits.max_batch_frames, "frames"), durable=True)
        if not out.stored:
            raise ApiError(503, "not_stored", writer.store_error(), **out.as_dict())
        if out.after_end:
            raise ApiError(409, "match_ended", out.errors[0].message, **out.as_dict())
        return JSONResponse(out.as_dict())

    @router.get("/api/matches/{match_id}/feed")
    async def get_feed(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        """Where the stored feed stands (a provider resuming asks before it sends)."""
        tokens.check(request, write=True)
        writer = known(await backend.writer(match_id), match_id)
        return JSONResponse({"match_id": match_id, **await writer.position()})

    @router.post("/api/matches/{match_id}/events")
    async def post_events(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        writer, body = await writing(request, match_id)
        data = parse_json(body)
        events = data if isinstance(data, list) else [data]
        for i, ev in enumerate(events):
            try:
                await writer.add_event(ev)
            except PacewireError as exc:
                where = f"event {i}: " if isinstance(exc, EventError) else ""
                raise ApiError.of(exc, f"{where}{exc}", applied=i) from None
        return JSONResponse({"applied": len(events)})

    @router.post("/api/matches/{match_id}/hr")
    async def post_hr(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        """Heart-rate samples (docs/wearables.md): JSON Lines, or one JSON array."""
        writer, body = await writing(request, match_id)
        data = body if body.lstrip()[:1] == b"[" else json_lines(body, limits.max_batch_frames, "samples")
        out = await writer.heart_rate(data, durable=True)
        if not out.stored:
            raise ApiError(503, "not_stored", writer.store_error(), **out.as_dict())
        return JSONResponse(out.as_dict())

    async def ingest_socket(ws: WebSocket, match_id: str, hr: bool) -> None:
        """A provider's socket: frames (or heart-rate samples) in, an ``error`` message per refusal out."""
        if not await accept(ws, tokens, write=True):
            return
        try:
            writer = known(await backend.writer(match_id), match_id)
        except PacewireError as exc:
            await refuse(ws, match_id, ApiError.of(exc))
            return
        try:
            await _read_socket(ws, writer, match_id, hr)
        except WebSocketDisconnect:
            return

    @router.websocket("/ingest/{match_id}")
    async def ws_ingest(ws: WebSocket, match_id: str = MatchIdParam) -> None:
        await ingest_socket(ws, match_id, hr=False)

    @router.websocket("/ingest/{match_id}/hr")
    async def ws_ingest_hr(ws: WebSocket, match_id: str = MatchIdParam) -> None:
        await ingest_socket(ws, match_id, hr=True)

    return router


async def _read_socket(ws: WebSocket, writer: MatchWriter, match_id: str, hr: bool) -> None:
    can_reply = True
    while True:
        msg = await ws.receive()
        if msg["type"] == "websocket.disconnect":
            return
        data = msg.get("text")
        if data is None:
            data = msg.get("bytes")
        if data is None:
            continue
        out = await (writer.heart_rate if hr else writer.frames)(data, durable=False)
        errs = [e.as_dict() for e in out.errors]
        if not out.stored:
            errs.append({"code": "not_stored", "message": writer.store_error()})
        for e in errs if can_reply else ():
            try:
                await ws.send_text(error_text(match_id, writer.clock(), **e))
            except Exception:  # the provider closed its side: still read what it sent before closing
                can_reply = False
                break
