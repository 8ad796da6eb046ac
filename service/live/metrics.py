"""Operator counters: Prometheus metrics of the process, and the hooks a match reports through."""
from __future__ import annotations

import asyncio
from collections.abc import Callable
from dataclasses import dataclass

from prometheus_client import CONTENT_TYPE_LATEST, CollectorRegistry, Counter, Gauge, Histogram, generate_latest


def _count(n: int) -> None:
    pass


def _seconds(s: float) -> None:
    pass


def _once() -> None:
    pass


@dataclass
class Hooks:
    """What a match tells the operator's counters; all optional."""

    frames_in: Callable[[int], None] = _count
    rejected: Callable[[int], None] = _count
    processing: Callable[[float], None] = _seconds
    messages_out: Callable[[int], None] = _count
    dropped: Callable[[], None] = _once


class Metrics:
    """The Prometheus registry of one process (``GET /metrics``)."""

    def __init__(self) -> None:
        r = self.registry = CollectorRegistry()
        self.frames = Counter("pacewire_frames_in_total", "Frames accepted", registry=r)
        self.rejected = Counter("pacewire_frames_rejected_total", "Frames rejected", registry=r)
        self.messages = Counter("pacewire_messages_out_total", "Messages queued to subscribers", registry=r)
        self.dropped = Counter("pacewire_dropped_backlogs_total", "Slow-subscriber backlogs replaced by a snapshot",
                               registry=r)
        self.subscribers = Gauge("pacewire_subscribers", "Subscribers", ["match"], registry=r)
        self.lag = Gauge("pacewire_lag_seconds", "Median arrival lag", ["match"], registry=r)
        self.tasks = Gauge("pacewire_asyncio_tasks", "Tasks alive on the event loop (a leak shows as growth)",
                           registry=r)
        self.processing = Histogram("pacewire_processing_seconds",
                                    "Time per applied block: engine, then deltas written to waiting subscribers",
                                    registry=r, buckets=(0.0005, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.5, 1, 5))

    def hooks(self) -> Hooks:
        return Hooks(frames_in=self.frames.inc, rejected=self.rejected.inc, processing=self.processing.observe,
                     messages_out=self.messages.inc, dropped=self.dropped.inc)

    def text(self, lags: dict[str, float]) -> tuple[bytes, str]:
        """The exposition text, with each match's arrival lag (s) and the task count set first."""
        for match_id, lag in lags.items():
            self.lag.labels(match_id).set(lag)
        self.tasks.set(len(asyncio.all_tasks()))
        return generate_latest(self.registry), CONTENT_TYPE_LATEST
