"""What follows the frames of a live match: reports at period ends, alerts, history at full time.

A :class:`Followup` belongs to one MatchRunner, which calls it at three
points: ``after_apply()`` after each applied block (alerts, once per
completed second), ``period_ended(name)`` when it announces a period end (a
``period_end`` event or the frames moving to the next period), and
``period_over(name)`` when the match status puts a break after a period whose
feed went silent once its nominal length was played (:mod:`pacewire.live.status`;
after the last period that end is recorded as an event, so it comes through
``period_ended``).

Whatever reads the engine state runs on the event loop and is cheap: one
snapshot and the per-block sums (a stalled period is first copied with its
tail finalised, as the stall view does). Drawing and writing the report and
every SQLite call run off the live path, on the background lane
(:mod:`pacewire.live.lane`: one niced worker thread, one job at a time).
"""
from __future__ import annotations

import asyncio
import logging
import sqlite3
import time
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path
from typing import Any, Protocol, TypeVar

import orjson

from pacewire.analyze import FiguresIndex
from pacewire.config import Settings
from pacewire.engine.baseline import Baselines
from pacewire.engine.blocks import block_series
from pacewire.engine.match import MatchState
from pacewire.engine.types import PERIOD_INDEX, Roster
from pacewire.live.archive import report_entries
from pacewire.live.broadcaster import Broadcaster
from pacewire.live.recorder import write_json_atomic
from pacewire.reports.alerts import evaluate_state, new_alerter, rules_from_settings
from pacewire.reports.baseline import comparison
from pacewire.reports.builder import ReportInput, build_report, list_reports, report_kind
from pacewire.reports.offline import report_input, state_until
from pacewire.reports.worker import build_report_in_process
from pacewire.store import history
from pacewire.store.record import match_record
from pacewire.wire.rules import Budgets, DropOffBaseline, RulesError, load_budgets, parse_budgets

T = TypeVar("T")
log = logging.getLogger("pacewire.followup")


class Followed(Protocol):
    """The match a follow-up looks after (its runner)."""

    match_id: str
    settings: Settings
    folder: Path
    roster: Roster
    state: MatchState
    broadcaster: Broadcaster
    score: list[int]

    def extra_reasons(self) -> list[dict[str, str]]: ...

    async def off_live(self, fn: Callable[..., T], *args: Any) -> T: ...


class Followup:
    def __init__(self, runner: Followed) -> None:
        self.runner = runner
        s = self.settings = runner.settings
        self.root = runner.folder / "reports"
        self.db = runner.folder.parent.parent / s.history.path
        self._lock = asyncio.Lock()
        # kind -> (period index, its last slot) the report was built on; reports on disk count (restarts)
        self._built: dict[str, tuple[int, int]] = {e["kind"]: tuple(e["basis"]) for e in list_reports(self.root)
                                                   if isinstance(e.get("basis"), list)}
        self._pending: dict[str, tuple[int, int]] = {}
        self._tasks: set[asyncio.Task[None]] = set()
        self._second: tuple[int, int] | None = None
        ids = tuple(p.id for p in runner.roster.players)
        rules: list[Any] = []
        if s.alerts.enabled:
            try:
                rules = rules_from_settings(s)
            except RulesError as exc:  # the config loaded, but a rule asks for a window that is not computed
                log.error("%s: alerts off: %s", runner.match_id, exc)
        self.alerter = new_alerter(s, rules, ids)
        self.alerter.restore(self._stored_alerts())
        # figures at an earlier match time (export ?at=): checkpoints over the recording, warmed at each report
        self.rewind = FiguresIndex(runner.folder, s, runner.match_id)
        self.alerter.set_budgets(self._initial_budgets())
        self.baselines: Baselines | None = None  # set once at the match's start (watch)

    # -- budgets -----------------------------------------------------------------------------------
    @property
    def budgets_path(self) -> Path:
        return self.runner.folder / "budgets.json"

    def _initial_budgets(self) -> dict[str, Any]:
        """The config's budgets file (players of this match), then this match's own budgets.json."""
        out: dict[str, Any] = {}
        ids = set(self.runner.roster.index)
        if self.settings.alerts.budgets_file:
            try:
                b = load_budgets(self.settings.alerts.budgets_file)
                out.update({pid: c for pid, c in b.players.items() if pid in ids})
            except RulesError as exc:
                log.error("%s: %s", self.runner.match_id, exc)
        if self.budgets_path.exists():
            try:
                out = dict(parse_budgets(orjson.loads(self.budgets_path.read_bytes()), str(self.budgets_path),
                                         ids).players)
            except (RulesError, orjson.JSONDecodeError, OSError) as exc:
                log.error("%s: ignoring %s: %s", self.runner.match_id, self.budgets_path, exc)
        return out

    def set_budgets(self, data: Any) -> dict[str, Any]:
        """Replace this match's budgets (validated; raises RulesError) and keep them with the match."""
        b = parse_budgets(data, "budgets", set(self.runner.roster.index))
        body = self.budgets_body(b)
        write_json_atomic(self.budgets_path, body)
        self.alerter.set_budgets(dict(b.players))
        self._second = None  # evaluate with the next frames even within the same second
        return body

    def budgets_body(self, b: Budgets | None = None) -> dict[str, Any]:
        players = b.players if b is not None else self.alerter.budgets
        return {"players": {pid: c.model_dump(exclude_none=True) for pid, c in players.items()}}

    # -- hooks -------------------------------------------------------------------------------------
    def after_apply(self) -> None:
        """Reports for periods that ended; alerts, once per completed second of the current period."""
        state = self.runner.state
        cur = state.current
        self._check_ended()
        if cur is None or not self.alerter.rules:
            return
        key = (cur.index, cur.bins.complete)
        if key == self._second:
            return
        self._second = key
        try:
            self._alerts()
        except Exception:  # an alert rule must never take the match down
            log.exception("%s: alert evaluation failed", self.runner.match_id)

    def _alerts(self) -> None:
        snap = self.runner.broadcaster.snapshot()
        alerts = evaluate_state(self.alerter, self.runner.state, snap, self.settings)
        if not alerts:
            return
        self._keep_alerts([a.body() for a in alerts])
        self.runner.broadcaster.invalidate()  # the snapshot's alerts changed
        for alert in alerts:
            self.runner.broadcaster.publish("alert", **alert.body())

    @property
    def alerts_path(self) -> Path:
        return self.runner.folder / "alerts.jsonl"

    def _stored_alerts(self) -> list[dict[str, Any]]:
        """The alerts raised before a restart (one JSON object a line; a torn last line is skipped)."""
        try:
            lines = self.alerts_path.read_bytes().splitlines()
        except FileNotFoundError:
            return []
        except OSError as exc:
            log.error("%s: cannot read %s: %s", self.runner.match_id, self.alerts_path, exc)
            return []
        out = []
        for line in lines:
            try:
                body = orjson.loads(line)
            except orjson.JSONDecodeError:
                continue
            if isinstance(body, dict):
                out.append(body)
        return out

    def _keep_alerts(self, bodies: list[dict[str, Any]]) -> None:
        """Append alerts to the match folder, so a restarted server still shows them."""
        try:
            with self.alerts_path.open("ab") as fh:
                fh.write(b"".join(orjson.dumps(b) + b"\n" for b in bodies))
        except OSError as exc:  # the alerts still go out; only a restart would forget them
            log.error("%s: cannot keep alerts in %s: %s", self.runner.match_id, self.alerts_path, exc)

    def alerts(self, until_period: int | None = None) -> list[dict[str, Any]]:
        """Every alert raised so far (a new list), oldest first; with ``until_period``, those raised
        up to the end of that period (PERIOD_INDEX)."""
        raised = self.alerter.raised
        if until_period is None:
            return list(raised)
        return [a for a in raised if PERIOD_INDEX.get(a.get("period") or "", 0) <= until_period]

    def period_ended(self, period: str) -> None:
        """The runner announced the end of ``period`` (an event, or the frames moved on)."""
        self._check_ended()

    def period_over(self, period: str) -> None:
        """The status put a break after ``period`` by its timeout: its report, on a copy whose period is over."""
        if self.settings.reports.enabled:
            self._spawn(self.build_for(period))

    def _check_ended(self) -> None:
        """Start building each report whose period has ended since it was last built: the latest
        ended period decides (a block may span the half-time break, so look at every period)."""
        if not self.settings.reports.enabled:
            return
        latest = {report_kind(p.name): p for p in self.runner.state.periods if p.ended}
        for kind, per in latest.items():
            key = (per.index, per.last_slot)
            if self._built.get(kind) != key and self._pending.get(kind) != key:
                self._pending[kind] = key
                self._spawn(self.build_for(per.name))

    def _spawn(self, coro: Any) -> None:
        task = asyncio.get_running_loop().create_task(coro)
        self._tasks.add(task)
        task.add_done_callback(self._tasks.discard)

    async def watch(self) -> None:
        """The players' baselines, once at start (for the drop-off rules)."""
        await self._load_baselines()

    async def _load_baselines(self) -> None:
        """Bands from the history, once per match start (the history does not change mid-match): the
        snapshot's ``baseline`` and the baseline alert rule read the same bands."""
        h = self.settings.history
        ids = [p.id for p in self.runner.roster.players]
        shares = {str(rate): share for rate, share in h.min_spread_share.items()}
        try:  # read even when this service stores nothing itself ([history] enabled = false), as before
            b = await self.runner.off_live(history.player_baselines, self.db, ids, h.baseline_matches, h.min_minutes,
                                           h.min_matches, h.band_spreads, h.block_min, self.runner.match_id, shares)
        except (history.HistoryError, OSError, sqlite3.Error) as exc:
            log.error("%s: no baselines: %s", self.runner.match_id, exc)
            return
        self.baselines = b
        if any(isinstance(r, DropOffBaseline) for r in self.alerter.rules):
            self.alerter.baselines = history.alert_bands(b)
        self.runner.broadcaster.invalidate()  # the snapshot gains each player's baseline

    # -- reports ---------------------------------------------------------------------------------------
    async def build_for(self, period: str) -> dict[str, Any] | None:
        """Build (or rebuild, if frames came since) the report that the end of ``period`` calls for."""
        try:
            async with self._lock:
                return await self._build(period)
        except Exception:
            log.exception("%s: report for %s failed", self.runner.match_id, period)
            return None
        finally:
            self._pending.pop(report_kind(period), None)

    async def _build(self, period: str) -> dict[str, Any] | None:
        r = self.runner
        state = r.state
        per = next((p for p in state.periods if p.name == period), None)
        if per is None:
            return None
        kind = report_kind(period)
        key = (per.index, per.last_slot)
        if self._built.get(kind) == key:
            return None
        base = state
        if per is state.current and not per.ended:  # the timeout: report on a copy whose period is over
            base = state.provisional()
            base.end_period()  # as a whistle would: tail finalised, last partial second counted
        now = time.time()
        inp = report_input(base, per.index, "live", now, self.settings.reports.intensity_block_min, now=now,
                           extra_reasons=r.extra_reasons(), score=list(r.score))
        # nothing shared with the live state
        inp = replace(inp, snapshot=orjson.loads(orjson.dumps(inp.snapshot)), alerts=self.alerts(per.index))
        blocks = None
        store = kind == "full_time" and self.settings.history.enabled  # the history keeps a match at full time
        if store or self.baselines is not None:
            blocks = block_series(state_until(base, per.index), self.settings.history.block_min, "merge")
            if self.baselines is not None:
                inp = replace(inp, against_own=comparison(self.baselines, blocks))
            if not store:
                blocks = None
        kickoff = state.periods[0].t0
        build = build_report_in_process if self.settings.reports.worker_process else build_report
        entry = await self.runner.off_live(build, inp, self.root, self.settings.reports.low_coverage,
                                        {"basis": list(key)})
        self._built[kind] = key
        r.broadcaster.publish("report", kind=kind, url=self.url(kind, "report.html"))
        log.info("%s: %s report ready in %.2f s", r.match_id, kind, time.time() - now)
        if blocks is not None:
            await self.runner.off_live(self._store, inp, blocks, kickoff)
        self._spawn(self.runner.off_live(self._warm))  # outside the lock: the next report never waits for it
        return entry

    def _warm(self) -> None:
        try:
            self.rewind.extend()
        except Exception as exc:  # the report stands; a later export ?at= reads the recording itself
            log.error("%s: figures index not warmed: %s", self.runner.match_id, exc)

    def _store(self, inp: ReportInput, blocks: Any, kickoff: float) -> None:
        try:
            history.save(self.db, match_record(inp.snapshot, blocks, "live", kickoff_t=kickoff, origin="live service"))
        except Exception as exc:  # the report stands without the history
            log.error("%s: not stored in the history: %s", self.runner.match_id, exc)

    def url(self, kind: str, name: str) -> str:
        return f"/api/matches/{self.runner.match_id}/reports/{kind}/{name}"

    def listing(self) -> list[dict[str, Any]]:
        return report_entries(self.runner.match_id, self.root)

    def idle(self) -> bool:
        """No report pending or being built, no history write under way."""
        return not self._pending and not self._tasks and not self._lock.locked()
