"""Snapshots as the end-to-end tests compare them."""
from __future__ import annotations

import time
from typing import Any

import httpx

from tests.support.live_server import LiveServer


def player_figures(snap: dict[str, Any]) -> dict[str, Any]:
    """Players' figures; on_pitch is live state (offline, the match is over and nobody is on), and so is
    baseline (the live service's history; offline has none)."""
    live_only = ("on_pitch", "baseline")
    return {pid: {k: v for k, v in p.items() if k not in live_only} for pid, p in snap["players"].items()}


def settled_snapshot(srv: LiveServer, match_id: str = "m_test") -> dict[str, Any]:
    """The REST snapshot once the feed has stopped long enough to be stalled (the tail shown finalised)."""
    time.sleep(2.8)
    return httpx.get(f"{srv.http}/api/matches/{match_id}/snapshot", timeout=10).json()
