"""Period starts and ends, each announced once: from frames moving on, or from match events."""
from __future__ import annotations

from collections.abc import Callable

from pacewire.engine.match import MatchState
from pacewire.live.broadcaster import Broadcaster


class PeriodAnnouncer:
    def __init__(self, broadcaster: Broadcaster, on_end: Callable[[str], None]) -> None:
        self.broadcaster = broadcaster
        self.on_end = on_end  # a period ended (its report is due)
        self.told: set[tuple[str, str]] = set()  # (event, period) already announced
        self.seen: str | None = None  # the period of the frames applied last

    def announce(self, event: str, period: str, frame_id: int | None) -> None:
        """A ``period`` message for ``event`` (``start``/``end``) of ``period``, unless told before."""
        if (event, period) in self.told:
            return
        self.told.add((event, period))
        self.broadcaster.publish("period", event=event, period=period, frame_id=frame_id)
        if event == "end":
            self.on_end(period)

    def observe(self, state: MatchState) -> None:
        """After frames were applied: frames of a new period end the one before and start it."""
        period = state.period_name()
        if period == self.seen or period is None:
            return
        if self.seen is not None:
            self.announce("end", self.seen, None)
        self.announce("start", period, state.last_frame_id)
        self.seen = period

    def rebuilt(self, state: MatchState) -> None:
        """The state was rebuilt from a recording or a checkpoint: what it holds was told before."""
        self.seen = state.period_name()
        for per in state.periods:
            self.told.add(("start", per.name))
            if per.ended:
                self.told.add(("end", per.name))
