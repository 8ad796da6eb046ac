"""Where the server stands, and the period ends a recording knows.

A replay asks the server (``GET /api/matches/MATCH/feed``) before it sends
anything and again after a dropped socket, and sends only the frames and
heart-rate samples after what the server already holds. The recording's
meta (``match.periods[].frame_id_end``) tells where each period ended; the
replay sends a ``period_end`` event once it has sent that frame, so a
replayed match ends as a live one does.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pacewire.wire.recording import Recording


class ReplayError(RuntimeError):
    """A replay cannot go on: the message says why."""


class ServerBusy(RuntimeError):
    """The server answered 5xx (starting, or its store unavailable): worth asking again."""


@dataclass(frozen=True)
class Position:
    """What the server holds of a match's feed (None: nothing, or an older server that cannot say)."""

    last_frame_id: int | None = None
    period: str | None = None
    hr_last_t: float | None = None  # the latest heart-rate sample held, UTC s
    status: str | None = None  # the match status

    def holds(self, frame_id: int | None) -> bool:
        return frame_id is not None and self.last_frame_id is not None and frame_id <= self.last_frame_id


async def ask(http: Any, mid: str) -> Position:
    """The server's position for match ``mid`` (raises httpx errors when it cannot be reached)."""
    r = await http.get(f"/api/matches/{mid}/feed")
    if r.status_code == 404 and "unknown_match" not in r.text:
        return Position()  # a server without the route: assume it holds nothing
    if r.status_code >= 500:
        raise ServerBusy(f"the server answered {r.status_code}: {r.text[:200]}")
    if r.status_code >= 400:
        raise ReplayError(f"the server would not say where match {mid} stands ({r.status_code}): {r.text[:300]}")
    b = r.json()
    return Position(b.get("last_frame_id"), b.get("period"), b.get("hr_last_timestamp"), b.get("match_status"))


def period_ends(rec: Recording) -> dict[int, str]:
    """Frame id -> period, for each period whose end the recording's meta gives."""
    out: dict[int, str] = {}
    periods = (rec.meta.get("match") or {}).get("periods") or []
    for p in periods if isinstance(periods, list) else []:
        if isinstance(p, dict) and type(p.get("frame_id_end")) is int and isinstance(p.get("period"), str):
            out[p["frame_id_end"]] = p["period"]
    return out


async def send_end(http: Any, mid: str, frame_id: int, period: str) -> None:
    """The ``period_end`` event of ``period`` at ``frame_id`` (the server waits for that frame if the
    event overtakes it)."""
    r = await http.post(f"/api/matches/{mid}/events",
                        json={"type": "period_end", "period": period, "frame_id": frame_id})
    if r.status_code >= 400:
        raise ReplayError(f"the end of {period} was refused ({r.status_code}): {r.text[:300]}")
