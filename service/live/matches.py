"""The matches one process serves: set-up, lookup, recovery from the data folder, the archive.

At start the data folder is only indexed: finished matches (``final.json``,
:mod:`pacewire.live.archive`) are served from disk, the others are rebuilt
from their recordings in the background, one at a time; a request for one
of them rebuilds it first. A match that has ended leaves memory after
``[archive] grace_s``; any write to it (a set-up, frames, a match event)
brings it back, and a ``period_start`` event reopens it.
"""
from __future__ import annotations

import asyncio
import gc
import logging
import time
from pathlib import Path
from typing import Any

import orjson

from pacewire.config import Settings
from pacewire.errors import PacewireError
from pacewire.live.archive import Archived, read_archive, write_archive
from pacewire.live.lane import BACKGROUND, URGENT, Lane
from pacewire.live.metrics import Hooks
from pacewire.live.recorder import write_json_atomic
from pacewire.live.recovery import recover
from pacewire.live.runner import MatchRunner
from pacewire.live.status import ENDED
from pacewire.wire.cdf import gnss_tolerances, parse_setup
from pacewire.wire.match_id import check_match_id, is_match_id

log = logging.getLogger("pacewire.matches")


class SetupConflict(PacewireError, ValueError):
    """The match exists with a different set-up and already has data."""

    code = "conflict"


class Matches:
    def __init__(self, data_dir: Path, settings: Settings, hooks: Hooks | None = None) -> None:
        self.root = data_dir / "matches"
        self.settings = settings
        self.hooks = hooks or Hooks()
        self.runners: dict[str, MatchRunner] = {}
        self._retire: list[MatchRunner] = []  # replaced before any frame; stopped at shutdown
        self.archived: dict[str, Archived] = {}  # finished matches, served from their folders
        self.pending: dict[str, Path] = {}  # found unfinished at start, not rebuilt yet
        self._building: dict[str, asyncio.Future[MatchRunner | None]] = {}
        self._ended_at: dict[str, float] = {}  # monotonic time each ended match was first seen idle
        self.lane = Lane()  # rebuilds, reports, history writes: off the live path

    def get(self, match_id: str) -> MatchRunner | None:
        return self.runners.get(match_id)

    def folder(self, match_id: str) -> Path:
        return self.root / check_match_id(match_id)

    def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[MatchRunner, bool]:
        """Create (or confirm) a match; returns (runner, created). Raises SetupError, SetupConflict,
        BadMatchId, OSError."""
        folder = self.folder(match_id)
        roster = parse_setup(meta, sheet, match_id, gnss_tolerances(self.settings))
        existing = self.runners.get(match_id)
        if existing is not None:
            if existing.roster == roster:
                return existing, False
            if existing.state.frames:
                raise SetupConflict(f"match {match_id} already has frames with a different set-up")
        folder.mkdir(parents=True, exist_ok=True)
        write_json_atomic(folder / "meta.json", meta)
        write_json_atomic(folder / "match.json", sheet)
        runner = MatchRunner(roster, self.settings, folder, self.hooks, self.lane)
        if existing is not None:
            self.runners.pop(match_id)
            self._retire.append(existing)
        self.runners[match_id] = runner
        runner.start()
        return runner, True

    # -- start-up: index finished matches, rebuild the others --------------------------------
    def index_all(self) -> list[str]:
        """Index the data folder (start-up, no engine work): archived matches are served from disk;
        the others are queued to be rebuilt (:meth:`rebuild_pending`). Returns those to rebuild."""
        if not self.root.is_dir():
            return []
        for folder in sorted(self.root.iterdir()):
            if not folder.is_dir() or not is_match_id(folder.name) or folder.name in self.runners:
                continue
            if not (folder / "meta.json").exists():
                continue
            archived = read_archive(folder)
            if archived is not None:
                self.archived[folder.name] = archived
            else:
                self.pending[folder.name] = folder
        return list(self.pending)

    async def rebuild_pending(self) -> None:
        """Rebuild the matches found unfinished at start, one at a time (a request for one comes first)."""
        while self.pending:
            await self.ready(next(iter(self.pending)), urgent=False)

    async def ready(self, match_id: str, reopen: bool = False, urgent: bool = True) -> MatchRunner | None:
        """The match in memory: rebuilt first if it is still queued, or (``reopen``) archived."""
        runner = self.runners.get(match_id)
        if runner is not None or not (match_id in self.pending or (reopen and match_id in self.archived)):
            return runner
        task = self._building.get(match_id)
        if task is None:
            task = self._building[match_id] = asyncio.ensure_future(self._rebuild(match_id, urgent))
            task.add_done_callback(lambda _: self._building.pop(match_id, None))
        return await asyncio.shield(task)

    async def _rebuild(self, match_id: str, urgent: bool) -> MatchRunner | None:
        folder = self.root / match_id
        t0 = time.perf_counter()
        try:  # on the background lane: /healthz and the live matches go on meanwhile
            runner = await self.lane.run(self._load, folder, priority=URGENT if urgent else BACKGROUND)
        finally:
            self.pending.pop(match_id, None)
        if runner is not None:
            self.archived.pop(match_id, None)
            self.runners[match_id] = runner
            runner.start()
            log.info("rebuilt %s in %.2f s", match_id, time.perf_counter() - t0)
        return runner

    def _load(self, folder: Path) -> MatchRunner | None:
        try:
            meta = orjson.loads((folder / "meta.json").read_bytes())
            sheet = orjson.loads((folder / "match.json").read_bytes())
            roster = parse_setup(meta, sheet, folder.name, gnss_tolerances(self.settings))
        except (OSError, ValueError) as exc:
            log.warning("skipping %s: %s", folder, exc)
            return None
        runner = MatchRunner(roster, self.settings, folder, self.hooks, self.lane)
        n = recover(runner)
        log.info("recovered %s: %d frames", folder.name, n)
        return runner

    def recover_all(self) -> list[str]:
        """Rebuild every match folder found in the data folder at once, archived or not (tools, tests)."""
        done: list[str] = []
        if not self.root.is_dir():
            return done
        for folder in sorted(self.root.iterdir()):
            if not folder.is_dir() or not is_match_id(folder.name):
                continue
            runner = self._load(folder)
            if runner is None:
                continue
            self.runners[folder.name] = runner
            runner.start()
            done.append(folder.name)
        return done

    # -- finished matches leave memory -----------------------------------------------------
    async def archive_loop(self) -> None:
        """Archive each match ``[archive] grace_s`` after it ended, once nothing of it is under way."""
        a = self.settings.archive
        while True:
            await asyncio.sleep(a.check_s)
            now = time.monotonic()
            for match_id, runner in list(self.runners.items()):
                if runner.status.told != ENDED or not runner.idle():
                    self._ended_at.pop(match_id, None)
                    continue
                since = self._ended_at.setdefault(match_id, now)
                if now - since >= a.grace_s:
                    await self.archive(match_id)

    async def archive(self, match_id: str) -> Archived | None:
        """Write a finished match's final files and let its engine state go."""
        runner = self.runners.pop(match_id, None)
        self._ended_at.pop(match_id, None)
        if runner is None:
            return None
        runner.save_counters()
        await runner.stop()  # recorders flushed: the archive covers every byte recorded
        snap = runner.snapshot_body()
        position = runner.position()
        try:
            archived = await self.lane.run(write_archive, runner.folder, match_id, runner.summary(), snap,
                                               list(runner.events), runner.followup.budgets_body(), position)
        except OSError as exc:
            log.error("%s: not archived, rebuilt on the next request: %s", match_id, exc)
            self.pending[match_id] = runner.folder
            return None
        self.archived[match_id] = archived
        del runner, snap
        gc.collect()  # the engine state holds reference cycles (runner <-> follow-up, broadcaster)
        log.info("archived %s", match_id)
        return archived

    async def stop_all(self) -> None:
        for r in [*self.runners.values(), *self._retire]:
            r.save_counters()
            await r.stop()
        await self.lane.close()
