"""Ingest for one match: decode, record, apply, broadcast; feed health over time.

The order for every batch of frames: decode (bad frames answered, nothing of
them kept) → recorder writes the accepted lines to the OS → the engine's
queue. One coroutine per match drains whatever is queued into one block and
steps the engine, so live it is usually one frame and in a fast replay
hundreds. If the recording cannot be written, the frames are not applied and
the decoder forgets them, so the provider can send them again.
"""
from __future__ import annotations

import asyncio
import logging
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import orjson

from pacewire.config import Settings
from pacewire.engine.health import STALLED
from pacewire.engine.match import MatchState
from pacewire.engine.snapshot import build_health, build_snapshot
from pacewire.engine.types import PERIODS, Block, Roster
from pacewire.live.broadcaster import Broadcaster
from pacewire.live.recorder import Recorder, RecorderError, write_json_atomic
from pacewire.live.reporting import Followup
from pacewire.params import match_params
from pacewire.wire.cdf import DecodeResult, FrameDecoder, FrameError, parse_message
from pacewire.wire.heart import HrDecoder, HrResult

log = logging.getLogger("pacewire.ingest")


@dataclass
class IngestOutcome:
    accepted: int
    rejected: int
    duplicates: int
    late: int
    errors: list[FrameError]
    stored: bool = True  # False: the recorder failed, nothing was kept

    def as_dict(self, limit: int = 20) -> dict[str, Any]:
        return {"accepted": self.accepted, "rejected": self.rejected, "duplicates": self.duplicates,
                "late": self.late, "errors": [e.as_dict() for e in self.errors[:limit]]}


@dataclass
class Hooks:
    """Operator counters the shell keeps (Prometheus); all optional."""

    frames_in: Callable[[int], None] = lambda n: None
    rejected: Callable[[int], None] = lambda n: None
    processing: Callable[[float], None] = lambda s: None
    messages_out: Callable[[int], None] = lambda n: None
    dropped: Callable[[], None] = lambda: None


EVENT_TYPES = ("period_start", "period_end", "substitution", "goal", "card")


class EventError(ValueError):
    pass


class MatchRunner:
    """One live match: its engine state, recording, subscribers and health."""

    def __init__(self, roster: Roster, settings: Settings, folder: Path, hooks: Hooks | None = None) -> None:
        self.roster = roster
        self.match_id = roster.match_id
        self.settings = settings
        self.folder = folder
        self.hooks = hooks or Hooks()
        self.state = MatchState(roster, match_params(settings, roster))
        self.decoder = FrameDecoder(roster, settings.decode.outside_margin_m, settings.decode.recent_ids)
        self.recorder = Recorder(folder, settings.server.fsync_interval_s)
        # heart-rate channel (docs/wearables.md): its own decoder and file, the same engine queue
        self.hr_decoder = HrDecoder(roster, self.state.params.heart)
        self.hr_recorder = Recorder(folder, settings.server.fsync_interval_s, "hr.jsonl")
        srv = settings.server
        self.broadcaster = Broadcaster(self.match_id, self.snapshot_body, srv.resume_buffer_s, srv.subscriber_queue,
                                       srv.max_subscribers, on_message=self.hooks.messages_out,
                                       on_drop=self.hooks.dropped, fps=roster.fps)
        self._queue: asyncio.Queue[tuple[DecodeResult | HrResult, float]] = asyncio.Queue()
        self._tasks: list[asyncio.Task] = []
        self.score = [0, 0]
        self.events: list[dict[str, Any]] = []
        self.health_state = STALLED
        self.health_reasons: list[str] = ["no_frames"]
        self._stall_view: MatchState | None = None  # figures shown while the feed is stalled
        self._stall_told = False  # subscribers were sent the stalled view's figures
        self._period_seen: str | None = None
        self._period_told: set[tuple[str, str]] = set()  # (event, period) already announced
        self.last_applied_wall = 0.0
        self.applied_frames = 0
        self.last_frame_arrival: dict[int, float] = {}  # frame id -> arrival, for the latency benchmark
        self.followup = Followup(self)  # reports at period ends, alerts, history (service/live/reporting.py)

    # -- life cycle ------------------------------------------------------------------
    def start(self) -> None:
        self.recorder.start()
        self.hr_recorder.start()
        self._tasks = [asyncio.create_task(self._apply_loop(), name=f"apply:{self.match_id}"),
                       asyncio.create_task(self._health_loop(), name=f"health:{self.match_id}"),
                       asyncio.create_task(self.followup.watch(), name=f"followup:{self.match_id}")]

    async def stop(self) -> None:
        for t in self._tasks:
            t.cancel()
        for t in self._tasks:
            try:
                await t
            except (asyncio.CancelledError, Exception):
                pass
        await self.recorder.stop()
        await self.hr_recorder.stop()

    # -- recovery ------------------------------------------------------------------------
    def recover(self) -> int:
        """Rebuild from the folder's recording and events (before start). Returns frames applied."""
        path = self.folder / "tracking.jsonl"
        n = 0
        if path.exists():
            with open(path, "rb") as fh:
                batch: list[bytes] = []
                for line in fh:
                    batch.append(line)
                    if len(batch) >= 2000:
                        n += self._recover_batch(batch)
                        batch = []
                if batch:
                    n += self._recover_batch(batch)
        hr = self.folder / "hr.jsonl"
        if hr.exists():
            with open(hr, "rb") as fh:
                res = HrDecoder(self.roster, self.state.params.heart, recorded=True).decode_lines(fh)
            # the live gate continues from the recorded samples (the last one per player)
            gate = self.hr_decoder.gate
            for i in set(res.player.tolist()):
                k = int(np.flatnonzero(res.player == i)[-1])
                gate.last_t[i], gate.last_bpm[i] = res.t[k], res.bpm[k]
            res.rejected = res.duplicates = res.late = 0  # live drops come from counters.json
            self.state.ingest_heart(res)
        ev = self.folder / "events.jsonl"
        if ev.exists():
            for line in ev.read_bytes().splitlines():
                try:
                    self._apply_event(orjson.loads(line))
                except (orjson.JSONDecodeError, EventError, KeyError):
                    log.warning("%s: skipped an unreadable event line", self.match_id)
        counters = self.folder / "counters.json"
        if counters.exists():
            try:
                c = orjson.loads(counters.read_bytes())
                self.state.health.rejected += int(c.get("rejected", 0))
                self.state.health.duplicates += int(c.get("duplicates", 0))
                self.state.health.late += int(c.get("late", 0))
                self.state.hr_rejected += int(c.get("hr_rejected", 0))
                self.state.hr_duplicates += int(c.get("hr_duplicates", 0))
                self.state.hr_late += int(c.get("hr_late", 0))
            except (orjson.JSONDecodeError, ValueError, TypeError):
                pass
        # recovered frames carry no arrival time: health starts afresh with the next frame
        h = self.state.health
        h.first_arrival = h.last_arrival = None
        self._period_seen = self.state.period_name()
        for per in self.state.periods:
            self._period_told.add(("start", per.name))
            if per.ended:
                self._period_told.add(("end", per.name))
        self.broadcaster.invalidate()
        return n

    def _recover_batch(self, lines: list[bytes]) -> int:
        res = self.decoder.decode_lines(lines)
        # counts of what was dropped live come from counters.json, not from here
        res.rejected = res.duplicates = res.late = 0
        self.state.ingest(res)
        return len(res.block)

    def save_counters(self) -> None:
        h = self.state.health
        try:
            st = self.state
            write_json_atomic(self.folder / "counters.json",
                              {"rejected": h.rejected, "duplicates": h.duplicates, "late": h.late,
                               "hr_rejected": st.hr_rejected, "hr_duplicates": st.hr_duplicates, "hr_late": st.hr_late})
        except OSError:
            pass

    # -- ingest -------------------------------------------------------------------------------
    async def ingest_lines(self, lines: list[bytes], durable: bool) -> IngestOutcome:
        """JSON Lines (HTTP): answered once the accepted lines are recorded."""
        arrival = time.time()
        cp = self.decoder.gate.checkpoint()
        res = self.decoder.decode_lines(lines)
        raw = [lines[i].rstrip(b"\r\n") for i in res.accepted]
        return await self._record(res, raw, cp, arrival, durable)

    async def ingest_message(self, data: str | bytes) -> IngestOutcome:
        """One WebSocket message: a frame or a JSON array of frames."""
        arrival = time.time()
        cp = self.decoder.gate.checkpoint()
        try:
            obj = orjson.loads(data)
        except orjson.JSONDecodeError as exc:
            self._count(DecodeResult(Block.empty(self.roster.n), [], rejected=1))
            return IngestOutcome(0, 1, 0, 0, [FrameError("bad_json", f"not valid JSON: {exc}")])
        objs = obj if isinstance(obj, list) else [obj]
        res = self.decoder.decode_objects(objs)
        if not isinstance(obj, list) and res.accepted:
            raw = [data.encode() if isinstance(data, str) else bytes(data)]
        else:
            raw = [orjson.dumps(objs[i]) for i in res.accepted]
        return await self._record(res, raw, cp, arrival, durable=False)

    async def _record(self, res: DecodeResult, raw: list[bytes], cp: tuple, arrival: float,
                      durable: bool) -> IngestOutcome:
        out = IngestOutcome(len(res.block), res.rejected, res.duplicates, res.late, res.errors)
        self._count(res)
        if not raw:
            return out
        try:
            await self.recorder.append(raw, durable=durable, after=lambda: self._queue.put_nowait((res, arrival)))
        except RecorderError:
            self.decoder.gate.restore(cp)
            out.accepted = 0
            out.stored = False
            self._set_health_now()
            return out
        self.hooks.frames_in(len(res.block))
        return out

    async def ingest_hr(self, data: bytes | str | list[bytes], durable: bool) -> IngestOutcome:
        """Heart-rate samples: JSON Lines (a list of lines, HTTP) or one WebSocket message
        (an object or an array); answered once the accepted samples are recorded."""
        arrival = time.time()
        dec = self.hr_decoder
        cp = dec.gate.checkpoint()
        if isinstance(data, list):
            res = dec.decode_lines(data)
            raw = [data[i].strip() for i in res.accepted]
        else:
            objs = parse_message(data)
            if isinstance(objs, FrameError):
                res, raw = HrResult.empty([objs], rejected=1), []
            else:
                res = dec.decode_objects(objs)
                raw = [orjson.dumps(objs[i]) for i in res.accepted]
        out = IngestOutcome(len(res), res.rejected, res.duplicates, res.late, res.errors)
        for st in (self.state, self._stall_view):  # a stalled feed's copy shows the counts too
            if st is not None:
                st.hr_rejected += res.rejected
                st.hr_duplicates += res.duplicates
                st.hr_late += res.late
        res.rejected = res.duplicates = res.late = 0  # counted here, once
        if out.rejected or out.duplicates or out.late:
            self.broadcaster.invalidate()
        if not len(res):
            return out
        try:
            await self.hr_recorder.append(raw, durable=durable, after=lambda: self._queue.put_nowait((res, arrival)))
        except RecorderError:
            dec.gate.restore(cp)
            out.accepted = 0
            out.stored = False
            self._set_health_now()
        return out

    def _count(self, res: DecodeResult) -> None:
        h = self.state.health
        h.rejected += res.rejected
        h.duplicates += res.duplicates
        h.late += res.late
        if res.rejected:
            self.hooks.rejected(res.rejected)

    async def _apply_loop(self) -> None:
        while True:
            first = await self._queue.get()
            items = [first]
            while not self._queue.empty():
                items.append(self._queue.get_nowait())
            hr = [r for r, _ in items if isinstance(r, HrResult)]
            if hr:
                items = [it for it in items if not isinstance(it[0], HrResult)]
                try:
                    got = HrResult.merge(hr)
                    self.state.ingest_heart(got)  # figures depend on timestamps only, not on order
                    if self._stall_view is not None:  # the stalled feed's finalised copy shows them too
                        self._stall_view.add_heart(got.player, got.t, got.bpm)
                except Exception:
                    log.exception("%s: engine failed on heart-rate samples; skipped", self.match_id)
                if not items:
                    self.broadcaster.invalidate()
                    self.broadcaster.tick()
                    continue
            merged = DecodeResult.merge([r for r, _ in items])  # type: ignore[misc]
            merged.rejected = merged.duplicates = merged.late = 0  # counted at decode time
            t0 = time.perf_counter()
            try:
                self.state.ingest(merged, now=time.time())
            except Exception:  # the engine must never take the match down
                log.exception("%s: engine failed on a block; block skipped", self.match_id)
                continue
            self.applied_frames += len(merged.block)
            self.last_frame_arrival = {int(merged.block.frame_id[-1]): items[-1][1]}
            self._stall_view = None
            self._after_apply()
            self.hooks.processing(time.perf_counter() - t0)

    def _announce_period(self, event: str, period: str, frame_id: int | None) -> None:
        if (event, period) not in self._period_told:
            self._period_told.add((event, period))
            self.broadcaster.publish("period", event=event, period=period, frame_id=frame_id)
            if event == "end":
                self.followup.period_ended(period)

    def _after_apply(self) -> None:
        period = self.state.period_name()
        if period != self._period_seen:
            if self._period_seen is not None:
                self._announce_period("end", self._period_seen, None)
            self._announce_period("start", period, self.state.last_frame_id)  # type: ignore[arg-type]
            self._period_seen = period
        self.broadcaster.invalidate()
        self.broadcaster.tick(frames=self.state.frames)
        self.followup.after_apply()
        self.last_applied_wall = time.time()

    # -- health ----------------------------------------------------------------------------------
    def extra_reasons(self) -> list[dict[str, str]]:
        return [{"code": "recorder", "message": rec.error} for rec in (self.recorder, self.hr_recorder) if rec.error]

    def _set_health_now(self) -> None:
        self.broadcaster.invalidate()
        self._maybe_health_message(self.health_body())

    def _maybe_health_message(self, health: dict[str, Any]) -> None:
        """Push a health message when the state or the kinds of reasons change."""
        codes = sorted(r["code"] for r in health["reasons"])
        if health["state"] != self.health_state or codes != self.health_reasons:
            self.health_state, self.health_reasons = health["state"], codes
            self.broadcaster.publish("health", health=health)

    async def _health_loop(self) -> None:
        every = self.settings.server.health_check_s
        last_save = time.monotonic()
        while True:
            await asyncio.sleep(every)
            try:
                self._stalled_view(time.time())
                if self._stall_view is not None and not self._stall_told:
                    self._stall_told = True  # subscribers get the finalised figures at once
                    self.broadcaster.invalidate()
                    self.broadcaster.tick(force=True)
                self.broadcaster.invalidate()  # health moves with the clock: the next read builds afresh
                self._maybe_health_message(self.health_body())
                if time.monotonic() - last_save > 5.0:
                    last_save = time.monotonic()
                    await asyncio.to_thread(self.save_counters)
            except Exception:
                log.exception("%s: health check failed", self.match_id)

    # -- snapshot ------------------------------------------------------------------------------------
    def _stalled_view(self, now: float) -> None:
        """Once the feed counts as stalled, show the tail finalised so nothing waits uncounted."""
        h = self.state.health
        if self._stall_view is None and h.last_arrival is not None and now - h.last_arrival > self.settings.health.stall_s:
            self._stall_view = self.state.provisional()
            self._stall_told = False

    def health_body(self) -> dict[str, Any]:
        """The snapshot's ``health`` now, without building the figures."""
        now = time.time()
        self._stalled_view(now)
        return build_health(self._stall_view or self.state, now, self.extra_reasons())

    def snapshot_body(self) -> dict[str, Any]:
        now = time.time()
        self._stalled_view(now)  # a read between the stall and the next health check sees final figures too
        shown = self._stall_view or self.state
        snap = build_snapshot(shown, now=now, extra_reasons=self.extra_reasons())
        for k, tid in enumerate(self.roster.team_ids):
            snap["teams"][tid]["score"] = self.score[k]
        return snap

    def summary(self) -> dict[str, Any]:
        h = self.state.health
        return {"match_id": self.match_id, "teams": {tid: {"name": self.roster.team_names[k], "side": ("home", "away")[k],
                                                              "score": self.score[k]}
                                                        for k, tid in enumerate(self.roster.team_ids)},
                "period": self.state.period_name(), "match_time_s": round(self.state.match_time_s(), 2),
                "frames": self.state.frames, "health": self.health_state,
                "subscribers": self.broadcaster.subscriber_count, "last_frame_at": h.last_arrival}

    # -- match events -----------------------------------------------------------------------------------
    def add_event(self, event: dict[str, Any]) -> dict[str, Any]:
        """Validate, record and apply one match event; raises EventError with a reason."""
        ev = self._check_event(event)
        self.recorder.append_event(ev)
        self._apply_event(ev)
        return ev

    def _check_event(self, e: Any) -> dict[str, Any]:
        if not isinstance(e, dict):
            raise EventError("an event must be a JSON object")
        kind = e.get("type")
        if kind not in EVENT_TYPES:
            raise EventError(f"type must be one of {', '.join(EVENT_TYPES)}")
        if "frame_id" not in e and "match_time_s" not in e:
            raise EventError("an event needs a frame_id or a match_time_s")
        if "frame_id" in e and type(e["frame_id"]) is not int:
            raise EventError("frame_id must be an integer")
        if "match_time_s" in e and (type(e["match_time_s"]) not in (int, float) or not 0 <= e["match_time_s"] < 36000):
            raise EventError("match_time_s must be a number of seconds")
        players = self.roster.index
        if kind in ("period_start", "period_end"):
            if e.get("period") not in PERIODS:
                raise EventError(f"period must be one of {', '.join(PERIODS)}")
        elif kind == "substitution":
            off, on = e.get("player_off"), e.get("player_on")
            for name, pid in (("player_off", off), ("player_on", on)):
                if not isinstance(pid, str) or pid not in players:
                    raise EventError(f"{name} {pid!r} is not in the match sheet")
            if self.roster.players[players[off]].team != self.roster.players[players[on]].team:
                raise EventError("player_off and player_on play for different teams")
        elif kind == "goal":
            if e.get("team_id") not in self.roster.team_ids:
                raise EventError(f"team_id must be one of {', '.join(self.roster.team_ids)}")
            if "player_id" in e and e["player_id"] not in players:
                raise EventError(f"player_id {e['player_id']!r} is not in the match sheet")
        elif kind == "card":
            if e.get("card") not in ("yellow", "second_yellow", "red"):
                raise EventError("card must be yellow, second_yellow or red")
            if e.get("player_id") not in players:
                raise EventError(f"player_id {e.get('player_id')!r} is not in the match sheet")
        allowed = {"type", "frame_id", "match_time_s", "period", "player_off", "player_on", "team_id", "player_id", "card"}
        extra = set(e) - allowed
        if extra:
            raise EventError(f"unknown fields: {', '.join(sorted(extra))}")
        return dict(e)

    def _apply_event(self, ev: dict[str, Any]) -> None:
        kind = ev["type"]
        self.events.append(ev)
        if kind == "substitution":
            self.state.substitute(ev["player_off"], ev["player_on"])
        elif kind == "card" and ev["card"] in ("red", "second_yellow"):
            self.state.substitute(ev["player_id"], None)
        elif kind == "goal":
            self.score[self.roster.team_ids.index(ev["team_id"])] += 1
        elif kind == "period_end":
            if self.state.period_name() == ev["period"]:
                self.state.end_period()
        self._stall_view = None  # a stalled feed's copy predates the event: the next read copies anew
        self.broadcaster.invalidate()

    def event_message(self, ev: dict[str, Any]) -> None:
        """Tell subscribers about an event that changes what they show."""
        kind = ev["type"]
        if kind in ("period_start", "period_end"):
            self._announce_period(kind.split("_")[1], ev["period"], ev.get("frame_id"))
        self.broadcaster.tick(force=True)
