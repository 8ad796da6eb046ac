"""Top speed: the highest speed a player held, not a one-sample peak.

``max_speed_ms`` is the highest speed sustained over ``hold`` consecutive final
samples (``speed.top_speed_hold_s`` in the config; common practice: a dwell
time on peak speed), so a brief spike of the fit, at the edge of a gap or from
an artefact the rules let through, cannot set it. A window holding an
uncredited sample (speed 0) holds 0. It never exceeds the physical bound:
samples above it are not credited (:mod:`pacewire.engine.kinematics`).

Samples are queued and the windows scanned in batches (and whenever the value
is read), with the last ``hold - 1`` samples carried between batches, so the
value depends only on the samples, never on how they came in blocks.
"""
from __future__ import annotations

import numpy as np

_BATCH = 256  # rows queued before a scan: a block costs a copy, a scan comes every few seconds of play


def rolling_min(a: np.ndarray, w: int) -> np.ndarray:
    """Minimum over each run of ``w`` consecutive rows: (rows - w + 1, ...), by doubling spans
    (about log2 w passes rather than w)."""
    m, span = a, 1
    while 2 * span <= w:
        m = np.minimum(m[:-span], m[span:])  # row i now covers rows i .. i + 2 span - 1
        span *= 2
    if span < w:
        m = np.minimum(m[:len(m) - (w - span)], m[w - span:])
    return m


class TopSpeed:
    """Per column (player), the highest speed held over ``hold`` consecutive samples, m/s."""

    def __init__(self, hold: int, n: int) -> None:
        self.hold = max(int(hold), 1)
        self._best = np.zeros(n)
        self._rows = np.zeros((self.hold - 1 + _BATCH, n))  # carried tail, then queued samples
        self._k = 0  # queued samples
        self._end = -1  # slot after the last sample added

    def add(self, slot0: int, speed: np.ndarray) -> None:
        """Final samples (rows, columns) at slots from ``slot0``, credited ones with their speed, others 0."""
        m = speed.shape[0]
        if slot0 != self._end:
            self._scan()
            self._rows[: self.hold - 1] = 0.0  # a new stretch: nothing held before it
        elif self._k + m > _BATCH:
            self._scan()
        self._end = slot0 + m
        if m > _BATCH:  # a big block is scanned at once
            self._scan(speed)
            return
        start = self.hold - 1 + self._k
        self._rows[start:start + m] = speed
        self._k += m

    def _scan(self, extra: np.ndarray | None = None) -> None:
        keep = self.hold - 1
        rows = self._rows[: keep + self._k]
        if extra is not None:
            rows = np.concatenate([rows, extra])
        if len(rows) > keep:
            held = rolling_min(rows, self.hold) if keep else rows
            np.maximum(self._best, np.maximum.reduce(held, axis=0), out=self._best)
            if keep:
                self._rows[:keep] = rows[len(rows) - keep:]
        self._k = 0

    @property
    def value(self) -> np.ndarray:
        """(columns,) m/s, everything added so far."""
        if self._k:
            self._scan()
        return self._best

    def grow(self, k: int) -> None:
        """``k`` more columns, with nothing held so far."""
        self._scan()
        self._best = np.concatenate([self._best, np.zeros(k)])
        self._rows = np.concatenate([self._rows, np.zeros((self._rows.shape[0], k))], axis=1)
