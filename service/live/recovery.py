"""A match rebuilt from its folder after a restart: recording, heart rate, CDF events, match events,
drop counts.

Recovery = the latest checkpoint (:mod:`pacewire.live.checkpoints`), if a
usable one is there, then the recording after what it covers replayed through
the same engine (so the figures are those of the live run) + the events in
their order + the drop counters saved beside the recording (recorded frames
carry none). Without a checkpoint the whole recording is replayed.
"""
from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import orjson

from pacewire.events import EventError
from pacewire.live import checkpoints
from pacewire.live.runner import MatchRunner
from pacewire.wire.heart import HrDecoder
from pacewire.wire.recording import EVENT_FILE

log = logging.getLogger("pacewire.recovery")
BATCH = 2000  # recorded lines decoded and applied at a time


def recover(runner: MatchRunner) -> int:
    """Rebuild ``runner`` from its folder (before it starts). Returns the frames applied (after the
    checkpoint, when one was used)."""
    cp = checkpoints.load(runner.folder)
    covers: dict[str, int] = {}
    if cp is not None:
        checkpoints.restore(runner, cp)
        covers = cp["covers"]
        log.info("%s: from its checkpoint (%d frames), then the recording after it", runner.match_id,
                 runner.state.frames)
    n = _frames(runner, covers.get("tracking.jsonl", 0))
    _heart_rate(runner, covers.get("hr.jsonl", 0))
    _cdf_events(runner, covers.get(EVENT_FILE, 0))
    _events(runner, covers.get("events.jsonl", 0))
    _counters(runner, from_checkpoint=cp is not None)
    runner.rebuilt()
    return n


def _tail(path: Path, offset: int) -> list[bytes]:
    with open(path, "rb") as fh:
        fh.seek(offset)
        return fh.read().splitlines()


def _frames(runner: MatchRunner, offset: int) -> int:
    path = runner.folder / "tracking.jsonl"
    n = 0
    if path.exists():
        with open(path, "rb") as fh:
            fh.seek(offset)
            batch: list[bytes] = []
            for line in fh:
                batch.append(line)
                if len(batch) >= BATCH:
                    n += runner.apply_lines(batch)
                    batch = []
            if batch:
                n += runner.apply_lines(batch)
    return n


def _heart_rate(runner: MatchRunner, offset: int) -> None:
    path = runner.folder / "hr.jsonl"
    if not path.exists():
        return
    state = runner.state
    res = HrDecoder(runner.roster, state.params.heart, recorded=True).decode_lines(_tail(path, offset))
    # the live gate continues from the recorded samples (the last one per player)
    gate = runner.intake.hr_decoder.gate
    for i in set(res.player.tolist()):
        k = int(np.flatnonzero(res.player == i)[-1])
        gate.last_t[i], gate.last_bpm[i] = res.t[k], res.bpm[k]
    res.rejected = res.duplicates = res.late = 0  # live drops come from counters.json
    state.ingest_heart(res)


def _cdf_events(runner: MatchRunner, offset: int) -> None:
    """The recorded CDF events through the live decoder, which goes on from them (ids, corrections)."""
    path = runner.folder / EVENT_FILE
    if not path.exists():
        return
    res = runner.intake.event_decoder.decode_lines(_tail(path, offset))
    if res.rejected:
        log.warning("%s: skipped %d unreadable CDF event lines", runner.match_id, res.rejected)
    res.rejected = res.duplicates = 0  # live refusals come from counters.json
    runner.state.ingest_events(res)


def _events(runner: MatchRunner, offset: int) -> None:
    path = runner.folder / "events.jsonl"
    if not path.exists():
        return
    for line in _tail(path, offset):
        try:
            runner.apply_event(orjson.loads(line), announce=False)
        except (orjson.JSONDecodeError, EventError, KeyError):
            log.warning("%s: skipped an unreadable event line", runner.match_id)


_COUNTERS = (("health", "rejected", "rejected"), ("health", "duplicates", "duplicates"), ("health", "late", "late"),
             ("health", "resent", "resent"), ("health", "after_end", "after_end"),
             ("", "hr_rejected", "hr_rejected"), ("", "hr_duplicates", "hr_duplicates"), ("", "hr_late", "hr_late"),
             ("event_feed", "rejected", "event_rejected"), ("event_feed", "duplicates", "event_duplicates"))


def _counters(runner: MatchRunner, from_checkpoint: bool) -> None:
    """The drop counts saved at the last stop: added to a state rebuilt from the recording; with a
    checkpoint (which holds the counts at its time) the larger of the two is the later total."""
    path = runner.folder / "counters.json"
    if not path.exists():
        return
    try:
        c = orjson.loads(path.read_bytes())
        for part, attr, key in _COUNTERS:
            obj = getattr(runner.state, part) if part else runner.state
            saved, now = int(c.get(key, 0)), getattr(obj, attr)
            setattr(obj, attr, max(now, saved) if from_checkpoint else now + saved)
    except (orjson.JSONDecodeError, ValueError, TypeError, AttributeError):
        pass
