"""What the routes need from whatever holds the matches: one interface per group of routes.

Two implementations: the single process (:mod:`pacewire.live.backend`, every
interface) and Redis (:mod:`pacewire.scale.ingest` for :class:`IngestBackend`,
:mod:`pacewire.scale.gateway` for :class:`ReadBackend`). A role mounts the
routers of the interfaces it implements (:mod:`pacewire.api.app`).

Errors: methods raise :class:`~pacewire.errors.PacewireError` subclasses whose
``code`` names them on the wire (``bad_setup``, ``conflict``, ``not_stored``,
``bad_event`` ...) or an :class:`~pacewire.api.errors.ApiError`.
"""
from __future__ import annotations

from collections.abc import Callable, Coroutine
from pathlib import Path
from typing import Any, Protocol

from pacewire.api.requests import StreamParams
from pacewire.engine.types import Roster
from pacewire.wire.outcome import EventOutcome, IngestOutcome

Send = Callable[[str], Coroutine[Any, Any, None]]  # a coroutine: the broadcaster may step it itself


class MatchWriter(Protocol):
    """The write side of one match."""

    async def frames(self, data: list[bytes] | bytes | str, durable: bool) -> IngestOutcome:
        """JSON Lines (HTTP, a list of lines) or one websocket message (a frame or a JSON array of
        frames): answered once the accepted frames are stored (``durable``: on disk, not only
        handed to the OS)."""

    async def heart_rate(self, data: bytes | str | list[bytes], durable: bool) -> IngestOutcome:
        """Heart-rate samples: JSON Lines (a list of lines) or one message (an object or an array)."""

    async def cdf_events(self, data: bytes | str | list[bytes], durable: bool) -> EventOutcome:
        """CDF events: JSON Lines (a list of lines) or one message (an event object or an array of them):
        answered once the accepted ones (corrections too) are stored."""

    async def add_event(self, event: Any) -> None:
        """Check, store and apply one match (control) event."""

    def store_error(self) -> str:
        """Why the last batch was not stored."""

    def clock(self) -> tuple[float, str | None]:
        """Match time (s) and period, for the envelope of an error message."""

    async def position(self) -> dict[str, Any]:
        """Where the stored feed stands, so a provider resuming sends only what is missing:
        ``last_frame_id``, ``last_timestamp`` (UTC s), ``period``, ``hr_last_timestamp`` (the latest
        heart-rate sample, UTC s) and ``match_status`` (None each when not known)."""


class IngestBackend(Protocol):
    async def setup(self, match_id: str, meta: Any, sheet: Any) -> tuple[Roster, bool]:
        """Create or confirm a match; (roster, created)."""

    async def writer(self, match_id: str) -> MatchWriter | None:
        """The match's write side; None if it was never set up."""

    async def health(self) -> dict[str, Any]: ...


class Subscription(Protocol):
    """One subscriber of ``WS /live/{id}``: its messages are queued from the moment it exists."""

    async def pump(self) -> None:
        """Send the queued messages until closed."""

    def close(self) -> None: ...


class ReadBackend(Protocol):
    async def list_matches(self) -> list[dict[str, Any]]: ...

    async def snapshot(self, match_id: str) -> bytes | None:
        """The snapshot message (JSON), None for an unknown match."""

    async def report_listing(self, match_id: str) -> list[dict[str, Any]] | None: ...

    async def roster(self, match_id: str) -> Roster | None: ...

    async def subscribe(self, match_id: str, params: StreamParams, send: Send) -> Subscription:
        """Attach a subscriber (its opening messages queued); ApiError when the match is full."""

    async def health(self) -> dict[str, Any]: ...


class FilesBackend(Protocol):
    """What only the process that holds a match's folder has: reports, budgets, exports."""

    def report_file(self, match_id: str, kind: str, name: str) -> Path: ...

    def budgets(self, match_id: str) -> dict[str, Any]: ...

    def set_budgets(self, match_id: str, data: Any) -> dict[str, Any]: ...

    async def figures(self, match_id: str, at_s: float | None, period: str | None = None) -> dict[str, Any]:
        """The snapshot body now, or as it was at match clock ``at_s`` (of ``period``, or of the one period
        whose recorded clock holds it)."""


class MetricsSource(Protocol):
    def metrics_text(self) -> tuple[bytes, str]:
        """Prometheus text and its content type."""
