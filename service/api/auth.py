"""The two tokens: one to set up matches and send data, one to read (the ingest token reads too).

A token comes as ``Authorization: Bearer TOKEN`` or ``?token=TOKEN`` (browsers
cannot set headers on a websocket). Without a configured token that side is open.
"""
from __future__ import annotations

import hmac
from dataclasses import dataclass
from typing import Any

from pacewire.api.errors import ApiError, unauthorised


def token_of(headers: Any, query: Any) -> str | None:
    auth = headers.get("authorization") or ""
    if auth.lower().startswith("bearer "):
        return str(auth[7:].strip())
    token = query.get("token")
    return None if token is None else str(token)


def _same(a: str | None, b: str) -> bool:
    return a is not None and hmac.compare_digest(a.encode(), b.encode())


@dataclass(frozen=True)
class Tokens:
    ingest: str | None = None
    view: str | None = None

    def can_write(self, token: str | None) -> bool:
        return self.ingest is None or _same(token, self.ingest)

    def can_read(self, token: str | None) -> bool:
        if self.view is None:
            return True
        return _same(token, self.view) or (self.ingest is not None and _same(token, self.ingest))

    def check(self, conn: Any, write: bool) -> None:
        """Raise 401 unless the request or websocket ``conn`` may write (or read)."""
        token = token_of(conn.headers, conn.query_params)
        if not (self.can_write(token) if write else self.can_read(token)):
            raise unauthorised()


async def accept(ws: Any, tokens: Tokens, write: bool) -> bool:
    """Accept a websocket, then close it (1008) unless its token may write (or read): accepting
    first makes the refusal a close reason the client can read."""
    await ws.accept()
    try:
        tokens.check(ws, write)
    except ApiError:
        await ws.close(code=1008, reason="unauthorised")
        return False
    return True
