"""The match clock: kick-off, the two halves as frame slots, and their times.

``frame_id`` is the slot index of the frame in the recording: it counts from 0
at kick-off, every 1/fps seconds of play, and the second half continues where
the first half stopped (the half-time break has no slots).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

KICKOFF = np.datetime64("2026-03-14T15:00:00.000", "ms")
HALF_TIME_BREAK_S = 15 * 60
# A full match is 45+2 and 45+4 minutes: `minutes` scales both halves.
FULL_MATCH_MIN = 95.0
FIRST_HALF_SHARE = 47.0 / 95.0
PERIOD_NAMES = ("first_half", "second_half")


@dataclass(frozen=True)
class Timeline:
    """Frame layout: halves of n1 and n2 slots at fps; times in seconds."""

    fps: int
    n1: int
    n2: int

    @property
    def n_slots(self) -> int:
        return self.n1 + self.n2

    @property
    def play_minutes(self) -> float:
        """Minutes of play (both halves, without the break)."""
        return self.n_slots / self.fps / 60.0

    @property
    def halves(self) -> tuple[tuple[int, int], tuple[int, int]]:
        """(first slot, slot count) of each half."""
        return (0, self.n1), (self.n1, self.n2)

    def period(self, frame: int) -> str:
        """CDF period name of a slot: ``first_half`` or ``second_half``."""
        return PERIOD_NAMES[0 if frame < self.n1 else 1]

    def frame_ms(self) -> np.ndarray:
        """Time of every slot, integer ms after the first kick-off."""
        ms1 = np.round(np.arange(self.n1) * 1000.0 / self.fps).astype("int64")
        ms2 = self.second_half_start_ms() + np.round(np.arange(self.n2) * 1000.0 / self.fps).astype("int64")
        return np.concatenate([ms1, ms2])

    def timestamps(self) -> list[str]:
        """RFC 3339 UTC timestamps (ms precision, ``Z``) of every slot."""
        strings = np.datetime_as_string(KICKOFF + self.frame_ms().astype("timedelta64[ms]"), unit="ms")
        return [s + "Z" for s in strings.tolist()]

    def first_half_end_ms(self) -> int:
        """End of the first half, ms after kick-off (end of its last frame)."""
        return int(round(self.n1 * 1000.0 / self.fps))

    def second_half_start_ms(self) -> int:
        """Second half kick-off, ms after the first kick-off."""
        return self.first_half_end_ms() + HALF_TIME_BREAK_S * 1000

    def second_half_end_ms(self) -> int:
        return self.second_half_start_ms() + int(round(self.n2 * 1000.0 / self.fps))


def make_timeline(minutes: float, fps: int) -> Timeline:
    """Split ``minutes`` of play into the two halves (47:48 share, as 45+2 / 45+4)."""
    if minutes <= 0 or fps <= 0:
        raise ValueError("minutes and fps must be positive")
    total = minutes * 60.0
    n1 = max(1, int(round(total * FIRST_HALF_SHARE * fps)))
    n2 = max(1, int(round(total * fps)) - n1)
    return Timeline(fps=int(fps), n1=n1, n2=n2)


def iso_ms(ms_after_kickoff: int) -> str:
    """RFC 3339 UTC string of a time given in ms after the first kick-off."""
    return str(np.datetime_as_string(KICKOFF + np.timedelta64(int(ms_after_kickoff), "ms"), unit="ms")) + "Z"


def duration_scale(minutes: float) -> float:
    """Duration scale of scripted stoppages (1 for a full match)."""
    return float(np.clip(minutes / FULL_MATCH_MIN, 0.25, 1.0))
