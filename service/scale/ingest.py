"""The ``ingest`` role: set-up and frames in, appended to a Redis Stream per match.

Same endpoints and checks as the single process (the decoder decides what is
accepted); an accepted frame becomes stream entry ``frame_id-1`` (keys.py), so
Redis itself refuses a duplicate or late frame whichever ingest node sends it.
A batch is acknowledged only once Redis has answered for every entry; if Redis
cannot be reached the decoder forgets the batch and the provider is told
``not_stored`` (HTTP 503 / an ingest ``error`` message) so it sends it again.
"""
from __future__ import annotations

import asyncio
import logging
import time
from dataclasses import dataclass, field
from typing import Any

import orjson
from fastapi import FastAPI, Request, WebSocket, WebSocketDisconnect
from fastapi.responses import JSONResponse, Response
from redis.exceptions import RedisError, ResponseError

from service.config import Settings
from service.engine.types import Roster
from service.live.app import ID, _error, _same, _token
from service.live.ingest import EventError, IngestOutcome, MatchRunner
from service.live.matches import MATCH_ID
from service.scale import keys
from service.wire.cdf import DecodeResult, FrameDecoder, FrameError, SetupError, parse_setup
from service.wire.messages import envelope

log = logging.getLogger("pacewire.scale.ingest")

# An event entry goes right after the stream's top entry (same millisecond part, next sequence number).
_ADD_EVENT = """
local top = redis.call('XREVRANGE', KEYS[1], '+', '-', 'COUNT', 1)
local ms = '0'
if #top > 0 then ms = string.match(top[1][1], '^(%d+)-') end
return redis.call('XADD', KEYS[1], ms .. '-*', 'e', ARGV[1])
"""


class StoreUnavailable(RuntimeError):
    """Redis could not be reached: nothing was kept."""


@dataclass
class IngestMatch:
    roster: Roster
    setup_raw: bytes
    decoder: FrameDecoder
    lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    primed: bool = False


class StreamIngest:
    """Per-match decoders in front of the Redis Streams."""

    def __init__(self, redis: Any, settings: Settings) -> None:
        self.redis = redis
        self.settings = settings
        self.matches: dict[str, IngestMatch] = {}
        self.error: str | None = None
        self._add_event = redis.register_script(_ADD_EVENT)

    def _new(self, roster: Roster, raw: bytes) -> IngestMatch:
        d = self.settings.decode
        return IngestMatch(roster, raw, FrameDecoder(roster, d.outside_margin_m, d.recent_ids))

    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        """Store the set-up in Redis (every role reads the roster from there). Raises SetupError,
        SetupConflict, StoreUnavailable."""
        from service.live.matches import SetupConflict

        roster = parse_setup(meta, sheet, match_id)
        raw = orjson.dumps({"meta": meta, "sheet": sheet})
        try:
            old = await self.redis.get(keys.setup(match_id))
            if old is not None:
                o = orjson.loads(old)
                if parse_setup(o["meta"], o["sheet"], match_id) == roster:
                    self.matches.setdefault(match_id, self._new(roster, old))
                    return roster, False
                if await self.redis.xlen(keys.frames(match_id)):
                    raise SetupConflict(f"match {match_id} already has frames with a different set-up")
            async with self.redis.pipeline(transaction=True) as p:
                p.set(keys.setup(match_id), raw)
                p.sadd(keys.MATCHES, match_id)
                await p.execute()
        except RedisError as exc:
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        self.matches[match_id] = self._new(roster, raw)
        return roster, True

    async def get(self, match_id: str) -> IngestMatch | None:
        """The match, set up here or through another ingest node. Raises StoreUnavailable."""
        m = self.matches.get(match_id)
        try:
            raw = await self.redis.get(keys.setup(match_id))
        except RedisError as exc:
            if m is not None:
                return m  # the append will tell
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        if raw is None:
            return None
        if m is None or m.setup_raw != raw:
            o = orjson.loads(raw)
            m = self.matches[match_id] = self._new(parse_setup(o["meta"], o["sheet"], match_id), raw)
        return m

    async def _prime(self, match_id: str, m: IngestMatch) -> None:
        """A fresh node learns the last accepted frame, so its ordering checks continue the stream's."""
        top = await self.redis.xrevrange(keys.frames(match_id), "+", "-", count=8)
        for _eid, fields in top:
            if b"f" in fields:
                m.decoder.decode_lines([fields[b"f"]])
                break
        m.primed = True

    # -- frames -----------------------------------------------------------------------------
    async def ingest_lines(self, match_id: str, m: IngestMatch, lines: list[bytes]) -> IngestOutcome:
        async with m.lock:
            try:
                if not m.primed:
                    await self._prime(match_id, m)
            except RedisError as exc:
                return self._unstored(match_id, exc)
            cp = m.decoder.gate.checkpoint()
            res = m.decoder.decode_lines(lines)
            raw = [lines[i].rstrip(b"\r\n") for i in res.accepted]
            return await self._append(match_id, m, res, raw, cp)

    async def ingest_message(self, match_id: str, m: IngestMatch, data: str | bytes) -> IngestOutcome:
        async with m.lock:
            try:
                if not m.primed:
                    await self._prime(match_id, m)
            except RedisError as exc:
                return self._unstored(match_id, exc)
            cp = m.decoder.gate.checkpoint()
            try:
                obj = orjson.loads(data)
            except orjson.JSONDecodeError as exc:
                res = DecodeResult(m.decoder.decode_objects([]).block, [], rejected=1)
                await self._count(match_id, res)
                return IngestOutcome(0, 1, 0, 0, [FrameError("bad_json", f"not valid JSON: {exc}")])
            objs = obj if isinstance(obj, list) else [obj]
            res = m.decoder.decode_objects(objs)
            if not isinstance(obj, list) and res.accepted:
                raw = [data.encode() if isinstance(data, str) else bytes(data)]
            else:
                raw = [orjson.dumps(objs[i]) for i in res.accepted]
            return await self._append(match_id, m, res, raw, cp)

    async def _count(self, match_id: str, res: DecodeResult) -> None:
        try:
            await self._count_pipe(self.redis.pipeline(transaction=False), match_id, res).execute()
        except RedisError:
            pass  # counters are advisory; frames are what must not be lost

    @staticmethod
    def _count_pipe(p: Any, match_id: str, res: DecodeResult) -> Any:
        for name in ("rejected", "duplicates", "late"):
            if getattr(res, name):
                p.hincrby(keys.counts(match_id), name, getattr(res, name))
        return p

    def _unstored(self, match_id: str, exc: Exception) -> IngestOutcome:
        self.error = f"Redis unavailable: {exc}"
        log.warning("%s: frames not stored: %s", match_id, exc)
        return IngestOutcome(0, 0, 0, 0, [], stored=False)

    async def _append(self, match_id: str, m: IngestMatch, res: DecodeResult, raw: list[bytes],
                      cp: tuple) -> IngestOutcome:
        out = IngestOutcome(len(res.block), res.rejected, res.duplicates, res.late, list(res.errors))
        key = keys.frames(match_id)
        arrival = b"%.6f" % time.time()
        p = self.redis.pipeline(transaction=False)
        fids = [int(f) for f in res.block.frame_id]
        for fid, line in zip(fids, raw):
            p.xadd(key, {"f": line, "a": arrival}, id=keys.frame_entry_id(fid))
        self._count_pipe(p, match_id, res)
        if not len(p):
            return out
        try:
            answers = await p.execute(raise_on_error=False)
        except RedisError as exc:
            m.decoder.gate.restore(cp)
            return self._unstored(match_id, exc)
        refused = []
        for fid, ans in zip(fids, answers):
            if isinstance(ans, ResponseError):
                refused.append(fid)
            elif isinstance(ans, Exception):  # the connection broke mid-batch: the provider resends
                m.decoder.gate.restore(cp)
                return self._unstored(match_id, ans)
        if refused:
            # another node (or an earlier attempt) stored these ids, or later ones: Redis refused them
            dup = late = 0
            for fid in refused:
                try:
                    have = await self.redis.xrange(key, keys.frame_entry_id(fid), keys.frame_entry_id(fid))
                except RedisError:
                    have = [1]
                if have:
                    dup += 1
                    out.errors.append(FrameError("duplicate", f"frame {fid} was already stored", fid))
                else:
                    late += 1
                    out.errors.append(FrameError("late", f"frame {fid} arrived after a later frame was stored", fid))
            out.accepted -= len(refused)
            out.duplicates += dup
            out.late += late
            try:
                p = self.redis.pipeline(transaction=False)
                if dup:
                    p.hincrby(keys.counts(match_id), "duplicates", dup)
                if late:
                    p.hincrby(keys.counts(match_id), "late", late)
                await p.execute()
            except RedisError:
                pass
        self.error = None
        return out

    # -- events -----------------------------------------------------------------------------------
    async def add_event(self, match_id: str, m: IngestMatch, event: Any) -> dict[str, Any]:
        """Validate (the single process's rules) and append one match event after the latest frame."""
        checker = MatchRunner.__new__(MatchRunner)  # only the roster is needed for the checks
        checker.roster = m.roster
        ev = MatchRunner._check_event(checker, event)
        try:
            await self._add_event(keys=[keys.frames(match_id)], args=[orjson.dumps(ev)])
        except RedisError as exc:
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        return ev


def create_ingest_app(redis: Any, settings: Settings, ingest_token: str | None) -> FastAPI:
    srv = settings.server
    store = StreamIngest(redis, settings)
    app = FastAPI(title="pacewire ingest", docs_url=None, redoc_url=None)
    app.state.store = store

    def can_write(token: str | None) -> bool:
        return ingest_token is None or _same(token, ingest_token)

    def unauthorised() -> JSONResponse:
        return _error(401, "unauthorised", "a valid token is needed (Authorization: Bearer ... or ?token=)")

    def unknown(match_id: str) -> JSONResponse:
        return _error(404, "unknown_match", f"no match {match_id!r}: set it up with PUT /api/matches/{match_id}")

    def unavailable(exc: Exception) -> JSONResponse:
        return _error(503, "not_stored", str(exc))

    async def read_body(request: Request) -> bytes | JSONResponse:
        chunks, total = [], 0
        async for chunk in request.stream():
            total += len(chunk)
            if total > srv.max_message_bytes:
                return _error(413, "too_large", f"body over {srv.max_message_bytes} bytes")
            chunks.append(chunk)
        return b"".join(chunks)

    @app.put("/api/matches/{match_id}")
    async def put_match(request: Request, match_id: str = ID) -> Response:
        from service.live.matches import SetupConflict

        if not can_write(_token(request.headers, request.query_params)):
            return unauthorised()
        body = await read_body(request)
        if isinstance(body, Response):
            return body
        try:
            data = orjson.loads(body)
        except orjson.JSONDecodeError as exc:
            return _error(400, "bad_json", f"body is not valid JSON: {exc}")
        if not isinstance(data, dict) or set(data) != {"meta", "sheet"}:
            return _error(422, "bad_setup", 'body must be {"meta": CDF meta, "sheet": CDF match sheet}')
        if not MATCH_ID.match(match_id) or match_id in (".", ".."):
            return _error(422, "bad_setup", f"match id {match_id!r} must match {MATCH_ID.pattern}")
        try:
            roster, created = await store.setup(match_id, data["meta"], data["sheet"])
        except SetupError as exc:
            return _error(422, "bad_setup", str(exc))
        except SetupConflict as exc:
            return _error(409, "conflict", str(exc))
        except StoreUnavailable as exc:
            return unavailable(exc)
        return JSONResponse({"match_id": match_id, "created": created, "players": roster.n, "fps": roster.fps},
                            status_code=201 if created else 200)

    @app.post("/api/matches/{match_id}/frames")
    async def post_frames(request: Request, match_id: str = ID) -> Response:
        if not can_write(_token(request.headers, request.query_params)):
            return unauthorised()
        try:
            m = await store.get(match_id)
        except StoreUnavailable as exc:
            return unavailable(exc)
        if m is None:
            return unknown(match_id)
        body = await read_body(request)
        if isinstance(body, Response):
            return body
        lines = body.split(b"\n")
        if len(lines) > srv.max_batch_frames + 1:
            return _error(413, "too_many_frames", f"more than {srv.max_batch_frames} frames in one batch")
        out = await store.ingest_lines(match_id, m, lines)
        if not out.stored:
            return _error(503, "not_stored", store.error or "Redis unavailable", **out.as_dict())
        return JSONResponse(out.as_dict())

    @app.post("/api/matches/{match_id}/events")
    async def post_events(request: Request, match_id: str = ID) -> Response:
        if not can_write(_token(request.headers, request.query_params)):
            return unauthorised()
        try:
            m = await store.get(match_id)
        except StoreUnavailable as exc:
            return unavailable(exc)
        if m is None:
            return unknown(match_id)
        body = await read_body(request)
        if isinstance(body, Response):
            return body
        try:
            data = orjson.loads(body)
        except orjson.JSONDecodeError as exc:
            return _error(400, "bad_json", f"body is not valid JSON: {exc}")
        events = data if isinstance(data, list) else [data]
        done = 0
        for i, ev in enumerate(events):
            try:
                await store.add_event(match_id, m, ev)
            except EventError as exc:
                return _error(422, "bad_event", f"event {i}: {exc}", applied=done)
            except StoreUnavailable as exc:
                return _error(503, "not_stored", str(exc), applied=done)
            done += 1
        return JSONResponse({"applied": done})

    @app.websocket("/ingest/{match_id}")
    async def ws_ingest(ws: WebSocket, match_id: str = ID) -> None:
        await ws.accept()
        if not can_write(_token(ws.headers, ws.query_params)):
            await ws.close(code=1008, reason="unauthorised")
            return

        async def say(code: str, message: str) -> None:
            await ws.send_text(orjson.dumps(envelope("error", match_id, 0, 0.0, None, code=code,
                                                     message=message)).decode())
        try:
            m = await store.get(match_id)
        except StoreUnavailable as exc:
            await say("not_stored", str(exc))
            await ws.close(code=1013)
            return
        if m is None:
            await say("unknown_match", f"no match {match_id!r}")
            await ws.close(code=1008)
            return
        try:
            while True:
                msg = await ws.receive()
                if msg["type"] == "websocket.disconnect":
                    return
                data = msg.get("text")
                if data is None:
                    data = msg.get("bytes")
                if data is None:
                    continue
                out = await store.ingest_message(match_id, m, data)
                errs = [e.as_dict() for e in out.errors]
                if not out.stored:
                    errs.append({"code": "not_stored", "message": store.error or "Redis unavailable"})
                for e in errs:
                    await ws.send_text(orjson.dumps(envelope("error", match_id, 0, 0.0, None, **e)).decode())
        except WebSocketDisconnect:
            return

    @app.get("/healthz")
    async def healthz() -> Response:
        try:
            await redis.ping()
            ok = True
        except RedisError:
            ok = False
        return JSONResponse({"status": "ok" if ok else "degraded", "role": "ingest", "redis": ok,
                             "time": time.time()})

    return app
