"""The broadcaster: subscription streams per (view, cadence), one serialisation each.

Each stream has its own ``seq`` (one more per message), a bounded buffer for
``since=SEQ`` resumes, and the last state it sent, which deltas are computed
from. A slow subscriber never holds anyone up: its own bounded queue, and on
overflow its backlog is replaced by one fresh snapshot (the drop is counted).
"""
from __future__ import annotations

import asyncio
import logging
import time
import zlib
from collections import deque
from collections.abc import Callable, Coroutine
from dataclasses import dataclass, field
from typing import Any

from pacewire.wire.messages import changed, dumps, envelope
from pacewire.wire.view import View

log = logging.getLogger("pacewire.broadcaster")

CADENCE_BURST = 2.0  # deltas a stream may send in a row on frame count, a late frame and the next one


def _pack(text: str) -> bytes:
    """A delta as the resume buffer keeps it: a one-frame stream holds resume_buffer_s x fps of them
    (300 s: 7500, ~45 MB as text); deflated (level 1, ~40 us) they take a fifth of that."""
    return zlib.compress(text.encode(), 1)


def _unpack(entry: str | bytes) -> str:
    return entry if isinstance(entry, str) else zlib.decompress(entry).decode()


class Subscriber:
    def __init__(self, send: Callable[[str], Coroutine[Any, Any, None]], queue_size: int) -> None:
        self.send = send
        self.limit = queue_size  # the opening messages may exceed it; later ones may not
        self.queue: asyncio.Queue[Any] = asyncio.Queue()  # message texts, and _Resume/_Failed (see pump)
        self.dropped = 0
        self.closed = False
        self.task: asyncio.Task[None] | None = None
        self.group: Group | None = None
        self.idle = False  # its pump waits on an empty queue: the broadcaster writes to the socket itself


class _Resume:
    """A send started inline (Broadcaster._write_now) that had to wait, for the socket's buffer to
    drain: awaited by the subscriber's pump, it goes on from where it stopped, as the task that runs
    a coroutine would (it hands up what the send waits on and passes back what the task throws in)."""

    __slots__ = ("coro", "waiting")

    def __init__(self, coro: Any, waiting: Any) -> None:
        self.coro, self.waiting = coro, waiting

    def __await__(self) -> Any:
        coro, waiting = self.coro, self.waiting
        while True:
            try:
                yield waiting
            except BaseException as exc:  # the pump was cancelled while the send waited: so is the send
                try:
                    waiting = coro.throw(exc)
                except StopIteration:
                    return
                continue
            try:
                waiting = coro.send(None)
            except StopIteration:
                return

    def close(self) -> None:
        self.coro.close()


class _Failed:
    """A send started inline that raised: the pump raises it, as its own send would have."""

    __slots__ = ("exc",)

    def __init__(self, exc: BaseException) -> None:
        self.exc = exc

    def __await__(self) -> Any:
        raise self.exc
        yield  # pragma: no cover - makes this a generator

    def close(self) -> None:
        pass


@dataclass
class Group:
    view: View
    every: float
    seq: int = 0
    state: dict[str, Any] | None = None  # the last state sent (view body)
    meta: tuple[float, str | None] = (0.0, None)  # match_time_s, period of that state
    last_sent: float = 0.0
    frames_sent: int = 0  # the feed's frame count at last_sent
    tokens: float = 0.0  # deltas the stream may send ahead of its wall-time cadence (Broadcaster._due)
    tokens_at: float = 0.0
    buffer: deque[tuple[int, float, str | bytes]] = field(default_factory=deque)  # (seq, time, text or _pack(text))
    buffer_bytes: int = 0  # what the buffer's entries hold (text length or deflated bytes)
    subscribers: set[Subscriber] = field(default_factory=set)
    idle_since: float | None = None


class Broadcaster:
    """All subscription streams of one match."""

    def __init__(self, match_id: str, snapshot: Callable[[], dict[str, Any]], buffer_s: float,
                 queue_size: int, max_subscribers: int, on_message: Callable[[int], None] | None = None,
                 on_drop: Callable[[], None] | None = None, fps: float | None = None,
                 buffer_bytes: int = 1 << 62) -> None:
        self.match_id = match_id
        self.fps = fps  # the feed's nominal rate: cadences also count in frames (see tick)
        self._snapshot_fn = snapshot
        self.buffer_s = buffer_s
        self.buffer_max = 100_000
        self.buffer_bytes_max = buffer_bytes  # per stream: a resume from further back gets a snapshot
        self.idle_max = 32  # streams kept for resumes with nobody on them; beyond, the longest idle go
        self.queue_size = queue_size
        self.max_subscribers = max_subscribers
        self.groups: dict[tuple[str, float], Group] = {}
        self._snap: dict[str, Any] | None = None
        self._on_message = on_message or (lambda n: None)
        self._on_drop = on_drop or (lambda: None)
        self.dropped = 0

    # -- state -----------------------------------------------------------------------
    def invalidate(self) -> None:
        """The engine state changed: the next read builds a fresh snapshot."""
        self._snap = None

    def snapshot(self) -> dict[str, Any]:
        if self._snap is None:
            self._snap = self._snapshot_fn()
        return self._snap

    @property
    def subscriber_count(self) -> int:
        return sum(len(g.subscribers) for g in self.groups.values())

    def group(self, view: View, every: float) -> Group:
        key = (view.key, round(every, 4))
        g = self.groups.get(key)
        if g is None:
            g = self.groups[key] = Group(view, every)
        return g

    def _message(self, g: Group, msg_type: str, /, **body: Any) -> str:
        g.seq += 1
        snap_time, period = g.meta
        period = body.pop("period", period)
        text = dumps(envelope(msg_type, self.match_id, g.seq, snap_time, period, **body)).decode()
        now = time.monotonic()
        g.buffer.append((g.seq, now, text))
        g.buffer_bytes += len(text)
        self._trim(g, now)
        return text

    def _trim(self, g: Group, now: float) -> None:
        horizon = now - self.buffer_s
        while g.buffer and (g.buffer[0][1] < horizon or len(g.buffer) > self.buffer_max
                            or g.buffer_bytes > self.buffer_bytes_max):
            g.buffer_bytes -= len(g.buffer.popleft()[2])

    def _fan_out(self, g: Group, text: str) -> None:
        for sub in list(g.subscribers):
            self._offer(sub, text)
        self._on_message(len(g.subscribers))

    def _offer(self, sub: Subscriber, text: str) -> None:
        if sub.idle and sub.queue.empty():
            self._write_now(sub, text)
            return
        if sub.queue.qsize() < sub.limit:
            sub.queue.put_nowait(text)
            return
        # slow reader: replace its backlog by one fresh snapshot (a send already under way goes on)
        under_way = []
        while not sub.queue.empty():
            item = sub.queue.get_nowait()
            if type(item) is not str:
                under_way.append(item)
        for item in under_way:
            sub.queue.put_nowait(item)
        sub.dropped += 1
        self.dropped += 1
        self._on_drop()
        assert sub.group is not None
        sub.queue.put_nowait(self.snapshot_text(sub.group, resync=True))

    def snapshot_text(self, g: Group, resync: bool = False) -> str:
        if g.state is None:
            self.refresh(g)
        snap_time, period = g.meta
        body: dict[str, Any] = dict(g.state or {})
        if resync:
            body["resync"] = True
        return dumps(envelope("snapshot", self.match_id, g.seq, snap_time, period, **body)).decode()

    def refresh(self, g: Group) -> dict[str, Any] | None:
        """Move the group to the current state; returns the delta body (None if unchanged)."""
        snap = self.snapshot()
        new = g.view.body(snap)
        d = changed(g.state, new) if g.state is not None else None
        g.state = new
        g.meta = (snap["match_time_s"], snap["period"])
        return d

    # -- output ------------------------------------------------------------------------
    def _due(self, g: Group, now: float, frames: int | None) -> bool:
        """A stream's cadence is up: its ``every`` of wall time passed, or its ``every`` of feed frames
        came while its rate allows (a bucket of at most CADENCE_BURST deltas, refilled at one per
        ``every``). Counting frames keeps a frame that arrives a little early after a late one from
        waiting a whole cadence (arrival jitter); the bucket keeps a fast replay to the cadence's rate."""
        if now - g.last_sent >= g.every - 1e-3:
            return True
        if frames is None or self.fps is None or frames - g.frames_sent < max(round(g.every * self.fps), 1):
            return False
        return self._tokens(g, now) >= 1.0 - 1e-6

    @staticmethod
    def _tokens(g: Group, now: float) -> float:
        return min(g.tokens + (now - g.tokens_at) / g.every, CADENCE_BURST)

    def _mark_sent(self, g: Group, now: float, frames: int | None) -> None:
        g.tokens = max(self._tokens(g, now) - 1.0, 0.0)
        g.tokens_at = g.last_sent = now
        if frames is not None:
            g.frames_sent = frames

    def tick(self, now: float | None = None, force: bool = False, frames: int | None = None) -> None:
        """After the state changed: send a delta to every stream whose cadence is due.
        ``frames``: the feed's frame count now (frames applied so far), if known."""
        now = time.monotonic() if now is None else now
        for g in list(self.groups.values()):
            if not g.subscribers:
                continue  # nobody to send to: a resume catches up with one delta from the state last sent
            if not force and not self._due(g, now, frames):
                continue
            if g.state is None:
                self.refresh(g)
                self._mark_sent(g, now, frames)
                continue
            self._advance(g, now, frames)
        self._expire(now)

    def _advance(self, g: Group, now: float, frames: int | None = None) -> None:
        """Send the stream's delta to the current state, if anything changed."""
        old_meta = g.meta
        d = self.refresh(g)
        if d is None and g.meta == old_meta:
            return
        self._mark_sent(g, now, frames)
        text = self._message(g, "delta", **(d or {}))
        self._fan_out(g, text)
        if g.buffer and g.buffer[-1][2] is text:  # written: the resume buffer keeps it deflated
            seq, t, _ = g.buffer[-1]
            packed = _pack(text)
            g.buffer[-1] = (seq, t, packed)
            g.buffer_bytes += len(packed) - len(text)

    def catch_up(self, g: Group) -> None:
        """A stream that sent nothing while idle gets followed again: bring it to the current state
        (the delta also goes to its buffer, so a ``since`` resume gets it)."""
        if g.state is not None:
            self._advance(g, time.monotonic())

    def publish(self, msg_type: str, /, **body: Any) -> None:
        """An event message (health, alert, period, report) to every stream that shows it: a message
        about a player (``player_id``, ``team_id`` in its body) goes only to views that show him."""
        player_id, team_id = body.get("player_id"), body.get("team_id")
        for g in list(self.groups.values()):
            if g.view.shows_player(player_id, team_id):
                if g.state is None:
                    self.refresh(g)
                self._fan_out(g, self._message(g, msg_type, **body))

    def _expire(self, now: float) -> None:
        """Forget streams nobody follows once their resume buffer has run out, and the longest idle
        beyond ``idle_max`` (each holds the state it last sent: many cadences must not pile up)."""
        idle = []
        for key, g in list(self.groups.items()):
            if g.subscribers:
                g.idle_since = None
                continue
            if g.idle_since is None:
                g.idle_since = now
            if now - g.idle_since > self.buffer_s:
                del self.groups[key]
            else:
                idle.append((g.idle_since, key))
        for _, key in sorted(idle)[:max(len(idle) - self.idle_max, 0)]:
            del self.groups[key]

    # -- subscribers ----------------------------------------------------------------------
    def attach(self, sub: Subscriber, view: View, every: float, since: int | None) -> None:
        """Queue the opening messages: a snapshot, or what was missed after ``since``."""
        g = self.group(view, every)
        sub.group = g
        g.idle_since = None
        if not g.subscribers:
            self.catch_up(g)
            self._trim(g, time.monotonic())  # an idle stream added nothing, so its buffer ages here
        first: list[str]
        if since is not None and g.buffer is not None and 0 <= since <= g.seq and (
                since == g.seq or (g.buffer and g.buffer[0][0] <= since + 1)):
            first = [_unpack(entry) for seq, _, entry in g.buffer if seq > since]
        else:
            first = [self.snapshot_text(g, resync=since is not None)]
        for text in first:
            sub.queue.put_nowait(text)
        g.subscribers.add(sub)

    def detach(self, sub: Subscriber) -> None:
        if sub.group is not None:
            sub.group.subscribers.discard(sub)
        sub.closed = True

    @staticmethod
    def _write_now(sub: Subscriber, text: str) -> None:
        """Send on the caller's turn of the event loop, with no task switch per subscriber and message:
        the send coroutine runs until it finishes, which it does at once while the socket takes data.
        If it has to wait, the pump finishes it (and sends what queues up meanwhile, in order)."""
        coro = sub.send(text)
        try:
            waiting = coro.send(None)
        except StopIteration:
            return
        except Exception as exc:  # the socket is gone: the pump ends on it, as when it sent itself
            sub.queue.put_nowait(_Failed(exc))
            return
        sub.queue.put_nowait(_Resume(coro, waiting))

    async def pump(self, sub: Subscriber) -> None:
        """Send a subscriber's queue to its socket until it closes. While it waits on an empty queue,
        new messages are written at once by the broadcaster (_write_now), not queued."""
        try:
            while not sub.closed:
                if sub.queue.empty():
                    sub.idle = True
                    try:
                        item = await sub.queue.get()
                    finally:
                        sub.idle = False
                else:
                    item = sub.queue.get_nowait()
                if type(item) is str:
                    await sub.send(item)
                else:
                    await item  # a send started inline: finish it (or raise what it raised)
                item = None  # not kept while idle (the opening snapshot, tens of kB, for the socket's life)
        finally:
            while not sub.queue.empty():  # sends started inline and never finished: let them go
                item = sub.queue.get_nowait()
                if type(item) is not str:
                    item.close()
