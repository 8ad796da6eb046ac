"""What the engine works on: the roster of a match and blocks of frames.

Arrays are shaped ``(frames, players, 2)``; positions in metres, origin at the
centre spot, x along the touchlines, y along the goal lines; NaN is "not seen".
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

# CDF v0.3.2 period names, in match order (Anzer et al. 2025).
PERIODS: tuple[str, ...] = (
    "first_half",
    "second_half",
    "first_half_extratime",
    "second_half_extratime",
    "shootout",
)
PERIOD_INDEX = {name: i for i, name in enumerate(PERIODS)}

# Ball context per frame.
BALL_UNKNOWN, BALL_OUT, BALL_IN = -1, 0, 1
NO_TEAM = -1

Sex = Literal["male", "female"]
# Kinds of tracking source, each with its own smoothing and artefact settings (config/default.toml).
FeedProfile = Literal["optical", "broadcast", "wearable"]


@dataclass(frozen=True)
class Player:
    id: str
    team: int  # 0 home, 1 away
    jersey_number: int
    is_goalkeeper: bool
    is_starter: bool
    name: str = ""
    max_speed_ms: float | None = None
    hr_max_bpm: float | None = None  # heart-rate profile (docs/wearables.md)
    hr_rest_bpm: float | None = None
    sex: Sex | None = None


@dataclass(frozen=True)
class Roster:
    """Match setup the engine needs: who plays, frame rate, pitch."""

    match_id: str
    team_ids: tuple[str, str]
    players: tuple[Player, ...]
    fps: int
    pitch_length_m: float = 105.0
    pitch_width_m: float = 68.0
    team_names: tuple[str, str] = ("", "")
    # the set-up's feed profile ("optical", "broadcast", "wearable"); None: the config's
    feed_profile: FeedProfile | None = None
    # GNSS pitch calibration as set up (compared), and the projection built from it (docs/wearables.md)
    gnss_pitch: Any = None
    projection: Any = field(default=None, repr=False, compare=False)
    # the periods the set-up lists (meta.match.periods), in match order: the match ends after the last
    periods: tuple[str, ...] = field(default=(), compare=False)
    index: dict[str, int] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "index", {p.id: i for i, p in enumerate(self.players)})

    @property
    def n(self) -> int:
        return len(self.players)

    def team_of(self) -> np.ndarray:
        return np.array([p.team for p in self.players], dtype=np.int8)

    def goalkeepers(self) -> np.ndarray:
        return np.array([p.is_goalkeeper for p in self.players], dtype=bool)

    def tracked(self) -> tuple[bool, bool]:
        """Which teams the feed tracks: a team with no players in the sheet is not tracked (one-team feeds)."""
        return any(p.team == 0 for p in self.players), any(p.team == 1 for p in self.players)


@dataclass(frozen=True)
class Block:
    """A run of accepted frames, in frame order."""

    frame_id: np.ndarray  # (F,) int64
    t: np.ndarray  # (F,) float64, UTC seconds since the epoch
    period: np.ndarray  # (F,) int8, index into PERIODS
    slot: np.ndarray  # (F,) int64, frame slot within its period: round((t - t_start) * fps)
    xy: np.ndarray  # (F, P, 2) float64, NaN where not seen
    ball: np.ndarray  # (F,) int8: BALL_IN, BALL_OUT, BALL_UNKNOWN
    poss: np.ndarray  # (F,) int8: 0 home, 1 away, NO_TEAM

    def __len__(self) -> int:
        return int(self.frame_id.shape[0])

    @staticmethod
    def empty(n_players: int) -> Block:
        return Block(
            frame_id=np.zeros(0, np.int64),
            t=np.zeros(0, np.float64),
            period=np.zeros(0, np.int8),
            slot=np.zeros(0, np.int64),
            xy=np.zeros((0, n_players, 2), np.float64),
            ball=np.zeros(0, np.int8),
            poss=np.zeros(0, np.int8),
        )

    def take(self, sel: slice | np.ndarray) -> Block:
        return Block(*(getattr(self, f)[sel] for f in _FIELDS))

    @staticmethod
    def concat(blocks: list[Block]) -> Block:
        return Block(*(np.concatenate([getattr(b, f) for b in blocks]) for f in _FIELDS))


_FIELDS = ("frame_id", "t", "period", "slot", "xy", "ball", "poss")
