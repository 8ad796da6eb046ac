"""The ``recorder`` role: the CDF folder of every match, written from its stream.

In scaled mode the streams are the durable log; this role turns them into the
same folder the single process records (``meta.json``, ``match.json``,
``tracking.jsonl``, ``events.jsonl``, and ``hr.jsonl`` / ``event.jsonl`` once
the match has heart-rate samples / CDF events) for replay, analysis and reports. The positions read so
far are stored beside the files with their lengths, written after an fsync, so
a restart cuts any unconfirmed tail and carries on with no line lost or
doubled. Run one recorder per data folder.
"""
from __future__ import annotations

import asyncio
import logging
import os
from pathlib import Path
from typing import Any

import orjson
from redis.exceptions import RedisError

from pacewire.live.recorder import write_json_atomic
from pacewire.scale import keys
from pacewire.scale.settings import ScaleSettings
from pacewire.wire.match_id import is_match_id

log = logging.getLogger("pacewire.scale.recorder")

POSITION = "stream_position.json"


class MatchFolder:
    def __init__(self, folder: Path) -> None:
        self.folder = folder
        folder.mkdir(parents=True, exist_ok=True)
        self.pos_path = folder / POSITION
        pos: dict[str, Any] = {"id": "0-0", "tracking": 0, "events": 0}
        if self.pos_path.exists():
            pos = orjson.loads(self.pos_path.read_bytes())
        self.last_id: str = pos["id"]
        self.hr_last_id: str = pos.get("hr_id", "0-0")  # a position file from before the heart-rate stream
        self.ev_last_id: str = pos.get("ev_id", "0-0")  # ... or from before the CDF event stream
        self.files = {name: folder / f"{name}.jsonl" for name in ("tracking", "events", "hr", "event")}
        self.sizes = {name: int(pos.get(name, 0)) for name in self.files}
        for name, path in self.files.items():
            if name in ("hr", "event") and not path.exists():
                continue  # made with the first entry: a match without heart rate has no hr.jsonl
            with open(path, "ab") as fh:
                fh.truncate(self.sizes[name])  # an unconfirmed tail goes; it is read again

    def write(self, entries: list[tuple[bytes, dict[bytes, bytes]]], kind: str = "frames") -> None:
        """Entries of the match's frames stream (frames and control events), of its heart-rate stream
        (``kind`` "hr") or of its CDF event stream ("ev")."""
        out: dict[str, list[bytes]] = ({"hr": []} if kind == "hr" else {"event": []} if kind == "ev"
                                       else {"tracking": [], "events": []})
        for _eid, f in entries:
            if kind == "ev":
                out["event"].append(f[b"e"] + b"\n")
            elif b"h" in f:
                out["hr"].append(f[b"h"] + b"\n")
            elif b"f" in f:
                out["tracking"].append(f[b"f"] + b"\n")
            elif b"e" in f:
                out["events"].append(f[b"e"] + b"\n")
        for name, lines in out.items():
            if not lines and not self.files[name].exists():
                continue
            with open(self.files[name], "ab") as fh:
                if lines:
                    fh.write(b"".join(lines))
                    fh.flush()
                    os.fsync(fh.fileno())
                self.sizes[name] = fh.tell()
        last = entries[-1][0].decode()
        if kind == "hr":
            self.hr_last_id = last
        elif kind == "ev":
            self.ev_last_id = last
        else:
            self.last_id = last
        write_json_atomic(self.pos_path, {"id": self.last_id, "hr_id": self.hr_last_id, "ev_id": self.ev_last_id,
                                          **self.sizes})


class StreamRecorder:
    def __init__(self, redis: Any, scale: ScaleSettings, data_dir: Path) -> None:
        self.redis = redis
        self.scale = scale
        self.root = data_dir / "matches"
        self.matches: dict[str, MatchFolder] = {}

    async def _open(self, mid: str) -> MatchFolder | None:
        if not is_match_id(mid):
            return None
        raw = await self.redis.get(keys.setup(mid))
        if raw is None:
            return None
        o = orjson.loads(raw)
        m = await asyncio.to_thread(MatchFolder, self.root / mid)
        await asyncio.to_thread(write_json_atomic, m.folder / "meta.json", o["meta"])
        await asyncio.to_thread(write_json_atomic, m.folder / "match.json", o["sheet"])
        self.matches[mid] = m
        return m

    async def run(self) -> None:
        last_scan = 0.0
        loop = asyncio.get_running_loop()
        while True:
            try:
                if loop.time() - last_scan > 1.0:
                    last_scan = loop.time()
                    for raw in await self.redis.smembers(keys.MATCHES):
                        mid = raw.decode()
                        if mid not in self.matches:
                            await self._open(mid)
                if not self.matches:
                    await asyncio.sleep(0.5)
                    continue
                streams = {}
                for mid, m in self.matches.items():
                    streams[keys.frames(mid)] = m.last_id
                    streams[keys.hr(mid)] = m.hr_last_id
                    streams[keys.events(mid)] = m.ev_last_id
                resp = await self.redis.xread(streams, count=self.scale.read_count, block=500)
                for key, entries in resp or []:
                    _, kind, mid = key.decode().split(":", 2)
                    if entries:
                        m = self.matches[mid]
                        await asyncio.to_thread(m.write, entries, kind)
                        # on disk and fsynced: the stream may be trimmed up to here (with the checkpoint)
                        await self.redis.hset(keys.recorded(mid), mapping={"frames": m.last_id, "hr": m.hr_last_id,
                                                                          "ev": m.ev_last_id})
            except asyncio.CancelledError:
                raise
            except RedisError as exc:
                log.warning("recorder: %s", exc)
                await asyncio.sleep(0.5)
            except OSError as exc:
                log.error("recorder: cannot write: %s", exc)
                await asyncio.sleep(1.0)
