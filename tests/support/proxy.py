"""A TCP relay in front of a real server that cuts one ingest websocket mid-stream: what a network
blip or a server closing an idle socket does to a provider's connection."""
from __future__ import annotations

import asyncio
import threading

from tests.support.live_server import free_port


class CuttingProxy:
    """Relays every connection to ``127.0.0.1:target``; the first ``GET /ingest/...`` connection is
    cut (both sides reset) once ``cut_after`` bytes have gone from the client to the server."""

    def __init__(self, target: int, cut_after: int) -> None:
        self.target = target
        self.cut_after = cut_after
        self.port = free_port()
        self.cuts = 0
        self._loop = asyncio.new_event_loop()
        self._thread = threading.Thread(target=self._loop.run_forever, daemon=True)
        self._server: asyncio.Server | None = None

    def start(self) -> CuttingProxy:
        self._thread.start()
        self._server = asyncio.run_coroutine_threadsafe(
            asyncio.start_server(self._relay, "127.0.0.1", self.port), self._loop).result(10)
        return self

    def stop(self) -> None:
        async def close() -> None:
            if self._server is not None:
                self._server.close()

        asyncio.run_coroutine_threadsafe(close(), self._loop).result(10)
        self._loop.call_soon_threadsafe(self._loop.stop)
        self._thread.join(10)

    async def _relay(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        up_reader, up_writer = await asyncio.open_connection("127.0.0.1", self.target)
        head = await reader.read(65536)
        cut = head.startswith(b"GET /ingest/") and self.cuts == 0
        if cut:
            self.cuts = -1  # taken: only this connection is cut
        up_writer.write(head)
        sent = [len(head)]

        def reset() -> None:
            for w in (writer, up_writer):
                w.transport.abort()

        async def pipe(src: asyncio.StreamReader, dst: asyncio.StreamWriter, count: bool) -> None:
            try:
                while data := await src.read(65536):
                    dst.write(data)
                    await dst.drain()
                    if count and cut:
                        sent[0] += len(data)
                        if sent[0] > self.cut_after:
                            self.cuts = 1
                            reset()
                            return
            except (ConnectionError, OSError):
                pass
            finally:
                dst.close()

        await asyncio.gather(pipe(reader, up_writer, True), pipe(up_reader, writer, False),
                             return_exceptions=True)
