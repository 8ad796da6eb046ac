"""Data into one match: decode, then record, then queue for the engine.

The order for every batch: decode (bad frames answered, nothing of them kept)
→ the recorder writes the accepted lines to the OS → the engine's queue. Once
the match has ended, a batch is refused whole (``match_ended``) and counted. If
the recording cannot be written, nothing of the batch is applied and the
decoder forgets it, so the provider can send it again. Heart-rate samples
(docs/wearables.md) and CDF events take the same path with their own decoder and file
(``hr.jsonl``, ``event.jsonl``).
"""
from __future__ import annotations

import time
from typing import Protocol

import orjson

from pacewire.engine.types import Roster
from pacewire.live.recorder import Recorder, RecorderError
from pacewire.wire.cdf import DecodeResult, FrameDecoder, FrameError, count_frames, parse_message
from pacewire.wire.events import EventDecoder, EventResult
from pacewire.wire.heart import HrDecoder, HrResult
from pacewire.wire.outcome import EventOutcome, IngestOutcome

Queued = tuple[DecodeResult | HrResult | EventResult, float]  # what was stored, and when it arrived (UTC s)


class IntakeSink(Protocol):
    """Where stored data and the drop counts go (the match's runner)."""

    def enqueue(self, item: Queued) -> None: ...

    def count_frames(self, res: DecodeResult) -> None: ...

    def count_heart(self, rejected: int, duplicates: int, late: int) -> None: ...

    def count_events(self, rejected: int, duplicates: int) -> None: ...

    def recorded(self, frames: int) -> None:
        """``frames`` frames are in the recording (the operator's counter)."""

    def frames_coming(self, now: float) -> None:
        """A batch of frames is being taken in: the feed is not silent."""

    def ended(self, now: float) -> bool:
        """The match has ended: frames are refused."""

    def refused_after_end(self, frames: int) -> str:
        """Count ``frames`` refused after the end; the message to answer with."""

    def unstored(self) -> None:
        """A recorder failed: health shows it at once."""


class Intake:
    def __init__(self, roster: Roster, decoder: FrameDecoder, hr_decoder: HrDecoder, recorder: Recorder,
                 hr_recorder: Recorder, sink: IntakeSink, event_recorder: Recorder) -> None:
        self.roster = roster
        self.decoder = decoder
        self.hr_decoder = hr_decoder
        self.event_decoder = EventDecoder(roster)
        self.recorder = recorder
        self.hr_recorder = hr_recorder
        self.event_recorder = event_recorder
        self.sink = sink

    async def frames(self, data: list[bytes] | bytes | str, durable: bool) -> IngestOutcome:
        """JSON Lines (HTTP, a list of lines) or one websocket message (a frame or a JSON array of
        frames): answered once the accepted frames are recorded."""
        arrival = time.time()
        if self.sink.ended(arrival):
            n, first = count_frames(data)
            return IngestOutcome(0, 0, 0, 0, [FrameError("match_ended", self.sink.refused_after_end(n), first)],
                                 after_end=n)
        self.sink.frames_coming(arrival)
        cp = self.decoder.gate.checkpoint()
        res, raw = self.decoder.decode_for_record(data)
        out = IngestOutcome(len(res.block), res.rejected, res.duplicates, res.late, res.errors, resent=res.resent)
        self.sink.count_frames(res)
        if not raw:
            return out
        try:
            await self.recorder.append(raw, durable=durable, after=lambda: self.sink.enqueue((res, arrival)))
        except RecorderError:
            self.decoder.gate.restore(cp)
            self.sink.unstored()
            return IngestOutcome(0, out.rejected, out.duplicates, out.late, out.errors, stored=False,
                                 resent=out.resent)
        self.sink.recorded(len(res.block))
        return out

    async def heart_rate(self, data: bytes | str | list[bytes], durable: bool) -> IngestOutcome:
        """Heart-rate samples: JSON Lines (a list of lines, HTTP) or one websocket message
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
        self.sink.count_heart(res.rejected, res.duplicates, res.late)
        res.rejected = res.duplicates = res.late = 0  # counted here, once
        if not len(res):
            return out
        try:
            await self.hr_recorder.append(raw, durable=durable, after=lambda: self.sink.enqueue((res, arrival)))
        except RecorderError:
            dec.gate.restore(cp)
            self.sink.unstored()
            return IngestOutcome(0, out.rejected, out.duplicates, out.late, out.errors, stored=False)
        return out

    async def events(self, data: bytes | str | list[bytes], durable: bool) -> EventOutcome:
        """CDF events: JSON Lines (a list of lines, HTTP) or one websocket message (an object or an
        array); answered once the accepted events (corrections included) are recorded."""
        arrival = time.time()
        dec = self.event_decoder
        res, raw = decode_events(dec, data)
        out = EventOutcome(len(res), res.rejected, res.duplicates, res.corrections, res.errors)
        self.sink.count_events(res.rejected, res.duplicates)
        res.rejected = res.duplicates = 0  # counted here, once
        if not len(res):
            return out
        try:
            await self.event_recorder.append(raw, durable=durable, after=lambda: self.sink.enqueue((res, arrival)))
        except RecorderError:
            dec.rollback(res)
            self.sink.unstored()
            return EventOutcome(0, out.rejected, out.duplicates, 0, out.errors, stored=False)
        return out


def decode_events(dec: EventDecoder, data: bytes | str | list[bytes]) -> tuple[EventResult, list[bytes]]:
    """A batch of CDF events decoded, and the accepted ones as lines to record: JSON Lines as they came,
    the objects of a websocket message written anew (one line each)."""
    if isinstance(data, list):
        res = dec.decode_lines(data)
        return res, [data[i].strip() for i in res.accepted]
    objs = parse_message(data)
    if isinstance(objs, FrameError):
        return EventResult(errors=[objs], rejected=1), []
    res = dec.decode_objects(objs)
    return res, [orjson.dumps(objs[i]) for i in res.accepted]
