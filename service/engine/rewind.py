"""Checkpoints of a MatchState that share its per-second history, to go back to a state it had.

A match's per-second cumulative sums (:class:`pacewire.engine.windows.SecondBins`)
are append-only: a row, once its second is complete, never changes, and a state
reads no row past its own last complete second; when the arrays grow they are
replaced, never resized in place. So a checkpoint keeps a reference to the
arrays the state has at that moment instead of a copy (about 3 KB per match
second stays shared) and the rest of the state as a compressed pickle (the
smoothing buffers are mostly empty space): a 95-minute match checkpointed every
minute keeps a few MB.
"""
from __future__ import annotations

import io
import pickle
import zlib
from dataclasses import dataclass
from typing import Any

import numpy as np

from pacewire.engine.match import MatchState

_CACHE = "snapshot_cache"  # what a snapshot cached on the state becomes: dropped, rebuilt on demand


@dataclass(frozen=True)
class Checkpoint:
    blob: bytes  # the state but its history arrays and snapshot cache: zlib (level 1) of a pickle
    shared: tuple[np.ndarray, ...]  # the history arrays it refers to


def checkpoint(state: MatchState) -> Checkpoint:
    """The state as it stands (it may go on stepping: what it writes later never reaches the
    checkpoint)."""
    shared = tuple(per.bins._cs for per in state.periods)
    index = {id(a): i for i, a in enumerate(shared)}
    cache = getattr(state, "_snapshot_cache", None)
    buf = io.BytesIO()

    class _Pickler(pickle.Pickler):
        def persistent_id(self, obj: Any) -> Any:
            if obj is cache and cache is not None:
                return _CACHE
            return index.get(id(obj)) if type(obj) is np.ndarray else None

    _Pickler(buf, protocol=pickle.HIGHEST_PROTOCOL).dump(state)
    return Checkpoint(zlib.compress(buf.getvalue(), 1), shared)


def resume(point: Checkpoint) -> MatchState:
    """A state to go on with from a checkpoint, with its own copy of the history rows it holds."""
    shared = point.shared

    class _Unpickler(pickle.Unpickler):
        def persistent_load(self, pid: Any) -> Any:
            return {} if pid == _CACHE else shared[pid]

    state: MatchState = _Unpickler(io.BytesIO(zlib.decompress(point.blob))).load()
    for per in state.periods:
        bins = per.bins
        bins._cs = bins._cs[: bins.complete + 1].copy()  # never write into the shared rows
    state.__dict__.pop("_snapshot_cache", None)
    return state
