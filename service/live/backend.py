"""The single-process backend of the routes: the matches this process runs, in memory and on disk."""
from __future__ import annotations

import asyncio
import time
from pathlib import Path
from typing import Any

from pacewire.analyze import FiguresIndex, MatchTimeError
from pacewire.api.backend import Send
from pacewire.api.errors import ApiError, unknown_match
from pacewire.api.requests import StreamParams
from pacewire.engine.types import Roster
from pacewire.errors import NotStored
from pacewire.live.archive import Archived
from pacewire.live.broadcaster import Broadcaster, Subscriber
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
        return self.runner.position()


class ArchivedWriter:
    """A finished match's write side: where its feed stands comes from its archive; a write first
    brings the match back into memory (rebuilt from its recording), then goes to its runner."""

    def __init__(self, matches: Matches, archived: Archived) -> None:
        self.matches, self.archived = matches, archived
        self._writer: LocalWriter | None = None

    async def _live(self) -> LocalWriter:
        if self._writer is None:
            runner = await self.matches.ready(self.archived.match_id, reopen=True)
            if runner is None:
                raise NotStored("the finished match cannot be rebuilt from its recording")
            self._writer = LocalWriter(runner)
        return self._writer

    async def frames(self, data: list[bytes] | bytes | str, durable: bool) -> IngestOutcome:
        return await (await self._live()).frames(data, durable)

    async def heart_rate(self, data: bytes | str | list[bytes], durable: bool) -> IngestOutcome:
        return await (await self._live()).heart_rate(data, durable)

    async def cdf_events(self, data: bytes | str | list[bytes], durable: bool) -> EventOutcome:
        return await (await self._live()).cdf_events(data, durable)

    async def add_event(self, event: Any) -> None:
        await (await self._live()).add_event(event)

    def store_error(self) -> str:
        return self._writer.store_error() if self._writer is not None else "the recording cannot be written"

    def clock(self) -> tuple[float, str | None]:
        if self._writer is not None:
            return self._writer.clock()
        s = self.archived.summary
        return float(s.get("match_time_s") or 0.0), s.get("period")

    async def position(self) -> dict[str, Any]:
        if self._writer is not None:
            return await self._writer.position()
        return await asyncio.to_thread(self.archived.position)


class LocalSubscription:
    def __init__(self, broadcaster: Broadcaster, sub: Subscriber, metrics: Metrics) -> None:
        self.broadcaster, self.sub, self.metrics = broadcaster, sub, metrics

    async def pump(self) -> None:
        await self.broadcaster.pump(self.sub)

    def close(self) -> None:
        b = self.broadcaster
        b.detach(self.sub)
        self.metrics.subscribers.labels(b.match_id).set(b.subscriber_count)


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

    async def _match(self, match_id: str) -> MatchRunner | Archived | None:
        """The match in memory (rebuilt first if it is still queued at start) or archived on disk."""
        runner = await self.matches.ready(match_id)
        return runner if runner is not None else self.matches.archived.get(match_id)

    def _known(self, match_id: str) -> MatchRunner | Archived:
        """The match in memory or archived (a synchronous route: a queued match is not waited for)."""
        found = self.matches.get(match_id) or self.matches.archived.get(match_id)
        if found is None:
            raise unknown_match(match_id)
        return found

    # -- ingest ---------------------------------------------------------------------------
    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        try:
            await self.matches.ready(match_id, reopen=True)  # a finished match comes back into memory
            runner, created = self.matches.setup(match_id, meta, sheet)
        except OSError as exc:
            raise ApiError(503, "storage", f"cannot write the match folder: {exc.strerror or exc}") from None
        return runner.roster, created

    async def writer(self, match_id: str) -> LocalWriter | ArchivedWriter | None:
        found = await self._match(match_id)
        if isinstance(found, Archived):
            return ArchivedWriter(self.matches, found)  # a write brings the finished match back into memory
        return None if found is None else LocalWriter(found)

    # -- reads ------------------------------------------------------------------------------
    async def list_matches(self) -> list[dict[str, Any]]:
        m = self.matches
        rows = [r.summary() for r in m.runners.values()] + [a.summary for a in m.archived.values()]
        rows += [{"match_id": mid, "status": None, "recovering": True} for mid in m.pending if mid not in m.runners]
        return sorted(rows, key=lambda r: r["match_id"])

    async def snapshot(self, match_id: str) -> bytes | None:
        found = await self._match(match_id)
        if isinstance(found, Archived):
            return dumps(snapshot_message(match_id, await asyncio.to_thread(found.snapshot)))
        if found is None:
            return None
        found.broadcaster.invalidate()
        return dumps(snapshot_message(match_id, found.broadcaster.snapshot()))

    async def report_listing(self, match_id: str) -> list[dict[str, Any]] | None:
        found = await self._match(match_id)
        return None if found is None else found.listing() if isinstance(found, Archived) else found.followup.listing()

    async def roster(self, match_id: str) -> Roster | None:
        found = await self._match(match_id)
        if isinstance(found, Archived):
            return found.roster(self.matches.settings)
        return None if found is None else found.roster

    def _archived_broadcaster(self, archived: Archived, roster: Roster) -> Broadcaster:
        """A finished match's stream: its final snapshot, then nothing (a broadcaster per subscription)."""
        srv = self.matches.settings.server
        snap = archived.snapshot()
        return Broadcaster(archived.match_id, lambda: snap, 0.0, srv.subscriber_queue, srv.max_subscribers,
                           fps=roster.fps)

    async def subscribe(self, match_id: str, params: StreamParams, send: Send) -> LocalSubscription:
        found = await self._match(match_id)
        if found is None:
            raise unknown_match(match_id)
        if isinstance(found, Archived):
            b = await asyncio.to_thread(self._archived_broadcaster, found, found.roster(self.matches.settings))
        else:
            b = found.broadcaster
        if b.subscriber_count >= b.max_subscribers:
            raise ApiError(429, "too_many_subscribers", f"this match already has {b.max_subscribers} subscribers")
        sub = Subscriber(send, self.matches.settings.server.subscriber_queue)
        b.attach(sub, params.view, params.every, params.since)
        self.metrics.subscribers.labels(match_id).set(b.subscriber_count)
        return LocalSubscription(b, sub, self.metrics)

    # -- match files -------------------------------------------------------------------------
    def report_file(self, match_id: str, kind: str, name: str) -> Path:
        self._known(match_id)
        path = self.matches.folder(match_id) / "reports" / kind / name
        if not path.is_file():
            raise ApiError(404, "no_report", f"no {kind} report yet")
        return path

    def budgets(self, match_id: str) -> dict[str, Any]:
        found = self._known(match_id)
        return found.budgets() if isinstance(found, Archived) else found.followup.budgets_body()

    def set_budgets(self, match_id: str, data: Any) -> dict[str, Any]:
        if isinstance(self._known(match_id), Archived):
            raise ApiError(409, "match_ended", "the match has ended and is archived; a match event reopens it")
        try:
            return self._runner(match_id).followup.set_budgets(data)
        except RulesError as exc:
            raise ApiError(422, "bad_budgets", str(exc)) from None
        except OSError as exc:
            raise ApiError(503, "storage", f"cannot store the budgets: {exc.strerror or exc}") from None

    async def figures(self, match_id: str, at_s: float | None, period: str | None = None) -> dict[str, Any]:
        found = await self._match(match_id)
        if found is None:
            raise unknown_match(match_id)
        if isinstance(found, Archived):
            return await self._archived_figures(found, at_s, period)
        runner = found
        if at_s is None:
            runner.broadcaster.invalidate()
            return runner.broadcaster.snapshot()
        try:
            return await asyncio.to_thread(runner.followup.rewind.figures, at_s, list(runner.events), period)
        except MatchTimeError as exc:
            raise ApiError.of(exc) from None
        except (OSError, ValueError) as exc:
            raise ApiError(503, "no_recording", f"cannot read the recording: {exc}") from None

    async def _archived_figures(self, found: Archived, at_s: float | None, period: str | None) -> dict[str, Any]:
        if at_s is None:
            return await asyncio.to_thread(found.snapshot)
        index = FiguresIndex(found.folder, self.matches.settings, found.match_id)
        try:
            return await asyncio.to_thread(index.figures, at_s, found.events(), period)
        except MatchTimeError as exc:
            raise ApiError.of(exc) from None
        except (OSError, ValueError) as exc:
            raise ApiError(503, "no_recording", f"cannot read the recording: {exc}") from None

    # -- operators ---------------------------------------------------------------------------
    async def health(self) -> dict[str, Any]:
        m = self.matches
        return {"status": "ok", "matches": len(m.runners) + len(m.archived) + len(m.pending),
                "in_memory": len(m.runners), "archived": len(m.archived), "recovering": len(m.pending),
                "time": time.time()}

    def metrics_text(self) -> tuple[bytes, str]:
        now = time.time()
        lags = {mid: lag for mid, r in self.matches.runners.items()
                if (lag := r.state.health.lag(now)[0]) is not None}
        return self.metrics.text(lags)
