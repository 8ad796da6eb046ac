"""Checkpoints of a MatchState that share its per-second history, to go back to a state it had.

A match's per-second cumulative sums (:class:`pacewire.engine.windows.SecondBins`)
are append-only: a row, once its second is complete, never changes, and a state
reads no row past its own last complete second; when the arrays grow they are
replaced, never resized in place. So a checkpoint keeps a reference to the
arrays the state has at that moment instead of a copy (about 3 KB per match
second stays shared), copies of its other arrays, and the rest of the state as
compressed JSON in the checkpoint format (:mod:`pacewire.engine.stateio`, no
pickle): a 95-minute match checkpointed every minute keeps a few MB.
"""
from __future__ import annotations

import zlib
from dataclasses import dataclass

import numpy as np

from pacewire.engine.match import MatchState
from pacewire.engine.stateio import decode, encode

ENGINE = ("pacewire.engine.",)  # the only classes an engine checkpoint may hold


@dataclass(frozen=True)
class Checkpoint:
    blob: bytes  # the state's JSON tree (zlib, level 1)
    arrays: tuple[np.ndarray, ...]  # its arrays: the history arrays shared, the others copied


def checkpoint(state: MatchState) -> Checkpoint:
    """The state as it stands (it may go on stepping: what it writes later never reaches the
    checkpoint)."""
    shared = {id(per.bins._cs) for per in state.periods}
    cache = state.__dict__.pop("_snapshot_cache", None)  # rebuilt on demand
    try:
        text, arrays = encode(state, ENGINE, keep=lambda a: a if id(a) in shared else a.copy())
    finally:
        if cache is not None:
            state.__dict__["_snapshot_cache"] = cache
    return Checkpoint(zlib.compress(text, 1), tuple(arrays))


def resume(point: Checkpoint) -> MatchState:
    """A state to go on with from a checkpoint, with its own copy of every array it holds."""
    state: MatchState = decode(zlib.decompress(point.blob), lambda i: point.arrays[i].copy(), ENGINE)
    for per in state.periods:
        bins = per.bins
        bins._cs = bins._cs[: bins.complete + 1].copy()  # the rows it holds; never the shared ones
    return state
