"""The ``ingest`` role: set-up, frames and heart rate in, appended to Redis Streams per match.

Same endpoints and checks as the single process (the decoder decides what is
accepted); an accepted frame becomes stream entry ``frame_id-1`` (keys.py), so
Redis itself refuses a duplicate or late frame whichever ingest node sends it.
Heart-rate samples are gated per player (docs/wearables.md): the gate lives in
Redis beside the samples' stream and a batch is appended only if the gate it
was checked against is still the stored one, so every node continues one gate.
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

import numpy as np
import orjson
from fastapi import FastAPI, Request, WebSocket, WebSocketDisconnect
from fastapi.responses import JSONResponse, Response
from redis.exceptions import RedisError, ResponseError

from pacewire.config import Settings
from pacewire.engine.types import Roster
from pacewire.live.app import ID, _error, _same, _token
from pacewire.live.ingest import EventError, IngestOutcome, MatchRunner
from pacewire.live.matches import MATCH_ID
from pacewire.params import heart_params
from pacewire.scale import keys
from pacewire.wire.cdf import DecodeResult, FrameDecoder, FrameError, SetupError, parse_message, parse_setup
from pacewire.wire.heart import HrDecoder, HrGate
from pacewire.wire.messages import envelope

log = logging.getLogger("pacewire.scale.ingest")

# An event entry goes right after the stream's top entry (same millisecond part, next sequence number).
_ADD_EVENT = """
local top = redis.call('XREVRANGE', KEYS[1], '+', '-', 'COUNT', 1)
local ms = '0'
if #top > 0 then ms = string.match(top[1][1], '^(%d+)-') end
return redis.call('XADD', KEYS[1], ms .. '-*', 'e', ARGV[1])
"""

# Heart-rate samples go in only if the gate they passed is still the stored one (its version), then the
# gate is stored with the next version: a compare-and-set, so two nodes never both admit a player's sample.
# KEYS: hr stream, gate hash, counts hash. ARGV: version checked against, new gate, rejected, duplicates,
# late, then 4 per sample: line, player id, t (UTC s), bpm. Returns {1, new version} or {0, version, gate}.
_APPEND_HR = """
local v = redis.call('HGET', KEYS[2], 'v') or ''
if v ~= ARGV[1] then return {0, v, redis.call('HGET', KEYS[2], 'g') or ''} end
for a = 6, #ARGV, 4 do
  redis.call('XADD', KEYS[1], '*', 'h', ARGV[a], 'p', ARGV[a + 1], 't', ARGV[a + 2], 'b', ARGV[a + 3])
end
local names = {'hr_rejected', 'hr_duplicates', 'hr_late'}
for k = 1, 3 do
  if tonumber(ARGV[2 + k]) > 0 then redis.call('HINCRBY', KEYS[3], names[k], ARGV[2 + k]) end
end
local nv = tostring((tonumber(v) or 0) + 1)
redis.call('HSET', KEYS[2], 'v', nv, 'g', ARGV[2])
return {1, nv}
"""
HR_ATTEMPTS = 20  # compare-and-set rounds before a batch is answered not_stored (nodes racing on one match)


class StoreUnavailable(RuntimeError):
    """Redis could not be reached: nothing was kept."""


@dataclass
class IngestMatch:
    roster: Roster
    setup_raw: bytes
    decoder: FrameDecoder
    hr: HrDecoder
    lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    primed: bool = False
    hr_lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    hr_version: str | None = None  # version of the stored gate that hr.gate equals; None: not loaded yet


def gate_bytes(gate: HrGate) -> bytes:
    """The heart-rate gate as stored in Redis: last t, last bpm, jump streak per player (float64)."""
    return np.stack([gate.last_t, gate.last_bpm, gate.streak.astype(np.float64)]).tobytes()


def load_gate(gate: HrGate, raw: bytes | None) -> None:
    """Set ``gate`` to the stored one; a missing or differently sized one (another set-up) is a fresh gate."""
    if raw and len(raw) == 3 * 8 * gate.n:
        a = np.frombuffer(raw, np.float64).reshape(3, gate.n)
        gate.restore((a[0], a[1], a[2].astype(np.int64)))
    else:
        gate.restore(HrGate(gate.n).checkpoint())


class StreamIngest:
    """Per-match decoders in front of the Redis Streams."""

    def __init__(self, redis: Any, settings: Settings) -> None:
        self.redis = redis
        self.settings = settings
        self.matches: dict[str, IngestMatch] = {}
        self.error: str | None = None
        self._add_event = redis.register_script(_ADD_EVENT)
        self._append_hr = redis.register_script(_APPEND_HR)

    def _new(self, roster: Roster, raw: bytes) -> IngestMatch:
        d = self.settings.decode
        return IngestMatch(roster, raw, FrameDecoder(roster, d.outside_margin_m, d.recent_ids),
                           HrDecoder(roster, heart_params(self.settings)))

    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        """Store the set-up in Redis (every role reads the roster from there). Raises SetupError,
        SetupConflict, StoreUnavailable."""
        from pacewire.live.matches import SetupConflict

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
                if await self.redis.xlen(keys.hr(match_id)):
                    raise SetupConflict(f"match {match_id} already has heart-rate samples with a different set-up")
            async with self.redis.pipeline(transaction=True) as p:
                p.set(keys.setup(match_id), raw)
                p.sadd(keys.MATCHES, match_id)
                p.delete(keys.hr_gate(match_id))  # a gate is per roster: the new set-up starts afresh
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
        log.warning("%s: not stored: %s", match_id, exc)
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

    # -- heart rate -------------------------------------------------------------------------------
    async def ingest_hr(self, match_id: str, m: IngestMatch, data: bytes | str | list[bytes]) -> IngestOutcome:
        """Heart-rate samples: JSON Lines (a list of lines, HTTP) or one message (an object or an
        array), checked as the single process checks them (``MatchRunner.ingest_hr``) against the
        gate stored in Redis; answered once Redis has the accepted samples."""
        dec = m.hr
        objs = None if isinstance(data, list) else parse_message(data)
        if isinstance(objs, FrameError):  # nothing reached the gate: count it, as frames count bad JSON
            try:
                await self.redis.hincrby(keys.counts(match_id), "hr_rejected", 1)
            except RedisError:
                pass
            return IngestOutcome(0, 1, 0, 0, [objs])
        async with m.hr_lock:
            for _attempt in range(HR_ATTEMPTS):
                try:
                    if m.hr_version is None:
                        v, g = await self.redis.hmget(keys.hr_gate(match_id), "v", "g")
                        load_gate(dec.gate, g)
                        m.hr_version = (v or b"").decode()
                except RedisError as exc:
                    return self._unstored(match_id, exc)
                cp = dec.gate.checkpoint()
                if objs is None:
                    res = dec.decode_lines(data)  # type: ignore[arg-type]
                    raw = [data[i].strip() for i in res.accepted]  # type: ignore[index]
                else:
                    res = dec.decode_objects(objs)
                    raw = [orjson.dumps(objs[i]) for i in res.accepted]
                out = IngestOutcome(len(res), res.rejected, res.duplicates, res.late, res.errors)
                if not (len(res) or res.rejected or res.duplicates or res.late):
                    return out
                args: list[Any] = [m.hr_version, gate_bytes(dec.gate), res.rejected, res.duplicates, res.late]
                ids = m.roster.players
                for line, i, t, bpm in zip(raw, res.player.tolist(), res.t.tolist(), res.bpm.tolist()):
                    args += [line, ids[i].id, repr(t), repr(bpm)]
                try:
                    ans = await self._append_hr(keys=[keys.hr(match_id), keys.hr_gate(match_id),
                                                      keys.counts(match_id)], args=args)
                except RedisError as exc:
                    dec.gate.restore(cp)
                    m.hr_version = None  # the script may have run before the connection broke: reload
                    out.accepted, out.stored = 0, False
                    self._unstored(match_id, exc)
                    return out
                if int(ans[0]) == 1:
                    m.hr_version = ans[1].decode()
                    self.error = None
                    return out
                # another node moved the gate on since this one last stored it: take it and check again
                load_gate(dec.gate, ans[2])
                m.hr_version = ans[1].decode()
        out = IngestOutcome(0, 0, 0, 0, [], stored=False)
        self.error = f"heart-rate gate of match {match_id} changed {HR_ATTEMPTS} times during one batch; send it again"
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

    async def writing(request: Request, match_id: str) -> tuple[IngestMatch, bytes] | Response:
        """A write request's match and body, or the answer refusing it (token, match, size)."""
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
        return m, body

    @app.put("/api/matches/{match_id}")
    async def put_match(request: Request, match_id: str = ID) -> Response:
        from pacewire.live.matches import SetupConflict

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
        got = await writing(request, match_id)
        if isinstance(got, Response):
            return got
        m, body = got
        lines = body.split(b"\n")
        if len(lines) > srv.max_batch_frames + 1:
            return _error(413, "too_many_frames", f"more than {srv.max_batch_frames} frames in one batch")
        out = await store.ingest_lines(match_id, m, lines)
        if not out.stored:
            return _error(503, "not_stored", store.error or "Redis unavailable", **out.as_dict())
        return JSONResponse(out.as_dict())

    @app.post("/api/matches/{match_id}/events")
    async def post_events(request: Request, match_id: str = ID) -> Response:
        got = await writing(request, match_id)
        if isinstance(got, Response):
            return got
        m, body = got
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

    @app.post("/api/matches/{match_id}/hr")
    async def post_hr(request: Request, match_id: str = ID) -> Response:
        """Heart-rate samples (docs/wearables.md): JSON Lines, or one JSON array."""
        got = await writing(request, match_id)
        if isinstance(got, Response):
            return got
        m, body = got
        data: bytes | list[bytes] = body if body.lstrip()[:1] == b"[" else body.split(b"\n")
        if isinstance(data, list) and len(data) > srv.max_batch_frames + 1:
            return _error(413, "too_many_samples", f"more than {srv.max_batch_frames} samples in one batch")
        out = await store.ingest_hr(match_id, m, data)
        if not out.stored:
            return _error(503, "not_stored", store.error or "Redis unavailable", **out.as_dict())
        return JSONResponse(out.as_dict())

    async def ingest_socket(ws: WebSocket, match_id: str, hr: bool) -> None:
        """A provider's socket: frames (or heart-rate samples) in, an ``error`` message per refusal out."""
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
        can_reply = True
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
                out = await (store.ingest_hr(match_id, m, data) if hr else store.ingest_message(match_id, m, data))
                errs = [e.as_dict() for e in out.errors]
                if not out.stored:
                    errs.append({"code": "not_stored", "message": store.error or "Redis unavailable"})
                for e in errs if can_reply else ():
                    try:
                        await ws.send_text(orjson.dumps(envelope("error", match_id, 0, 0.0, None, **e)).decode())
                    except Exception:  # the provider closed its side: still read what it sent before closing
                        can_reply = False
                        break
        except WebSocketDisconnect:
            return

    @app.websocket("/ingest/{match_id}")
    async def ws_ingest(ws: WebSocket, match_id: str = ID) -> None:
        await ingest_socket(ws, match_id, hr=False)

    @app.websocket("/ingest/{match_id}/hr")
    async def ws_ingest_hr(ws: WebSocket, match_id: str = ID) -> None:
        await ingest_socket(ws, match_id, hr=True)

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
