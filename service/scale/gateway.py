"""The ``gateway`` role: websockets and REST reads, fed by the aggregator over Redis.

A gateway holds a :class:`Feed` per (match, view, cadence) stream its clients
follow: it subscribes to the stream's channel, opens with the stream's
snapshot stored by the aggregator, and keeps a local resume buffer. Message
texts are forwarded byte for byte, so every gateway gives a stream's
subscribers the same seq and the same bytes, and one serialisation (done once,
by the aggregator) serves every subscriber of a stream. A seq gap (a dropped
Redis connection) is filled from the stream's buffer in Redis, or answered
with a resync snapshot when the buffer has moved on.
"""
from __future__ import annotations

import asyncio
import logging
import time
from collections import deque
from collections.abc import Coroutine
from typing import Any

import orjson
from redis.exceptions import RedisError

from pacewire.api.backend import Send
from pacewire.api.errors import ApiError
from pacewire.api.requests import StreamParams
from pacewire.config import Settings
from pacewire.engine.types import Roster
from pacewire.live.broadcaster import Subscriber
from pacewire.scale import keys
from pacewire.scale.settings import ScaleSettings
from pacewire.tasks import cancel
from pacewire.wire.cdf import parse_setup

log = logging.getLogger("pacewire.scale.gateway")

_RESYNC = -1  # queue marker: send a fresh snapshot with "resync": true


def resync_text(snapshot_text: str) -> str:
    """The snapshot with ``"resync": true`` last, as the broadcaster writes it."""
    return snapshot_text[:-1] + ',"resync":true}'


class Client(Subscriber):
    """A websocket subscriber; its queue holds (seq, text), its pump skips what it has sent."""

    def __init__(self, send: Any, queue_size: int) -> None:
        super().__init__(send, queue_size)
        self.sent_seq = -1
        self.feed: Feed | None = None


class Feed:
    """One (match, view, cadence) stream mirrored from Redis."""

    def __init__(self, gw: Gateway, match_id: str, stream: str) -> None:
        self.gw = gw
        self.match_id = match_id
        self.stream = stream
        self.channel = keys.out_channel(match_id, stream)
        self.buffer_key = keys.out_buffer(match_id, stream)
        self.snapshot_key = keys.out_snapshot(match_id, stream)
        self.seq = -1
        self.buffer: deque[tuple[int, float, str]] = deque()
        self.snap: tuple[int, str] | None = None
        self.subscribers: set[Client] = set()
        self.ready = asyncio.Event()
        self.pending: list[str] = []
        self.idle_since: float | None = None
        self.repairing = False
        self.last_message = time.monotonic()

    # -- start -----------------------------------------------------------------------------
    async def bootstrap(self) -> None:
        r = self.gw.redis
        await self.gw.listen(self.channel, self)  # first, so nothing falls between buffer and live
        while True:
            try:
                await self.gw.announce(self.match_id, self.stream)
                text = await r.get(self.snapshot_key)
                if text is not None:
                    break
            except RedisError as exc:
                log.warning("%s: waiting for Redis: %s", self.match_id, exc)
            await asyncio.sleep(0.1)  # no aggregator has made the stream yet
        text = text.decode()
        entries = await r.xrange(self.buffer_key, "-", "+", count=self.gw.buffer_max)
        now_wall, now_mono = time.time(), time.monotonic()
        horizon = now_wall - self.gw.buffer_s
        for eid, f in entries:
            w = float(f.get(b"w", now_wall))
            if w >= horizon:
                self.buffer.append((keys_seq(eid), now_mono - (now_wall - w), f[b"t"].decode()))
        self.seq = keys.seq_of(text)
        if self.buffer and self.buffer[-1][0] > self.seq:
            self.seq = self.buffer[-1][0]
        self.snap = (keys.seq_of(text), text)
        self.ready.set()
        pending, self.pending = self.pending, []
        for t in pending:
            self.on_text(t)

    # -- live --------------------------------------------------------------------------------
    def on_text(self, text: str) -> None:
        if not self.ready.is_set() or self.repairing:
            self.pending.append(text)
            return
        s = keys.seq_of(text)
        if s <= self.seq:
            return
        if s > self.seq + 1:
            self.pending.append(text)
            self.repairing = True
            self.gw.spawn(self.repair())
            return
        self._accept(s, text)

    def _accept(self, s: int, text: str) -> None:
        self.seq = s
        now = time.monotonic()
        self.last_message = now
        self.buffer.append((s, now, text))
        horizon = now - self.gw.buffer_s
        while self.buffer and (self.buffer[0][1] < horizon or len(self.buffer) > self.gw.buffer_max):
            self.buffer.popleft()
        for c in list(self.subscribers):
            self.gw.offer(c, s, text)
        self.gw.messages_out += len(self.subscribers)

    async def repair(self) -> None:
        """Fill a seq gap from Redis, or resync everyone when the buffer there has moved on."""
        r = self.gw.redis
        try:
            for _ in range(50):
                try:
                    entries = await r.xrange(self.buffer_key, f"{self.seq + 1}-0", "+", count=self.gw.buffer_max)
                    snap = await r.get(self.snapshot_key)
                    break
                except RedisError:
                    await asyncio.sleep(0.2)
            else:
                return
            if entries and keys_seq(entries[0][0]) == self.seq + 1:
                for eid, f in entries:
                    s = keys_seq(eid)
                    if s == self.seq + 1:
                        self._accept(s, f[b"t"].decode())
            elif snap is not None and keys.seq_of(snap.decode()) > self.seq:
                text = snap.decode()
                self.seq = keys.seq_of(text)
                self.snap = (self.seq, text)
                self.buffer.clear()
                for c in list(self.subscribers):
                    self.gw.offer(c, _RESYNC, "")
        finally:
            self.repairing = False
            pending, self.pending = self.pending, []
            for t in pending:
                self.on_text(t)

    async def check(self) -> None:
        """After a Redis reconnect or a quiet spell: is the stored stream ahead of us?"""
        if not self.ready.is_set() or self.repairing:
            return
        snap = await self.gw.redis.get(self.snapshot_key)
        if snap is not None and keys.seq_of(snap.decode()) > self.seq:
            self.repairing = True
            await self.repair()

    async def snapshot_text(self) -> tuple[int, str]:
        if self.snap is not None and self.snap[0] >= self.seq:
            return self.snap
        raw = await self.gw.redis.get(self.snapshot_key)
        if raw is not None:
            text = raw.decode()
            s = keys.seq_of(text)
            if self.snap is None or s >= self.snap[0]:
                self.snap = (s, text)
        assert self.snap is not None
        return self.snap

    # -- subscribers ----------------------------------------------------------------------------
    async def attach(self, c: Client, since: int | None) -> None:
        await self.ready.wait()
        c.feed = self
        self.idle_since = None
        b = self.buffer
        if since is not None and 0 <= since <= self.seq and (since == self.seq or (b and b[0][0] <= since + 1)):
            first = [(s, t) for s, _, t in b if s > since]
            c.sent_seq = since
        else:
            try:
                s0, text = await self.snapshot_text()
            except RedisError:
                assert self.snap is not None  # set before ready
                s0, text = self.snap
            first = [(s0, resync_text(text) if since is not None else text)]
            first += [(s, t) for s, _, t in self.buffer if s > s0]
        for item in first:
            c.queue.put_nowait(item)
        self.subscribers.add(c)

    def detach(self, c: Client) -> None:
        self.subscribers.discard(c)
        c.closed = True
        if not self.subscribers:
            self.idle_since = time.monotonic()


def keys_seq(entry_id: bytes) -> int:
    return int(entry_id.split(b"-", 1)[0])


class Gateway:
    """The feeds of one gateway process and its one pub/sub connection."""

    def __init__(self, redis: Any, settings: Settings, scale: ScaleSettings) -> None:
        self.redis = redis
        self.settings = settings
        self.scale = scale
        srv = settings.server
        self.buffer_s = srv.resume_buffer_s
        self.buffer_max = 100_000
        self.feeds: dict[tuple[str, str], Feed] = {}
        self._starting: dict[tuple[str, str], asyncio.Task[None]] = {}
        self.handlers: dict[str, Feed] = {}
        self.pubsub = redis.pubsub(ignore_subscribe_messages=True)
        self.rosters: dict[str, tuple[bytes, Roster]] = {}
        self.messages_out = 0
        self.dropped = 0
        self._tasks: list[asyncio.Task[None]] = []
        self._background: set[asyncio.Task[None]] = set()  # repairs and checks under way

    def spawn(self, coro: Coroutine[Any, Any, None]) -> None:
        """Run ``coro`` in the background, held until it ends (the loop keeps only weak references)."""
        task = asyncio.create_task(coro)
        self._background.add(task)
        task.add_done_callback(self._background.discard)

    async def start(self) -> None:
        await self.pubsub.subscribe(f"{keys.PREFIX}:gateway")  # the connection exists from now on
        self._tasks = [asyncio.create_task(self._reader(), name="gw-reader"),
                       asyncio.create_task(self._upkeep(), name="gw-upkeep")]

    async def stop(self) -> None:
        await cancel([*self._tasks, *self._background])
        try:
            await self.pubsub.aclose()
        except Exception:
            pass

    async def roster(self, match_id: str) -> Roster | None:
        raw = await self.redis.get(keys.setup(match_id))
        if raw is None:
            return None
        have = self.rosters.get(match_id)
        if have is not None and have[0] == raw:
            return have[1]
        o = orjson.loads(raw)
        roster = parse_setup(o["meta"], o["sheet"], match_id)
        self.rosters[match_id] = (raw, roster)
        return roster

    async def feed(self, match_id: str, stream: str) -> Feed:
        key = (match_id, stream)
        f = self.feeds.get(key)
        if f is None:
            f = self.feeds[key] = Feed(self, match_id, stream)
            self._starting[key] = asyncio.create_task(f.bootstrap())
        task = self._starting.get(key)
        if task is not None:
            try:
                await asyncio.shield(task)
            finally:
                if task.done():
                    self._starting.pop(key, None)
        return f

    async def listen(self, channel: str, feed: Feed) -> None:
        self.handlers[channel] = feed
        await self.pubsub.subscribe(channel)

    async def announce(self, match_id: str, stream: str) -> None:
        until_ms = int((time.time() + self.scale.want_ttl_s) * 1000)
        async with self.redis.pipeline(transaction=False) as p:
            p.hset(keys.want(match_id), stream, until_ms)
            p.publish(keys.WANT_CHANNEL, f"{match_id} {stream}")
            await p.execute()

    def offer(self, c: Client, seq: int, text: str) -> None:
        if c.queue.qsize() < c.limit:
            c.queue.put_nowait((seq, text))
            return
        while not c.queue.empty():  # slow reader: its backlog becomes one fresh snapshot
            c.queue.get_nowait()
        c.dropped += 1
        self.dropped += 1
        c.queue.put_nowait((_RESYNC, ""))

    async def pump(self, c: Client) -> None:
        while not c.closed:
            seq, text = await c.queue.get()
            if seq == _RESYNC:
                assert c.feed is not None
                seq, text = await c.feed.snapshot_text()
                text = resync_text(text)
            elif seq <= c.sent_seq:
                continue  # already covered by the opening snapshot
            await c.send(text)
            c.sent_seq = seq

    async def _reader(self) -> None:
        broken = False
        while True:
            try:
                msg = await self.pubsub.get_message(timeout=1.0)
                if broken:
                    broken = False
                    for f in list(self.feeds.values()):
                        self.spawn(f.check())
                if msg is None or msg.get("type") != "message":
                    continue
                ch = msg["channel"].decode()
                feed = self.handlers.get(ch)
                if feed is not None:
                    feed.on_text(msg["data"].decode())
            except asyncio.CancelledError:
                raise
            except Exception as exc:
                if not broken:
                    log.warning("pub/sub connection lost: %s", exc)
                broken = True
                await asyncio.sleep(0.3)

    async def _upkeep(self) -> None:
        """Renew interest in followed streams, forget idle ones, catch up after quiet spells."""
        last_want = 0.0
        while True:
            await asyncio.sleep(1.0)
            now = time.monotonic()
            try:
                for key, f in list(self.feeds.items()):
                    if f.idle_since is not None and now - f.idle_since > self.buffer_s:
                        del self.feeds[key]
                        self.handlers.pop(f.channel, None)
                        await self.pubsub.unsubscribe(f.channel)
                        continue
                    if f.ready.is_set() and now - f.last_message > 2.0:
                        await f.check()
                if now - last_want > self.scale.want_ttl_s / 3:
                    last_want = now
                    for (mid, stream) in list(self.feeds):
                        await self.announce(mid, stream)
            except RedisError as exc:
                log.warning("gateway upkeep: %s", exc)
            except Exception:
                log.exception("gateway upkeep failed")

    def subscriber_count(self, match_id: str) -> int:
        return sum(len(f.subscribers) for (mid, _), f in self.feeds.items() if mid == match_id)


def unavailable(exc: Exception) -> ApiError:
    return ApiError(503, "unavailable", f"Redis unavailable: {exc}")


class GatewaySubscription:
    def __init__(self, gw: Gateway, feed: Feed, client: Client) -> None:
        self.gw, self.feed, self.client = gw, feed, client

    async def pump(self) -> None:
        await self.gw.pump(self.client)

    def close(self) -> None:
        self.feed.detach(self.client)


class RedisReads:
    """The gateway role's backend (:class:`~pacewire.api.backend.ReadBackend`): what the aggregators
    published in Redis."""

    def __init__(self, gw: Gateway) -> None:
        self.gw = gw
        self.redis = gw.redis

    async def list_matches(self) -> list[dict[str, Any]]:
        try:
            ids = sorted(m.decode() for m in await self.redis.smembers(keys.MATCHES))
            raws = await self.redis.mget([keys.summary(m) for m in ids]) if ids else []
        except RedisError as exc:
            raise unavailable(exc) from None
        out = []
        for mid, raw in zip(ids, raws, strict=True):
            unknown = {"match_id": mid, "status": "not_started", "health": "stalled", "frames": 0}
            s = orjson.loads(raw) if raw is not None else unknown
            s["subscribers"] = self.gw.subscriber_count(mid)  # on this gateway
            out.append(s)
        return out

    async def snapshot(self, match_id: str) -> bytes | None:
        try:
            raw = await self.redis.get(keys.snapshot(match_id))
            if raw is None:
                if await self.redis.get(keys.setup(match_id)) is None:
                    return None
                raise ApiError(503, "not_ready", "no aggregator has published this match yet")
        except RedisError as exc:
            raise unavailable(exc) from None
        return bytes(raw)

    async def report_listing(self, match_id: str) -> list[dict[str, Any]] | None:
        try:
            if await self.redis.get(keys.setup(match_id)) is None:
                return None
        except RedisError as exc:
            raise unavailable(exc) from None
        return []  # reports are written where the recorder role keeps the folders

    async def roster(self, match_id: str) -> Roster | None:
        try:
            return await self.gw.roster(match_id)
        except RedisError as exc:
            raise unavailable(exc) from None

    async def subscribe(self, match_id: str, params: StreamParams, send: Send) -> GatewaySubscription:
        limit = self.gw.settings.server.max_subscribers
        if self.gw.subscriber_count(match_id) >= limit:
            raise ApiError(429, "too_many_subscribers", f"this match already has {limit} subscribers here")
        feed = await self.gw.feed(match_id, keys.stream_key(params.view.key, params.every))
        c = Client(send, self.gw.settings.server.subscriber_queue)
        await feed.attach(c, params.since)
        return GatewaySubscription(self.gw, feed, c)

    async def health(self) -> dict[str, Any]:
        gw = self.gw
        return {"status": "ok", "role": "gateway", "feeds": len(gw.feeds),
                "subscribers": sum(len(f.subscribers) for f in gw.feeds.values()),
                "messages_out": gw.messages_out, "dropped": gw.dropped, "time": time.time()}
