"""Ending the background tasks a shell started."""
from __future__ import annotations

import asyncio
from collections.abc import Iterable


async def cancel(tasks: Iterable[asyncio.Task[object] | None]) -> None:
    """Cancel every task, then wait for each to end; what a task raised on its way out is dropped
    (it is stopping because its owner is)."""
    live = [t for t in tasks if t is not None]
    for t in live:
        t.cancel()
    for t in live:
        try:
            await t
        except (asyncio.CancelledError, Exception):
            pass
