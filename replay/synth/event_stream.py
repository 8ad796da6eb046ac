"""The fictional match's CDF event stream (event.jsonl), read off its ball and possession.

The ball of the synthetic match is a chain of rolls, flights, dribbles and stoppages (ball.py); the
events are what a person coding that ball would log: a pass or a shot at each kick (the ball's speed
jumping above KICK_MS), its outcome from what the ball does next (received by a team-mate,
intercepted, over a line, in the goal, held by the keeper), a carry for each dribble, the restarts
after every stoppage (kick-off, throw-in, goal kick, free kick), and the substitutions and cautions
of the match. So possession and dead balls in the events match the tracking's ``ball`` fields frame
for frame. Every event is CDF v0.3.2 (Anzer et al. 2025) as the validator package accepts it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from pacewire.replay.synth.clubs import CLUBS, OFFICIALS
from pacewire.replay.synth.documents import MATCH_ID
from pacewire.replay.synth.match import SynthMatch

KICK_MS = 8.0  # ball speed a kick starts above, m/s: dribbles stay under 4.5 m/s, kicks leave at 11 m/s or more
RECEIVED_MS = 4.6  # a pass is received once the ball is this slow (dribbling pace)
SHOT_X = 50.0  # a kick that ends this close to the goal line a team attacks is a shot, m
GOAL_Y = 3.66  # half the goal's width, m (Laws of the Game)
FEET = ("right_foot", "right_foot", "left_foot")  # two in three kicks with the right foot (from memory)


@dataclass
class Event:
    """One coded event before it is written: frame, kind and the CDF fields that vary."""

    frame: int
    kind: str
    team: int  # 0 home, 1 away, -1 referee
    col: int  # column 0..21 of the player acting, -1 for the referee
    sub_type: str | None = None
    ok: bool = True
    outcome: str = "successful"
    receiver_col: int | None = None
    receiver_frame: int | None = None
    end_frame: int | None = None
    id: str = ""


class Coder:
    """Reads the events of one half off the ball arrays (``start``..``stop``: its slots)."""

    def __init__(self, m: SynthMatch, start: int, stop: int, dirs: tuple[float, float]) -> None:
        self.m, self.start, self.stop, self.dirs = m, start, stop, dirs
        fps = m.timeline.fps
        xy = m.ball_xy[start:stop]
        speed = np.abs(np.diff(xy, append=xy[-1:])) * fps  # speed leaving each frame, m/s
        fast = speed > KICK_MS
        self.kicks = (np.flatnonzero(fast & ~np.r_[False, fast[:-1]]) + start).tolist()
        self.speed = speed
        self.events: list[Event] = []

    def nearest(self, f: int, team: int, at: complex | None = None) -> int:
        """Column of ``team``'s player nearest the ball (or ``at``) at slot ``f``."""
        cols = slice(11 * team, 11 * team + 11)
        target = self.m.ball_xy[f] if at is None else at
        return 11 * team + int(np.argmin(np.abs(self.m.positions[f, cols] - target)))

    def next_change(self, f: int, until: int) -> int | None:
        """The first slot after ``f`` (before ``until``) where the ball state or possession changes."""
        live, poss = self.m.ball_in_play, self.m.ball_poss
        seg = slice(f + 1, until)
        diff = np.flatnonzero((live[seg] != live[f]) | (poss[seg] != poss[f]))
        return int(diff[0]) + f + 1 if len(diff) else None

    def received(self, f: int, until: int) -> int:
        """The slot a kick at ``f`` is received (the ball back at dribbling pace)."""
        slow = np.flatnonzero(self.speed[f - self.start + 1: until - self.start] < RECEIVED_MS)
        return f + 1 + int(slow[0]) if len(slow) else until - 1

    def code(self) -> list[Event]:
        m = self.m
        live, poss = m.ball_in_play, m.ball_poss
        kicks = self.kicks + [self.stop]
        for i, f in enumerate(kicks[:-1]):
            nxt = kicks[i + 1]
            team = int(poss[f])
            restart = f == self.start or not live[f - 1]
            col = self.nearest(f, team)
            change = self.next_change(f, nxt)
            end = self.received(f, nxt) if change is None else change
            if self._is_shot(f, end, team):
                self._shot(f, end, change, team, col, restart)
            else:
                self._pass(f, end, change, team, col, restart, nxt)
        return self.events

    def _is_shot(self, f: int, end: int, team: int) -> bool:
        p = self.m.ball_xy[end]
        return self.dirs[team] * p.real > SHOT_X and abs(p.imag) < 12.5

    def _restart_kind(self, f: int) -> str:
        p = self.m.ball_xy[f]
        if abs(p) < 1.0:
            return "kick_off"
        if abs(p.imag) > 33.0:
            return "throw_in"
        if abs(p.real) > 45.0:
            return "goal_kick"
        return "free_kick"

    def _shot(self, f: int, end: int, change: int | None, team: int, col: int, restart: bool) -> None:
        m = self.m
        p = m.ball_xy[end]
        if change is not None and not m.ball_in_play[change]:
            outcome = "successful" if abs(p.imag) < GOAL_Y else "wide"
        else:
            outcome = "saved"
        self.events.append(Event(f, "shot", team, col, "free_kick" if restart else None, outcome == "successful",
                                 outcome, end_frame=end))
        if outcome == "saved" and change is not None:  # the keeper holds it
            other = 1 - team
            self.events.append(Event(change, "goalkeeping", other, 11 * other, "claim", True, "successful"))

    def _pass(self, f: int, end: int, change: int | None, team: int, col: int, restart: bool, nxt: int) -> None:
        m = self.m
        sub = self._restart_kind(f) if restart else None
        if change is not None and not m.ball_in_play[change]:
            self.events.append(Event(f, "pass", team, col, sub, False, "out_of_play", receiver_frame=change,
                                     end_frame=change))
            return
        if change is not None and m.ball_poss[change] != team:  # intercepted on receipt
            other = 1 - team
            rcol = self.nearest(change, other)
            self.events.append(Event(f, "pass", team, col, sub, False, "intercepted", rcol, change, change))
            self.events.append(Event(change, "interception", other, rcol, None, True, "successful"))
            self._carry(change, other, rcol, nxt)
            return
        rcol = self.nearest(end, team)
        self.events.append(Event(f, "pass", team, col, sub, True, "successful", rcol, end, end))
        self._carry(end, team, rcol, nxt)

    def _carry(self, f: int, team: int, col: int, nxt: int) -> None:
        """The receiver's dribble until the next kick, when it lasts at least half a second."""
        fps = self.m.timeline.fps
        if nxt - f >= fps // 2 and nxt < self.stop and self.m.ball_in_play[f:nxt].all():
            self.events.append(Event(f, "carry", team, col, None, True, "successful", end_frame=nxt - 1))


def code_match(m: SynthMatch) -> list[Event]:
    """Every event of the match in time order, with ids ``ev_00001``..."""
    events: list[Event] = []
    for h, (start, n) in enumerate(m.timeline.halves):
        dirs = (1.0, -1.0) if h == 0 else (-1.0, 1.0)  # the home team attacks +x in the first half
        events += Coder(m, start, start + n, dirs).code()
    for s in m.subs:
        events.append(Event(s.frame, "referee", -1, -1, "substitution", True, "successful"))
    for _team, frame, _slot in m.cards:
        events.append(Event(frame, "referee", -1, -1, "caution", True, "yellow_card"))
    events.sort(key=lambda e: e.frame)  # stable: the coding order of one frame is kept
    for k, e in enumerate(events, 1):
        e.id = f"ev_{k:05d}"
    return events


def _xy(m: SynthMatch, f: int) -> tuple[float, float]:
    p = m.ball_xy[f]
    return round(float(np.clip(p.real, -52.5, 52.5)), 2), round(float(np.clip(p.imag, -34.0, 34.0)), 2)


def event_object(m: SynthMatch, e: Event, ts: list[str], foot: str) -> dict[str, Any]:
    """The CDF event line of one coded event (``ts``: the timestamp of every slot)."""
    x, y = _xy(m, e.frame)
    ends = e.kind in ("pass", "shot")
    x_end, y_end = _xy(m, e.end_frame if e.end_frame is not None else e.frame) if ends else (None, None)
    tl = m.timeline
    ev: dict[str, Any] = {
        "id": e.id, "time": ts[e.frame], "period": tl.period(e.frame), "type": e.kind, "sub_type": e.sub_type,
        "is_successful": e.ok, "outcome_type": e.outcome,
        "receiver_id": None, "receiver_time": None, "receiver_team_id": None,
        "x": x, "y": y, "x_end": x_end, "y_end": y_end, "body_part": foot if ends else None,
        "related_event_ids": None,
    }
    if e.receiver_col is not None and e.receiver_frame is not None:
        ev["receiver_id"] = m.player_at(e.receiver_frame, e.receiver_col)
        ev["receiver_time"] = ts[e.receiver_frame]
        ev["receiver_team_id"] = CLUBS[e.receiver_col // 11].team_id
    if e.team < 0:
        ev["official_id"] = OFFICIALS[0][0]
    else:
        ev["team_id"] = CLUBS[e.team].team_id
        ev["player_id"] = m.player_at(e.frame, e.col)
    return {"match": {"id": MATCH_ID}, "meta": {"is_synced": True}, "event": ev,
            "tracking": {"frame_id": e.frame}}


def event_objects(m: SynthMatch, rng: np.random.Generator) -> list[dict[str, Any]]:
    """The match's CDF event lines in time order (``rng`` picks the feet)."""
    ts = m.timeline.timestamps()
    events = code_match(m)
    feet = rng.integers(0, len(FEET), len(events)).tolist()
    return [event_object(m, e, ts, FEET[k]) for e, k in zip(events, feet, strict=True)]
