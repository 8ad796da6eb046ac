"""The ``ingest`` role: set-up, frames and heart rate in, appended to Redis Streams per match.

Same endpoints and checks as the single process (the decoder decides what is
accepted); an accepted frame becomes stream entry ``frame_id-1`` (keys.py), so
Redis itself refuses a duplicate or late frame whichever ingest node sends it.
Heart-rate samples are gated per player (docs/wearables.md): the gate lives in
Redis beside the samples' stream and a batch is appended only if the gate it
was checked against is still the stored one, so every node continues one gate.
A batch is acknowledged only once Redis has answered for every entry; if Redis
cannot be reached the decoder forgets the batch and the provider is told
``not_stored`` (HTTP 503 / an ingest ``error`` message) so it sends it again.
"""
from __future__ import annotations

import asyncio
import logging
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import orjson
from redis.exceptions import RedisError

from pacewire.config import Settings
from pacewire.engine.types import Roster
from pacewire.errors import NotStored
from pacewire.events import check_event
from pacewire.live.matches import SetupConflict
from pacewire.params import heart_params
from pacewire.scale import keys
from pacewire.wire.cdf import (
    DecodeResult,
    FrameDecoder,
    FrameError,
    GateCheckpoint,
    count_frames,
    parse_message,
    parse_setup,
    parse_timestamp,
)
from pacewire.wire.events import EventDecoder, EventRefusal, EventResult
from pacewire.wire.heart import HrDecoder, HrGate
from pacewire.wire.outcome import EventOutcome, IngestOutcome, after_end_message

log = logging.getLogger("pacewire.scale.ingest")

# An event entry goes right after the stream's top entry (same millisecond part, next sequence number);
# a period start reopens an ended match at once (KEYS[2]: the ended flag; ARGV[2] '1' for a period start).
_ADD_EVENT = """
local top = redis.call('XREVRANGE', KEYS[1], '+', '-', 'COUNT', 1)
local ms = '0'
if #top > 0 then ms = string.match(top[1][1], '^(%d+)-') end
if ARGV[2] == '1' then redis.call('DEL', KEYS[2]) end
return redis.call('XADD', KEYS[1], ms .. '-*', 'e', ARGV[1])
"""

# Accepted frames in, unless the match has ended (then the whole batch is counted and refused: -1).
# KEYS: frames stream, ended flag, counts hash. ARGV: arrival, frames in the batch, rejected,
# duplicates, late, resent, then (entry id, line) per frame. Returns 1 (stored) or 0 (Redis refused
# the id: stored before, or a later one is) per frame.
_APPEND = """
if redis.call('EXISTS', KEYS[2]) == 1 then
  redis.call('HINCRBY', KEYS[3], 'after_end', ARGV[2])
  return -1
end
local names = {'rejected', 'duplicates', 'late', 'resent'}
for k = 1, 4 do
  if tonumber(ARGV[2 + k]) > 0 then redis.call('HINCRBY', KEYS[3], names[k], ARGV[2 + k]) end
end
local out = {}
for a = 7, #ARGV, 2 do
  local r = redis.pcall('XADD', KEYS[1], ARGV[a], 'f', ARGV[a + 1], 'a', ARGV[1])
  if type(r) == 'table' and r.err then out[#out + 1] = 0 else out[#out + 1] = 1 end
end
return out
"""

# Which of these entry ids the stream holds (ARGV), 1 or 0 each: a frame the decoder calls late that
# the stream has is a resend.
_HELD = """
local out = {}
for i = 1, #ARGV do
  if #redis.call('XRANGE', KEYS[1], ARGV[i], ARGV[i], 'COUNT', 1) > 0 then out[i] = 1 else out[i] = 0 end
end
return out
"""

# Heart-rate samples go in only if the gate they passed is still the stored one (its version), then the
# gate is stored with the next version: a compare-and-set, so two nodes never both admit a player's sample.
# KEYS: hr stream, gate hash, counts hash. ARGV: version checked against, new gate, rejected, duplicates,
# late, then 4 per sample: line, player id, t (UTC s), bpm. Returns {1, new version} or {0, version, gate}.
_APPEND_HR = """
local v = redis.call('HGET', KEYS[2], 'v') or ''
if v ~= ARGV[1] then return {0, v, redis.call('HGET', KEYS[2], 'g') or ''} end
for a = 6, #ARGV, 4 do
  redis.call('XADD', KEYS[1], '*', 'h', ARGV[a], 'p', ARGV[a + 1], 't', ARGV[a + 2], 'b', ARGV[a + 3])
end
local names = {'hr_rejected', 'hr_duplicates', 'hr_late'}
for k = 1, 3 do
  if tonumber(ARGV[2 + k]) > 0 then redis.call('HINCRBY', KEYS[3], names[k], ARGV[2 + k]) end
end
local nv = tostring((tonumber(v) or 0) + 1)
redis.call('HSET', KEYS[2], 'v', nv, 'g', ARGV[2])
return {1, nv}
"""
HR_ATTEMPTS = 20  # compare-and-set rounds before a batch is answered not_stored (nodes racing on one match)

# CDF events go in keyed by id (docs: corrections): an id with the same content is a duplicate and not
# appended, with other content a correction. KEYS: event stream, id hash, counts hash. ARGV: arrival,
# rejected, then 2 per event: id, line (canonical content). Returns per event 0 duplicate, 1 new, 2 correction.
_APPEND_EVENTS = """
local out = {}
local dup = 0
for a = 3, #ARGV, 2 do
  local old = redis.call('HGET', KEYS[2], ARGV[a])
  if old == ARGV[a + 1] then
    out[#out + 1] = 0
    dup = dup + 1
  else
    redis.call('HSET', KEYS[2], ARGV[a], ARGV[a + 1])
    redis.call('XADD', KEYS[1], '*', 'e', ARGV[a + 1], 'a', ARGV[1])
    out[#out + 1] = old and 2 or 1
  end
end
if tonumber(ARGV[2]) > 0 then redis.call('HINCRBY', KEYS[3], 'event_rejected', ARGV[2]) end
if dup > 0 then redis.call('HINCRBY', KEYS[3], 'event_duplicates', dup) end
return out
"""


class StoreUnavailable(NotStored):
    """Redis could not be reached: nothing was kept."""


@dataclass
class IngestMatch:
    roster: Roster
    setup_raw: bytes
    decoder: FrameDecoder
    hr: HrDecoder
    lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    primed: bool = False
    hr_lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    hr_version: str | None = None  # version of the stored gate that hr.gate equals; None: not loaded yet
    events: EventDecoder | None = None  # checks CDF events; their ids live in Redis


def gate_bytes(gate: HrGate) -> bytes:
    """The heart-rate gate as stored in Redis: last t, last bpm, jump streak per player (float64)."""
    return np.stack([gate.last_t, gate.last_bpm, gate.streak.astype(np.float64)]).tobytes()


def load_gate(gate: HrGate, raw: bytes | None) -> None:
    """Set ``gate`` to the stored one; a missing or differently sized one (another set-up) is a fresh gate."""
    if raw and len(raw) == 3 * 8 * gate.n:
        a = np.frombuffer(raw, np.float64).reshape(3, gate.n)
        gate.restore((a[0], a[1], a[2].astype(np.int64)))
    else:
        gate.restore(HrGate(gate.n).checkpoint())


class StreamIngest:
    """Per-match decoders in front of the Redis Streams."""

    def __init__(self, redis: Any, settings: Settings) -> None:
        self.redis = redis
        self.settings = settings
        self.matches: dict[str, IngestMatch] = {}
        self.error: str | None = None
        self._add_event = redis.register_script(_ADD_EVENT)
        self._append_hr = redis.register_script(_APPEND_HR)
        self._append_frames = redis.register_script(_APPEND)
        self._held = redis.register_script(_HELD)
        self._append_events = redis.register_script(_APPEND_EVENTS)

    def _new(self, roster: Roster, raw: bytes) -> IngestMatch:
        d = self.settings.decode
        return IngestMatch(roster, raw, FrameDecoder(roster, d.outside_margin_m, d.recent_ids),
                           HrDecoder(roster, heart_params(self.settings)))

    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        """Store the set-up in Redis (every role reads the roster from there). Raises SetupError,
        SetupConflict, StoreUnavailable."""
        roster = parse_setup(meta, sheet, match_id)
        raw = orjson.dumps({"meta": meta, "sheet": sheet})
        try:
            old = await self.redis.get(keys.setup(match_id))
            if old is not None:
                o = orjson.loads(old)
                if parse_setup(o["meta"], o["sheet"], match_id) == roster:
                    self.matches.setdefault(match_id, self._new(roster, old))
                    return roster, False
                if await self.redis.xlen(keys.frames(match_id)):
                    raise SetupConflict(f"match {match_id} already has frames with a different set-up")
                if await self.redis.xlen(keys.hr(match_id)):
                    raise SetupConflict(f"match {match_id} already has heart-rate samples with a different set-up")
            async with self.redis.pipeline(transaction=True) as p:
                p.set(keys.setup(match_id), raw)
                p.sadd(keys.MATCHES, match_id)
                p.delete(keys.hr_gate(match_id))  # a gate is per roster: the new set-up starts afresh
                await p.execute()
        except RedisError as exc:
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        self.matches[match_id] = self._new(roster, raw)
        return roster, True

    async def get(self, match_id: str) -> IngestMatch | None:
        """The match, set up here or through another ingest node. Raises StoreUnavailable."""
        m = self.matches.get(match_id)
        try:
            raw = await self.redis.get(keys.setup(match_id))
        except RedisError as exc:
            if m is not None:
                return m  # the append will tell
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        if raw is None:
            return None
        if m is None or m.setup_raw != raw:
            o = orjson.loads(raw)
            m = self.matches[match_id] = self._new(parse_setup(o["meta"], o["sheet"], match_id), raw)
        return m

    async def _prime(self, match_id: str, m: IngestMatch) -> None:
        """A fresh node learns the last accepted frame, so its ordering checks continue the stream's."""
        top = await self.redis.xrevrange(keys.frames(match_id), "+", "-", count=8)
        for _eid, fields in top:
            if b"f" in fields:
                m.decoder.decode_lines([fields[b"f"]])
                break
        m.primed = True

    # -- frames -----------------------------------------------------------------------------
    async def ingest_frames(self, match_id: str, m: IngestMatch, data: list[bytes] | bytes | str) -> IngestOutcome:
        """JSON Lines (a list of lines) or one websocket message, appended once decoded."""
        async with m.lock:
            try:
                if not m.primed:
                    await self._prime(match_id, m)
            except RedisError as exc:
                return self._unstored(match_id, exc)
            cp = m.decoder.gate.checkpoint()
            res, raw = m.decoder.decode_for_record(data)
            try:
                await self._resent(match_id, res)
            except RedisError as exc:
                m.decoder.gate.restore(cp)
                return self._unstored(match_id, exc)
            if not raw:
                await self._count(match_id, res)
                return IngestOutcome(0, res.rejected, res.duplicates, res.late, list(res.errors), resent=res.resent)
            return await self._append(match_id, m, res, raw, cp, count_frames(data)[0])

    async def _resent(self, match_id: str, res: DecodeResult) -> None:
        """Frames the decoder calls late (it knows only what this node took) that the stream holds
        were sent again: count them as resent."""
        late = [i for i, e in enumerate(res.errors) if e.code == "late" and e.frame_id is not None]
        if not late:
            return
        held = await self._held(keys=[keys.frames(match_id)],
                                args=[keys.frame_entry_id(int(res.errors[i].frame_id or 0)) for i in late])
        for i, h in zip(late, held, strict=True):
            if int(h):
                e = res.errors[i]
                res.errors[i] = FrameError("resent", f"frame {e.frame_id} is already held (sent again)", e.frame_id,
                                           e.line)
                res.late -= 1
                res.resent += 1

    async def _count(self, match_id: str, res: DecodeResult) -> None:
        try:
            await self._count_pipe(self.redis.pipeline(transaction=False), match_id, res).execute()
        except RedisError:
            pass  # counters are advisory; frames are what must not be lost

    @staticmethod
    def _count_pipe(p: Any, match_id: str, res: DecodeResult) -> Any:
        for name in ("rejected", "duplicates", "late", "resent"):
            if getattr(res, name):
                p.hincrby(keys.counts(match_id), name, getattr(res, name))
        return p

    def _unstored(self, match_id: str, exc: Exception) -> IngestOutcome:
        self.error = f"Redis unavailable: {exc}"
        log.warning("%s: not stored: %s", match_id, exc)
        return IngestOutcome.unstored()

    async def _append(self, match_id: str, m: IngestMatch, res: DecodeResult, raw: list[bytes],
                      cp: GateCheckpoint, batch: int) -> IngestOutcome:
        """Append the accepted frames in one script, which refuses the whole batch (``batch`` frames)
        once the match has ended."""
        out = IngestOutcome(len(res.block), res.rejected, res.duplicates, res.late, list(res.errors),
                            resent=res.resent)
        key = keys.frames(match_id)
        fids = [int(f) for f in res.block.frame_id]
        args: list[Any] = [b"%.6f" % time.time(), batch, res.rejected, res.duplicates, res.late, res.resent]
        for fid, line in zip(fids, raw, strict=True):
            args += [keys.frame_entry_id(fid), line]
        try:
            answers = await self._append_frames(keys=[key, keys.ended(match_id), keys.counts(match_id)], args=args)
        except RedisError as exc:
            m.decoder.gate.restore(cp)
            return self._unstored(match_id, exc)
        if answers == -1:
            m.decoder.gate.restore(cp)
            first = count_frames([raw[0]])[1] if raw else None
            self.error = None
            return IngestOutcome(0, 0, 0, 0, [FrameError("match_ended", after_end_message(batch), first)],
                                 after_end=batch)
        refused = [fid for fid, ans in zip(fids, answers, strict=True) if not int(ans)]
        if refused:
            # another node (or an earlier attempt) stored these ids, or later ones: Redis refused them
            dup = late = 0
            for fid in refused:
                try:
                    have = await self.redis.xrange(key, keys.frame_entry_id(fid), keys.frame_entry_id(fid))
                except RedisError:
                    have = [1]
                if have:
                    dup += 1
                    out.errors.append(FrameError("duplicate", f"frame {fid} was already stored", fid))
                else:
                    late += 1
                    out.errors.append(FrameError("late", f"frame {fid} arrived after a later frame was stored", fid))
            out.accepted -= len(refused)
            out.duplicates += dup
            out.late += late
            try:
                p = self.redis.pipeline(transaction=False)
                if dup:
                    p.hincrby(keys.counts(match_id), "duplicates", dup)
                if late:
                    p.hincrby(keys.counts(match_id), "late", late)
                await p.execute()
            except RedisError:
                pass
        self.error = None
        return out

    # -- heart rate -------------------------------------------------------------------------------
    async def ingest_hr(self, match_id: str, m: IngestMatch, data: bytes | str | list[bytes]) -> IngestOutcome:
        """Heart-rate samples: JSON Lines (a list of lines, HTTP) or one message (an object or an
        array), checked as the single process checks them (``Intake.heart_rate``) against the
        gate stored in Redis; answered once Redis has the accepted samples."""
        dec = m.hr
        objs = None if isinstance(data, list) else parse_message(data)
        if isinstance(objs, FrameError):  # nothing reached the gate: count it, as frames count bad JSON
            try:
                await self.redis.hincrby(keys.counts(match_id), "hr_rejected", 1)
            except RedisError:
                pass
            return IngestOutcome(0, 1, 0, 0, [objs])
        async with m.hr_lock:
            for _attempt in range(HR_ATTEMPTS):
                try:
                    if m.hr_version is None:
                        v, g = await self.redis.hmget(keys.hr_gate(match_id), "v", "g")
                        load_gate(dec.gate, g)
                        m.hr_version = (v or b"").decode()
                except RedisError as exc:
                    return self._unstored(match_id, exc)
                cp = dec.gate.checkpoint()
                if isinstance(data, list):  # JSON Lines (objs is None)
                    res = dec.decode_lines(data)
                    raw = [data[i].strip() for i in res.accepted]
                else:
                    assert objs is not None  # parsed above
                    res = dec.decode_objects(objs)
                    raw = [orjson.dumps(objs[i]) for i in res.accepted]
                out = IngestOutcome(len(res), res.rejected, res.duplicates, res.late, res.errors)
                if not (len(res) or res.rejected or res.duplicates or res.late):
                    return out
                args: list[Any] = [m.hr_version, gate_bytes(dec.gate), res.rejected, res.duplicates, res.late]
                ids = m.roster.players
                for line, i, t, bpm in zip(raw, res.player.tolist(), res.t.tolist(), res.bpm.tolist(), strict=True):
                    args += [line, ids[i].id, repr(t), repr(bpm)]
                try:
                    ans = await self._append_hr(keys=[keys.hr(match_id), keys.hr_gate(match_id),
                                                      keys.counts(match_id)], args=args)
                except RedisError as exc:
                    dec.gate.restore(cp)
                    m.hr_version = None  # the script may have run before the connection broke: reload
                    out.accepted, out.stored = 0, False
                    self._unstored(match_id, exc)
                    return out
                if int(ans[0]) == 1:
                    m.hr_version = ans[1].decode()
                    self.error = None
                    return out
                # another node moved the gate on since this one last stored it: take it and check again
                load_gate(dec.gate, ans[2])
                m.hr_version = ans[1].decode()
        out = IngestOutcome.unstored()
        self.error = f"heart-rate gate of match {match_id} changed {HR_ATTEMPTS} times during one batch; send it again"
        return out

    # -- CDF events --------------------------------------------------------------------------------
    async def ingest_events(self, match_id: str, m: IngestMatch, data: bytes | str | list[bytes]) -> EventOutcome:
        """CDF events checked as the single process checks them; Redis decides, per id, duplicate or
        correction (one script, so every node agrees) and appends the others. Answered once stored."""
        if m.events is None:
            m.events = EventDecoder(m.roster)
        if isinstance(data, list):
            good, res = m.events.checked_lines(data)
        else:
            objs = parse_message(data)
            good, res = ([], EventResult(errors=[objs], rejected=1)) if isinstance(objs, FrameError) \
                else m.events.checked(objs)
        args: list[Any] = [f"{time.time():.6f}", res.rejected]
        for c in good:
            args += [c.id, c.blob]
        try:
            ans = await self._append_events(keys=[keys.events(match_id), keys.event_ids(match_id),
                                                  keys.counts(match_id)], args=args)
        except RedisError as exc:
            self._unstored(match_id, exc)
            return EventOutcome(0, res.rejected, 0, 0, res.errors, stored=False)
        out = EventOutcome(0, res.rejected, 0, 0, res.errors)
        for c, a in zip(good, ans, strict=True):
            if int(a) == 0:
                out.duplicates += 1
                out.errors.append(EventRefusal("duplicate", f"event {c.id!r} was already applied with this content",
                                               None, c.line, c.id))
            else:
                out.accepted += 1
                out.corrections += int(a) == 2
        self.error = None
        return out

    # -- events -----------------------------------------------------------------------------------
    async def add_event(self, match_id: str, m: IngestMatch, event: Any) -> dict[str, Any]:
        """Check (as the single process does) and append one match event after the latest frame."""
        ev = check_event(m.roster, event)
        try:
            await self._add_event(keys=[keys.frames(match_id), keys.ended(match_id)],
                                  args=[orjson.dumps(ev), "1" if ev["type"] == "period_start" else "0"])
        except RedisError as exc:
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        return ev

    async def position(self, match_id: str) -> dict[str, Any]:
        """Where the stream stands: its latest frame and heart-rate sample, and the match status the
        aggregator last published (``ended`` while the ended flag is set)."""
        try:
            top = await self.redis.xrevrange(keys.frames(match_id), "+", "-", count=64)
            hr = await self.redis.xrevrange(keys.hr(match_id), "+", "-", count=1)
            summary, ended = await self.redis.mget([keys.summary(match_id), keys.ended(match_id)])
        except RedisError as exc:
            raise StoreUnavailable(f"Redis unavailable: {exc}") from exc
        out: dict[str, Any] = {"last_frame_id": None, "last_timestamp": None, "period": None,
                               "hr_last_timestamp": float(hr[0][1][b"t"]) if hr else None,
                               "match_status": "ended" if ended else
                               (orjson.loads(summary).get("status") if summary else None)}
        line = next((f[b"f"] for _, f in top if b"f" in f), None)
        if line is not None:
            obj = orjson.loads(line)
            out.update(last_frame_id=obj["frame_id"], last_timestamp=parse_timestamp(obj["timestamp"]),
                       period=obj["period"])
        return out


class RedisWriter:
    """A match's write side in the ingest role (:class:`~pacewire.api.backend.MatchWriter`)."""

    def __init__(self, store: StreamIngest, match_id: str, m: IngestMatch) -> None:
        self.store, self.match_id, self.m = store, match_id, m

    async def frames(self, data: list[bytes] | bytes | str, durable: bool) -> IngestOutcome:
        return await self.store.ingest_frames(self.match_id, self.m, data)  # stored once Redis answers

    async def heart_rate(self, data: bytes | str | list[bytes], durable: bool) -> IngestOutcome:
        return await self.store.ingest_hr(self.match_id, self.m, data)

    async def cdf_events(self, data: bytes | str | list[bytes], durable: bool) -> EventOutcome:
        return await self.store.ingest_events(self.match_id, self.m, data)  # stored once Redis answers

    async def add_event(self, event: Any) -> None:
        await self.store.add_event(self.match_id, self.m, event)

    def store_error(self) -> str:
        return self.store.error or "Redis unavailable"

    def clock(self) -> tuple[float, str | None]:
        return 0.0, None  # the ingest role does not run the engine

    async def position(self) -> dict[str, Any]:
        return await self.store.position(self.match_id)


class RedisIngest:
    """The ingest role's backend (:class:`~pacewire.api.backend.IngestBackend`)."""

    def __init__(self, redis: Any, settings: Settings) -> None:
        self.redis = redis
        self.store = StreamIngest(redis, settings)

    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        return await self.store.setup(match_id, meta, sheet)

    async def writer(self, match_id: str) -> RedisWriter | None:
        m = await self.store.get(match_id)
        return None if m is None else RedisWriter(self.store, match_id, m)

    async def health(self) -> dict[str, Any]:
        try:
            await self.redis.ping()
            ok = True
        except RedisError:
            ok = False
        return {"status": "ok" if ok else "degraded", "role": "ingest", "redis": ok, "time": time.time()}
