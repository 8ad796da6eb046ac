"""Routes raise, one handler renders: every refusal is ``{"error": {"code", "message", ...}}``.

A route raises :class:`ApiError` (status, code, message, extra fields), or lets a
:class:`~pacewire.errors.PacewireError` with a wire ``code`` through; the handler
installed by :func:`install` turns either into the response body. On a
websocket the same error becomes an ``error`` message and a close
(:func:`close_code`).
"""
from __future__ import annotations

from typing import Any, TypeVar

import orjson
from fastapi import FastAPI, Request
from fastapi.responses import JSONResponse

from pacewire.errors import PacewireError
from pacewire.wire.messages import envelope

# The HTTP status of each wire code a domain error carries (routes raising ApiError give their own).
STATUS = {
    "bad_json": 400, "unauthorised": 401, "unknown_match": 404, "conflict": 409, "match_ended": 409, "too_large": 413,
    "bad_setup": 422, "bad_event": 422, "bad_budgets": 422, "bad_request": 422, "bad_match_id": 422,
    "not_stored": 503, "storage": 503, "unavailable": 503, "not_ready": 503,
}


class ApiError(PacewireError):
    """A refused request: HTTP ``status``, wire ``code``, a ``message`` a person can act on."""

    def __init__(self, status: int, code: str, message: str, **extra: Any) -> None:
        super().__init__(message)
        self.status = status
        self.code = code
        self.message = message
        self.extra = extra

    @classmethod
    def of(cls, exc: PacewireError, message: str | None = None, **extra: Any) -> ApiError:
        """The API error for a domain error (its ``code`` decides the status)."""
        if isinstance(exc, ApiError):
            return exc
        code = getattr(exc, "code", "error")
        return cls(STATUS.get(code, 500), code, message or str(exc), **extra)

    def body(self) -> dict[str, Any]:
        return {"error": {"code": self.code, "message": self.message, **self.extra}}


def unauthorised() -> ApiError:
    return ApiError(401, "unauthorised", "a valid token is needed (Authorization: Bearer ... or ?token=)")


def unknown_match(match_id: str) -> ApiError:
    return ApiError(404, "unknown_match", f"no match {match_id!r}: set it up with PUT /api/matches/{match_id}")


def error_text(match_id: str, clock: tuple[float, str | None], **body: Any) -> str:
    """An ``error`` message to a socket (``code``, ``message`` and what else the body holds)."""
    return orjson.dumps(envelope("error", match_id, 0, clock[0], clock[1], **body)).decode()


CLOSE_REASON_BYTES = 123  # the most a websocket close frame's reason may hold (RFC 6455, 5.5)


async def refuse(ws: Any, match_id: str, err: ApiError) -> None:
    """Refuse a websocket after accepting it: the error message, then a close whose reason repeats
    it, since many client libraries show only the close (code and reason)."""
    await ws.send_text(error_text(match_id, (0.0, None), code=err.code, message=err.message, **err.extra))
    await ws.close(code=close_code(err), reason=close_reason(err))


def close_reason(err: ApiError) -> str:
    """The error's message cut to what a close frame holds (an ellipsis marks a cut)."""
    text = err.message
    if len(text.encode()) <= CLOSE_REASON_BYTES:
        return text
    cut = text.encode()[:CLOSE_REASON_BYTES - 3].decode(errors="ignore")
    return cut + "\u2026"


T = TypeVar("T")


def known(found: T | None, match_id: str) -> T:
    """What a backend found for ``match_id``; None means the match was never set up (404)."""
    if found is None:
        raise unknown_match(match_id)
    return found


def close_code(err: ApiError) -> int:
    """The websocket close code after an error message: 1013 (try again later) when the service
    is unavailable, else 1008 (policy violation)."""
    return 1013 if err.status == 503 else 1008


async def _render(request: Request, exc: Exception) -> JSONResponse:
    err = ApiError.of(exc) if isinstance(exc, PacewireError) else ApiError(500, "internal", "internal error")
    return JSONResponse(err.body(), status_code=err.status)


def install(app: FastAPI) -> None:
    """Render every pacewire error raised by a route of ``app``."""
    app.add_exception_handler(PacewireError, _render)
