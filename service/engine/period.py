"""One period's running state: the per-player sums of the players seen in it so far."""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pacewire.engine.exertion import Exertion
from pacewire.engine.kinematics import Track
from pacewire.engine.topspeed import TopSpeed
from pacewire.engine.types import PERIODS
from pacewire.engine.windows import SecondBins


@dataclass
class Period:
    """One period's running state.

    The engine works only on the players seen in the period so far: the columns
    ``cols`` (roster indices, in order of appearance), grown when a player first
    appears (a player never seen has all-zero figures). The properties below give
    the per-player arrays roster-wide (P = roster size)."""

    index: int
    t0: float  # timestamp of slot 0, s
    n: int  # roster size
    track: Track
    exertion: Exertion
    bins: SecondBins
    ball_poss: np.ndarray  # (slots, 2) int8: ball state, team in possession
    cols: np.ndarray  # (C,) roster index of each column
    unseen: np.ndarray  # roster indices not seen so far
    team: np.ndarray  # (C,) int8
    c_sums: np.ndarray  # (N_FIG, C) int64
    c_zones: np.ndarray  # (C, Z) int64 µm
    c_poss: np.ndarray  # (C, 4, 2) int64 µm: context (the contract's three, then unknown) × (distance, hsr)
    poss_pend: np.ndarray  # (2, C) int64 µm: distance, hsr since the ball context last changed
    top: TopSpeed  # (C,) top speed held, m/s
    c_first_seen: np.ndarray  # (C,) slot, -1 never
    c_last_seen: np.ndarray  # (C,) slot, -1 never
    c_off_slots: np.ndarray  # (C,) slots in gaps long enough to mean "off the pitch"
    c_last_valid: np.ndarray  # (C,) slot of the latest credited sample, -1 never
    c_last_speed: np.ndarray  # (C,) m/s at last_valid
    c_artefacts: np.ndarray  # (C,) seen samples removed as tracking artefacts
    last_slot: int = -1  # latest slot received
    ended: bool = False
    full_upto: int = -1  # end slot of the latest final samples if every column was seen in all of them
    in_order: bool = False  # the columns are the whole roster in roster order
    order: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))  # cols, then unseen
    poss_code: int | None = None  # ball state and possession (int16 view) of the blocks in poss_pend
    poss_ctx: tuple[int, int] | None = None  # context of each team for poss_pend
    # (C,) first bincount bin of each column
    zone_bin: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))

    @property
    def name(self) -> str:
        return PERIODS[self.index]

    def _roster(self, a: np.ndarray, fill: Any) -> np.ndarray:
        out = np.full((self.n, *a.shape[1:]), fill, a.dtype)
        out[self.cols] = a
        return out

    @property
    def sums(self) -> np.ndarray:
        """(P, N_FIG) int64."""
        return self._roster(self.c_sums.T, 0)

    @property
    def zones(self) -> np.ndarray:
        """(P, Z) int64 µm."""
        return self._roster(self.c_zones, 0)

    @property
    def poss(self) -> np.ndarray:
        """(P, 3, 2) int64 µm: context × (distance, hsr)."""
        c = self.c_poss
        if self.poss_ctx is not None:
            c = c.copy()
            self.add_pending(c)
        return self._roster(c[:, :3], 0)

    def add_pending(self, c_poss: np.ndarray) -> None:
        """Add the sums held since the ball context last changed to ``c_poss``."""
        ctx = np.array(self.poss_ctx)[self.team]
        c_poss[np.arange(len(ctx)), ctx] += self.poss_pend.T

    @property
    def max_speed(self) -> np.ndarray:
        return self._roster(self.top.value, 0.0)

    @property
    def artefacts(self) -> np.ndarray:
        return self._roster(self.c_artefacts, 0)

    @property
    def first_seen(self) -> np.ndarray:
        return self._roster(self.c_first_seen, -1)

    @property
    def last_seen(self) -> np.ndarray:
        return self._roster(self.c_last_seen, -1)

    @property
    def off_slots(self) -> np.ndarray:
        return self._roster(self.c_off_slots, 0)

    @property
    def last_valid(self) -> np.ndarray:
        return self._roster(self.c_last_valid, -1)

    @property
    def last_speed(self) -> np.ndarray:
        return self._roster(self.c_last_speed, 0.0)

    def onpitch_slots(self) -> np.ndarray:
        first, last = self.c_first_seen, self.c_last_seen
        return self._roster(np.where(first >= 0, last - first + 1 - self.c_off_slots, 0), 0)
