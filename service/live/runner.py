"""One live match: its engine state, intake, subscribers, feed watch and follow-up.

One coroutine per match drains whatever the intake has queued into one block
and steps the engine, so live it is usually one frame and in a fast replay
hundreds. The Redis aggregator drives the same runner from a stream instead
of the intake, through the same public methods (``apply_lines``,
``apply_event``, ``add_heart``, ``apply_cdf_events``, ``after_block``, ``check_status``).

A ``period_end`` event placed at a frame the engine has not reached yet (sent
on another connection than the frames, so it may overtake them) waits for that
frame. The match status (:mod:`pacewire.live.status`) is judged after every
block and event and on the feed watch's clock.
"""
from __future__ import annotations

import asyncio
import logging
import math
import time
from collections.abc import Awaitable, Callable
from pathlib import Path
from typing import Any, TypeVar

import orjson

from pacewire.config import Settings
from pacewire.engine.match import MatchState
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import PERIOD_INDEX, PERIODS, Roster
from pacewire.events import apply_event, check_event
from pacewire.live import checkpoints
from pacewire.live.broadcaster import Broadcaster
from pacewire.live.feedwatch import FeedWatch
from pacewire.live.followup import Followup
from pacewire.live.intake import Intake, Queued
from pacewire.live.lane import Lane
from pacewire.live.metrics import Hooks
from pacewire.live.periods import PeriodAnnouncer
from pacewire.live.recorder import Recorder, write_json_atomic
from pacewire.live.status import BREAK, ENDED, MatchStatus
from pacewire.params import match_params
from pacewire.tasks import cancel
from pacewire.wire.cdf import DecodeResult, FrameDecoder
from pacewire.wire.events import EventResult
from pacewire.wire.heart import HrDecoder, HrResult
from pacewire.wire.outcome import after_end_message
from pacewire.wire.recording import EVENT_FILE

T = TypeVar("T")
log = logging.getLogger("pacewire.runner")


class MatchRunner:
    def __init__(self, roster: Roster, settings: Settings, folder: Path, hooks: Hooks | None = None,
                 lane: Lane | None = None) -> None:
        self.roster = roster
        self.lane = lane  # the background lane (reports, history); None: worker threads
        self.match_id = roster.match_id
        self.settings = settings
        self.folder = folder
        self.hooks = hooks or Hooks()
        self.state = MatchState(roster, match_params(settings, roster))
        self.decoder = FrameDecoder(roster, settings.decode.outside_margin_m, settings.decode.recent_ids)
        srv = settings.server
        self.recorder = Recorder(folder, srv.fsync_interval_s)
        self.hr_recorder = Recorder(folder, srv.fsync_interval_s, "hr.jsonl")
        self.event_recorder = Recorder(folder, srv.fsync_interval_s, EVENT_FILE)  # the CDF event stream
        self.intake = Intake(roster, self.decoder, HrDecoder(roster, self.state.params.heart), self.recorder,
                             self.hr_recorder, self, self.event_recorder)
        self.broadcaster = Broadcaster(self.match_id, self.snapshot_body, srv.resume_buffer_s, srv.subscriber_queue,
                                       srv.max_subscribers, on_message=self.hooks.messages_out,
                                       on_drop=self.hooks.dropped, fps=roster.fps,
                                       buffer_bytes=int(srv.resume_buffer_mb * 1024 * 1024))
        self.feed = FeedWatch(self, settings.health.stall_s, srv.health_check_s)
        self._queue: asyncio.Queue[Queued] = asyncio.Queue()
        self._tasks: list[asyncio.Task[None]] = []
        self.score = [0, 0]
        self._kickoff: str | None = None  # the meta's match.kickoff_time; "" when it has none
        self.events: list[dict[str, Any]] = []
        self.applied_frames = 0
        self.last_applied_wall = 0.0
        self.last_frame_arrival: dict[int, float] = {}  # frame id -> arrival, for the latency benchmark
        self.followup = Followup(self)  # reports at period ends, alerts, history
        self.periods = PeriodAnnouncer(self.broadcaster, self.followup.period_ended)
        self.status = MatchStatus(roster, settings.reports.period_timeout_s,
                                  {name: int(getattr(settings.periods, name)) for name in PERIODS})
        self.parked: list[tuple[dict[str, Any], bool]] = []  # period ends waiting for their frame
        # records the period_end that makes the last period's timeout final (the aggregator's goes through Redis)
        self.record_end: Callable[[dict[str, Any]], Awaitable[bool]] = self._record_end
        self._closing: tuple[int, int] | None = None  # (period, last slot) whose timeout end is being recorded
        self._side: set[asyncio.Task[Any]] = set()
        self._checkpoint_frames = 0  # state.frames at the last checkpoint (or the rebuild)

    # -- life cycle ------------------------------------------------------------------
    def start(self) -> None:
        self.recorder.start()
        self.hr_recorder.start()
        self.event_recorder.start()
        self._tasks = [asyncio.create_task(self._apply_loop(), name=f"apply:{self.match_id}"),
                       asyncio.create_task(self.feed.run(), name=f"health:{self.match_id}"),
                       asyncio.create_task(self.followup.watch(), name=f"followup:{self.match_id}")]

    async def stop(self) -> None:
        await cancel([*self._tasks, *self._side])
        await self.recorder.stop()
        await self.hr_recorder.stop()
        await self.event_recorder.stop()

    # -- what the intake stores (IntakeSink) ----------------------------------------------
    def enqueue(self, item: Queued) -> None:
        self._queue.put_nowait(item)

    def count_frames(self, res: DecodeResult) -> None:
        h = self.state.health
        h.rejected += res.rejected
        h.duplicates += res.duplicates
        h.late += res.late
        h.resent += res.resent
        if res.rejected:
            self.hooks.rejected(res.rejected)

    def count_heart(self, rejected: int, duplicates: int, late: int) -> None:
        for st in (self.state, self.feed.stall_view):  # a stalled feed's copy shows the counts too
            if st is not None:
                st.hr_rejected += rejected
                st.hr_duplicates += duplicates
                st.hr_late += late
        if rejected or duplicates or late:
            self.broadcaster.invalidate()

    def count_events(self, rejected: int, duplicates: int) -> None:
        for st in (self.state, self.feed.stall_view):  # a stalled feed's copy shows the counts too
            if st is not None:
                st.event_feed.rejected += rejected
                st.event_feed.duplicates += duplicates
        if rejected or duplicates:
            self.broadcaster.invalidate()

    def recorded(self, frames: int) -> None:
        self.hooks.frames_in(frames)

    def frames_coming(self, now: float) -> None:
        self.status.frames_in(now)

    def ended(self, now: float) -> bool:
        return self.status.judge(self.state, now).status == ENDED

    def refused_after_end(self, frames: int) -> str:
        self.state.health.after_end += frames
        self.broadcaster.invalidate()
        return after_end_message(frames, f" ({self.state.period_name()}, {self.state.match_time_s() / 60:.1f} min)")

    def unstored(self) -> None:
        self.feed.check()

    # -- applying ----------------------------------------------------------------------
    async def _apply_loop(self) -> None:
        while True:
            items = [await self._queue.get()]
            while not self._queue.empty():
                items.append(self._queue.get_nowait())
            hr = [r for r, _ in items if isinstance(r, HrResult)]
            frames = [(r, t) for r, t in items if isinstance(r, DecodeResult)]
            for r, t in items:
                if isinstance(r, EventResult):
                    self.apply_cdf_events(r, now=t)  # figures depend on the final events, not on the order
            if not hr and not frames:
                self.broadcaster.tick()
                continue
            if hr:
                self.add_heart(HrResult.merge(hr))  # figures depend on timestamps only, not on order
                if not frames:
                    self.broadcaster.invalidate()
                    self.broadcaster.tick()
                    continue
            merged = DecodeResult.merge([r for r, _ in frames])
            merged.rejected = merged.duplicates = merged.late = merged.resent = 0  # counted at decode time
            t0 = time.perf_counter()
            try:
                self.state.ingest(merged, now=time.time())
            except Exception:  # the engine must never take the match down
                log.exception("%s: engine failed on a block; block skipped", self.match_id)
                continue
            self.last_frame_arrival = {int(merged.block.frame_id[-1]): frames[-1][1]}
            self._release()
            self.after_block(len(merged.block), t0)
            self._checkpoint_due()

    async def off_live(self, fn: Callable[..., T], *args: Any) -> T:
        """``fn(*args)`` off the live path: on the background lane, or a worker thread without one."""
        if self.lane is not None:
            return await self.lane.run(fn, *args)
        return await asyncio.to_thread(fn, *args)

    def queue_empty(self) -> bool:
        return self._queue.empty()

    def _checkpoint_due(self) -> None:
        """Every ``[archive] checkpoint_s`` of play, the state beside the recording (written in a thread)."""
        every = self.settings.archive.checkpoint_s
        due = self.state.frames - self._checkpoint_frames >= every * self.roster.fps
        if every <= 0 or not due or any(not t.done() for t in self._side if t.get_name() == "checkpoint"):
            return
        captured = checkpoints.capture(self)
        if captured is None:
            return  # some recorded line is not applied yet: after a later block
        self._checkpoint_frames = self.state.frames
        task = asyncio.get_running_loop().create_task(self._write_checkpoint(*captured), name="checkpoint")
        self._side.add(task)
        task.add_done_callback(self._side.discard)

    async def _write_checkpoint(self, text: bytes, arrays: list[Any]) -> None:
        try:
            await self.off_live(checkpoints.write, self.folder, text, arrays)
        except OSError as exc:  # the recording stands; a restart replays more of it
            log.error("%s: checkpoint not written: %s", self.match_id, exc)

    def apply_lines(self, lines: list[bytes], now: float | None = None) -> int:
        """Recorded frame lines (a recording, a stream) into the engine; their drops were counted
        when they arrived. Returns the frames applied."""
        res = self.decoder.decode_lines(lines)
        res.rejected = res.duplicates = res.late = res.resent = 0
        try:
            self.state.ingest(res, now=now)
        except Exception:  # the engine must never take the match down
            log.exception("%s: engine failed on a block; block skipped", self.match_id)
        self._release()
        return len(res.block)

    def apply_cdf_events(self, res: EventResult, now: float | None) -> None:
        """Accepted CDF events into the engine (``now``: their arrival, live); a stalled feed's copy
        predates them."""
        try:
            self.state.ingest_events(res, now=now)
        except Exception:
            log.exception("%s: engine failed on events; skipped", self.match_id)
        self.feed.moved_on()
        self.broadcaster.invalidate()

    def add_heart(self, res: HrResult) -> None:
        """Accepted heart-rate samples into the engine (and into a stalled feed's copy)."""
        try:
            self.state.ingest_heart(res)
            if self.feed.stall_view is not None:
                self.feed.stall_view.add_heart(res.player, res.t, res.bpm)
        except Exception:
            log.exception("%s: engine failed on heart-rate samples; skipped", self.match_id)

    def after_block(self, frames: int, started: float) -> None:
        """After a block of ``frames`` was applied (``started``: perf_counter before it): periods,
        deltas to subscribers, reports and alerts."""
        self.applied_frames += frames
        self.status.frames_in(time.time())
        self.feed.moved_on()
        self.periods.observe(self.state)
        self.check_status()
        self.broadcaster.invalidate()
        self.broadcaster.tick(frames=self.state.frames)
        self.followup.after_apply()
        self.last_applied_wall = time.time()
        self.hooks.processing(time.perf_counter() - started)

    def rebuilt(self) -> None:
        """The state was rebuilt (recording, checkpoint): health starts afresh with the next frame."""
        h = self.state.health
        h.first_arrival = h.last_arrival = None  # rebuilt frames carry no arrival time
        self.periods.rebuilt(self.state)
        self.status.frames_in(time.time())  # the silence before a period's timeout counts from the rebuild
        self.status.told = self.status.judge(self.state, time.time()).status  # told before the restart
        h.finished = self.status.told == ENDED
        self._checkpoint_frames = self.state.frames
        self.broadcaster.invalidate()

    # -- match events -------------------------------------------------------------------
    def add_event(self, event: Any) -> dict[str, Any]:
        """Check, record and apply one match event, and tell subscribers; raises EventError, OSError."""
        ev = check_event(self.roster, event)
        self.recorder.append_event(ev)
        self.apply_event(ev, announce=True)
        return ev

    def apply_event(self, ev: dict[str, Any], announce: bool) -> None:
        """A checked event into the figures and the score; ``announce``: tell subscribers now."""
        if self._ahead(ev):
            self.parked.append((ev, announce))
            return
        self.events.append(ev)
        apply_event(self.state, ev)
        self.status.event(ev, time.time())
        if ev["type"] == "goal":
            self.score[self.roster.team_ids.index(ev["team_id"])] += 1
        self.feed.moved_on()  # a stalled feed's copy predates the event: the next read copies anew
        self.broadcaster.invalidate()
        if announce:
            if ev["type"] in ("period_start", "period_end"):
                self.periods.announce(ev["type"].split("_")[1], ev["period"], ev.get("frame_id"))
            self.check_status()
            self.broadcaster.tick(force=True)

    def _ahead(self, ev: dict[str, Any]) -> bool:
        """A period end placed at a frame of its period the engine has not reached yet."""
        if ev["type"] != "period_end" or type(ev.get("frame_id")) is not int:
            return False
        cur, last = self.state.current, self.state.last_frame_id
        if cur is not None and PERIOD_INDEX[ev["period"]] < cur.index:
            return False  # the frames have moved past its period: it ends nothing that is not over
        return last is None or ev["frame_id"] > last

    def _release(self) -> None:
        """Apply the parked period ends whose frame has now been applied."""
        if self.parked and not all(self._ahead(ev) for ev, _ in self.parked):
            due = [(ev, a) for ev, a in self.parked if not self._ahead(ev)]
            self.parked = [(ev, a) for ev, a in self.parked if self._ahead(ev)]
            for ev, announce in due:
                self.apply_event(ev, announce)

    # -- the match status ------------------------------------------------------------------
    def check_status(self, now: float | None = None) -> None:
        """Judge the status; on a change tell subscribers (a ``status`` message, the delta, feed
        health) and start what it calls for: a break's report, the record of a last period's end."""
        now = time.time() if now is None else now
        st = self.status
        v = st.judge(self.state, now)
        if v.close:
            self._close_last_period()
        if v.status == st.told:
            return
        st.told = v.status
        self.state.health.finished = v.status == ENDED
        self.broadcaster.invalidate()
        self.broadcaster.publish("status", match_status=v.status, cause=v.cause, message=st.message(v, self.state))
        self.broadcaster.tick(force=True)
        if v.status == BREAK and v.cause == "timeout" and v.period is not None:
            self.followup.period_over(v.period)
        self.feed.check()

    def _close_last_period(self) -> None:
        cur = self.state.current
        assert cur is not None
        key = (cur.index, cur.last_slot)
        if self._closing == key:
            return
        self._closing = key
        task = asyncio.get_running_loop().create_task(self._close(key, self.status.timeout_end(self.state)))
        self._side.add(task)
        task.add_done_callback(self._side.discard)

    async def _close(self, key: tuple[int, int], ev: dict[str, Any]) -> None:
        try:
            done = await self.record_end(ev)
        except Exception:
            log.exception("%s: recording the end of %s failed", self.match_id, ev["period"])
            done = False
        if not done and self._closing == key:
            await asyncio.sleep(1.0)  # frames came meanwhile, or the store failed: judge again later
            self._closing = None

    async def _record_end(self, ev: dict[str, Any]) -> bool:
        try:
            self.add_event(ev)
        except OSError as exc:
            log.error("%s: cannot record the end of %s: %s", self.match_id, ev["period"], exc)
            return False
        return True

    # -- what is shown ---------------------------------------------------------------------
    def extra_reasons(self) -> list[dict[str, str]]:
        return [{"code": "recorder", "message": rec.error}
                for rec in (self.recorder, self.hr_recorder, self.event_recorder) if rec.error]

    def snapshot_body(self) -> dict[str, Any]:
        now = time.time()
        snap = build_snapshot(self.feed.shown(now), now=now, extra_reasons=self.extra_reasons(),
                              baselines=self.followup.baselines)
        for k, tid in enumerate(self.roster.team_ids):
            snap["teams"][tid]["score"] = self.score[k]
        snap["match_status"] = self.status.told
        snap["alerts"] = self.followup.alerts()  # a new list each time: a delta compares it by value
        return snap

    def summary(self) -> dict[str, Any]:
        r = self.roster
        if self._kickoff is None:  # read once: the match list names each match by its kick-off
            self._kickoff = kickoff_time(self.folder)
        return {"match_id": self.match_id, "kickoff_time": self._kickoff or None,
                "teams": {tid: {"name": r.team_names[k], "side": ("home", "away")[k], "score": self.score[k]}
                          for k, tid in enumerate(r.team_ids)},
                "period": self.state.period_name(), "match_time_s": round(self.state.match_time_s(), 2),
                "status": self.status.told, "frames": self.state.frames, "health": self.feed.state,
                "subscribers": self.broadcaster.subscriber_count, "last_frame_at": self.state.health.last_arrival,
                "kickoff_t": self.state.periods[0].t0 if self.state.periods else None, "archived": False}

    def position(self) -> dict[str, Any]:
        """Where the stored feed stands (``GET /api/matches/{id}/feed``)."""
        gate = self.decoder.gate  # what the recording holds: accepted frames, applied or still queued
        hr_t = self.intake.hr_decoder.gate.last_t
        hr_last = float(hr_t.max()) if len(hr_t) and math.isfinite(hr_t.max()) else None
        return {"last_frame_id": gate.last_id if gate.last_id >= 0 else None,
                "last_timestamp": gate.last_t if math.isfinite(gate.last_t) else None,
                "period": PERIODS[gate.period] if gate.period >= 0 else None,
                "hr_last_timestamp": hr_last, "match_status": self.status.told}

    def idle(self) -> bool:
        """Nothing queued, nothing being built or recorded for this match (it may be archived)."""
        return self._queue.empty() and not self._side and self.followup.idle()

    def save_counters(self) -> None:
        """The drop counts beside the recording (recovered frames carry none)."""
        h, st = self.state.health, self.state
        try:
            write_json_atomic(self.folder / "counters.json",
                              {"rejected": h.rejected, "duplicates": h.duplicates, "late": h.late,
                               "resent": h.resent, "after_end": h.after_end,
                               "hr_rejected": st.hr_rejected, "hr_duplicates": st.hr_duplicates,
                               "hr_late": st.hr_late, "event_rejected": st.event_feed.rejected,
                               "event_duplicates": st.event_feed.duplicates})
        except OSError:
            pass


def kickoff_time(folder: Path) -> str:
    """The CDF meta's ``match.kickoff_time`` (RFC 3339) from the match folder; "" when absent or unreadable."""
    try:
        meta = orjson.loads((folder / "meta.json").read_bytes())
    except (OSError, ValueError):
        return ""
    match = meta.get("match") if isinstance(meta, dict) else None
    value = match.get("kickoff_time") if isinstance(match, dict) else None
    return value if isinstance(value, str) else ""
