"""Per-second bins and peak windows against a slow reference: whatever the block sizes,
gaps and the order players first appear in, the bins hold the plain per-second sums
and the peaks are the maxima over every full rolling window (Fereday et al. 2020's
definition of peak demands), the distance peak's start its first occurrence."""
from __future__ import annotations

import numpy as np
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.engine.exertion import DIST, N_FIG
from pacewire.engine.windows import SecondBins

FPS = 5
ROSTER = 5
WINDOWS = [3, 7, 7]  # seconds; a repeated length is one window


def reference(rows: dict[int, np.ndarray], complete: int, windows: list[int]) -> tuple:
    """cs (complete + 1, P, F), and per window (peak (P, F), start (P,)) by brute force."""
    per_sec = np.zeros((complete, ROSTER, N_FIG), np.int64)
    for slot, r in rows.items():
        if slot // FPS < complete:
            per_sec[slot // FPS] += r
    cs = np.concatenate([np.zeros((1, ROSTER, N_FIG), np.int64), np.cumsum(per_sec, axis=0)])
    peaks = {}
    for w in set(windows):
        if complete < w:
            peaks[w] = (np.full((ROSTER, N_FIG), -1), np.full(ROSTER, -1))
            continue
        sums = np.stack([cs[i] - cs[i - w] for i in range(w, complete + 1)])  # window ending at second i
        peaks[w] = (sums.max(axis=0), np.argmax(sums[..., DIST], axis=0))  # first maximum: start = i - w
    return cs, peaks


steps = st.lists(st.tuples(st.integers(0, 12),  # slots skipped before the rows (a gap)
                           st.integers(1, 40),  # rows (above 4 s: the long-block path)
                           st.lists(st.integers(0, ROSTER - 1), max_size=2),  # players appearing
                           st.integers(0, 2**16)),
                 min_size=1, max_size=12)


@hsettings(max_examples=200, deadline=None)
@given(steps=steps, finish=st.booleans())
def test_bins_equal_a_brute_force_reference(steps, finish):
    bins = SecondBins(FPS, ROSTER, WINDOWS)
    cols: list[int] = []
    rows: dict[int, np.ndarray] = {}
    slot = 0
    for gap, n, new, seed in steps:
        for p in new:
            if p not in cols:
                cols.append(p)
                bins.grow(np.array([p]))
        slot += gap
        rng = np.random.default_rng(seed)
        fig = rng.integers(0, 10**6, (N_FIG, n, len(cols))).astype(float)  # whole micro-units
        fig[:, :, rng.random(len(cols)) < 0.4] = 0.0  # players with nothing credited (yet): all-zero windows
        total = bins.add(slot, fig)
        assert np.array_equal(total, fig.sum(axis=1))
        for k in range(n):
            full = np.zeros((ROSTER, N_FIG), np.int64)
            full[cols] = fig[:, k].T
            rows[slot + k] = full
        slot += n
    if finish:
        bins.finish()
    complete = -(-slot // FPS) if finish else slot // FPS
    assert bins.complete == complete
    cs, peaks = reference(rows, complete, WINDOWS)
    for a in range(0, complete + 1, 2):
        for b in range(a, complete + 1, 3):
            assert np.array_equal(bins.span(a, b), cs[b] - cs[a])
    for w, (peak, arg) in peaks.items():
        assert np.array_equal(bins.peak[w], peak)
        assert np.array_equal(bins.peak_start[w], arg if complete >= w else np.full(ROSTER, -1))
