"""Data in: match set-up, frames, CDF events, match control events and heart rate, over HTTP and websockets.

Every write is answered only once what was accepted is stored (the recording,
or Redis); a refusal names what to fix, and a batch that could not be stored is
answered ``not_stored`` so the provider sends it again.
"""
from __future__ import annotations

from typing import Any

import orjson
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
        """CDF events (JSON Lines, or one JSON object or array of them): counts and the first refusals,
        answered once stored; or pacewire's control events (one JSON object or an array)."""
        writer, body = await writing(request, match_id)
        cdf, data = event_batch(body, limits.max_batch_frames)
        if cdf:
            out = await writer.cdf_events(data, durable=True)
            if not out.stored:
                raise ApiError(503, "not_stored", writer.store_error(), **out.as_dict())
            return JSONResponse(out.as_dict())
        await apply_control(writer, data)
        return JSONResponse({"applied": len(data)})

    @router.post("/api/matches/{match_id}/hr")
    async def post_hr(request: Request, match_id: str = MatchIdParam) -> JSONResponse:
        """Heart-rate samples (docs/wearables.md): JSON Lines, or one JSON array."""
        writer, body = await writing(request, match_id)
        data = body if body.lstrip()[:1] == b"[" else json_lines(body, limits.max_batch_frames, "samples")
        out = await writer.heart_rate(data, durable=True)
        if not out.stored:
            raise ApiError(503, "not_stored", writer.store_error(), **out.as_dict())
        return JSONResponse(out.as_dict())

    async def ingest_socket(ws: WebSocket, match_id: str, kind: str) -> None:
        """A provider's socket: frames (or heart-rate samples, or events) in, an ``error`` message per refusal out."""
        if not await accept(ws, tokens, write=True):
            return
        try:
            writer = known(await backend.writer(match_id), match_id)
        except PacewireError as exc:
            await refuse(ws, match_id, ApiError.of(exc))
            return
        try:
            await _read_socket(ws, writer, match_id, kind)
        except WebSocketDisconnect:
            return

    @router.websocket("/ingest/{match_id}")
    async def ws_ingest(ws: WebSocket, match_id: str = MatchIdParam) -> None:
        await ingest_socket(ws, match_id, "frames")

    @router.websocket("/ingest/{match_id}/hr")
    async def ws_ingest_hr(ws: WebSocket, match_id: str = MatchIdParam) -> None:
        await ingest_socket(ws, match_id, "hr")

    @router.websocket("/ingest/{match_id}/events")
    async def ws_ingest_events(ws: WebSocket, match_id: str = MatchIdParam) -> None:
        await ingest_socket(ws, match_id, "events")

    return router


def event_batch(body: bytes | str, limit: int) -> tuple[bool, Any]:
    """What an events body holds: (True, what ``MatchWriter.cdf_events`` takes) for CDF events (objects
    with an ``event``, or JSON Lines), (False, the objects) for control events."""
    try:
        data = orjson.loads(body)
    except orjson.JSONDecodeError:
        if isinstance(body, str):
            body = body.encode()
        return True, json_lines(body, limit, "events")  # JSON Lines: CDF events, each line judged
    objs = data if isinstance(data, list) else [data]
    cdf = [type(o) is dict and "event" in o for o in objs]
    if any(cdf) and not all(cdf):
        raise ApiError(422, "bad_event", "a batch holds either CDF event objects or control events, not both")
    return (True, body) if any(cdf) else (False, objs)


async def apply_control(writer: MatchWriter, events: list[Any]) -> None:
    """Control events one by one; the first refusal stops the batch and says how many were applied."""
    for i, ev in enumerate(events):
        try:
            await writer.add_event(ev)
        except PacewireError as exc:
            where = f"event {i}: " if isinstance(exc, EventError) else ""
            raise ApiError.of(exc, f"{where}{exc}", applied=i) from None


async def _receive(writer: MatchWriter, data: bytes | str, kind: str) -> list[dict[str, Any]]:
    """One provider message in; the refusals to send back."""
    if kind == "events":
        try:
            cdf, objs = event_batch(data, 1_000_000)
            if cdf:
                ev = await writer.cdf_events(objs if isinstance(objs, list) else data, durable=False)
                errs = [e.as_dict() for e in ev.errors]
                return errs if ev.stored else [*errs, {"code": "not_stored", "message": writer.store_error()}]
            await apply_control(writer, objs)
            return []
        except ApiError as exc:
            return [{"code": exc.code, "message": exc.message, **exc.extra}]
    out = await (writer.heart_rate if kind == "hr" else writer.frames)(data, durable=False)
    errs = [e.as_dict() for e in out.errors]
    return errs if out.stored else [*errs, {"code": "not_stored", "message": writer.store_error()}]


async def _read_socket(ws: WebSocket, writer: MatchWriter, match_id: str, kind: str) -> None:
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
        errs = await _receive(writer, data, kind)
        for e in errs if can_reply else ():
            try:
                await ws.send_text(error_text(match_id, writer.clock(), **e))
            except Exception:  # the provider closed its side: still read what it sent before closing
                can_reply = False
                break
