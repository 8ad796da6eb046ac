"""The answer to a batch of frames, heart-rate samples or CDF events: what was kept, what was refused and why."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pacewire.wire.cdf import FrameError


@dataclass
class IngestOutcome:
    accepted: int
    rejected: int
    duplicates: int
    late: int
    errors: list[FrameError]
    stored: bool = True  # False: the recording (or Redis) could not keep the batch; nothing of it counts
    resent: int = 0  # frames the service already held, sent again
    after_end: int = 0  # frames refused because the match had ended

    def as_dict(self, limit: int = 20) -> dict[str, Any]:
        return {"accepted": self.accepted, "rejected": self.rejected, "duplicates": self.duplicates,
                "late": self.late, "resent": self.resent, "after_end": self.after_end,
                "errors": [e.as_dict() for e in self.errors[:limit]]}

    @staticmethod
    def unstored() -> IngestOutcome:
        return IngestOutcome(0, 0, 0, 0, [], stored=False)


def after_end_message(frames: int, where: str = "") -> str:
    """The answer to frames sent after the match ended (``where``: when it ended, if known)."""
    return (f"the match has ended{where}: {frames} frame{'s' if frames != 1 else ''} refused; "
            "a period_start event reopens it")


@dataclass
class EventOutcome:
    """The answer to a batch of CDF events: corrections are accepted events whose id came before."""

    accepted: int
    rejected: int
    duplicates: int
    corrections: int
    errors: list[FrameError]
    stored: bool = True

    def as_dict(self, limit: int = 20) -> dict[str, Any]:
        return {"accepted": self.accepted, "rejected": self.rejected, "duplicates": self.duplicates,
                "corrections": self.corrections, "errors": [e.as_dict() for e in self.errors[:limit]]}

    @staticmethod
    def unstored() -> EventOutcome:
        return EventOutcome(0, 0, 0, 0, [], stored=False)
