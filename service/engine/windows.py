"""Per-second bins of the figure matrix; rolling, fixed and peak windows.

Peak demands are the maximum over rolling windows of the cumulative figure
(Fereday et al. 2020, J Sci Med Sport 23:764), updated as seconds complete.

The bins hold only the players seen in the period (``cols``: roster indices in
order of appearance; a player never seen has all-zero figures); what they
return is roster-wide, one row per player.
"""
from __future__ import annotations

from bisect import bisect_right
from itertools import pairwise

import numpy as np

from pacewire.engine.exertion import DIST, N_FIG

_SEGMENTS: dict[tuple[int, int, int, int], np.ndarray] = {}  # summing matrices, by (rows, skip, first cut, fps)
_PEAK_CHUNK = 256  # seconds per batched peak update: bounds its temporary arrays


def _segments(n: int, skip: int, cut: int, fps: int) -> np.ndarray:
    """(q + 1, n) 0/1 matrix: row 0 sums rows [skip, cut), the next rows each further
    ``fps`` rows (the last one possibly short), the final row all n rows. Sums of
    integer-valued floats below 2**53 are exact in any order, so one matrix product
    gives exact per-second sums."""
    key = (n, skip, cut, fps)
    m = _SEGMENTS.get(key)
    if m is None:
        edges = [skip, *range(min(cut, n), n, fps), n]
        m = np.zeros((len(edges), n))
        for j, (a, b) in enumerate(pairwise(edges)):
            m[j, a:b] = 1.0
        m[-1] = 1.0
        if len(_SEGMENTS) >= 512:  # block sizes and phases vary live: keep the cache bounded
            _SEGMENTS.clear()
        _SEGMENTS[key] = m
    return m


def _segment_sums(fig: np.ndarray, skip: int, cut: int, fps: int) -> np.ndarray:
    """What ``np.matmul(_segments(n, skip, cut, fps), fig)`` gives for fig (F, n, P), for long blocks."""
    f, n, p = fig.shape
    cut = min(cut, n)
    whole = (n - cut) // fps
    parts = [fig[:, skip:cut].sum(axis=1, keepdims=True)]
    if whole:
        parts.append(fig[:, cut: cut + whole * fps].reshape(f, whole, fps, p).sum(axis=2))
    if cut + whole * fps < n:
        parts.append(fig[:, cut + whole * fps:].sum(axis=1, keepdims=True))
    parts.append(fig.sum(axis=1, keepdims=True))
    return np.concatenate(parts, axis=1)


def _widen(a: np.ndarray, k: int, fill: int) -> np.ndarray:
    """``a`` with ``k`` more columns on its last axis, set to ``fill``."""
    return np.concatenate([a, np.full((*a.shape[:-1], k), fill, a.dtype)], axis=-1)


class SecondBins:
    """One period's figures per second (int64 micro-units or counts), as cumulative sums:
    ``_cs[s, figure, column]`` = sum over the seconds before s."""

    def __init__(self, fps: int, n_players: int, peak_s: list[int]) -> None:
        self.fps = fps
        self.n = n_players  # roster size: the width of what the bins return
        self.cols = np.zeros(0, np.int64)  # roster index of each column
        self._cs = np.zeros((64, N_FIG, 0), np.int64)
        self._run = np.zeros((N_FIG, 0), np.int64)  # cs of the second in progress plus its rows so far
        self.complete = 0  # seconds fully final
        self.end_slot = 0  # one past the last final slot
        self.peak_s = peak_s
        self._win = np.array(sorted(set(peak_s)), np.int64)
        self._win_list = self._win.tolist()
        self._win_col = self._win[:, None]
        self._peak = np.full((len(self._win), N_FIG, 0), -1, np.int64)
        self._peak_start = np.full((len(self._win), 0), -1, np.int64)

    def grow(self, new_cols: np.ndarray) -> None:
        """Add columns for players seen for the first time (all zero so far)."""
        k = len(new_cols)
        self.cols = np.concatenate([self.cols, new_cols])
        self._cs = _widen(self._cs, k, 0)
        self._run = _widen(self._run, k, 0)
        # windows evaluated already saw these players' zeros: peak 0 from second 0
        reached = np.where(self.complete >= self._win, 0, -1)
        grown = np.broadcast_to(reached[:, None, None], (len(self._win), N_FIG, k))
        self._peak = np.concatenate([self._peak, grown], 2)
        self._peak_start = np.concatenate([self._peak_start, np.broadcast_to(reached[:, None], (len(self._win), k))], 1)

    def add(self, slot0: int, fig: np.ndarray) -> np.ndarray:
        """Add final rows ``fig`` (N_FIG, n, columns), integer-valued float64, at contiguous
        slots from ``slot0``; returns their total (N_FIG, columns) as int64."""
        n = fig.shape[1]
        fps = self.fps
        end = slot0 + n
        self.end_slot = end
        lo = self.complete * fps
        skip = 0
        if slot0 < lo:
            # rows in a second finish() already closed (frames after a period end): they count in the
            # next second, except those of such rows that reach past it, which were always dropped
            skip = lo - slot0 if end > lo else 0
        elif slot0 >= lo + fps:
            self._close_to(slot0 // fps)  # a gap: the seconds before hold nothing more
            lo = self.complete * fps
        k = max(end // fps - self.complete, 0)  # seconds this call completes
        if n <= 4 * fps:
            seg = np.matmul(_segments(n, skip, lo + fps - slot0, fps), fig)
        else:  # a long block: whole seconds by a reshaped sum (the product grows with n squared)
            seg = _segment_sums(fig, skip, lo + fps - slot0, fps)
        seg = seg.transpose(1, 0, 2).astype(np.int64, order="C")  # (segments, F, P), each contiguous
        if k:
            c = self.complete
            if c + k + 1 > self._cs.shape[0]:
                self._reserve(c + k + 1)
            rows = self._cs[c + 1: c + 1 + k]
            if k == 1:
                np.add(self._run, seg[0], out=rows[0])
            else:
                np.cumsum(seg[:k], axis=0, out=rows)
                rows += self._run
            self._run = rows[-1] + seg[k] if seg.shape[0] > k + 1 else rows[-1].copy()
            self.complete = c + k
            self._update_peaks(c)
        else:
            self._run += seg[0]
        return seg[-1]

    def finish(self) -> None:
        """The period ended: the second in progress counts as complete."""
        if self.end_slot > self.complete * self.fps:  # final rows in a second not yet closed
            self._close_to(self.complete + 1)

    def _reserve(self, rows: int) -> None:
        if rows > self._cs.shape[0]:
            grown = np.zeros((max(2 * self._cs.shape[0], rows), *self._cs.shape[1:]), np.int64)
            grown[: self.complete + 1] = self._cs[: self.complete + 1]
            self._cs = grown

    def _close_to(self, sec: int) -> None:
        """Seconds below ``sec`` are complete; the rows so far count in the first of them."""
        if sec <= self.complete:
            return
        c = self.complete
        self._reserve(sec + 1)
        self._cs[c + 1: sec + 1] = self._run
        self.complete = sec
        self._update_peaks(c)

    def _update_peaks(self, old: int) -> None:
        """Rolling windows ending at the seconds completed since ``old``: a window ending at
        second index i covers seconds [i - w, i). Each figure keeps its own maximum; the start
        follows the distance peak (the first second it was reached)."""
        win = self._win
        end = self.complete
        if end < win[0]:
            return
        cs = self._cs
        if end == old + 1:  # one second completed (the live case): every window at once
            nv = bisect_right(self._win_list, end)
            peak, start = self._peak[:nv], self._peak_start[:nv]
            sums = cs[end] - cs.take(end - win[:nv], axis=0)
            np.copyto(start, end - self._win_col[:nv], where=sums[:, DIST] > peak[:, DIST])
            np.maximum(peak, sums, out=peak)
            return
        for a in range(max(old + 1, int(win[0])), end + 1, _PEAK_CHUNK):
            i = np.arange(a, min(a + _PEAK_CHUNK, end + 1))
            nv = int(np.searchsorted(win, i[-1], side="right"))
            peak, start = self._peak[:nv], self._peak_start[:nv]
            back = i[:, None] - win[None, :nv]  # (k, windows)
            sums = cs[i][:, None] - cs[np.maximum(back, 0)]  # (k, windows, F, P)
            sums[back < 0] = -1  # windows not yet full: never a peak
            best = sums.max(axis=0)
            arg = sums[:, :, DIST].argmax(axis=0)
            better = best[:, DIST] > peak[:, DIST]
            start[...] = np.where(better, i[arg] - win[:nv, None], start)
            np.maximum(peak, best, out=peak)

    # -- reading: roster-wide ------------------------------------------------------------
    def _roster(self, a: np.ndarray, fill: int = 0) -> np.ndarray:
        """(N_FIG, columns) → (players, N_FIG); players never seen get ``fill``."""
        out = np.full((self.n, a.shape[0]), fill, np.int64)
        out[self.cols] = a.T
        return out

    @property
    def peak(self) -> dict[int, np.ndarray]:
        """Best rolling-window sums so far, per window length (s): (players, N_FIG); -1 before
        the period holds a full window."""
        out = {}
        for j, w in enumerate(self._win.tolist()):
            out[w] = self._roster(self._peak[j], 0 if self.complete >= w else -1)
        return out

    @property
    def peak_start(self) -> dict[int, np.ndarray]:
        """Second (within the period) where each player's distance peak starts, -1 before a full window."""
        out = {}
        for j, w in enumerate(self._win.tolist()):
            s = np.full(self.n, 0 if self.complete >= w else -1, np.int64)
            s[self.cols] = self._peak_start[j]
            out[w] = s
        return out

    def cum(self, idx: np.ndarray) -> np.ndarray:
        """Column sums over the seconds before each boundary ``idx`` (clipped to the complete
        seconds): (len(idx), N_FIG, columns), int64."""
        return self._cs[np.minimum(idx, self.complete)]

    def in_progress(self) -> np.ndarray:
        """Column sums of the second in progress so far (N_FIG, columns): final rows not yet in a
        complete second."""
        return self._run - self._cs[self.complete]

    def covered_s(self, start: int, stop: int) -> float:
        """Seconds of final data in complete seconds [start, stop): the last
        second of an ended period may be partial."""
        start = min(max(start, 0), self.complete)
        stop = min(max(stop, start), self.complete)
        return max(min(stop * self.fps, self.end_slot) - start * self.fps, 0) / self.fps

    def span(self, start: int, stop: int) -> np.ndarray:
        """Sum over complete seconds [start, stop) → (players, N_FIG)."""
        start = min(max(start, 0), self.complete)
        stop = min(max(stop, start), self.complete)
        return self._roster(self._cs[stop] - self._cs[start])
