"""A live match's checkpoint beside its recording: recovery from it plus the recording's tail.

Every ``[archive] checkpoint_s`` of match time, at a moment when every line
in the match's recorded files has been applied (nothing queued, no recorder
mid-write), the runner's engine state, frame and heart-rate gates, CDF event
ids, score, match events, status and parked period ends go to
``checkpoint.npz`` (the format of :mod:`pacewire.engine.stateio`: npz +
JSON, no pickle), written to a temporary file, fsynced and renamed. It
stores the byte size of each recorded file it covers (``covers``); recovery
restores it and applies only what each file holds beyond that. A checkpoint
that cannot be read, is of another format, or covers more than a file holds
is logged and the whole recording is replayed instead.
"""
from __future__ import annotations

import logging
import os
from pathlib import Path
from typing import Any

import numpy as np

from pacewire.engine.stateio import StateFormatError, encode, from_npz, npz_bytes
from pacewire.live.archive import recorded_sizes

MatchRunner = Any  # pacewire.live.runner.MatchRunner, which imports this module

log = logging.getLogger("pacewire.checkpoints")

FILE = "checkpoint.npz"
CLASSES = ("pacewire.engine.", "pacewire.wire.", "pacewire.live.status:")  # what a checkpoint may build


def capture(runner: MatchRunner) -> tuple[bytes, list[np.ndarray]] | None:
    """The runner's state as JSON and copied arrays (on the event loop, so nothing moves meanwhile);
    None while some recorded line is not applied yet (the checkpoint waits for a quieter moment)."""
    recorders = (runner.recorder, runner.hr_recorder, runner.event_recorder)
    if not runner.queue_empty() or not all(r.idle() for r in recorders):
        return None
    ev = runner.intake.event_decoder
    state = runner.state
    cache = state.__dict__.pop("_snapshot_cache", None)  # rebuilt on demand
    try:
        body = {"covers": recorded_sizes(runner.folder), "state": state, "gate": runner.decoder.gate,
                "hr_gate": runner.intake.hr_decoder.gate, "ev_ids": (ev.content, ev.keys),
                "score": runner.score, "events": runner.events, "told": runner.periods.told,
                "status": runner.status, "parked": runner.parked}
        # the per-second history is append-only (rows up to ``complete`` never change): shared, not
        # copied; the rows past it are cut on loading
        history = {id(per.bins._cs) for per in state.periods}
        return encode(body, CLASSES, keep=lambda a: a if id(a) in history else a.copy())
    finally:
        if cache is not None:
            state.__dict__["_snapshot_cache"] = cache


def write(folder: Path, text: bytes, arrays: list[np.ndarray]) -> None:
    """``checkpoint.npz`` atomically (temporary file, fsync, rename): blocking, for a worker thread."""
    tmp = folder / (FILE + ".tmp")
    with open(tmp, "wb") as fh:
        fh.write(npz_bytes(text, arrays))
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, folder / FILE)


def load(folder: Path) -> dict[str, Any] | None:
    """The checkpoint if there is a usable one (it covers no more than each file holds)."""
    path = folder / FILE
    if not path.exists():
        return None
    try:
        body: dict[str, Any] = from_npz(path.read_bytes(), CLASSES)
        sizes = recorded_sizes(folder)
        if any(sizes.get(name, 0) < n for name, n in body["covers"].items()):
            log.warning("%s: the checkpoint covers more than the recording holds: replaying the whole recording",
                        folder.name)
            return None
        return body
    except (OSError, StateFormatError, KeyError, TypeError, AttributeError) as exc:
        log.warning("%s: checkpoint not used (%s): replaying the whole recording", folder.name, exc)
        return None


def restore(runner: MatchRunner, cp: dict[str, Any]) -> None:
    """Put a loaded checkpoint into a runner that has not started."""
    runner.state, runner.decoder.gate = cp["state"], cp["gate"]
    for per in runner.state.periods:
        bins = per.bins
        bins._cs = bins._cs[: bins.complete + 1].copy()  # the rows the checkpoint holds
    runner.intake.hr_decoder.gate = cp["hr_gate"]
    ev = runner.intake.event_decoder
    ev.content, ev.keys = cp["ev_ids"]
    runner.score, runner.events, runner.parked = cp["score"], cp["events"], cp["parked"]
    runner.periods.told = set(cp["told"])
    runner.status = cp["status"]
