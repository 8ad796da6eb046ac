"""A match rebuilt from its folder after a restart: recording, heart rate, CDF events, match events,
drop counts.

Recovery = the recording replayed through the same engine (so the figures are
those of the live run) + the events in their order + the drop counters saved
beside the recording (recorded frames carry none).
"""
from __future__ import annotations

import logging

import numpy as np
import orjson

from pacewire.events import EventError
from pacewire.live.runner import MatchRunner
from pacewire.wire.heart import HrDecoder
from pacewire.wire.recording import EVENT_FILE

log = logging.getLogger("pacewire.recovery")
BATCH = 2000  # recorded lines decoded and applied at a time


def recover(runner: MatchRunner) -> int:
    """Rebuild ``runner`` from its folder (before it starts). Returns the frames applied."""
    n = _frames(runner)
    _heart_rate(runner)
    _cdf_events(runner)
    _events(runner)
    _counters(runner)
    runner.rebuilt()
    return n


def _frames(runner: MatchRunner) -> int:
    path = runner.folder / "tracking.jsonl"
    n = 0
    if path.exists():
        with open(path, "rb") as fh:
            batch: list[bytes] = []
            for line in fh:
                batch.append(line)
                if len(batch) >= BATCH:
                    n += runner.apply_lines(batch)
                    batch = []
            if batch:
                n += runner.apply_lines(batch)
    return n


def _heart_rate(runner: MatchRunner) -> None:
    path = runner.folder / "hr.jsonl"
    if not path.exists():
        return
    state = runner.state
    with open(path, "rb") as fh:
        res = HrDecoder(runner.roster, state.params.heart, recorded=True).decode_lines(fh)
    # the live gate continues from the recorded samples (the last one per player)
    gate = runner.intake.hr_decoder.gate
    for i in set(res.player.tolist()):
        k = int(np.flatnonzero(res.player == i)[-1])
        gate.last_t[i], gate.last_bpm[i] = res.t[k], res.bpm[k]
    res.rejected = res.duplicates = res.late = 0  # live drops come from counters.json
    state.ingest_heart(res)


def _cdf_events(runner: MatchRunner) -> None:
    """The recorded CDF events through the live decoder, which goes on from them (ids, corrections)."""
    path = runner.folder / EVENT_FILE
    if not path.exists():
        return
    with open(path, "rb") as fh:
        res = runner.intake.event_decoder.decode_lines(fh)
    if res.rejected:
        log.warning("%s: skipped %d unreadable CDF event lines", runner.match_id, res.rejected)
    res.rejected = res.duplicates = 0  # live refusals come from counters.json
    runner.state.ingest_events(res)


def _events(runner: MatchRunner) -> None:
    path = runner.folder / "events.jsonl"
    if not path.exists():
        return
    for line in path.read_bytes().splitlines():
        try:
            runner.apply_event(orjson.loads(line), announce=False)
        except (orjson.JSONDecodeError, EventError, KeyError):
            log.warning("%s: skipped an unreadable event line", runner.match_id)


def _counters(runner: MatchRunner) -> None:
    path = runner.folder / "counters.json"
    if not path.exists():
        return
    try:
        c = orjson.loads(path.read_bytes())
        st, h = runner.state, runner.state.health
        h.rejected += int(c.get("rejected", 0))
        h.duplicates += int(c.get("duplicates", 0))
        h.late += int(c.get("late", 0))
        h.resent += int(c.get("resent", 0))
        h.after_end += int(c.get("after_end", 0))
        st.hr_rejected += int(c.get("hr_rejected", 0))
        st.hr_duplicates += int(c.get("hr_duplicates", 0))
        st.hr_late += int(c.get("hr_late", 0))
        st.event_feed.rejected += int(c.get("event_rejected", 0))
        st.event_feed.duplicates += int(c.get("event_duplicates", 0))
    except (orjson.JSONDecodeError, ValueError, TypeError):
        pass
