"""Row-wise helpers over arrays shaped (rows, players[, 2]): the last or next True of a mask per
column, shifts by one row, per-column gathers and vector lengths. Used by the kinematics and the
artefact rules; each is a handful of numpy calls, with no Python loop over rows or players."""
from __future__ import annotations

import numpy as np

BIG = np.iinfo(np.int64).max // 4  # "no such row": above any row index, safe to add a row count to


def prev_true(mask: np.ndarray) -> np.ndarray:
    """Index of the last True at or before each row (per column), -1 if none."""
    idx = np.where(mask, np.arange(mask.shape[0])[:, None], -1)
    return np.maximum.accumulate(idx, axis=0)


def next_true(mask: np.ndarray) -> np.ndarray:
    """Index of the first True at or after each row (per column), BIG if none."""
    idx = np.where(mask, np.arange(mask.shape[0])[:, None], BIG)
    return np.minimum.accumulate(idx[::-1], axis=0)[::-1]


def shift_down(a: np.ndarray, fill: int) -> np.ndarray:
    out = np.empty_like(a)
    out[0] = fill
    out[1:] = a[:-1]
    return out


def shift_up(a: np.ndarray, fill: int) -> np.ndarray:
    out = np.empty_like(a)
    out[-1] = fill
    out[:-1] = a[1:]
    return out


def gather(a: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """a[idx[i, p], p] for a (N, P) or (N, P, 2) array; idx must be in range."""
    return take(a, flat(idx))


def flat(idx: np.ndarray) -> np.ndarray:
    """Row indices (N, P) as flat indices into an (N, P, ...) array."""
    return idx * idx.shape[1] + np.arange(idx.shape[1])


def take(a: np.ndarray, flat: np.ndarray) -> np.ndarray:
    """gather with flat indices (a gather used more than once); np.take is the fastest gather."""
    if a.ndim == 3:
        return np.take(a.reshape(-1, a.shape[2]), flat, axis=0)
    return np.take(a.reshape(-1), flat)


def norm(d: np.ndarray) -> np.ndarray:
    """Length of (..., 2) vectors: the sum of squares of np.linalg.norm, without a reduction over an axis of two."""
    s = d[..., 0] * d[..., 0]
    s += d[..., 1] * d[..., 1]
    return np.sqrt(s, out=s)
