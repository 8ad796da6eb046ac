"""The matches one process serves: set-up, lookup, recovery from the data folder."""
from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import orjson

from pacewire.config import Settings
from pacewire.errors import PacewireError
from pacewire.live.metrics import Hooks
from pacewire.live.recorder import write_json_atomic
from pacewire.live.recovery import recover
from pacewire.live.runner import MatchRunner
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
        runner = MatchRunner(roster, self.settings, folder, self.hooks)
        if existing is not None:
            self.runners.pop(match_id)
            self._retire.append(existing)
        self.runners[match_id] = runner
        runner.start()
        return runner, True

    def recover_all(self) -> list[str]:
        """Rebuild every match folder found in the data folder (start-up)."""
        done: list[str] = []
        if not self.root.is_dir():
            return done
        for folder in sorted(self.root.iterdir()):
            if not folder.is_dir() or not is_match_id(folder.name):
                continue
            try:
                meta = orjson.loads((folder / "meta.json").read_bytes())
                sheet = orjson.loads((folder / "match.json").read_bytes())
                roster = parse_setup(meta, sheet, folder.name, gnss_tolerances(self.settings))
            except (OSError, ValueError) as exc:
                log.warning("skipping %s: %s", folder, exc)
                continue
            runner = MatchRunner(roster, self.settings, folder, self.hooks)
            n = recover(runner)
            log.info("recovered %s: %d frames", folder.name, n)
            self.runners[folder.name] = runner
            runner.start()
            done.append(folder.name)
        return done

    async def stop_all(self) -> None:
        for r in [*self.runners.values(), *self._retire]:
            r.save_counters()
            await r.stop()
