"""``pacewire replay``: stream a CDF folder into a server at X times real time.

Pacing follows the frames' own timestamps on a monotonic clock: frame k is
due at ``start + (t_k - t_0) / speed``, so errors never accumulate over a
match. The break between periods is skipped (the next period starts one
second of wall time after the last frame of the previous one).

Where the server stands (:mod:`pacewire.replay.position`): before sending, the
replay asks the server what it already holds of the match and sends only the
frames and heart-rate samples after that; once it has sent the frame the
recording's meta gives as a period's end, it sends that ``period_end`` event.

Seek (``--from MM:SS``): the frames before that match-clock time (and after
what the server holds) are sent at once as HTTP batches (the server analyses
them immediately and they count in every figure), then streaming continues
at the chosen speed.

A dropped socket (the server restarting, a network blip, a pause long enough
for the server to close the socket) is not the end: the replay tries again
with a growing delay for up to ``--retry-for`` seconds, asks where the server stands
and goes on from there. Ctrl-C, and any error it cannot get past, end with
one line saying why and how to resume (``--from``), never a traceback.

Heart rate (docs/wearables.md): when the recording has heart-rate samples
(``hr.jsonl``), they go over a second socket, ``/ingest/MATCH/hr``, paced by
their own timestamps on the frames' clock (the same start, speed and skipped
break; samples in a break go at once, with the next period), one JSON array
per tick; the two sockets share the ticks, so neither waits for the other, also
through a hole in the tracking. With ``--from`` the samples before the first
streamed frame are posted at once to ``/api/matches/MATCH/hr`` (JSON Lines
batches), after the frames before it.

CDF events (``event.jsonl``) go over a third socket, ``/ingest/MATCH/events``, on the
same clock, in file order (the order they arrived when recorded): each line when the
frames' clock reaches its own time, or at once if it is already past (a line that
arrived late was recorded after later events, so it is sent late again). With
``--from`` the event lines timed before the first streamed frame are posted at once to
``/api/matches/MATCH/events`` (JSON Lines, in file order).
"""
from __future__ import annotations

import argparse
import asyncio
import contextlib
import functools
import itertools
import signal
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit, urlunsplit

import orjson

from pacewire.engine.match import CLOCK_START_MIN
from pacewire.replay.position import Position, ReplayError, ServerBusy, ask, period_ends, send_end
from pacewire.wire.cdf import parse_timestamp
from pacewire.wire.recording import Recording, open_recording

BREAK_WALL_S = 1.0  # wall time between periods in a replay
TICK_S = 0.02  # frames due within one tick go in one message
MAX_BYTES = 512 * 1024  # per message or batch, well under the server's 1 MiB default
MAX_LINES_FAST = 250  # lines per message at max speed
HR_BATCH = 1500  # heart-rate samples per HTTP batch, far under the server's batch limit
RETRY_FIRST_S = 0.5  # first wait after a dropped socket; doubled after each failed attempt
RETRY_MAX_S = 8.0  # longest wait between attempts
RETRY_BUDGET_S = 120.0  # how long a replay keeps trying to reach a server that went away

__all__ = ["Frame", "Progress", "ReplayError", "main", "replay"]


@dataclass
class Frame:
    line: bytes
    t: float  # timestamp, s
    clock_s: float  # football clock, s
    period: str
    fid: int | None = None  # frame_id, when the line reads


def parse_clock(text: str) -> float:
    """"MM:SS" (or "MM:SS.s", or plain seconds) → seconds of the football clock."""
    try:
        if ":" in text:
            m, s = text.split(":", 1)
            value = int(m) * 60 + float(s)
        else:
            value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not MM:SS") from None
    if value < 0:
        raise argparse.ArgumentTypeError("a match time cannot be negative")
    return value


def fmt_clock(seconds: float) -> str:
    return f"{int(seconds // 60):02d}:{int(seconds % 60):02d}"


@dataclass
class Sample:
    line: bytes
    t: float  # timestamp, s


def samples_of(rec: Recording) -> list[Sample]:
    """The heart-rate lines in file order with their time; an unreadable line keeps the
    previous line's time and goes as it is (the server judges it)."""
    out: list[Sample] = []
    t = float("-inf")
    for line in rec.hr_lines():
        raw = line.rstrip(b"\r\n")
        if not raw.strip():
            continue
        try:
            t = parse_timestamp(orjson.loads(raw)["timestamp"])
        except Exception:  # not ours to judge
            pass
        out.append(Sample(raw, t))
    return out


def events_of(rec: Recording) -> list[Sample]:
    """The CDF event lines in file order with their event time; an unreadable line keeps the previous
    line's time and goes as it is (the server judges it)."""
    out: list[Sample] = []
    t = float("-inf")
    for line in rec.event_lines():
        raw = line.rstrip(b"\r\n")
        if not raw.strip():
            continue
        try:
            t = parse_timestamp(orjson.loads(raw)["event"]["time"])
        except Exception:  # not ours to judge
            pass
        out.append(Sample(raw, t))
    return out


def frames_of(rec: Recording, after: int | None = None) -> Iterator[Frame]:
    """Every parsable frame line with its time; unreadable lines go as they are (the server judges them).
    ``after``: the server holds every frame up to this id, so the lines up to it are skipped."""
    t0: dict[str, float] = {}
    last = (0.0, 0.0, "first_half")
    skipping = after is not None
    for line in rec.lines():
        raw = line.rstrip(b"\r\n")
        if not raw.strip():
            continue
        fid = None
        try:
            obj = orjson.loads(raw)
            period = obj["period"]
            t = parse_timestamp(obj["timestamp"])
            start = t0.setdefault(period, t)
            clock = CLOCK_START_MIN.get(period, 0) * 60.0 + (t - start)
            last = (t, clock, period)
            fid = obj["frame_id"] if type(obj["frame_id"]) is int else None
        except Exception:  # not ours to judge: the server answers it with a reason
            t, clock, period = last
        if skipping:
            if fid is None or after is None or fid <= after:
                continue
            skipping = False
        yield Frame(raw, t, clock, period, fid)


def _http_base(ws_url: str) -> tuple[str, str]:
    """ws://host:port/ingest/MATCH → (http://host:port, MATCH)."""
    parts = urlsplit(ws_url)
    if parts.scheme not in ("ws", "wss") or not parts.path.startswith("/ingest/"):
        raise ReplayError(f"--to must look like ws://HOST:PORT/ingest/MATCH, not {ws_url!r}")
    match_id = parts.path[len("/ingest/"):]
    scheme = "https" if parts.scheme == "wss" else "http"
    return urlunsplit((scheme, parts.netloc, "", "", "")), match_id


class Progress:
    def __init__(self, stream: Any = sys.stderr) -> None:
        self.stream = stream
        self.last = 0.0
        self.t0 = time.monotonic()
        self.sent = 0
        self.hr_sent = 0  # heart-rate samples
        self.ev_sent = 0  # CDF events

    def show(self, fr: Frame, sent: int, force: bool = False) -> None:
        now = time.monotonic()
        self.sent = sent
        if not force and now - self.last < 0.5:
            return
        self.last = now
        rate = sent / max(now - self.t0, 1e-9)
        if self.stream.isatty():
            self.stream.write(f"\r{fr.period:<22} {fmt_clock(fr.clock_s)}  {sent:>8} frames  {rate:8.0f} frames/s ")
        else:
            self.stream.write(f"{fr.period} {fmt_clock(fr.clock_s)} {sent} frames {rate:.0f} frames/s\n")
        self.stream.flush()

    def say(self, text: str) -> None:
        """A line of its own (after a progress line a terminal keeps open)."""
        self.stream.write(("\n" if self.stream.isatty() else "") + text + "\n")
        self.stream.flush()


class _Paced:
    """One ingest socket: lines due within one tick go in one message, sent at the due time
    of its first line (``speed`` None: at once, MAX_LINES_FAST lines per message)."""

    def __init__(self, ws: Any, wall0: float, speed: float | None) -> None:
        self.ws, self.wall0, self.speed = ws, wall0, speed
        self.out: list[bytes] = []
        self.size = 0
        self.due_at = 0.0
        self.sent = 0

    async def add(self, line: bytes, due: float) -> None:
        full = self.size + len(line) > MAX_BYTES or (self.speed is None and len(self.out) >= MAX_LINES_FAST)
        if self.out and (full or self.speed is not None and due - self.due_at > TICK_S):
            await self.flush()
        if not self.out:
            self.due_at = due
        self.out.append(line)
        self.size += len(line) + 1

    async def flush(self) -> None:
        if self.out:
            self.sent += await _send(self.ws, self.out, self.wall0, self.due_at, self.speed)
            self.out, self.size = [], 0


@dataclass
class _Cursor:
    """How far a replay got: frames sent, the last one sent, the first frame read but not
    sent yet (a seek reads one frame past its end), the next heart-rate sample to send and
    what the server said on the ingest socket that ends the replay."""

    sent: int = 0
    last: Frame | None = None
    pending: Frame | None = None
    hr_next: int = 0
    fatal: str | None = None
    events: list[Sample] | None = None  # the CDF event lines still to send, in file order


@dataclass
class _Match:
    """One replay's fixed parts: the server, the recording and what goes with it."""

    http: Any
    mid: str
    rec: Recording
    samples: list[Sample]
    ends: dict[int, str]  # frame id -> the period the recording's meta ends there
    rename: Callable[[bytes], bytes]
    progress: Progress | None
    events: list[Sample]  # the recording's CDF event lines, in file order

    def say(self, text: str) -> None:
        (self.progress or Progress()).say(text)

    async def ended_at(self, fr: Frame) -> None:
        """After frame ``fr`` went out: the end of its period, if the meta puts it there."""
        if fr.fid is not None and fr.fid in self.ends:
            await send_end(self.http, self.mid, fr.fid, self.ends[fr.fid])


def _dropped() -> tuple[type[BaseException], ...]:
    """What a dropped, unreachable or briefly unavailable server raises: worth another attempt."""
    import httpx
    import websockets

    return (websockets.ConnectionClosed, websockets.InvalidHandshake, httpx.TransportError, OSError, TimeoutError,
            ServerBusy)


async def replay(folder: Path, to: str, speed: float | None, start_s: float | None = None, until_s: float | None = None,
                 token: str | None = None, match_id: str | None = None, progress: Progress | None = None,
                 stop: asyncio.Event | None = None, cursor: _Cursor | None = None,
                 retry_s: float = RETRY_BUDGET_S) -> tuple[int, Frame | None]:
    """Stream a folder; returns (frames sent, last frame sent). ``speed`` None: as fast as possible.

    Heart-rate samples, when the folder has them, go alongside (module docstring);
    ``progress.hr_sent`` counts them. ``cursor``: where the replay got, kept up to date
    (for the caller's resume hint when it fails). ``retry_s``: how long to keep trying
    after the server went away."""
    import httpx

    rec = open_recording(folder)
    base, url_match = _http_base(to)
    mid = match_id or url_match
    headers = {"Authorization": f"Bearer {token}"} if token else {}
    cur = cursor if cursor is not None else _Cursor()
    ws_url = to if match_id is None else to.rsplit("/", 1)[0] + "/" + mid
    async with httpx.AsyncClient(base_url=base, headers=headers, timeout=60) as http:
        m = _Match(http, mid, rec, samples_of(rec), period_ends(rec),
                   functools.partial(_rename, mid=mid, url_match=url_match, rec=rec), progress, events_of(rec))
        await _set_up(http, mid, rec)
        pos = await ask(http, mid)
        deadline, sent = None, -1
        while True:
            try:
                await _from(m, pos, ws_url, headers, speed, start_s, until_s, cur, stop)
                break
            except _dropped() as exc:
                if stop is not None and stop.is_set():
                    break
                if cur.sent != sent:  # frames went out since the last drop: a new outage, a new budget
                    deadline, sent = time.monotonic() + retry_s, cur.sent
                where = fmt_clock(cur.last.clock_s) if cur.last else "the start"
                m.say(f"connection to the server lost after {where} ({_why(exc)}); trying again")
                got = await _reconnect(m, stop, exc, deadline or 0.0)
                if got is None:
                    break
                pos = got
                m.say(f"reconnected: the server holds the match up to frame {pos.last_frame_id}; going on")
    if progress is not None and cur.last is not None:
        progress.show(cur.last, cur.sent, force=True)
    return cur.sent, cur.last


def _why(exc: BaseException) -> str:
    return str(exc) or type(exc).__name__


async def _reconnect(m: _Match, stop: asyncio.Event | None, first: BaseException, deadline: float
                     ) -> Position | None:
    """Ask where the server stands, with a growing delay between attempts, until it answers (its
    position), ``stop`` is set (None) or the ``deadline`` (monotonic) has passed (ReplayError)."""
    delay, last = RETRY_FIRST_S, first
    while time.monotonic() < deadline:
        if stop is not None:
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(stop.wait(), delay)
            if stop.is_set():
                return None
        else:
            await asyncio.sleep(delay)
        try:
            return await ask(m.http, m.mid)
        except _dropped() as exc:
            last = exc
        delay = min(2 * delay, RETRY_MAX_S)
    raise ReplayError(f"gave up reaching the server ({_why(last)})")


async def _from(m: _Match, pos: Position, ws_url: str, headers: dict[str, str], speed: float | None,
                start_s: float | None, until_s: float | None, cur: _Cursor, stop: asyncio.Event | None) -> None:
    """Send what the server lacks after ``pos``: at once up to ``start_s``, then streamed."""
    frames = frames_of(m.rec, after=pos.last_frame_id)
    cur.pending = None
    cur.hr_next = next((i for i, s in enumerate(m.samples) if pos.hr_last_t is None or s.t > pos.hr_last_t),
                       len(m.samples))
    held = pos.last_frame_id
    if held is not None and m.ends.get(held) == pos.period and pos.status != "ended":
        await send_end(m.http, m.mid, held, m.ends[held])  # the replay stopped between the frame and its end
    first = next(frames, None)
    if first is None:
        return  # the server holds the whole recording
    if pos.status == "ended":
        raise ReplayError(f"the server's match {m.mid} has ended (it holds frames up to {pos.last_frame_id}) and "
                          "refuses more: a period_start event reopens it, or replay into another match id")
    frames = itertools.chain([first], frames)
    # every event line again after a drop: the server answers those it holds as duplicates and keeps the rest
    cur.events = list(m.events)
    if start_s is not None:
        await _seek(m, frames, start_s, cur)
    await _stream(m, ws_url, headers, speed, frames, until_s, cur, stop)


async def _set_up(http: Any, mid: str, rec: Recording) -> None:
    """Set the match up on the server: the recording's meta (under match id ``mid``) and sheet."""
    meta = dict(rec.meta)
    meta["match"] = {**meta.get("match", {}), "id": mid}
    r = await http.put(f"/api/matches/{mid}", json={"meta": meta, "sheet": rec.sheet})
    if r.status_code >= 400:
        raise ReplayError(f"set-up refused ({r.status_code}): {r.text}")


async def _seek(m: _Match, frames: Iterator[Frame], start_s: float, cur: _Cursor) -> None:
    """Post the frames before match time ``start_s`` at once (batches of MAX_BYTES at most, each
    followed by the period ends it holds), then the heart-rate samples before the first frame left
    to stream."""
    batch: list[Frame] = []
    size = 0
    for fr in frames:
        if fr.clock_s >= start_s:
            cur.pending = fr
            break
        line = m.rename(fr.line)
        if batch and size + len(line) > MAX_BYTES:
            await _post_frames(m, batch, cur)
            batch, size = [], 0
        batch.append(Frame(line, fr.t, fr.clock_s, fr.period, fr.fid))
        size += len(line) + 1
    if batch:
        await _post_frames(m, batch, cur)
    # the heart rate before the first streamed frame (all of it if none is left)
    first = cur.hr_next
    while cur.hr_next < len(m.samples) and (cur.pending is None or m.samples[cur.hr_next].t < cur.pending.t):
        cur.hr_next += 1
    await _post_hr(m.http, m.mid, [s.line for s in m.samples[first:cur.hr_next]])
    if m.progress is not None:
        m.progress.hr_sent += cur.hr_next - first
    events = cur.events or []  # the event lines timed before the first streamed frame (all if none is left)
    early = [e for e in events if cur.pending is None or e.t < cur.pending.t]
    cur.events = [e for e in events if cur.pending is not None and e.t >= cur.pending.t]
    await _post_hr(m.http, m.mid, [m.rename(e.line) for e in early], "events")
    if m.progress is not None:
        m.progress.ev_sent += len(early)

async def _post_frames(m: _Match, batch: list[Frame], cur: _Cursor) -> None:
    await _post(m.http, m.mid, [fr.line for fr in batch])
    cur.sent += len(batch)
    cur.last = batch[-1]
    for fr in batch:
        await m.ended_at(fr)


async def _stream(m: _Match, ws_url: str, headers: dict[str, str], speed: float | None, frames: Iterator[Frame],
                  until_s: float | None, cur: _Cursor, stop: asyncio.Event | None) -> None:
    """Stream the frames from ``cur.pending`` on, and the heart-rate samples from
    ``cur.hr_next`` on, over the ingest sockets until the end, ``until_s`` or ``stop``."""
    async with contextlib.AsyncExitStack() as stack:
        ws, hr_ws = await _connect(stack, ws_url, headers, heart_rate=cur.hr_next < len(m.samples))
        ev_ws = await _connect_events(stack, ws_url, headers) if cur.events else None
        drains = [asyncio.create_task(_drain(w, cur, m)) for w in (ws, hr_ws, ev_ws) if w is not None]
        clock = _Clock(ws, hr_ws, speed, m.samples, cur.hr_next)
        clock.add_events(ev_ws, [Sample(m.rename(e.line), e.t) for e in cur.events or []])
        counted = 0
        try:
            finished = True
            for fr in itertools.chain([cur.pending] if cur.pending is not None else [], frames):
                if stop is not None and stop.is_set() or until_s is not None and fr.clock_s > until_s:
                    finished = False
                    break
                if cur.fatal is not None:
                    raise ReplayError(cur.fatal)
                await clock.frame(fr, m.rename(fr.line), cur.last)
                if fr.fid is not None and fr.fid in m.ends:
                    await clock.frames.flush()  # the frame first, then the end of its period
                    await m.ended_at(fr)
                cur.sent += clock.frames.sent - counted
                counted = clock.frames.sent
                cur.last = fr
                if m.progress is not None:
                    m.progress.show(fr, cur.sent)
            await clock.finish(finished)
            cur.sent += clock.frames.sent - counted
            if clock.hr is not None and m.progress is not None:
                m.progress.hr_sent += clock.hr.sent
            if clock.ev is not None and m.progress is not None:
                m.progress.ev_sent += clock.ev.sent
        finally:
            for task in drains:
                task.cancel()
    if cur.fatal is not None:
        raise ReplayError(cur.fatal)


async def _connect(stack: contextlib.AsyncExitStack, ws_url: str, headers: dict[str, str],
                   heart_rate: bool) -> tuple[Any, Any | None]:
    """The ingest socket, and with ``heart_rate`` the heart-rate socket ``ws_url``/hr;
    both close with ``stack``."""
    import websockets

    ws = await stack.enter_async_context(websockets.connect(ws_url, additional_headers=headers, max_size=None))
    if not heart_rate:
        return ws, None
    try:
        hr_ws = await stack.enter_async_context(
            websockets.connect(ws_url + "/hr", additional_headers=headers, max_size=None))
    except websockets.InvalidStatus as exc:
        raise ReplayError(f"the server refused the heart-rate socket {ws_url}/hr "
                          f"({exc.response.status_code})") from None
    return ws, hr_ws


async def _connect_events(stack: contextlib.AsyncExitStack, ws_url: str, headers: dict[str, str]) -> Any:
    """The events socket ``ws_url``/events, closed with ``stack``."""
    import websockets

    try:
        return await stack.enter_async_context(
            websockets.connect(ws_url + "/events", additional_headers=headers, max_size=None))
    except websockets.InvalidStatus as exc:
        raise ReplayError(f"the server refused the events socket {ws_url}/events "
                          f"({exc.response.status_code})") from None


class _Clock:
    """Both ingest sockets on one clock: frames and heart-rate samples go when their
    timestamps are due (module docstring), the break between periods skipped."""

    def __init__(self, ws: Any, hr_ws: Any | None, speed: float | None, samples: list[Sample],
                 hr_next: int) -> None:
        wall0 = time.monotonic()
        self.speed = speed
        self.frames = _Paced(ws, wall0, speed)
        self.hr = _Paced(hr_ws, wall0, speed) if hr_ws is not None else None
        self.channels = [c for c in (self.frames, self.hr) if c is not None]
        self.samples, self.hr_next = samples, hr_next
        self.ref_t: float | None = None
        self.period: str | None = None
        self.shift = 0.0  # skipped break time, s of frame time
        self.ev: _Paced | None = None
        self.events: list[Sample] = []
        self.ev_next = 0

    def add_events(self, ws: Any | None, events: list[Sample]) -> None:
        """The events socket and the event lines to send on it, in file order."""
        if ws is not None:
            self.ev = _Paced(ws, self.frames.wall0, self.speed)
            self.channels.append(self.ev)
            self.events = events

    async def events_before(self, t: float) -> None:
        # file order: a line waits for the lines before it, then goes once its own time is past
        ev = self.ev
        while ev is not None and self.ev_next < len(self.events) and self.events[self.ev_next].t < t:
            e = self.events[self.ev_next]
            await self.emit(ev, e.line, max(self.due_of(e.t), ev.due_at))
            self.ev_next += 1

    def due_of(self, t: float) -> float:
        """Wall time (s after the start) at which a line of timestamp ``t`` is due."""
        return 0.0 if self.speed is None or self.ref_t is None else (t - self.shift - self.ref_t) / self.speed

    async def emit(self, channel: _Paced, line: bytes, due: float) -> None:
        # one clock for both sockets: the other one's tick goes first once it is over
        for other in self.channels:
            if other is not channel and other.out and self.speed is not None and due - other.due_at > TICK_S:
                await other.flush()
        await channel.add(line, due)

    async def heart_rate_before(self, t: float) -> None:
        # samples in a break get the next period's clock: they go at once, as the break is skipped
        samples, hr = self.samples, self.hr
        while hr is not None and self.hr_next < len(samples) and samples[self.hr_next].t < t:
            await self.emit(hr, samples[self.hr_next].line, self.due_of(samples[self.hr_next].t))
            self.hr_next += 1

    async def frame(self, fr: Frame, line: bytes, last: Frame | None) -> None:
        """Send frame ``fr`` as ``line`` when it is due (the samples before it first);
        ``last``: the frame sent before it, if any."""
        if self.ref_t is None:
            self.ref_t, self.period = fr.t, fr.period
        if fr.period != self.period:
            # skip the break: the new period starts BREAK_WALL_S after the last frame
            gap = fr.t - (last.t if last is not None else fr.t)
            self.shift += max(gap - BREAK_WALL_S * (self.speed or 1.0), 0.0)
            self.period = fr.period
        if self.hr is not None:
            await self.heart_rate_before(fr.t)
        await self.events_before(fr.t)
        await self.emit(self.frames, line, self.due_of(fr.t))

    async def finish(self, finished: bool) -> None:
        """Send what is held: the samples after the last frame (if the stream was not cut
        short), then the last message of each socket."""
        if finished and self.hr is not None:
            await self.heart_rate_before(float("inf"))
        if finished:
            await self.events_before(float("inf"))
        await self.frames.flush()
        if self.hr is not None:
            await self.hr.flush()
        if self.ev is not None:
            await self.ev.flush()


def _rename(line: bytes, mid: str, url_match: str, rec: Recording) -> bytes:
    """Frames keep their match id unless the replay goes to another match id."""
    original = str(rec.meta.get("match", {}).get("id", ""))
    if mid == original:
        return line
    return line.replace(f'"id":"{original}"'.encode(), f'"id":"{mid}"'.encode(), 1)


async def _post(http: Any, mid: str, lines: list[bytes]) -> None:
    r = await http.post(f"/api/matches/{mid}/frames", content=b"\n".join(lines))
    if r.status_code >= 400:
        raise ReplayError(f"batch refused ({r.status_code}): {r.text[:300]}")


async def _post_hr(http: Any, mid: str, lines: list[bytes], route: str = "hr") -> None:
    """Heart-rate samples (or CDF event lines: ``route`` "events") as JSON Lines batches (HR_BATCH lines,
    MAX_BYTES at most)."""
    batch: list[bytes] = []
    size = 0
    for line in lines:
        if batch and (len(batch) >= HR_BATCH or size + len(line) > MAX_BYTES):
            await _post_hr_batch(http, mid, batch, route)
            batch, size = [], 0
        batch.append(line)
        size += len(line) + 1
    if batch:
        await _post_hr_batch(http, mid, batch, route)


async def _post_hr_batch(http: Any, mid: str, lines: list[bytes], route: str = "hr") -> None:
    r = await http.post(f"/api/matches/{mid}/{route}", content=b"\n".join(lines))
    if r.status_code >= 400:
        what = "heart-rate" if route == "hr" else "event"
        raise ReplayError(f"{what} batch refused ({r.status_code}): {r.text[:300]}")


async def _send(ws: Any, lines: list[bytes], wall0: float, due: float, speed: float | None) -> int:
    if speed is not None:
        wait = wall0 + due - time.monotonic()
        if wait > 0:
            await asyncio.sleep(wait)
    payload = lines[0] if len(lines) == 1 else b"[" + b",".join(lines) + b"]"
    await ws.send(payload.decode())
    return len(lines)


async def _drain(ws: Any, cur: _Cursor, m: _Match) -> None:
    """Read what the server says on an ingest socket (errors) so its buffers never fill; a refusal
    the replay cannot get past (the match has ended) stops it."""
    quiet = ("duplicate", "late", "resent")
    try:
        async for msg in ws:
            try:
                e = orjson.loads(msg)
            except orjson.JSONDecodeError:
                continue
            if e.get("type") != "error" or e.get("code") in quiet:
                continue
            if e.get("code") == "match_ended":
                cur.fatal = f"the server refuses frames: {e.get('message')}"
                continue
            m.say(f"server: {e.get('code')}: {e.get('message')}")
    except Exception:  # the socket went: the sender finds out on its next send
        pass


def _speed(text: str) -> float | None:
    if text == "max":
        return None
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError("speed is a number from 0.25 to 100, or max") from None
    if not 0.25 <= v <= 100:
        raise argparse.ArgumentTypeError("speed is a number from 0.25 to 100, or max")
    return v


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="pacewire replay", description="Stream a recorded match into a pacewire server.")
    p.add_argument("folder", type=Path, help="a CDF folder (meta.json, match.json, tracking.jsonl[.gz])")
    p.add_argument("--to", required=True, help="ws://HOST:PORT/ingest/MATCH")
    p.add_argument("--speed", type=_speed, default=1.0, help="times real time, 0.25 to 100, or max (default 1)")
    p.add_argument("--from", dest="start", type=parse_clock,
                   help="start at this match time (MM:SS); earlier frames are sent at once")
    p.add_argument("--until", type=parse_clock, help="stop at this match time (MM:SS)")
    p.add_argument("--token", help="ingest token")
    p.add_argument("--retry-for", dest="retry_s", type=float, default=RETRY_BUDGET_S, metavar="SECONDS",
                   help=f"after a dropped connection keep trying this long (default {RETRY_BUDGET_S:g})")
    p.add_argument("--loop", action="store_true", help="start again at the end, as a new match MATCH-2, MATCH-3, ...")
    return p


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    stop = asyncio.Event()
    cur = _Cursor()

    async def run() -> int:
        nonlocal cur
        loop = asyncio.get_running_loop()
        try:
            loop.add_signal_handler(signal.SIGINT, stop.set)
            loop.add_signal_handler(signal.SIGTERM, stop.set)
        except (NotImplementedError, RuntimeError):
            pass
        _, url_match = _http_base(args.to)
        round_no = 1
        while True:
            mid = url_match if round_no == 1 else f"{url_match}-{round_no}"
            prog = Progress()
            cur = _Cursor()
            sent, last = await replay(args.folder, args.to, args.speed, args.start, args.until, args.token,
                                      None if round_no == 1 else mid, prog, stop, cur, args.retry_s)
            if stop.is_set():
                print(f"\nstopped{_resume_hint(cur)}", file=sys.stderr)
                return 0
            hr = f", {prog.hr_sent} heart-rate samples" if prog.hr_sent else ""
            ev = f", {prog.ev_sent} events" if prog.ev_sent else ""
            print(f"\nreplay of {args.folder} into {mid} done: {sent} frames{hr}{ev}", file=sys.stderr)
            if not args.loop:
                return 0
            round_no += 1

    try:
        return asyncio.run(run())
    except KeyboardInterrupt:  # before the signal handlers were in place
        print(f"\nstopped{_resume_hint(cur)}", file=sys.stderr)
        return 130
    except ReplayError as exc:
        print(f"\npacewire replay: {exc}{_resume_hint(cur)}", file=sys.stderr)
        return 2
    except Exception as exc:  # one line, never a traceback: what failed and how to go on
        what = "cannot reach the server" if isinstance(exc, _dropped()) else type(exc).__name__
        print(f"\npacewire replay: {what}: {_why(exc)}{_resume_hint(cur)}", file=sys.stderr)
        return 2


def _resume_hint(cur: _Cursor) -> str:
    """Where the replay stopped and the command option that goes on from there."""
    if cur.last is None:
        return ""
    where = fmt_clock(cur.last.clock_s)
    return f" at {where} ({cur.last.period}, {cur.sent} frames sent); resume with --from {where}"
