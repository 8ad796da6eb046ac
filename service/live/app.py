"""The FastAPI app: the endpoints of DESIGN §3."""
from __future__ import annotations

import asyncio
import hmac
import logging
import time
from contextlib import asynccontextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import orjson
from fastapi import FastAPI, Path as PathParam, Request, WebSocket, WebSocketDisconnect
from fastapi.responses import FileResponse, JSONResponse, PlainTextResponse, Response
from fastapi.staticfiles import StaticFiles
from prometheus_client import CONTENT_TYPE_LATEST, CollectorRegistry, Counter, Gauge, Histogram, generate_latest

from pacewire.config import Settings
from pacewire.live.broadcaster import Subscriber, View, ViewError
from pacewire.live.ingest import EventError, Hooks
from pacewire.live.integrations import make_router
from pacewire.live.matches import MATCH_ID, Matches, SetupConflict
from pacewire.live.reporting import add_routes as add_report_routes
from pacewire.wire.cdf import SetupError
from pacewire.wire.messages import envelope

log = logging.getLogger("pacewire.app")
ID = PathParam(pattern=MATCH_ID.pattern)


@dataclass(frozen=True)
class ServerOptions:
    data_dir: Path
    settings: Settings
    ingest_token: str | None = None
    view_token: str | None = None


class Metrics:
    def __init__(self) -> None:
        r = self.registry = CollectorRegistry()
        self.frames = Counter("pacewire_frames_in_total", "Frames accepted", registry=r)
        self.rejected = Counter("pacewire_frames_rejected_total", "Frames rejected", registry=r)
        self.messages = Counter("pacewire_messages_out_total", "Messages queued to subscribers", registry=r)
        self.dropped = Counter("pacewire_dropped_backlogs_total", "Slow-subscriber backlogs replaced by a snapshot", registry=r)
        self.subscribers = Gauge("pacewire_subscribers", "Subscribers", ["match"], registry=r)
        self.lag = Gauge("pacewire_lag_seconds", "Median arrival lag", ["match"], registry=r)
        self.tasks = Gauge("pacewire_asyncio_tasks", "Tasks alive on the event loop (a leak shows as growth)", registry=r)
        self.processing = Histogram("pacewire_processing_seconds", "Time per applied block: engine, then deltas written to waiting subscribers", registry=r,
                                    buckets=(0.0005, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.5, 1, 5))

    def hooks(self) -> Hooks:
        return Hooks(frames_in=self.frames.inc, rejected=self.rejected.inc, processing=self.processing.observe,
                     messages_out=self.messages.inc, dropped=self.dropped.inc)


def _token(headers: Any, query: Any) -> str | None:
    auth = headers.get("authorization") or ""
    if auth.lower().startswith("bearer "):
        return auth[7:].strip()
    return query.get("token")


def _same(a: str | None, b: str) -> bool:
    return a is not None and hmac.compare_digest(a.encode(), b.encode())


def _error(status: int, code: str, message: str, **extra: Any) -> JSONResponse:
    return JSONResponse({"error": {"code": code, "message": message, **extra}}, status_code=status)


WEB = Path(__file__).resolve().parent.parent / "web"  # the bench page (static, no build step)


def create_app(opts: ServerOptions) -> FastAPI:
    settings = opts.settings
    srv = settings.server
    metrics = Metrics()
    matches = Matches(opts.data_dir, settings, metrics.hooks())

    @asynccontextmanager
    async def lifespan(app: FastAPI):  # noqa: ANN202
        opts.data_dir.mkdir(parents=True, exist_ok=True)
        recovered = matches.recover_all()  # before serving: frames must find their match rebuilt
        if recovered:
            log.info("recovered matches: %s", ", ".join(recovered))
        yield
        await matches.stop_all()

    app = FastAPI(title="pacewire", lifespan=lifespan, docs_url=None, redoc_url=None)
    app.state.matches = matches
    app.state.metrics = metrics

    def can_write(token: str | None) -> bool:
        return opts.ingest_token is None or _same(token, opts.ingest_token)

    def can_read(token: str | None) -> bool:
        if opts.view_token is None:
            return True
        return _same(token, opts.view_token) or (opts.ingest_token is not None and _same(token, opts.ingest_token))

    app.include_router(make_router(matches, can_read))  # schemas, AsyncAPI, exports (integrations.py)

    def unauthorised() -> JSONResponse:
        return _error(401, "unauthorised", "a valid token is needed (Authorization: Bearer ... or ?token=)")

    def unknown(match_id: str) -> JSONResponse:
        return _error(404, "unknown_match", f"no match {match_id!r}: set it up with PUT /api/matches/{match_id}")

    async def read_body(request: Request) -> bytes | JSONResponse:
        size = request.headers.get("content-length")
        if size is not None and size.isdigit() and int(size) > srv.max_message_bytes:
            return _error(413, "too_large", f"body over {srv.max_message_bytes} bytes")
        chunks, total = [], 0
        async for chunk in request.stream():
            total += len(chunk)
            if total > srv.max_message_bytes:
                return _error(413, "too_large", f"body over {srv.max_message_bytes} bytes")
            chunks.append(chunk)
        return b"".join(chunks)

    async def write_request(request: Request, match_id: str) -> tuple[Any, bytes] | Response:
        """The opening of every provider POST: token, match, body; a Response when refused."""
        if not can_write(_token(request.headers, request.query_params)):
            return unauthorised()
        runner = matches.get(match_id)
        if runner is None:
            return unknown(match_id)
        body = await read_body(request)
        if isinstance(body, Response):
            return body
        return runner, body

    # -- set-up and ingest -------------------------------------------------------------------
    @app.put("/api/matches/{match_id}")
    async def put_match(request: Request, match_id: str = ID) -> Response:
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
        try:
            runner, created = matches.setup(match_id, data["meta"], data["sheet"])
        except SetupError as exc:
            return _error(422, "bad_setup", str(exc))
        except SetupConflict as exc:
            return _error(409, "conflict", str(exc))
        except ValueError as exc:  # a match id the folder rules refuse (".", "..")
            return _error(422, "bad_match_id", str(exc))
        except OSError as exc:
            return _error(503, "storage", f"cannot write the match folder: {exc.strerror or exc}")
        return JSONResponse({"match_id": match_id, "created": created, "players": runner.roster.n,
                             "fps": runner.roster.fps}, status_code=201 if created else 200)

    @app.post("/api/matches/{match_id}/frames")
    async def post_frames(request: Request, match_id: str = ID) -> Response:
        got = await write_request(request, match_id)
        if isinstance(got, Response):
            return got
        runner, body = got
        lines = body.split(b"\n")
        if len(lines) > srv.max_batch_frames + 1:
            return _error(413, "too_many_frames", f"more than {srv.max_batch_frames} frames in one batch")
        out = await runner.ingest_lines(lines, durable=True)
        if not out.stored:
            return _error(503, "not_stored", runner.recorder.error or "the recording cannot be written", **out.as_dict())
        return JSONResponse(out.as_dict())

    @app.post("/api/matches/{match_id}/events")
    async def post_events(request: Request, match_id: str = ID) -> Response:
        got = await write_request(request, match_id)
        if isinstance(got, Response):
            return got
        runner, body = got
        try:
            data = orjson.loads(body)
        except orjson.JSONDecodeError as exc:
            return _error(400, "bad_json", f"body is not valid JSON: {exc}")
        events = data if isinstance(data, list) else [data]
        done = []
        for i, ev in enumerate(events):
            try:
                done.append(runner.add_event(ev))
            except EventError as exc:
                return _error(422, "bad_event", f"event {i}: {exc}", applied=len(done))
            except OSError as exc:
                return _error(503, "not_stored", f"cannot record the event: {exc.strerror or exc}", applied=len(done))
            runner.event_message(done[-1])
        return JSONResponse({"applied": len(done)})

    @app.post("/api/matches/{match_id}/hr")
    async def post_hr(request: Request, match_id: str = ID) -> Response:
        """Heart-rate samples (docs/wearables.md): JSON Lines, or one JSON array."""
        got = await write_request(request, match_id)
        if isinstance(got, Response):
            return got
        runner, body = got
        data: bytes | list[bytes] = body if body.lstrip()[:1] == b"[" else body.split(b"\n")
        if isinstance(data, list) and len(data) > srv.max_batch_frames + 1:
            return _error(413, "too_many_samples", f"more than {srv.max_batch_frames} samples in one batch")
        out = await runner.ingest_hr(data, durable=True)
        if not out.stored:
            return _error(503, "not_stored", runner.hr_recorder.error or "the recording cannot be written", **out.as_dict())
        return JSONResponse(out.as_dict())

    async def ingest_socket(ws: WebSocket, match_id: str, hr: bool) -> None:
        """A provider's socket: frames (or heart-rate samples) in, an ``error`` message per refusal out."""
        await ws.accept()  # accept first, so the refusal is a close code the client can read
        if not can_write(_token(ws.headers, ws.query_params)):
            await ws.close(code=1008, reason="unauthorised")
            return
        runner = matches.get(match_id)
        if runner is None:
            await ws.send_text(orjson.dumps(envelope("error", match_id, 0, 0.0, None, code="unknown_match",
                                                     message=f"no match {match_id!r}")).decode())
            await ws.close(code=1008)
            return
        recorder = runner.hr_recorder if hr else runner.recorder
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
                out = await (runner.ingest_hr(data, durable=False) if hr else runner.ingest_message(data))
                errs = [e.as_dict() for e in out.errors]
                if not out.stored:
                    errs.append({"code": "not_stored", "message": recorder.error or "the recording cannot be written"})
                for e in errs if can_reply else ():
                    try:
                        await ws.send_text(orjson.dumps(envelope("error", match_id, 0, runner.state.match_time_s(),
                                                                 runner.state.period_name(), **e)).decode())
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

    # -- reads -----------------------------------------------------------------------------------
    @app.get("/api/matches")
    async def list_matches(request: Request) -> Response:
        if not can_read(_token(request.headers, request.query_params)):
            return unauthorised()
        return JSONResponse({"matches": [r.summary() for r in matches.runners.values()]})

    @app.get("/api/matches/{match_id}/snapshot")
    async def get_snapshot(request: Request, match_id: str = ID) -> Response:
        if not can_read(_token(request.headers, request.query_params)):
            return unauthorised()
        runner = matches.get(match_id)
        if runner is None:
            return unknown(match_id)
        runner.broadcaster.invalidate()
        snap = runner.broadcaster.snapshot()
        body = {k: snap[k] for k in ("players", "teams", "health")}
        msg = envelope("snapshot", match_id, 0, snap["match_time_s"], snap["period"], **body)
        return Response(orjson.dumps(msg), media_type="application/json")

    @app.get("/api/matches/{match_id}/reports")
    async def get_reports(request: Request, match_id: str = ID) -> Response:
        if not can_read(_token(request.headers, request.query_params)):
            return unauthorised()
        runner = matches.get(match_id)
        if runner is None:
            return unknown(match_id)
        return JSONResponse({"match_id": match_id, "reports": runner.followup.listing()})

    # report files, per-player load budgets (service/live/reporting.py)
    add_report_routes(app, matches, can_read, can_write, _token, _error)

    @app.websocket("/live/{match_id}")
    async def ws_live(ws: WebSocket, match_id: str = ID) -> None:
        await ws.accept()
        if not can_read(_token(ws.headers, ws.query_params)):
            await ws.close(code=1008, reason="unauthorised")
            return

        async def refuse(code: str, message: str) -> None:
            await ws.send_text(orjson.dumps(envelope("error", match_id, 0, 0.0, None, code=code, message=message)).decode())
            await ws.close(code=1008)

        runner = matches.get(match_id)
        if runner is None:
            return await refuse("unknown_match", f"no match {match_id!r}")
        q = ws.query_params
        try:
            every = float(q.get("every", srv.default_every_s))
            if not (every == every) or every < 1.0 / runner.roster.fps - 1e-9 or every > srv.max_every_s:
                raise ValueError
        except ValueError:
            return await refuse("bad_request", f"every must be a number of seconds from {1 / runner.roster.fps:g} to {srv.max_every_s:g}")
        since: int | None = None
        if "since" in q:
            try:
                since = int(q["since"])
                if since < 0:
                    raise ValueError
            except ValueError:
                return await refuse("bad_request", "since must be a whole number >= 0")
        try:
            view = View.parse(q.get("view", "all"), runner.roster.team_ids, set(runner.roster.index))
        except ViewError as exc:
            return await refuse("bad_request", str(exc))
        b = runner.broadcaster
        if b.subscriber_count >= b.max_subscribers:
            return await refuse("too_many_subscribers", f"this match already has {b.max_subscribers} subscribers")
        sub = Subscriber(ws.send_text, srv.subscriber_queue)
        b.attach(sub, view, every, since)
        metrics.subscribers.labels(match_id).set(b.subscriber_count)
        pump = asyncio.create_task(b.pump(sub))
        try:
            while True:
                msg = await ws.receive()
                if msg["type"] == "websocket.disconnect":
                    break
        except (WebSocketDisconnect, RuntimeError):
            pass
        finally:
            b.detach(sub)
            pump.cancel()
            try:
                await pump
            except (asyncio.CancelledError, Exception):
                pass
            metrics.subscribers.labels(match_id).set(b.subscriber_count)

    # -- operators -----------------------------------------------------------------------------------
    @app.get("/healthz")
    async def healthz() -> Response:
        return JSONResponse({"status": "ok", "matches": len(matches.runners), "time": time.time()})

    @app.get("/metrics")
    async def get_metrics() -> Response:
        for mid, r in matches.runners.items():
            lag, _ = r.state.health.lag(time.time())
            if lag is not None:
                metrics.lag.labels(mid).set(lag)
        metrics.tasks.set(len(asyncio.all_tasks()))
        return PlainTextResponse(generate_latest(metrics.registry), media_type=CONTENT_TYPE_LATEST)

    app.mount("/static", StaticFiles(directory=WEB), name="static")

    @app.get("/")
    async def index() -> Response:
        return FileResponse(WEB / "index.html", headers={"Cache-Control": "no-cache"})

    return app
