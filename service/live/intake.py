"""Data into one match: decode, then record, then queue for the engine.

The order for every batch: decode (bad frames answered, nothing of them kept)
→ the recorder writes the accepted lines to the OS → the engine's queue. If
the recording cannot be written, nothing of the batch is applied and the
decoder forgets it, so the provider can send it again. Heart-rate samples
(docs/wearables.md) take the same path with their own decoder and file.
"""
from __future__ import annotations

import time
from typing import Protocol

import orjson

from pacewire.engine.types import Block, Roster
from pacewire.live.recorder import Recorder, RecorderError
from pacewire.wire.cdf import DecodeResult, FrameDecoder, FrameError, parse_message
from pacewire.wire.heart import HrDecoder, HrResult
from pacewire.wire.outcome import IngestOutcome

Queued = tuple[DecodeResult | HrResult, float]  # what was stored, and when it arrived (UTC s)


class IntakeSink(Protocol):
    """Where stored data and the drop counts go (the match's runner)."""

    def enqueue(self, item: Queued) -> None: ...

    def count_frames(self, res: DecodeResult) -> None: ...

    def count_heart(self, rejected: int, duplicates: int, late: int) -> None: ...

    def recorded(self, frames: int) -> None:
        """``frames`` frames are in the recording (the operator's counter)."""

    def unstored(self) -> None:
        """A recorder failed: health shows it at once."""


class Intake:
    def __init__(self, roster: Roster, decoder: FrameDecoder, hr_decoder: HrDecoder, recorder: Recorder,
                 hr_recorder: Recorder, sink: IntakeSink) -> None:
        self.roster = roster
        self.decoder = decoder
        self.hr_decoder = hr_decoder
        self.recorder = recorder
        self.hr_recorder = hr_recorder
        self.sink = sink

    async def frames_lines(self, lines: list[bytes], durable: bool) -> IngestOutcome:
        """JSON Lines (HTTP): answered once the accepted lines are recorded."""
        arrival = time.time()
        cp = self.decoder.gate.checkpoint()
        res = self.decoder.decode_lines(lines)
        raw = [lines[i].rstrip(b"\r\n") for i in res.accepted]
        return await self._record(res, raw, cp, arrival, durable)

    async def frames_message(self, data: str | bytes) -> IngestOutcome:
        """One websocket message: a frame or a JSON array of frames."""
        arrival = time.time()
        cp = self.decoder.gate.checkpoint()
        try:
            obj = orjson.loads(data)
        except orjson.JSONDecodeError as exc:
            self.sink.count_frames(DecodeResult(Block.empty(self.roster.n), [], rejected=1))
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
        self.sink.count_frames(res)
        if not raw:
            return out
        try:
            await self.recorder.append(raw, durable=durable, after=lambda: self.sink.enqueue((res, arrival)))
        except RecorderError:
            self.decoder.gate.restore(cp)
            self.sink.unstored()
            return IngestOutcome(0, out.rejected, out.duplicates, out.late, out.errors, stored=False)
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
