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

import io
import zlib
from dataclasses import dataclass
from typing import Any

import numpy as np

from pacewire.engine.match import MatchState
from pacewire.engine.stateio import decode, encode

ENGINE = ("pacewire.engine.",)  # the only classes an engine checkpoint may hold


@dataclass(frozen=True)
class Checkpoint:
    blob: bytes  # the state's JSON tree (zlib, level 1)
    shared: dict[int, np.ndarray]  # the history arrays it refers to, by their index in the tree
    packed: bytes  # its other arrays, copied into one compressed npz (mostly empty smoothing buffers)


def checkpoint(state: MatchState) -> Checkpoint:
    """The state as it stands (it may go on stepping: what it writes later never reaches the
    checkpoint)."""
    history = {id(per.bins._cs) for per in state.periods}
    cache = state.__dict__.pop("_snapshot_cache", None)  # rebuilt on demand
    try:
        text, arrays = encode(state, ENGINE, keep=lambda a: a)
    finally:
        if cache is not None:
            state.__dict__["_snapshot_cache"] = cache
    shared = {i: a for i, a in enumerate(arrays) if id(a) in history}
    buf = io.BytesIO()
    own: dict[str, Any] = {f"a{i}": a for i, a in enumerate(arrays) if i not in shared}
    np.savez_compressed(buf, **own)
    return Checkpoint(zlib.compress(text, 1), shared, buf.getvalue())


def resume(point: Checkpoint) -> MatchState:
    """A state to go on with from a checkpoint, with its own copy of every array it holds."""
    with np.load(io.BytesIO(point.packed), allow_pickle=False) as z:
        own = {int(k[1:]): z[k] for k in z.files}
    state: MatchState = decode(zlib.decompress(point.blob), lambda i: own[i] if i in own else point.shared[i],
                               ENGINE)
    for per in state.periods:
        bins = per.bins
        bins._cs = bins._cs[: bins.complete + 1].copy()  # the rows it holds; never the shared ones
    return state
