"""The feed over time: health messages when its state changes, and the figures a stalled feed shows.

Once no frame has come for ``health.stall_s``, subscribers are shown a copy of
the state whose tail is finalised (nothing waits uncounted for frames that may
never come); the next applied frame or match event drops the copy. A period
over by its timeout (a break, :mod:`pacewire.live.status`) is shown ended in
that copy: nobody on the pitch, its last second counted. The watch's clock
also judges the match status.
"""
from __future__ import annotations

import asyncio
import logging
import time
from typing import Any, Protocol

from pacewire.engine.health import STALLED
from pacewire.engine.match import MatchState
from pacewire.engine.snapshot import build_health
from pacewire.live.broadcaster import Broadcaster
from pacewire.live.status import BREAK, MatchStatus

log = logging.getLogger("pacewire.feedwatch")
SAVE_EVERY_S = 5.0  # drop counters written beside the recording at most this often


class Watched(Protocol):
    """The match a watch looks after (its runner)."""

    match_id: str
    state: MatchState
    broadcaster: Broadcaster
    status: MatchStatus

    def extra_reasons(self) -> list[dict[str, str]]: ...

    def check_status(self, now: float | None = None) -> None: ...

    def save_counters(self) -> None: ...


class FeedWatch:
    def __init__(self, match: Watched, stall_s: float, check_s: float) -> None:
        self.match = match
        self.stall_s = stall_s
        self.check_s = check_s
        self.state = STALLED  # the health state subscribers were last told
        self.reasons: list[str] = ["no_frames"]  # ... and its reason codes
        self.events: tuple[str | None, list[str]] = (None, [])  # the event stream's state and reason codes
        self.stall_view: MatchState | None = None  # figures shown while the feed is stalled
        self._stall_told = False  # subscribers were sent the stalled view's figures

    def moved_on(self) -> None:
        """Frames or an event changed the state: a stalled view predates them."""
        self.stall_view = None

    def shown(self, now: float) -> MatchState:
        """The state to show now: once the feed counts as stalled, a copy with its tail finalised."""
        state = self.match.state
        h = state.health
        v = self.match.status.judge(state, now)
        closed = v.status == BREAK and v.cause == "timeout"
        if self.stall_view is None and (closed or h.last_arrival is not None and now - h.last_arrival > self.stall_s):
            self.stall_view = state.provisional()
            self._stall_told = False
        view = self.stall_view
        if closed and view is not None and view.current is not None and not view.current.ended:
            view.end_period()  # as its whistle would: nobody on the pitch during the break
        return view or state

    def health_body(self) -> dict[str, Any]:
        """The snapshot's ``health`` now, without building the figures."""
        now = time.time()
        return build_health(self.shown(now), now, self.match.extra_reasons())

    def check(self) -> None:
        """Push a health message when the state or the kinds of reasons change, the tracking's or
        the event stream's."""
        self.match.broadcaster.invalidate()
        health = self.health_body()
        codes = sorted(r["code"] for r in health["reasons"])
        ev = health.get("events") or {}
        events = (ev.get("state"), sorted(r["code"] for r in ev.get("reasons", [])))
        if health["state"] != self.state or codes != self.reasons or events != self.events:
            self.state, self.reasons, self.events = health["state"], codes, events
            self.match.broadcaster.publish("health", health=health)

    async def run(self) -> None:
        """Every ``check_s``: a feed that just stalled shows its final figures at once; health
        follows the clock; the drop counters are saved now and then."""
        b = self.match.broadcaster
        last_save = time.monotonic()
        while True:
            await asyncio.sleep(self.check_s)
            try:
                self.match.check_status()
                self.shown(time.time())
                if self.stall_view is not None and not self._stall_told:
                    self._stall_told = True
                    b.invalidate()
                    b.tick(force=True)
                self.check()  # health moves with the clock: the next read builds afresh
                if time.monotonic() - last_save > SAVE_EVERY_S:
                    last_save = time.monotonic()
                    await asyncio.to_thread(self.match.save_counters)
            except Exception:
                log.exception("%s: health check failed", self.match.match_id)
