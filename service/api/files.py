"""A match's files: half-/full-time reports, per-player load budgets, per-player exports.

* ``GET /api/matches/{id}/reports/{kind}/{file}``: ``report.html``, ``report.csv``, ``snapshot.json``,
  ``alerts.csv``
* ``GET``/``PUT /api/matches/{id}/budgets``: caps per player (validated; kept with the match)
* ``GET /api/matches/{id}/export.json`` and ``export.csv``: one row of figures per player, now,
  or as they were at a match time: ``?at=`` seconds of the match clock, ``MM:SS``, or stoppage
  time as ``45+2:00`` (the 2nd minute added to the first half), with ``&period=`` when the clock
  alone names two moments (first-half stoppage time overlaps the second half's clock); the engine
  goes on from the nearest checkpoint before then, in a worker thread
"""
from __future__ import annotations

import math
import re
from typing import Any

import orjson
from fastapi import APIRouter, Request
from fastapi.responses import FileResponse, JSONResponse, Response

from pacewire.api.auth import Tokens
from pacewire.api.backend import FilesBackend
from pacewire.api.errors import ApiError
from pacewire.api.requests import MatchIdParam, match_id_or_404, parse_json, read_body
from pacewire.config import Server
from pacewire.engine.match import CLOCK_START_MIN
from pacewire.engine.types import PERIODS
from pacewire.reports.builder import FILES, KINDS
from pacewire.reports.export import export_csv, export_table
from pacewire.wire.messages import CONTRACT_VERSION

MEDIA = {"report.html": "text/html; charset=utf-8", "report.csv": "text/csv; charset=utf-8",
         "snapshot.json": "application/json", "alerts.csv": "text/csv; charset=utf-8"}


def file_routes(backend: FilesBackend, tokens: Tokens, limits: Server) -> APIRouter:
    router = APIRouter()

    @router.get("/api/matches/{match_id}/reports/{kind}/{name}")
    async def get_report_file(request: Request, match_id: str, kind: str, name: str) -> FileResponse:
        tokens.check(request, write=False)
        match_id_or_404(match_id)
        if kind not in KINDS or name not in FILES:
            raise ApiError(404, "unknown_report", f"reports are {', '.join(KINDS)}; files are {', '.join(FILES)}")
        path = backend.report_file(match_id, kind, name)
        return FileResponse(path, media_type=MEDIA[name], headers={"Cache-Control": "no-cache"})

    @router.get("/api/matches/{match_id}/budgets")
    async def get_budgets(request: Request, match_id: str) -> JSONResponse:
        tokens.check(request, write=False)
        return JSONResponse({"match_id": match_id, **backend.budgets(match_id_or_404(match_id))})

    @router.put("/api/matches/{match_id}/budgets")
    async def put_budgets(request: Request, match_id: str) -> JSONResponse:
        tokens.check(request, write=True)
        match_id_or_404(match_id)
        backend.budgets(match_id)  # an unknown match is refused before its body is read
        data = parse_json(await read_body(request, limits.max_message_bytes))
        return JSONResponse({"match_id": match_id, **backend.set_budgets(match_id, data)})

    async def table(request: Request, match_id: str) -> tuple[dict[str, Any], list[str], list[dict[str, Any]]]:
        tokens.check(request, write=False)
        at, period = _match_time(request.query_params.get("at"), request.query_params.get("period"))
        snap = await backend.figures(match_id, at, period)
        columns, rows = export_table(snap)
        head = {"v": CONTRACT_VERSION, "match_id": match_id, "match_time_s": snap["match_time_s"],
                "period": snap["period"], "at": at}
        return head, columns, rows

    @router.get("/api/matches/{match_id}/export.json")
    async def export_json(request: Request, match_id: str = MatchIdParam) -> Response:
        head, columns, rows = await table(request, match_id)
        return Response(orjson.dumps({**head, "columns": columns, "players": rows}), media_type="application/json")

    @router.get("/api/matches/{match_id}/export.csv")
    async def export_csv_route(request: Request, match_id: str = MatchIdParam) -> Response:
        head, columns, rows = await table(request, match_id)
        headers = {"Content-Disposition": f'inline; filename="{match_id}.csv"',
                   "X-Pacewire-Match-Time-S": str(head["match_time_s"])}
        return Response(export_csv(columns, rows), media_type="text/csv; charset=utf-8", headers=headers)

    return router


# stoppage time "45+2:00": the period whose nominal end is that minute (the next period's start)
_ENDING_AT = {CLOCK_START_MIN[b]: a for a, b in zip(PERIODS, PERIODS[1:], strict=False)}
_CLOCK = re.compile(r"^(?:(?P<base>\d+)\+)?(?P<min>\d+)(?::(?P<sec>[0-5]?\d(?:\.\d+)?))?$")
_BAD_AT = "at must be match-clock seconds (2820), MM:SS (47:00) or stoppage time (45+2:00)"


def _match_time(text: str | None, period: str | None) -> tuple[float | None, str | None]:
    """``?at=`` and ``?period=`` as (match clock seconds, period or None)."""
    if period is not None and period not in PERIODS:
        raise ApiError(422, "bad_request", f"period must be one of {', '.join(PERIODS)}")
    if text is None:
        if period is not None:
            raise ApiError(422, "bad_request", "period goes with at (a match time)")
        return None, None
    text = text.strip()
    if ":" not in text and "+" not in text:
        try:
            at = float(text)
        except ValueError:
            raise ApiError(422, "bad_request", _BAD_AT) from None
        if not math.isfinite(at) or at < 0:
            raise ApiError(422, "bad_request", _BAD_AT)
        return at, period
    m = _CLOCK.match(text)
    if m is None:
        raise ApiError(422, "bad_request", _BAD_AT)
    minutes, seconds = int(m["min"]), float(m["sec"] or 0.0)
    if m["base"] is None:
        return minutes * 60.0 + seconds, period
    base = int(m["base"])
    stoppage = _ENDING_AT.get(base)
    if stoppage is None:
        raise ApiError(422, "bad_request",
                       f"stoppage time follows {', '.join(map(str, _ENDING_AT))} minutes, not {base}")
    if period is not None and period != stoppage:
        raise ApiError(422, "bad_request", f"{text} is {stoppage} stoppage time, not {period}")
    return (base + minutes) * 60.0 + seconds, stoppage
