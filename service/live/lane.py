"""The background lane: report drawing, rebuilds and history writes, off the live path.

One worker thread (niced where the OS allows) takes the jobs one at a time from a
bounded priority queue: a rebuild a request is waiting for goes first, then the
rest in the order they came. The event loop only awaits the job's future, so the
live path (decode, record, apply, publish) never waits behind this work; a full
queue makes the next background job's caller wait, never the frames.
"""
from __future__ import annotations

import asyncio
import itertools
import logging
import os
import threading
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import Any, TypeVar

from pacewire.tasks import cancel

log = logging.getLogger("pacewire.lane")
T = TypeVar("T")
URGENT, BACKGROUND = 0, 1
NICE = 10  # the worker thread's niceness increment (common practice: a batch job below interactive work)


def _lower_priority() -> None:
    try:  # Linux schedules threads one by one: this lowers only the worker
        os.setpriority(os.PRIO_PROCESS, threading.get_native_id(), NICE)
    except (OSError, AttributeError):
        pass


class Lane:
    def __init__(self, limit: int = 256) -> None:
        self.limit = limit
        self._pool = ThreadPoolExecutor(1, thread_name_prefix="pacewire-lane", initializer=_lower_priority)
        self._queue: asyncio.PriorityQueue[tuple[int, int, Callable[[], Any], asyncio.Future[Any]]] | None = None
        self._seq = itertools.count()
        self._worker: asyncio.Task[None] | None = None

    async def run(self, fn: Callable[..., T], *args: Any, priority: int = BACKGROUND) -> T:
        """``fn(*args)`` on the worker thread; returns its result (raises what it raised)."""
        loop = asyncio.get_running_loop()
        if self._queue is None:
            self._queue = asyncio.PriorityQueue(self.limit)
        if self._worker is None or self._worker.done():
            self._worker = loop.create_task(self._work(), name="lane")
        fut: asyncio.Future[T] = loop.create_future()
        await self._queue.put((priority, next(self._seq), lambda: fn(*args), fut))
        return await fut

    async def _work(self) -> None:
        assert self._queue is not None
        loop = asyncio.get_running_loop()
        while True:
            _, _, job, fut = await self._queue.get()
            if fut.done():  # its caller went away
                continue
            try:
                result = await loop.run_in_executor(self._pool, job)
            except Exception as exc:
                if not fut.done():
                    fut.set_exception(exc)
            else:
                if not fut.done():
                    fut.set_result(result)

    async def close(self) -> None:
        await cancel([self._worker])
        self._pool.shutdown(wait=False, cancel_futures=True)
