"""Routes for integrators: the message schemas, the AsyncAPI document, per-player exports.

* ``GET /api/schema/messages``: every JSON Schema (2020-12) of the messages out, by name;
  ``GET /api/schema/messages/NAME.json`` one of them (what the AsyncAPI document references).
* ``GET /asyncapi.json``: the AsyncAPI 3.0 description of the WebSocket channels.
* ``GET /api/matches/{id}/export.json`` and ``export.csv``: one row of figures per player,
  now, or with ``?at=MATCH_TIME_S`` as they were at that match time (the engine re-runs
  over the recording up to then, in a worker thread).

The schemas and the AsyncAPI document describe the contract, hold no match data and
are public; exports need the read token like every other read.
"""
from __future__ import annotations

import asyncio
import csv
import io
import math
from pathlib import Path
from typing import Any, Callable

import numpy as np
import orjson
from fastapi import APIRouter, Path as PathParam, Request
from fastapi.responses import Response

from pacewire.wire.recording import open_recording
from pacewire.analyze import add_heart_rate, new_match
from pacewire.config import Settings
from pacewire.engine.match import CLOCK_START_MIN, MatchState
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import PERIODS
from pacewire.live.matches import MATCH_ID, Matches
from pacewire.wire.asyncapi import asyncapi_document
from pacewire.wire.messages import CONTRACT_VERSION
from pacewire.wire.schema import JSON_SCHEMA_DIALECT, json_schemas

ID_COLUMNS = ("player_id", "team_id", "jersey_number", "name", "is_goalkeeper", "on_pitch")
FIGURE_COLUMNS = ("minutes", "distance_m", "m_per_min", "hsr_m", "sprint_m", "hsr_efforts", "sprints", "accels",
                  "decels", "speed_ms", "max_speed_ms", "metabolic_power_wkg", "energy_jkg", "high_power_m", "coverage")
_CLOCK_S = np.array([CLOCK_START_MIN[p] * 60.0 for p in PERIODS])  # match clock at each period's start, s


def export_table(snapshot: dict[str, Any]) -> tuple[list[str], list[dict[str, Any]]]:
    """Columns and one row per player (home team first, then by shirt number) from a snapshot body.

    Row values are the snapshot's own: ``zone_BAND_m`` is ``zones[BAND]`` and
    ``peak_Nmin_distance_m`` is ``windows.peak_Nmin.distance_m`` (empty until N minutes were played).
    """
    players = snapshot["players"]
    first = next(iter(players.values()), None)
    zones = list(first["zones"]) if first else []
    peaks = [k for k in first["windows"] if k.startswith("peak_")] if first else []
    columns = [*ID_COLUMNS, *FIGURE_COLUMNS, *(f"zone_{z}_m" for z in zones), *(f"{k}_distance_m" for k in peaks)]
    team_order = {tid: i for i, tid in enumerate(snapshot["teams"])}
    rows = []
    for pid, p in sorted(players.items(), key=lambda kv: (team_order.get(kv[1]["team_id"], 99), kv[1]["jersey_number"])):
        row: dict[str, Any] = {"player_id": pid}
        for c in (*ID_COLUMNS[1:], *FIGURE_COLUMNS):
            row[c] = p.get(c)
        for z in zones:
            row[f"zone_{z}_m"] = p["zones"].get(z)
        for k in peaks:
            w = p["windows"].get(k)
            row[f"{k}_distance_m"] = w["distance_m"] if w else None
        rows.append(row)
    return columns, rows


def _csv(columns: list[str], rows: list[dict[str, Any]]) -> str:
    def cell(v: Any) -> Any:
        if v is None:
            return ""
        if isinstance(v, bool):
            return "true" if v else "false"
        return v

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([cell(r[c]) for c in columns])
    return buf.getvalue()


def _event_applies(ev: dict[str, Any], last_frame_id: int | None, at_s: float) -> bool:
    if "frame_id" in ev:
        return last_frame_id is not None and ev["frame_id"] <= last_frame_id
    return ev.get("match_time_s", math.inf) <= at_s


def _replay_event(state: MatchState, ev: dict[str, Any]) -> None:
    """What a recorded match event does to the figures (as MatchRunner applies it)."""
    kind = ev["type"]
    if kind == "substitution":
        state.substitute(ev["player_off"], ev["player_on"])
    elif kind == "card" and ev.get("card") in ("red", "second_yellow"):
        state.substitute(ev["player_id"], None)
    elif kind == "period_end" and state.period_name() == ev.get("period"):
        state.end_period()


def figures_at(folder: Path, settings: Settings, match_id: str, at_s: float,
               events: list[dict[str, Any]]) -> dict[str, Any]:
    """The snapshot body as it was at match time ``at_s``: the engine over the recorded frames
    up to then (the tail finalised, as a stalled feed shows it) plus the match events up to then.
    Blocking: run it in a thread."""
    rec = open_recording(folder)
    state, decoder = new_match(rec.meta, rec.sheet, settings, match_id)
    add_heart_rate(state, rec)  # samples after the cut stay pending: tracking never reaches them
    fps = state.fps
    for first, lines in rec.batches():
        res = decoder.decode_lines(lines, first_line=first)
        b = res.block
        if len(b):
            clock = _CLOCK_S[b.period] + b.slot / fps
            keep = int(np.searchsorted(clock, at_s + 1e-9, side="right"))  # frames are in match-clock order
            if keep < len(b):
                res.block = b.take(slice(0, keep))
                state.ingest(res)
                break
        state.ingest(res)
    last_fid = state.last_frame_id if state.frames else None
    for ev in events:
        if _event_applies(ev, last_fid, at_s):
            _replay_event(state, ev)
    state.freeze()
    return build_snapshot(state)


def make_router(matches: Matches, can_read: Callable[[str | None], bool]) -> APIRouter:
    # app.py includes this router from create_app, so its helpers are importable by now
    from pacewire.live.app import _error, _token

    router = APIRouter()
    schemas = json_schemas()
    index = orjson.dumps({"v": CONTRACT_VERSION, "dialect": JSON_SCHEMA_DIALECT, "schemas": schemas})
    one = {name: orjson.dumps(s) for name, s in schemas.items()}
    match_id_param = PathParam(pattern=MATCH_ID.pattern)
    srv = matches.settings.server

    @router.get("/api/schema/messages")
    async def get_schemas() -> Response:
        return Response(index, media_type="application/json")

    @router.get("/api/schema/messages/{name}.json")
    async def get_schema(name: str) -> Response:
        if name not in one:
            return _error(404, "unknown_schema", f"no schema {name!r}; there are: {', '.join(one)}")
        return Response(one[name], media_type="application/schema+json")

    @router.get("/asyncapi.json")
    async def get_asyncapi(request: Request) -> Response:
        doc = asyncapi_document(host=request.url.netloc, protocol="wss" if request.url.scheme == "https" else "ws",
                                default_every_s=srv.default_every_s, max_every_s=srv.max_every_s)
        return Response(orjson.dumps(doc), media_type="application/json")

    async def table(request: Request, match_id: str) -> tuple[dict[str, Any], list[str], list[dict[str, Any]]] | Response:
        if not can_read(_token(request.headers, request.query_params)):
            return _error(401, "unauthorised", "a valid token is needed (Authorization: Bearer ... or ?token=)")
        runner = matches.get(match_id)
        if runner is None:
            return _error(404, "unknown_match", f"no match {match_id!r}: set it up with PUT /api/matches/{match_id}")
        at_text = request.query_params.get("at")
        at: float | None = None
        if at_text is not None:
            try:
                at = float(at_text)
                if not math.isfinite(at) or at < 0:
                    raise ValueError
            except ValueError:
                return _error(422, "bad_request", "at must be a match time in seconds, >= 0")
        if at is None:
            runner.broadcaster.invalidate()
            snap = runner.broadcaster.snapshot()
        else:
            try:
                snap = await asyncio.to_thread(figures_at, runner.folder, matches.settings, match_id, at,
                                               list(runner.events))
            except (OSError, ValueError) as exc:
                return _error(503, "no_recording", f"cannot read the recording: {exc}")
        columns, rows = export_table(snap)
        head = {"v": CONTRACT_VERSION, "match_id": match_id, "match_time_s": snap["match_time_s"],
                "period": snap["period"], "at": at}
        return head, columns, rows

    @router.get("/api/matches/{match_id}/export.json")
    async def export_json(request: Request, match_id: str = match_id_param) -> Response:
        out = await table(request, match_id)
        if isinstance(out, Response):
            return out
        head, columns, rows = out
        return Response(orjson.dumps({**head, "columns": columns, "players": rows}), media_type="application/json")

    @router.get("/api/matches/{match_id}/export.csv")
    async def export_csv(request: Request, match_id: str = match_id_param) -> Response:
        out = await table(request, match_id)
        if isinstance(out, Response):
            return out
        head, columns, rows = out
        headers = {"Content-Disposition": f'inline; filename="{match_id}.csv"',
                   "X-Pacewire-Match-Time-S": str(head["match_time_s"])}
        return Response(_csv(columns, rows), media_type="text/csv; charset=utf-8", headers=headers)

    return router
