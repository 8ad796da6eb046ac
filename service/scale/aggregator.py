"""The ``aggregator`` role: claims matches, steps the engine, publishes the messages.

A match is claimed with a lease (``SET lease owner NX PX``, renewed at a third
of its length). The claimant rebuilds the match from its latest checkpoint and
the streams after it (frames and control events; heart-rate samples; CDF
events), then reads new entries of each through the consumer group
``aggregators``. Heart-rate figures depend on timestamps only
(docs/wearables.md) and the phases on the final events only, so the streams are
read independently, each from its own position in the checkpoint. Its broadcaster
holds one stream per (view, cadence) that some gateway asked for; every
message of a stream goes out in one Lua call that first checks the lease (a
lapsed owner publishes nothing), appends the message to the stream's resume
buffer, publishes it on the stream's channel and stores the stream's snapshot
at that seq. That snapshot is also the stream's hand-over: a successor
restores seq and last state from it, so clients see the seq continue and a
delta that brings them to the rebuilt state.
"""
from __future__ import annotations

import asyncio
import logging
import os
import socket
import time
import uuid
from pathlib import Path
from typing import Any

import numpy as np
import orjson
from redis.exceptions import RedisError, ResponseError

from pacewire.config import Settings
from pacewire.engine.stateio import from_npz, to_npz
from pacewire.live.broadcaster import Group, Subscriber
from pacewire.live.metrics import Hooks
from pacewire.live.runner import MatchRunner
from pacewire.live.status import ENDED
from pacewire.scale import keys
from pacewire.scale.settings import ScaleSettings
from pacewire.wire.cdf import parse_setup
from pacewire.wire.heart import HrResult
from pacewire.wire.messages import snapshot_message
from pacewire.wire.view import View, ViewError

# the only classes a Redis checkpoint may build: engine state, decoder gates and ids, the match status
CHECKPOINT_CLASSES = ("pacewire.engine.", "pacewire.wire.", "pacewire.live.status:")
log = logging.getLogger("pacewire.scale.aggregator")

GROUP = "aggregators"
SNAP_TTL_S = 86_400  # a stream's hand-over snapshot outlives any match

_RENEW = """
local v = redis.call('GET', KEYS[1])
if v == ARGV[1] then return redis.call('PEXPIRE', KEYS[1], ARGV[2]) end
if not v then
  if redis.call('SET', KEYS[1], ARGV[1], 'NX', 'PX', ARGV[2]) then return 1 end
end
return 0
"""

_RELEASE = """
if redis.call('GET', KEYS[1]) == ARGV[1] then return redis.call('DEL', KEYS[1]) end
return 0
"""

# KEYS: lease, then (buffer, snapshot) per stream. ARGV: owner, lease ms, wall time, then per stream:
# channel, snapshot text, buffer length, n, then n × (seq, text).
_PUBLISH = f"""
local owner = redis.call('GET', KEYS[1])
if not owner then
  -- expired while this process was busy, and nobody took it: still the only writer
  if not redis.call('SET', KEYS[1], ARGV[1], 'NX', 'PX', ARGV[2]) then return 0 end
elseif owner ~= ARGV[1] then return 0 end
local a = 4
for g = 1, (#KEYS - 1) / 2 do
  local buf, snap = KEYS[2 * g], KEYS[2 * g + 1]
  local channel, snaptext, maxlen, n = ARGV[a], ARGV[a + 1], ARGV[a + 2], tonumber(ARGV[a + 3])
  a = a + 4
  for i = 1, n do
    redis.pcall('XADD', buf, 'MAXLEN', '~', maxlen, ARGV[a] .. '-0', 't', ARGV[a + 1], 'w', ARGV[3])
    redis.call('PUBLISH', channel, ARGV[a + 1])
    a = a + 2
  end
  redis.call('SET', snap, snaptext, 'EX', {SNAP_TTL_S})
end
return 1
"""


# The period_end that makes a silent last period final, appended after the stream's top entry only
# if that entry is the one this owner applied last (no frame came meanwhile), and the ended flag set
# in the same step, so no ingest node appends a frame after it. KEYS: frames stream, ended flag,
# lease. ARGV: the entry id applied last, the event, the owner.
_END = """
if redis.call('GET', KEYS[3]) ~= ARGV[3] then return 0 end
local top = redis.call('XREVRANGE', KEYS[1], '+', '-', 'COUNT', 1)
if #top == 0 or top[1][1] ~= ARGV[1] then return 0 end
local ms = string.match(top[1][1], '^(%d+)-')
redis.call('XADD', KEYS[1], ms .. '-*', 'e', ARGV[2])
redis.call('SET', KEYS[2], '1')
return 1
"""

# The ended flag follows the status: set once the match has ended, if the entry applied last is the
# stream's top (an unread period_start may already have reopened it); cleared once it has reopened.
# KEYS: frames stream, ended flag. ARGV: '1' set or '0' clear, the entry id applied last.
_FLAG = """
if ARGV[1] == '0' then redis.call('DEL', KEYS[2]) return 1 end
local top = redis.call('XREVRANGE', KEYS[1], '+', '-', 'COUNT', 1)
if #top > 0 and top[1][1] ~= ARGV[2] then return 0 end
redis.call('SET', KEYS[2], '1')
return 1
"""


class _SinkQueue:
    """Looks like a subscriber's queue to the broadcaster; feeds the match's publish queue."""

    def __init__(self, sink: Sink, out: asyncio.Queue[tuple[Sink, str | None]]) -> None:
        self.sink, self.out = sink, out

    def qsize(self) -> int:
        return 0

    def put_nowait(self, text: str) -> None:
        self.out.put_nowait((self.sink, text))


class Sink(Subscriber):
    """The one 'subscriber' of a stream on the aggregator: Redis, on behalf of every gateway."""

    def __init__(self, match_id: str, stream: str, out: asyncio.Queue[tuple[Sink, str | None]], maxlen: int) -> None:
        super().__init__(self._never, 1)
        self.stream = stream
        self.channel = keys.out_channel(match_id, stream)
        self.buffer_key = keys.out_buffer(match_id, stream)
        self.snapshot_key = keys.out_snapshot(match_id, stream)
        self.maxlen = maxlen
        # duck-typed: the broadcaster only calls qsize and put_nowait on a sink's queue
        self.queue = _SinkQueue(self, out)  # type: ignore[assignment]
        self.wanted_until = 0.0

    async def _never(self, text: str) -> None:  # pragma: no cover - sinks are never pumped
        raise RuntimeError("a sink is not pumped")


class AggMatch:
    """One claimed match: a MatchRunner fed from the stream instead of from sockets."""

    def __init__(self, agg: Aggregator, match_id: str, runner: MatchRunner) -> None:
        self.agg = agg
        self.redis = agg.redis
        self.match_id = match_id
        self.runner = runner
        self.key = keys.frames(match_id)
        self.last_id = b"0-0"
        self.hr_key = keys.hr(match_id)
        self.hr_last_id = b"0-0"  # heart-rate entries applied up to here
        self.ev_key = keys.events(match_id)
        self.ev_last_id = b"0-0"  # CDF event entries applied up to here
        self.out: asyncio.Queue[tuple[Sink, str | None]] = asyncio.Queue()
        self.sinks: dict[str, Sink] = {}
        self.tasks: list[asyncio.Task[None]] = []
        self.lost = asyncio.Event()
        self.stopped = False
        self.last_checkpoint = time.monotonic()
        self.last_arrival: float | None = None  # arrival (ingest wall time) of the latest applied frame
        self.flagged: bool | None = None  # the ended flag as this owner last set it (None: not yet)
        runner.record_end = self.record_end

    # -- rebuild ------------------------------------------------------------------------------
    async def rebuild(self) -> int:
        """Checkpoint (if any) plus the stream after it; returns the entries replayed."""
        r = self.runner
        cp = await self.redis.get(keys.checkpoint(self.match_id))
        if cp is not None:
            try:
                self._restore(from_npz(cp, CHECKPOINT_CLASSES))
            except Exception as exc:  # an unreadable or old-format checkpoint: the whole stream will do
                log.warning("%s: checkpoint unreadable (%s), replaying the whole stream", self.match_id, exc)
                self.runner = r = _fresh_runner(self.agg, self.match_id, r.roster)
                r.record_end = self.record_end
                self.last_id = self.hr_last_id = self.ev_last_id = b"0-0"
        n = 0
        count = self.agg.scale.read_count
        for key, start, apply in ((self.key, self.last_id, lambda b: self._apply(b, now=None)),
                                  (self.hr_key, self.hr_last_id, self._apply_hr),
                                  (self.ev_key, self.ev_last_id, lambda b: self._apply_events(b, now=None))):
            while True:
                lo = b"(" + start if start != b"0-0" else b"-"
                batch = await self.redis.xrange(key, lo, "+", count=count)
                if not batch:
                    break
                apply(batch)
                n += len(batch)
                start = batch[-1][0]
        await self._read_counts()
        r.rebuilt()  # as after a restart: health starts afresh
        # the consumer groups: made if missing, then moved to what was rebuilt; old consumers go
        for key, last in ((self.key, self.last_id), (self.hr_key, self.hr_last_id), (self.ev_key, self.ev_last_id)):
            try:
                await self.redis.xgroup_create(key, GROUP, id="0", mkstream=True)
            except ResponseError as exc:
                if "BUSYGROUP" not in str(exc):
                    raise
            await self.redis.xgroup_setid(key, GROUP, last)
            for c in await self.redis.xinfo_consumers(key, GROUP):
                name = c["name"].decode() if isinstance(c["name"], bytes) else c["name"]
                if name != self.agg.owner:
                    await self.redis.xgroup_delconsumer(key, GROUP, name)
        return n

    def _checkpoint_state(self) -> dict[str, Any]:
        r = self.runner
        ev = r.intake.event_decoder
        return {"state": r.state, "gate": r.decoder.gate, "score": r.score, "events": r.events,
                "told": r.periods.told, "last_id": self.last_id, "hr_last_id": self.hr_last_id,
                "status": r.status, "parked": r.parked, "ev_last_id": self.ev_last_id,
                "ev_ids": (ev.content, ev.keys)}

    def _restore(self, cp: dict[str, Any]) -> None:
        r = self.runner
        r.state, r.decoder.gate, r.score, r.events = cp["state"], cp["gate"], cp["score"], cp["events"]
        r.periods.told = set(cp["told"])
        r.status, r.parked = cp.get("status", r.status), cp.get("parked", [])
        self.last_id = cp["last_id"]
        self.hr_last_id = cp.get("hr_last_id", b"0-0")  # a checkpoint from before the heart-rate stream
        self.ev_last_id = cp.get("ev_last_id", b"0-0")  # ... or from before the CDF event stream
        ev = r.intake.event_decoder
        ev.content, ev.keys = cp.get("ev_ids", ({}, {}))

    async def checkpoint(self) -> None:
        """Engine state + stream position, so a successor replays only what came after."""
        blob = to_npz(self._checkpoint_state(), CHECKPOINT_CLASSES)  # npz + JSON, no pickle
        await self.redis.set(keys.checkpoint(self.match_id), blob)
        self.last_checkpoint = time.monotonic()
        await self.trim()

    async def trim(self) -> None:
        """Trim each stream below the oldest position both the checkpoint just written and the recorder
        (its files fsynced) have confirmed: nothing a successor or the recording still needs goes.
        Without a recorder's position nothing is trimmed (the stream is then the only log)."""
        rec = await self.redis.hgetall(keys.recorded(self.match_id))
        for key, field, mine in ((self.key, b"frames", self.last_id), (self.hr_key, b"hr", self.hr_last_id),
                                 (self.ev_key, b"ev", self.ev_last_id)):
            theirs = rec.get(field)
            if theirs is None or mine == b"0-0" or theirs == b"0-0":
                continue
            ms, seq = min(_entry_id(mine), _entry_id(theirs))
            await self.redis.xtrim(key, minid=f"{ms}-{seq}", approximate=False)

    # -- the stream -------------------------------------------------------------------------------
    def _apply(self, entries: list[tuple[bytes, dict[bytes, bytes]]], now: float | None) -> int:
        """Apply stream entries in order: runs of frames as one block, events between them."""
        r = self.runner
        lines: list[bytes] = []
        frames = 0

        def flush() -> None:
            nonlocal frames
            if lines:
                frames += r.apply_lines(lines, now=now)  # drops were counted at ingest (keys.counts)
                lines.clear()

        for eid, fields in entries:
            line = fields.get(b"f")
            if line is not None:
                lines.append(line)
                if b"a" in fields:
                    self.last_arrival = float(fields[b"a"])
            elif b"e" in fields:
                flush()
                try:
                    r.apply_event(orjson.loads(fields[b"e"]), announce=now is not None)
                except Exception:
                    log.warning("%s: skipped an unreadable event entry %s", self.match_id, eid)
            self.last_id = eid
        flush()
        return frames

    def _apply_hr(self, entries: list[tuple[bytes, dict[bytes, bytes]]]) -> int:
        """Apply heart-rate entries: samples ingest's gate accepted, so they are not gated again
        (a sample let through after a run of hr_jump rejections counts here as it does live)."""
        r = self.runner
        index = r.roster.index
        player: list[int] = []
        t: list[float] = []
        bpm: list[float] = []
        for eid, f in entries:
            try:
                i, ti, bi = index[f[b"p"].decode()], float(f[b"t"]), float(f[b"b"])
            except (KeyError, ValueError, UnicodeDecodeError):
                log.warning("%s: skipped an unreadable heart-rate entry %s", self.match_id, eid)
            else:
                player.append(i)
                t.append(ti)
                bpm.append(bi)
            self.hr_last_id = eid
        if player:
            # drops were counted at ingest (keys.counts)
            r.add_heart(HrResult(np.asarray(player, np.int64), np.asarray(t, np.float64),
                                 np.asarray(bpm, np.float64), []))
        return len(player)

    def _apply_events(self, entries: list[tuple[bytes, dict[bytes, bytes]]], now: float | None) -> int:
        """Apply CDF event entries (each accepted version; ingest dropped the duplicates and counted the
        refusals): a re-seen id corrects its event, as in the single process. ``now`` None: rebuilding,
        else the arrival at ingest of the last entry (their lag behind the tracking)."""
        r = self.runner
        res = r.intake.event_decoder.decode_lines([f.get(b"e", b"") for _eid, f in entries])
        if res.rejected:
            log.warning("%s: skipped %d unreadable event entries", self.match_id, res.rejected)
        res.rejected = res.duplicates = 0
        arrival = float(entries[-1][1].get(b"a", 0.0)) if now is not None and entries else None
        r.apply_cdf_events(res, now=arrival or None)
        self.ev_last_id = entries[-1][0]
        return len(res)

    async def _read_loop(self) -> None:
        r = self.runner
        hr_key = self.hr_key.encode()
        ev_key = self.ev_key.encode()
        while not self.stopped:
            try:
                resp = await self.redis.xreadgroup(GROUP, self.agg.owner,
                                                   {self.key: ">", self.hr_key: ">", self.ev_key: ">"},
                                                   count=self.agg.scale.read_count, block=500)
            except RedisError as exc:
                log.warning("%s: stream read failed: %s", self.match_id, exc)
                await asyncio.sleep(0.5)
                continue
            if not resp:
                continue
            if self.stopped:
                return
            got = {key: entries for key, entries in resp if entries}
            hr = got.pop(hr_key, [])
            evs = got.pop(ev_key, [])
            entries: list[Any] = next(iter(got.values()), [])
            if evs:
                self._apply_events(evs, now=time.time())
            if (hr and self._apply_hr(hr) or evs) and not entries:
                r.broadcaster.invalidate()
                r.broadcaster.tick()
            t0 = time.perf_counter()
            n = self._apply(entries, now=time.time()) if entries else 0
            if n:
                r.after_block(n, t0)
                r.hooks.frames_in(n)
            try:
                async with self.redis.pipeline(transaction=False) as p:
                    for key, done in ((self.key, entries), (self.hr_key, hr), (self.ev_key, evs)):
                        if done:
                            p.xack(key, GROUP, *[e[0] for e in done])
                    await p.execute()
            except RedisError:
                pass  # the entries are applied; a successor replays from the checkpoint anyway
            if time.monotonic() - self.last_checkpoint > self.agg.scale.checkpoint_s:
                try:
                    await self.checkpoint()
                except RedisError as exc:
                    log.warning("%s: checkpoint failed: %s", self.match_id, exc)

    async def _read_counts(self) -> None:
        c = await self.redis.hgetall(keys.counts(self.match_id))
        r = self.runner
        h = r.state.health
        h.rejected = int(c.get(b"rejected", 0))
        h.duplicates = int(c.get(b"duplicates", 0))
        h.late = int(c.get(b"late", 0))
        h.resent = int(c.get(b"resent", 0))
        h.after_end = int(c.get(b"after_end", 0))
        hr = tuple(int(c.get(k, 0)) for k in (b"hr_rejected", b"hr_duplicates", b"hr_late"))
        ev = tuple(int(c.get(k, 0)) for k in (b"event_rejected", b"event_duplicates"))
        for st in (r.state, r.feed.stall_view):  # a stalled feed's copy holds its own counters
            if st is not None and (st.hr_rejected, st.hr_duplicates, st.hr_late) != hr:
                st.hr_rejected, st.hr_duplicates, st.hr_late = hr
                r.broadcaster.invalidate()
            if st is not None and (st.event_feed.rejected, st.event_feed.duplicates) != ev:
                st.event_feed.rejected, st.event_feed.duplicates = ev
                r.broadcaster.invalidate()

    async def _status_loop(self) -> None:
        """Once a second: ingest counters in, summary and full snapshot out (REST reads)."""
        r = self.runner
        while not self.stopped:
            await asyncio.sleep(1.0)
            try:
                await self._read_counts()
                await self._sync_ended()
                msg = snapshot_message(self.match_id, r.broadcaster.snapshot())
                summary = r.summary()
                summary["aggregator"] = self.agg.owner
                async with self.redis.pipeline(transaction=False) as p:
                    p.set(keys.snapshot(self.match_id), orjson.dumps(msg), ex=SNAP_TTL_S)
                    p.set(keys.summary(self.match_id), orjson.dumps(summary), ex=SNAP_TTL_S)
                    await p.execute()
            except RedisError as exc:
                log.warning("%s: status write failed: %s", self.match_id, exc)
            except Exception:
                log.exception("%s: status loop failed", self.match_id)

    # -- the end of the match ---------------------------------------------------------------------
    async def record_end(self, ev: dict[str, Any]) -> bool:
        """The runner's hook for a silent last period: the end goes into the stream (read back and
        applied like any event) unless a frame came after the one applied last."""
        done = await self.agg.end_script(keys=[self.key, keys.ended(self.match_id), keys.lease(self.match_id)],
                                         args=[self.last_id, orjson.dumps(ev), self.agg.owner])
        return bool(int(done))

    async def _sync_ended(self) -> None:
        """Keep the ended flag (ingest refuses frames while it is set) in step with the status."""
        ended = self.runner.status.told == ENDED
        if self.flagged is ended:
            return
        done = await self.agg.flag_script(keys=[self.key, keys.ended(self.match_id)],
                                          args=["1" if ended else "0", self.last_id])
        if int(done):
            self.flagged = ended

    # -- output streams -----------------------------------------------------------------------------
    async def want(self, stream: str, until: float) -> None:
        """A gateway needs this (view, cadence) stream: make (or restore) it."""
        sink = self.sinks.get(stream)
        b = self.runner.broadcaster
        if sink is not None and sink.group is not None and all(g is not sink.group for g in b.groups.values()):
            del self.sinks[stream]  # its stream was forgotten while idle: start it again (below)
            sink = None
        if sink is not None:
            sink.wanted_until = max(sink.wanted_until, until)
            if sink.group is not None and sink not in sink.group.subscribers:
                idle = not sink.group.subscribers
                sink.group.subscribers.add(sink)
                if idle:  # an idle stream sends nothing: bring it to the current state
                    b.catch_up(sink.group)
            return
        roster = self.runner.roster
        try:
            view_key, every = keys.split_stream_key(stream)
            view = View.parse(view_key, roster.team_ids, set(roster.index))
        except (ValueError, ViewError):
            log.warning("%s: ignoring an unknown stream %r", self.match_id, stream)
            return
        srv = self.agg.settings.server
        maxlen = min(b.buffer_max, int(srv.resume_buffer_s / every) + 500)
        sink = Sink(self.match_id, stream, self.out, maxlen)
        sink.wanted_until = until
        self.sinks[stream] = sink
        g = b.group(view, every)
        sink.group = g
        if g.state is None:
            prev = await self.redis.get(sink.snapshot_key)
            if prev is not None:
                _restore_group(g, orjson.loads(prev))  # the seq carries on from the last owner
            else:
                await self.redis.delete(sink.buffer_key)  # a new stream starts its buffer afresh
                b.refresh(g)
        g.subscribers.add(sink)
        g.idle_since = None
        self.out.put_nowait((sink, None))  # store its snapshot now: gateways open with it

    def expire_wants(self, now: float) -> None:
        for stream, sink in list(self.sinks.items()):
            if sink.wanted_until < now and sink.group is not None:
                sink.group.subscribers.discard(sink)
                if sink.group not in self.runner.broadcaster.groups.values():
                    del self.sinks[stream]

    async def _publish_loop(self) -> None:
        b = self.runner.broadcaster
        while not self.stopped:
            first = await self.out.get()
            items = [first]
            while not self.out.empty():
                items.append(self.out.get_nowait())
            streams: dict[str, tuple[Sink, list[str]]] = {}
            for sink, text in items:
                entry = streams.setdefault(sink.stream, (sink, []))
                if text is not None:
                    entry[1].append(text)
            # no await since the texts were queued: each group's seq and state are those of its last message
            k = [keys.lease(self.match_id)]
            a: list[Any] = [self.agg.owner, self.agg.scale.lease_ms, f"{time.time():.6f}"]
            for sink, texts in streams.values():
                assert sink.group is not None
                k += [sink.buffer_key, sink.snapshot_key]
                a += [sink.channel, b.snapshot_text(sink.group), sink.maxlen, len(texts)]
                for t in texts:
                    a += [keys.seq_of(t), t]
            ok = False
            for attempt in range(1_000_000):
                if self.stopped:
                    return
                try:
                    ok = await self.agg.publish(keys=k, args=a)
                    break
                except RedisError as exc:
                    if attempt == 0:
                        log.warning("%s: publish failed, retrying: %s", self.match_id, exc)
                    await asyncio.sleep(0.2)
            if not ok:
                log.warning("%s: lease lost; handing the match over", self.match_id)
                self.lost.set()
                return

    # -- life cycle ------------------------------------------------------------------------------------
    def start(self) -> None:
        r = self.runner
        self.tasks = [asyncio.create_task(self._read_loop(), name=f"agg-read:{self.match_id}"),
                      asyncio.create_task(self._publish_loop(), name=f"agg-publish:{self.match_id}"),
                      asyncio.create_task(r.feed.run(), name=f"agg-health:{self.match_id}"),
                      asyncio.create_task(self._status_loop(), name=f"agg-status:{self.match_id}")]

    async def stop(self) -> None:
        self.stopped = True  # redis-py may swallow a cancel during a blocking read: the loop checks this
        for t in self.tasks:
            t.cancel()
        _, pending = await asyncio.wait(self.tasks, timeout=5.0)
        for t in pending:
            import io
            buf = io.StringIO()
            t.print_stack(file=buf)
            log.warning("%s: task %s still running: %s", self.match_id, t.get_name(), buf.getvalue())


def _restore_group(g: Group, msg: dict[str, Any]) -> None:
    g.seq = int(msg["seq"])
    g.state = {k: msg[k] for k in ("players", "teams", "health", "match_status") if k in msg}
    g.meta = (msg["match_time_s"], msg["period"])


def _entry_id(raw: bytes) -> tuple[int, int]:
    """A stream entry id as (milliseconds, sequence), for comparing positions."""
    ms, _, seq = raw.decode().partition("-")
    return int(ms), int(seq or 0)


def _fresh_runner(agg: Aggregator, match_id: str, roster: Any) -> MatchRunner:
    return MatchRunner(roster, agg.settings, agg.data_dir / "matches" / match_id, agg.hooks)


class Aggregator:
    """Claims matches from Redis and runs them; any number run side by side."""

    def __init__(self, redis: Any, settings: Settings, scale: ScaleSettings, data_dir: Path,
                 hooks: Hooks | None = None) -> None:
        self.redis = redis
        self.settings = settings
        self.scale = scale
        self.data_dir = data_dir
        self.hooks = hooks or Hooks()
        self.owner = f"{socket.gethostname()}:{os.getpid()}:{uuid.uuid4().hex[:8]}"
        self.matches: dict[str, AggMatch] = {}
        self.publish = redis.register_script(_PUBLISH)
        self._renew = redis.register_script(_RENEW)
        self._release = redis.register_script(_RELEASE)
        self.end_script = redis.register_script(_END)
        self.flag_script = redis.register_script(_FLAG)
        self._tasks: list[asyncio.Task[None]] = []

    async def run(self) -> None:
        self._tasks = [asyncio.create_task(self._want_listener(), name="agg-wants")]
        every = self.scale.lease_ms / 3000.0
        try:
            while True:
                try:
                    await self._round()
                except RedisError as exc:
                    log.warning("aggregator round failed: %s", exc)
                except Exception:
                    log.exception("aggregator round failed")
                await asyncio.sleep(every)
        finally:
            for t in self._tasks:
                t.cancel()
            await self.shutdown()

    async def _round(self) -> None:
        lease_ms = self.scale.lease_ms
        for mid, m in list(self.matches.items()):
            if m.lost.is_set() or not await self._renew(keys=[keys.lease(mid)], args=[self.owner, lease_ms]):
                log.warning("%s: lease lost", mid)
                await self._drop(mid)
        limit = self.scale.max_matches
        for raw in sorted(await self.redis.smembers(keys.MATCHES)):
            mid = raw.decode()
            if mid in self.matches or (limit and len(self.matches) >= limit):
                continue
            if await self.redis.set(keys.lease(mid), self.owner, nx=True, px=lease_ms):
                try:
                    await self._take(mid)
                except Exception:
                    log.exception("%s: could not take the match; releasing it", mid)
                    await self._drop(mid)
                    await self._release(keys=[keys.lease(mid)], args=[self.owner])
        now = time.time()
        for mid, m in list(self.matches.items()):
            wants = await self.redis.hgetall(keys.want(mid))
            for stream, until in wants.items():
                if float(until) / 1000.0 >= now:
                    await m.want(stream.decode(), float(until) / 1000.0)
            m.expire_wants(now)

    async def _take(self, mid: str) -> None:
        raw = await self.redis.get(keys.setup(mid))
        if raw is None:
            raise RuntimeError("no set-up stored")
        o = orjson.loads(raw)
        roster = parse_setup(o["meta"], o["sheet"], mid)
        m = AggMatch(self, mid, _fresh_runner(self, mid, roster))
        self.matches[mid] = m
        t0 = time.perf_counter()
        n = await m.rebuild()
        log.warning("%s: claimed by %s, rebuilt %d entries in %.2f s", mid, self.owner, n, time.perf_counter() - t0)
        now = time.time()
        for stream, until in (await self.redis.hgetall(keys.want(mid))).items():
            if float(until) / 1000.0 >= now:
                await m.want(stream.decode(), float(until) / 1000.0)
        m.start()
        m.runner.broadcaster.tick(force=True)  # streams restored from a hand-over move to the rebuilt state

    async def _drop(self, mid: str) -> None:
        m = self.matches.pop(mid, None)
        if m is not None:
            t0 = time.perf_counter()
            await m.stop()
            log.warning("%s: stopped in %.2f s", mid, time.perf_counter() - t0)

    async def _want_listener(self) -> None:
        """Gateways announce a stream here, so a first subscriber needs no polling round."""
        while True:
            try:
                ps = self.redis.pubsub()
                await ps.subscribe(keys.WANT_CHANNEL)
                async for msg in ps.listen():
                    if msg.get("type") != "message":
                        continue
                    mid, _, stream = msg["data"].decode().partition(" ")
                    m = self.matches.get(mid)
                    if m is not None:
                        await m.want(stream, time.time() + self.scale.want_ttl_s)
            except asyncio.CancelledError:
                raise
            except Exception as exc:
                log.warning("want listener: %s", exc)
                await asyncio.sleep(0.5)

    async def shutdown(self) -> None:
        """Graceful stop: checkpoint and release every lease so successors start at once."""
        for mid, m in list(self.matches.items()):
            await m.stop()
            try:
                await m.checkpoint()
                await self._release(keys=[keys.lease(mid)], args=[self.owner])
            except RedisError:
                pass
        self.matches.clear()
