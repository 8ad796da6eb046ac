"""The recorder: every accepted frame appended to the match's CDF folder.

Writes happen in the recorder's own task, in arrival order; a frame reaches
the OS before the engine applies it, an fsync follows at a set interval and at
once for HTTP batches. A write that fails is undone (the file is cut back to
its length before the write), and a line a crash left without its newline is
closed before the next write, so a torn line never merges with a later one.
"""
from __future__ import annotations

import asyncio
import os
import time
from collections.abc import Awaitable, Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import orjson

from pacewire.errors import PacewireError
from pacewire.tasks import cancel


class RecorderError(PacewireError, OSError):
    """The recording cannot be written; nothing of the batch was kept."""

    code = "not_stored"


@dataclass
class _Job:
    lines: list[bytes]
    durable: bool
    after: Callable[[], None] | None
    done: asyncio.Future[None] = field(default_factory=lambda: asyncio.get_running_loop().create_future())


def write_json_atomic(path: Path, obj: Any) -> None:
    tmp = path.with_suffix(path.suffix + ".tmp")
    with open(tmp, "wb") as fh:
        fh.write(orjson.dumps(obj, option=orjson.OPT_INDENT_2))
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


class Recorder:
    """Append-only writer for one match's ``tracking.jsonl`` (or ``hr.jsonl``), and ``events.jsonl``."""

    def __init__(self, folder: Path, fsync_interval_s: float, name: str = "tracking.jsonl") -> None:
        self.folder = folder
        self.path = folder / name
        self.events_path = folder / "events.jsonl"
        self.fsync_interval_s = fsync_interval_s
        self._queue: asyncio.Queue[_Job] = asyncio.Queue()
        self._busy = False  # a job taken from the queue whose lines may be in the file, not yet handed on
        self._fd: int | None = None
        self._dirty = False
        self._last_sync = time.monotonic()
        self.error: str | None = None  # last write problem, cleared by a good write
        self.frames_written = 0
        self._task: asyncio.Task[None] | None = None
        self._sync_task: asyncio.Task[None] | None = None

    def start(self) -> None:
        self._task = asyncio.create_task(self._run(), name=f"recorder:{self.folder.name}")
        self._sync_task = asyncio.create_task(self._sync_loop(), name=f"recorder-sync:{self.folder.name}")

    async def stop(self) -> None:
        await cancel((self._task, self._sync_task))
        if self._fd is not None:
            try:
                if self._dirty:
                    os.fsync(self._fd)
            except OSError:
                pass
            os.close(self._fd)
            self._fd = None

    def idle(self) -> bool:
        """Every line in the file has been handed on (``after``): nothing queued or being written."""
        return self._queue.empty() and not self._busy

    def append(self, lines: list[bytes], durable: bool = False, after: Callable[[], None] | None = None
               ) -> Awaitable[None]:
        """Queue lines (without newlines); ``after`` runs right after they reach the OS.

        The returned future resolves once written (and fsynced if ``durable``),
        or raises RecorderError.
        """
        job = _Job(lines, durable, after)
        self._queue.put_nowait(job)
        return job.done

    async def _run(self) -> None:
        while True:
            job = await self._queue.get()
            self._busy = True
            try:
                self._write(job.lines)
                if job.durable:
                    await asyncio.to_thread(os.fsync, self._open())  # the descriptor _write used
                    self._dirty = False
                    self._last_sync = time.monotonic()
                self.error = None
            except OSError as exc:
                self.error = f"recording failed: {exc.strerror or exc}"
                if not job.done.done():
                    job.done.set_exception(RecorderError(self.error))
                continue
            finally:
                self._busy = False
            if job.after is not None:
                job.after()
            if not job.done.done():
                job.done.set_result(None)

    def _open(self) -> int:
        if self._fd is None:
            fd = os.open(self.path, os.O_RDWR | os.O_APPEND | os.O_CREAT, 0o644)
            size = os.fstat(fd).st_size
            if size and os.pread(fd, 1, size - 1) != b"\n":  # a line torn by a crash (power cut) stays alone
                os.write(fd, b"\n")
            self._fd = fd
        return self._fd

    def _write(self, lines: list[bytes]) -> None:
        if not lines:
            return
        fd = self._open()
        data = b"\n".join(lines) + b"\n"
        start = os.fstat(fd).st_size
        try:
            view = memoryview(data)
            while view:
                n = os.write(fd, view)
                view = view[n:]
        except OSError:
            try:
                os.ftruncate(fd, start)
            except OSError:
                pass
            raise
        self._dirty = True
        self.frames_written += len(lines)

    async def _sync_loop(self) -> None:
        while True:
            await asyncio.sleep(self.fsync_interval_s)
            if self._dirty and self._fd is not None:
                try:
                    await asyncio.to_thread(os.fsync, self._fd)
                    self._dirty = False
                    self._last_sync = time.monotonic()
                except OSError as exc:
                    self.error = f"fsync failed: {exc.strerror or exc}"

    def append_event(self, event: dict[str, Any]) -> None:
        """Match events are rare: written and fsynced at once (they drive recovery)."""
        with open(self.events_path, "ab") as fh:
            fh.write(orjson.dumps(event) + b"\n")
            fh.flush()
            os.fsync(fh.fileno())
