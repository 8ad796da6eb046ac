"""The broadcaster on its own: cadence of deltas against the feed's frames and the wall clock.

The clock is passed in (``tick(now=...)``), so these tests time nothing.
"""
from __future__ import annotations

import asyncio
import copy
from itertools import pairwise
from typing import Any

import orjson
import pytest
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.live.broadcaster import Broadcaster, Subscriber, View
from pacewire.wire.messages import apply_delta, changed

FPS = 25


class _Feed:
    """A snapshot source whose figures change with every frame."""

    def __init__(self) -> None:
        self.frames = 0

    def snapshot(self) -> dict[str, Any]:
        t = self.frames / FPS
        return {"match_time_s": t, "period": "first_half", "players": {"p1": {"distance_m": 2.0 * t}},
                "teams": {}, "health": {"frames": self.frames}}


def _stream(every: float) -> tuple[_Feed, Broadcaster, Subscriber]:
    feed = _Feed()
    b = Broadcaster("m", feed.snapshot, buffer_s=60.0, queue_size=10_000, max_subscribers=10, fps=FPS)
    sub = Subscriber(_never, 10_000)
    b.attach(sub, View("all"), every, None)
    return feed, b, sub


async def _never(text: str) -> None:  # pragma: no cover - the queue is read directly here
    raise AssertionError("not pumped in these tests")


def _deltas(sub: Subscriber) -> list[dict[str, Any]]:
    out = []
    while not sub.queue.empty():
        msg = orjson.loads(sub.queue.get_nowait())
        if msg["type"] == "delta":
            out.append(msg)
    return out


def test_one_frame_cadence_sends_every_frame_through_arrival_jitter():
    """every = one frame: each new frame gets its delta, also a frame that comes 15 ms after a late
    one (wall-time gating alone held it back a whole frame; common practice: a cadence of one frame
    means every frame)."""
    feed, b, sub = _stream(1 / FPS)
    _deltas(sub)  # the opening snapshot
    arrivals = [0.0, 0.040, 0.105, 0.120, 0.160, 0.230, 0.241, 0.280]  # late, then on time
    for k, t in enumerate(arrivals):
        feed.frames = k + 1
        b.invalidate()
        b.tick(now=100.0 + t, frames=feed.frames)
    got = _deltas(sub)
    assert [d["health"]["frames"] for d in got] == list(range(1, len(arrivals) + 1))
    assert [d["seq"] for d in got] == list(range(1, len(arrivals) + 1))


def test_fast_replay_keeps_the_cadence_rate():
    """Frames 4 ms apart (a 10x replay): a one-frame stream still sends about one delta per 40 ms
    of wall time (at most CADENCE_BURST ahead), and a 1 s stream about one per second."""
    for every, seconds, most in ((1 / FPS, 0.4, 0.4 * FPS + 2), (1.0, 5.0, 5 + 2)):
        feed, b, sub = _stream(every)
        _deltas(sub)
        n = int(seconds / 0.004)
        for k in range(n):
            feed.frames = k + 1
            b.invalidate()
            b.tick(now=100.0 + 0.004 * k, frames=feed.frames)
        sent = len(_deltas(sub))
        assert seconds / every - 1 <= sent <= most, (every, sent)


def test_one_second_cadence_at_real_time_sends_once_a_second():
    feed, b, sub = _stream(1.0)
    _deltas(sub)
    for k in range(5 * FPS):
        feed.frames = k + 1
        b.invalidate()
        b.tick(now=100.0 + k / FPS + (0.01 if k % 3 == 0 else 0.0), frames=feed.frames)
    sent = _deltas(sub)
    assert 4 <= len(sent) <= 5
    steps = [b2["health"]["frames"] - a["health"]["frames"] for a, b2 in pairwise(sent)]
    assert all(s >= FPS - 1 for s in steps), steps


_leaf = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.floats(-2, 2, allow_nan=False),
                  st.text("ab", max_size=2))
_tree = st.recursive(_leaf, lambda kids: st.dictionaries(st.text("abcd", min_size=1, max_size=2), kids, max_size=4),
                     max_leaves=20)


@given(old=st.dictionaries(st.text("abcd", min_size=1, max_size=2), _tree, max_size=5),
       new=st.dictionaries(st.text("abcd", min_size=1, max_size=2), _tree, max_size=5))
@hsettings(max_examples=400, deadline=None)
def test_a_delta_applied_to_the_old_state_gives_the_new_one(old, new):
    """What a client does (apply_delta) with what the broadcaster sends (changed) rebuilds the new
    state exactly, except that a key removed becomes None (a delta sends a key that disappeared as
    null: pacewire.wire.messages)."""
    d = changed(old, new)
    got = apply_delta(copy.deepcopy(old), d or {})
    assert _without_nulls(got) == _without_nulls(new)
    assert (d is None) == (old == new)
    # the same object on both sides is never looked into (the snapshot reuses unchanged parts)
    shared = {"x": new}
    assert changed({"x": new, "y": 1}, {**shared, "y": 2}) == {"y": 2}


def _without_nulls(v: Any) -> Any:
    if type(v) is dict:
        return {k: _without_nulls(x) for k, x in v.items() if x is not None}
    return v


class _Socket:
    """A subscriber's socket: takes each message at once while ``open`` is set, else waits for it
    (a full send buffer); records what it sent, in order."""

    def __init__(self) -> None:
        self.open = asyncio.Event()
        self.open.set()
        self.sent: list[dict[str, Any]] = []
        self.fail: Exception | None = None

    async def send(self, text: str) -> None:
        await self.open.wait()
        if self.fail is not None:
            raise self.fail
        self.sent.append(orjson.loads(text))


def _pumped(every: float, limit: int = 10_000) -> tuple[_Feed, Broadcaster, Subscriber, _Socket]:
    feed = _Feed()
    b = Broadcaster("m", feed.snapshot, buffer_s=60.0, queue_size=limit, max_subscribers=10, fps=FPS)
    sock = _Socket()
    sub = Subscriber(sock.send, limit)
    b.attach(sub, View("all"), every, None)
    sub.task = asyncio.get_running_loop().create_task(b.pump(sub))
    return feed, b, sub, sock


def _frame(feed: _Feed, b: Broadcaster) -> None:
    feed.frames += 1
    b.invalidate()
    b.tick(now=100.0 + feed.frames / FPS, frames=feed.frames)


def test_deltas_reach_the_socket_in_order_also_when_it_stalls():
    """A socket that takes data gets each delta within the tick that made it (written inline, no
    task switch); one that stalls gets the waiting deltas later, in seq order, none lost or twice."""

    async def main() -> None:
        feed, b, sub, sock = _pumped(1 / FPS)
        await asyncio.sleep(0)  # the pump sends the opening snapshot and waits
        assert [m["type"] for m in sock.sent] == ["snapshot"]
        for _ in range(5):
            _frame(feed, b)
            assert sock.sent[-1]["health"]["frames"] == feed.frames  # before any await: written inline
        sock.open.clear()  # the send buffer is full
        for _ in range(5):
            _frame(feed, b)
        await asyncio.sleep(0.01)
        assert len(sock.sent) == 6
        sock.open.set()
        for _ in range(20):
            await asyncio.sleep(0)
        _frame(feed, b)  # the pump caught up and waits again: inline once more
        assert sock.sent[-1]["health"]["frames"] == feed.frames
        assert [m["seq"] for m in sock.sent] == list(range(12))
        b.detach(sub)
        sub.task.cancel()

    asyncio.run(main())


def test_a_stalled_socket_over_its_queue_gets_one_fresh_snapshot_after_the_send_under_way():
    async def main() -> None:
        feed, b, sub, sock = _pumped(1 / FPS, limit=3)
        await asyncio.sleep(0)
        _frame(feed, b)
        sock.open.clear()
        for _ in range(6):  # the first waits inside the socket; three queue; then the backlog overflows
            _frame(feed, b)
        assert sub.dropped >= 1
        sock.open.set()
        for _ in range(20):
            await asyncio.sleep(0)
        kinds = [(m["type"], m["seq"], m.get("resync")) for m in sock.sent]
        assert kinds[:3] == [("snapshot", 0, None), ("delta", 1, None), ("delta", 2, None)]
        assert ("snapshot", b.groups[("all", 0.04)].seq, True) in kinds[3:]
        seqs = [s for _, s, _ in kinds]
        assert seqs == sorted(seqs)  # never back in time
        b.detach(sub)
        sub.task.cancel()

    asyncio.run(main())


def test_a_send_that_fails_inline_ends_the_pump_with_its_error():
    async def main() -> None:
        feed, b, sub, sock = _pumped(1 / FPS)
        await asyncio.sleep(0)
        sock.fail = ConnectionResetError("peer gone")
        _frame(feed, b)
        with pytest.raises(ConnectionResetError):
            await asyncio.wait_for(sub.task, 1.0)

    asyncio.run(main())


def test_a_resume_gets_exactly_the_messages_sent_after_its_seq():
    """since=N (README, "Consuming the stream"): every later message, from N+1 on, as sent, from the
    resume buffer (which keeps written deltas deflated), events between the deltas included."""

    async def main() -> None:
        feed, b, first, sock = _pumped(1 / FPS)
        await asyncio.sleep(0)
        for k in range(30):
            _frame(feed, b)
            if k == 12:
                b.publish("health", health={"state": "degraded", "reasons": []})
        assert any(type(e) is bytes for _, _, e in b.groups[("all", 0.04)].buffer)
        late = _Socket()
        sub = Subscriber(late.send, 10_000)
        b.attach(sub, View("all"), 1 / FPS, since=9)
        sub.task = asyncio.get_running_loop().create_task(b.pump(sub))
        for _ in range(5):
            await asyncio.sleep(0)
        assert late.sent == [m for m in sock.sent if m["seq"] > 9]
        assert [m["seq"] for m in late.sent] == list(range(10, 32))
        for s in (first, sub):
            b.detach(s)
            s.task.cancel()

    asyncio.run(main())


def test_the_resume_buffer_is_bounded_in_bytes_and_a_resume_from_beyond_gets_a_snapshot():
    """However many messages the cadence makes, a stream keeps at most ``buffer_bytes`` of them
    (the newest); a ``since`` older than what it keeps is answered with a fresh snapshot."""

    async def main() -> None:
        feed = _Feed()
        limit = 2_000  # bytes: a few dozen small deltas
        b = Broadcaster("m", feed.snapshot, buffer_s=3600.0, queue_size=10_000, max_subscribers=10, fps=FPS,
                        buffer_bytes=limit)
        sock = _Socket()
        first = Subscriber(sock.send, 10_000)
        b.attach(first, View("all"), 1 / FPS, None)
        first.task = asyncio.get_running_loop().create_task(b.pump(first))
        await asyncio.sleep(0)
        for _ in range(500):
            _frame(feed, b)
        g = b.groups[("all", 0.04)]
        held = sum(len(e) for _, _, e in g.buffer)
        assert g.buffer_bytes == held and held <= limit  # the count kept is what the entries hold
        assert 0 < len(g.buffer) < 500 and g.buffer[-1][0] == g.seq  # the newest stay
        late = _Socket()
        sub = Subscriber(late.send, 10_000)
        b.attach(sub, View("all"), 1 / FPS, since=3)
        sub.task = asyncio.get_running_loop().create_task(b.pump(sub))
        for _ in range(5):
            await asyncio.sleep(0)
        assert late.sent[0]["type"] == "snapshot"  # seq 4 is long gone from the buffer
        for s in (first, sub):
            b.detach(s)
            s.task.cancel()

    asyncio.run(main())
