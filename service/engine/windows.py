"""Per-second bins of the figure matrix; rolling, fixed and peak windows.

Peak demands are the maximum over rolling windows of the cumulative figure
(Fereday et al. 2020, J Sci Med Sport 23:764), updated as seconds complete.
"""
from __future__ import annotations

import numpy as np

from service.engine.exertion import DIST, N_FIG


class SecondBins:
    """One period's figures per second: bins[s, player, figure] (int64 micro-units)."""

    def __init__(self, fps: int, n_players: int, peak_s: list[int]) -> None:
        self.fps = fps
        self.n = n_players
        self._cs = np.zeros((64, n_players, N_FIG), np.int64)  # _cs[s] = sum of seconds < s
        self.partial = np.zeros((n_players, N_FIG), np.int64)  # the second in progress
        self.partial_sec = 0
        self.complete = 0  # seconds fully final
        self.end_slot = 0  # one past the last final slot
        self.peak_s = peak_s
        self.peak = {w: np.full((n_players, N_FIG), -1, np.int64) for w in peak_s}
        self.peak_start = {w: np.full(n_players, -1, np.int64) for w in peak_s}

    def add(self, slot0: int, fig: np.ndarray) -> np.ndarray:
        """Add final rows starting at ``slot0`` (contiguous slots); returns their
        per-second sums (seconds touched, P, F)."""
        n = fig.shape[0]
        fps = self.fps
        self.end_slot = slot0 + n
        s_first = slot0 // fps
        s_last = (slot0 + n - 1) // fps
        if s_first > self.partial_sec:
            self._close_to(s_first)
        if s_first == s_last:
            sums = fig.sum(axis=0)[None]
            self.partial += sums[0]
        else:
            starts = np.arange(s_first + 1, s_last + 1) * fps - slot0
            sums = np.add.reduceat(fig, np.concatenate(([0], starts)), axis=0)
            self.partial += sums[0]
            self._close_to(s_first + 1)
            # whole seconds strictly inside, then the last (possibly partial) one
            self._append(sums[1:-1])
            self.partial_sec = s_last
            self.partial = sums[-1].copy()
        if (slot0 + n) % fps == 0:
            self._close_to(s_last + 1)
        return sums

    def finish(self) -> None:
        """The period ended: the second in progress counts as complete."""
        if self.end_slot > self.complete * self.fps:  # final rows in a second not yet closed
            self._close_to(self.partial_sec + 1)

    def _close_to(self, sec: int) -> None:
        """Seconds below ``sec`` are complete; empty seconds in between count zero."""
        if sec <= self.complete:
            return
        rows = np.zeros((sec - self.complete, self.n, N_FIG), np.int64)
        if self.partial_sec >= self.complete:
            rows[self.partial_sec - self.complete] = self.partial
        self.partial = np.zeros((self.n, N_FIG), np.int64)
        self.partial_sec = sec
        self._append(rows)

    def _append(self, rows: np.ndarray) -> None:
        if rows.shape[0] == 0:
            return
        old = self.complete
        new = old + rows.shape[0]
        if new + 1 > self._cs.shape[0]:
            grown = np.zeros((max(2 * self._cs.shape[0], new + 1), self.n, N_FIG), np.int64)
            grown[: old + 1] = self._cs[: old + 1]
            self._cs = grown
        np.cumsum(rows, axis=0, out=self._cs[old + 1: new + 1])
        self._cs[old + 1: new + 1] += self._cs[old]
        self.complete = new
        self._update_peaks(old)

    @property
    def cs(self) -> np.ndarray:
        return self._cs[: self.complete + 1]

    def _update_peaks(self, old_complete: int) -> None:
        cs = self.cs
        end = self.complete
        for w in self.peak_s:
            lo = max(old_complete, w)  # window ending at second index i covers [i - w, i)
            if lo > end:
                continue
            sums = cs[lo: end + 1] - cs[lo - w: end + 1 - w]  # (k, P, F)
            best = sums.max(axis=0)
            arg = sums[..., DIST].argmax(axis=0)
            better = sums[arg, np.arange(self.n), DIST] > self.peak[w][:, DIST]
            self.peak_start[w] = np.where(better, lo + arg - w, self.peak_start[w])
            np.maximum(self.peak[w], best, out=self.peak[w])

    def covered_s(self, start: int, stop: int) -> float:
        """Seconds of final data in complete seconds [start, stop): the last
        second of an ended period may be partial."""
        start = min(max(start, 0), self.complete)
        stop = min(max(stop, start), self.complete)
        return max(min(stop * self.fps, self.end_slot) - start * self.fps, 0) / self.fps

    def span(self, start: int, stop: int) -> np.ndarray:
        """Sum over complete seconds [start, stop) → (P, F)."""
        start = min(max(start, 0), self.complete)
        stop = min(max(stop, start), self.complete)
        return self.cs[stop] - self.cs[start]

