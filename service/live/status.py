"""The match status: ``not_started``, ``live``, ``break`` (between periods) and ``ended``.

A period is over on a ``period_end`` event, on the next period's frames, or once
its nominal length (``[periods]``) is played and no frame came for
``reports.period_timeout_s``. The match ends after the last period the set-up
lists in ``meta.match.periods`` (the second half when it lists none), or after a
later one that was played.

The timeout is a judgement about a silent feed. Between periods it is only
shown (the period's figures as if its whistle had gone): frames of the same
period may still come, and the status goes back to ``live``. After the last
period it is made final as a recorded ``period_end`` event with ``"source":
"timeout"``, so a restart, a successor aggregator and the exports all see the
match ended. Once ended, frames are refused (``match_ended``, counted in
``health.after_end``) until a ``period_start`` event reopens the match.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pacewire.engine.match import CLOCK_START_MIN, MatchState
from pacewire.engine.types import PERIOD_INDEX, PERIODS, Roster

NOT_STARTED, LIVE, BREAK, ENDED = "not_started", "live", "break", "ended"
STATUSES = (NOT_STARTED, LIVE, BREAK, ENDED)
DEFAULT_LAST = "second_half"  # a set-up that lists no periods plays two halves (Laws of the Game)


@dataclass(frozen=True)
class Verdict:
    """The status now, which period is over (break, ended), and why: ``frames``, ``period_start``,
    ``period_end`` (an event), ``timeout``. ``close``: the last period's timeout has run out and its end
    is still to be recorded (until then the status stays ``live``)."""

    status: str
    period: str | None = None
    cause: str | None = None
    close: bool = False


def _clock(period: str, state: MatchState) -> str:
    s = CLOCK_START_MIN[period] * 60 + max(state.current.last_slot if state.current else 0, 0) / state.fps
    return f"{int(s // 60):02d}:{int(s % 60):02d}"


class MatchStatus:
    """One match's status from its engine state, its events and the wall clock."""

    def __init__(self, roster: Roster, timeout_s: float, nominal_min: dict[str, int]) -> None:
        self.timeout_s = timeout_s
        self.nominal_s = {name: 60.0 * nominal_min.get(name, 0) for name in PERIODS}
        listed = [PERIOD_INDEX[p] for p in roster.periods]
        self.last_index = max(listed) if listed else PERIOD_INDEX[DEFAULT_LAST]
        self.opened = -1  # the latest period a period_start event opened
        self.sources: dict[str, str] = {}  # period -> source of its latest period_end event
        self.last_in: float | None = None  # wall time frames last came in
        self.told = NOT_STARTED  # the status subscribers were last told

    def frames_in(self, now: float) -> None:
        """Frames came in (accepted by the intake, or applied)."""
        self.last_in = now if self.last_in is None else max(self.last_in, now)

    def event(self, ev: dict[str, Any], now: float) -> None:
        """A match event was applied: a period start opens its period and restarts the silence clock."""
        if ev["type"] == "period_start":
            self.opened = max(self.opened, PERIOD_INDEX[ev["period"]])
            self.last_in = now
        elif ev["type"] == "period_end":
            self.sources[ev["period"]] = ev.get("source", "provider")

    def judge(self, state: MatchState, now: float) -> Verdict:
        """The status of ``state`` at wall time ``now``."""
        cur = state.current
        if cur is None or self.opened > cur.index:
            return Verdict(LIVE, cause="period_start") if self.opened >= 0 else Verdict(NOT_STARTED)
        last = cur.index >= self.last_index  # the last period listed, or a later one that was played
        if cur.ended:
            cause = "timeout" if self.sources.get(cur.name) == "timeout" else "period_end"
            return Verdict(ENDED if last else BREAK, cur.name, cause)
        silent = self.last_in is not None and now - self.last_in >= self.timeout_s
        if silent and (cur.last_slot + 1) / state.fps >= self.nominal_s[cur.name]:
            if last:
                return Verdict(LIVE, cause="frames", close=True)
            return Verdict(BREAK, cur.name, "timeout")
        return Verdict(LIVE, cause="frames")

    def message(self, v: Verdict, state: MatchState) -> str:
        """A sentence for the ``status`` message."""
        if v.status == NOT_STARTED:
            return "no frame yet"
        if v.status == LIVE:
            return "a period_start event opened the next period" if v.cause == "period_start" else "frames are coming"
        assert v.period is not None
        what = "full time" if v.status == ENDED else "break"
        if v.cause == "timeout":
            return (f"{what}: {v.period} ended at {_clock(v.period, state)}: its nominal length was played and "
                    f"no frame came for {self.timeout_s:g} s")
        return f"{what}: {v.period} ended at {_clock(v.period, state)} (period_end event)"

    def timeout_end(self, state: MatchState) -> dict[str, Any]:
        """The ``period_end`` event that makes the last period's timeout final."""
        cur = state.current
        assert cur is not None
        return {"type": "period_end", "period": cur.name, "frame_id": state.last_frame_id, "source": "timeout"}
