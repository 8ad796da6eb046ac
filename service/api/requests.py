"""What every route reads from a request: a bounded body, JSON, a match id, stream parameters."""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import orjson
from fastapi import Path as PathParam, Request

from pacewire.api.errors import ApiError, unknown_match
from pacewire.engine.types import Roster
from pacewire.wire.match_id import MATCH_ID, is_match_id
from pacewire.wire.view import View, ViewError

# The match id path parameter of every route (FastAPI refuses other characters with a 422).
MatchIdParam = PathParam(pattern=MATCH_ID.pattern)


def match_id_or_404(match_id: str) -> str:
    """Routes without the pattern in their path (file routes) still name only real matches."""
    if not is_match_id(match_id):
        raise unknown_match(match_id)
    return match_id


async def read_body(request: Request, limit: int) -> bytes:
    """The whole body, refused with 413 once it passes ``limit`` bytes (declared or streamed)."""
    size = request.headers.get("content-length")
    if size is not None and size.isdigit() and int(size) > limit:
        raise ApiError(413, "too_large", f"body over {limit} bytes")
    chunks, total = [], 0
    async for chunk in request.stream():
        total += len(chunk)
        if total > limit:
            raise ApiError(413, "too_large", f"body over {limit} bytes")
        chunks.append(chunk)
    return b"".join(chunks)


def parse_json(body: bytes | str) -> Any:
    try:
        return orjson.loads(body)
    except orjson.JSONDecodeError as exc:
        raise ApiError(400, "bad_json", f"body is not valid JSON: {exc}") from None


def json_lines(body: bytes, limit: int, what: str) -> list[bytes]:
    """A JSON Lines body as lines, at most ``limit`` of them (a trailing newline is free)."""
    lines = body.split(b"\n")
    if len(lines) > limit + 1:
        raise ApiError(413, f"too_many_{what}", f"more than {limit} {what} in one batch")
    return lines


def bad_param(name: str, message: str) -> ApiError:
    """A refused query parameter: the message names it, and so does ``param``."""
    return ApiError(422, "bad_request", message, param=name)


@dataclass(frozen=True)
class StreamParams:
    """``WS /live/{id}?every=S&view=V&since=N``, checked against the match's roster."""

    every: float
    view: View
    since: int | None

    @staticmethod
    def parse(query: Any, roster: Roster, default_every_s: float, max_every_s: float) -> StreamParams:
        low = 1.0 / roster.fps
        try:
            every = float(query.get("every", default_every_s))
            if not math.isfinite(every) or every < low - 1e-9 or every > max_every_s:
                raise ValueError
        except ValueError:
            raise bad_param("every", f"every must be a number of seconds from {low:g} to {max_every_s:g}, "
                                     f"not {str(query.get('every'))[:20]!r}") from None
        since: int | None = None
        if "since" in query:
            try:
                since = int(query["since"])
                if since < 0:
                    raise ValueError
            except ValueError:
                raise bad_param("since", f"since must be a whole number >= 0, not {str(query['since'])[:20]!r}"
                                ) from None
        try:
            view = View.parse(str(query.get("view", "all")), roster.team_ids, set(roster.index))
        except ViewError as exc:
            raise bad_param("view", str(exc)) from None
        return StreamParams(every, view, since)
