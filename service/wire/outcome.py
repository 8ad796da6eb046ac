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

    def as_dict(self, limit: int = 20) -> dict[str, Any]:
        return {"accepted": self.accepted, "rejected": self.rejected, "duplicates": self.duplicates,
                "late": self.late, "errors": [e.as_dict() for e in self.errors[:limit]]}

    @staticmethod
    def unstored() -> IngestOutcome:
        return IngestOutcome(0, 0, 0, 0, [], stored=False)


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
