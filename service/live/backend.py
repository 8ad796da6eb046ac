"""The single-process backend of the routes: the matches this process runs, in memory and on disk."""
from __future__ import annotations

import asyncio
import math
import time
from pathlib import Path
from typing import Any

from pacewire.analyze import MatchTimeError
from pacewire.api.backend import Send
from pacewire.api.errors import ApiError, unknown_match
from pacewire.api.requests import StreamParams
from pacewire.engine.types import PERIODS, Roster
from pacewire.errors import NotStored
from pacewire.live.broadcaster import Subscriber
from pacewire.live.matches import Matches
from pacewire.live.metrics import Metrics
from pacewire.live.runner import MatchRunner
from pacewire.wire.messages import dumps, snapshot_message
from pacewire.wire.outcome import EventOutcome, IngestOutcome
from pacewire.wire.rules import RulesError


class LocalWriter:
    """A match's write side: its runner's intake and events."""

    def __init__(self, runner: MatchRunner) -> None:
        self.runner = runner

    async def frames(self, data: list[bytes] | bytes | str, durable: bool) -> IngestOutcome:
        return await self.runner.intake.frames(data, durable)

    async def heart_rate(self, data: bytes | str | list[bytes], durable: bool) -> IngestOutcome:
        return await self.runner.intake.heart_rate(data, durable)

    async def cdf_events(self, data: bytes | str | list[bytes], durable: bool) -> EventOutcome:
        return await self.runner.intake.events(data, durable)

    async def add_event(self, event: Any) -> None:
        try:
            self.runner.add_event(event)
        except OSError as exc:
            raise NotStored(f"cannot record the event: {exc.strerror or exc}") from None

    def store_error(self) -> str:
        r = self.runner
        return r.recorder.error or r.hr_recorder.error or r.event_recorder.error or "the recording cannot be written"

    def clock(self) -> tuple[float, str | None]:
        return self.runner.state.match_time_s(), self.runner.state.period_name()

    async def position(self) -> dict[str, Any]:
        r = self.runner
        gate = r.decoder.gate  # what the recording holds: accepted frames, applied or still queued
        hr_t = r.intake.hr_decoder.gate.last_t
        hr_last = float(hr_t.max()) if len(hr_t) and math.isfinite(hr_t.max()) else None
        return {"last_frame_id": gate.last_id if gate.last_id >= 0 else None,
                "last_timestamp": gate.last_t if math.isfinite(gate.last_t) else None,
                "period": PERIODS[gate.period] if gate.period >= 0 else None,
                "hr_last_timestamp": hr_last, "match_status": r.status.told}


class LocalSubscription:
    def __init__(self, runner: MatchRunner, sub: Subscriber, metrics: Metrics) -> None:
        self.runner, self.sub, self.metrics = runner, sub, metrics

    async def pump(self) -> None:
        await self.runner.broadcaster.pump(self.sub)

    def close(self) -> None:
        b = self.runner.broadcaster
        b.detach(self.sub)
        self.metrics.subscribers.labels(self.runner.match_id).set(b.subscriber_count)


class LocalBackend:
    """Every route group: ingest, reads, match files, metrics."""

    def __init__(self, matches: Matches, metrics: Metrics) -> None:
        self.matches = matches
        self.metrics = metrics

    def _runner(self, match_id: str) -> MatchRunner:
        runner = self.matches.get(match_id)
        if runner is None:
            raise unknown_match(match_id)
        return runner

    # -- ingest ---------------------------------------------------------------------------
    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        try:
            runner, created = self.matches.setup(match_id, meta, sheet)
        except OSError as exc:
            raise ApiError(503, "storage", f"cannot write the match folder: {exc.strerror or exc}") from None
        return runner.roster, created

    async def writer(self, match_id: str) -> LocalWriter | None:
        runner = self.matches.get(match_id)
        return None if runner is None else LocalWriter(runner)

    # -- reads ------------------------------------------------------------------------------
    async def list_matches(self) -> list[dict[str, Any]]:
        return [r.summary() for r in self.matches.runners.values()]

    async def snapshot(self, match_id: str) -> bytes | None:
        runner = self.matches.get(match_id)
        if runner is None:
            return None
        runner.broadcaster.invalidate()
        return dumps(snapshot_message(match_id, runner.broadcaster.snapshot()))

    async def report_listing(self, match_id: str) -> list[dict[str, Any]] | None:
        runner = self.matches.get(match_id)
        return None if runner is None else runner.followup.listing()

    async def roster(self, match_id: str) -> Roster | None:
        runner = self.matches.get(match_id)
        return None if runner is None else runner.roster

    async def subscribe(self, match_id: str, params: StreamParams, send: Send) -> LocalSubscription:
        runner = self._runner(match_id)
        b = runner.broadcaster
        if b.subscriber_count >= b.max_subscribers:
            raise ApiError(429, "too_many_subscribers", f"this match already has {b.max_subscribers} subscribers")
        sub = Subscriber(send, self.matches.settings.server.subscriber_queue)
        b.attach(sub, params.view, params.every, params.since)
        self.metrics.subscribers.labels(match_id).set(b.subscriber_count)
        return LocalSubscription(runner, sub, self.metrics)

    # -- match files -------------------------------------------------------------------------
    def report_file(self, match_id: str, kind: str, name: str) -> Path:
        path = self._runner(match_id).followup.root / kind / name
        if not path.is_file():
            raise ApiError(404, "no_report", f"no {kind} report yet")
        return path

    def budgets(self, match_id: str) -> dict[str, Any]:
        return self._runner(match_id).followup.budgets_body()

    def set_budgets(self, match_id: str, data: Any) -> dict[str, Any]:
        try:
            return self._runner(match_id).followup.set_budgets(data)
        except RulesError as exc:
            raise ApiError(422, "bad_budgets", str(exc)) from None
        except OSError as exc:
            raise ApiError(503, "storage", f"cannot store the budgets: {exc.strerror or exc}") from None

    async def figures(self, match_id: str, at_s: float | None, period: str | None = None) -> dict[str, Any]:
        runner = self._runner(match_id)
        if at_s is None:
            runner.broadcaster.invalidate()
            return runner.broadcaster.snapshot()
        try:
            return await asyncio.to_thread(runner.followup.rewind.figures, at_s, list(runner.events), period)
        except MatchTimeError as exc:
            raise ApiError.of(exc) from None
        except (OSError, ValueError) as exc:
            raise ApiError(503, "no_recording", f"cannot read the recording: {exc}") from None

    # -- operators ---------------------------------------------------------------------------
    async def health(self) -> dict[str, Any]:
        return {"status": "ok", "matches": len(self.matches.runners), "time": time.time()}

    def metrics_text(self) -> tuple[bytes, str]:
        now = time.time()
        lags = {mid: lag for mid, r in self.matches.runners.items()
                if (lag := r.state.health.lag(now)[0]) is not None}
        return self.metrics.text(lags)
