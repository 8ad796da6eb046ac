"""A small client for pacewire's live stream (``WS /live/{match_id}``; README, "Consuming the stream").

It keeps a local copy of the match state (``sub.state``: ``players``, ``teams``,
``health``, the same body as a snapshot) by applying every delta, checks that
``seq`` goes up by one, and on a disconnect or a gap reconnects with
``since=LAST_SEQ`` (the server then sends what was missed, or a fresh snapshot
with ``resync: true``).

    import asyncio
    from pacewire.client import subscribe

    async def main():
        sub = subscribe("http://localhost:8000", "m_fict_001", view="team:t_home", every=1.0)
        async for msg in sub:
            if msg["type"] in ("snapshot", "delta"):
                p = sub.state["players"]["p7"]
                print(msg["match_time_s"], p["distance_m"], p["hsr_m"])

    asyncio.run(main())

From a plain script: ``for msg in subscribe_sync(...)`` (the socket runs in a
thread) or ``state = run_until(url, match_id, until=lambda msg, state: ...)``.

The state changes only through snapshots and deltas; ``health``, ``period``,
``alert`` and ``report`` messages are events and are yielded as they come.
Yielded messages are never changed afterwards (the state holds its own copy).
"""
from __future__ import annotations

import asyncio
import queue
import threading
from collections.abc import AsyncGenerator, AsyncIterator, Callable, Iterator
from typing import Any
from urllib.parse import urlencode, urlsplit, urlunsplit

import orjson
from websockets.asyncio.client import ClientConnection, connect
from websockets.exceptions import ConnectionClosed, InvalidHandshake, InvalidStatus, InvalidURI

from pacewire.errors import PacewireError
from pacewire.wire.messages import CONTRACT_VERSION, apply_delta

BODY = ("players", "teams", "health", "match_status")


class SubscriptionError(PacewireError, RuntimeError):
    """The server refused the subscription (unknown match, bad parameters, no valid token)."""

    def __init__(self, code: str, message: str) -> None:
        super().__init__(f"{code}: {message}")
        self.code, self.message = code, message


class ContractVersionError(SubscriptionError):
    """The server speaks another major version of the contract than this client."""


def live_url(url: str, match_id: str, view: str | None = None, every: float | None = None,
             since: int | None = None) -> str:
    """``ws[s]://HOST/live/MATCH?...`` from a server URL (http, https, ws or wss)."""
    parts = urlsplit(url)
    scheme = {"http": "ws", "https": "wss"}.get(parts.scheme, parts.scheme)
    query = {k: v for k, v in (("every", every), ("view", view), ("since", since)) if v is not None}
    path = f"{parts.path.rstrip('/')}/live/{match_id}"
    return urlunsplit((scheme, parts.netloc, path, urlencode(query, safe=":,"), ""))


def _body(text: str | bytes) -> dict[str, Any]:
    """The state part of a snapshot or delta, parsed afresh so it shares nothing with the yielded message."""
    msg = orjson.loads(text)
    return {k: msg[k] for k in BODY if k in msg}


class Subscription:
    """One match's stream and the local copy of its state; iterate it with ``async for``."""

    def __init__(self, url: str, match_id: str, *, view: str | None = None, every: float | None = None,
                 token: str | None = None, reconnect_delay_s: float = 0.25, max_delay_s: float = 5.0,
                 max_attempts: int | None = None, open_timeout_s: float = 10.0) -> None:
        self.url, self.match_id, self.view, self.every = url, match_id, view, every
        self.token = token
        self.reconnect_delay_s, self.max_delay_s = reconnect_delay_s, max_delay_s
        self.max_attempts = max_attempts  # consecutive failed connects before giving up; None: never
        self.open_timeout_s = open_timeout_s
        self.state: dict[str, Any] | None = None  # players, teams, health; None until the first snapshot
        self.seq: int | None = None  # last seq applied
        self.match_time_s: float | None = None
        self.period: str | None = None
        self.ws: ClientConnection | None = None  # the current socket, while connected
        self.connects = 0  # sockets opened
        self.snapshots = 0  # snapshots applied (including resyncs)
        self.resyncs = 0  # snapshots with resync: true
        self.resumes = 0  # reconnects that went on from since without a snapshot
        self.gaps = 0  # seq gaps seen (each led to a reconnect)
        self._resuming = False
        self._iter: Any = None

    def __aiter__(self) -> AsyncIterator[dict[str, Any]]:
        self._iter = self._messages()
        return self._iter

    async def aclose(self) -> None:
        """Close the socket now (leaving an ``async for`` early leaves it open until then)."""
        if self._iter is not None:
            await self._iter.aclose()
            self._iter = None

    async def __aenter__(self) -> Subscription:
        return self

    async def __aexit__(self, *exc: Any) -> None:
        await self.aclose()

    async def _messages(self) -> AsyncGenerator[dict[str, Any], None]:
        stream = self.stream()
        try:
            async for _text, msg in stream:
                yield msg
        finally:
            await stream.aclose()  # closes the socket

    async def stream(self) -> AsyncGenerator[tuple[str, dict[str, Any]], None]:
        """(raw text, message) of every message applied, in seq order, across reconnects."""
        failures = 0
        while True:
            since = self.seq if self.state is not None else None
            url = live_url(self.url, self.match_id, self.view, self.every, since)
            headers = {"Authorization": f"Bearer {self.token}"} if self.token else None
            try:
                async with connect(url, additional_headers=headers, max_size=None,
                                   open_timeout=self.open_timeout_s) as ws:
                    self.ws = ws
                    self.connects += 1
                    failures = 0
                    self._resuming = since is not None
                    async for text in ws:
                        msg = orjson.loads(text)
                        verdict = self._take(msg, text)
                        if verdict == "gap":
                            self.gaps += 1
                            break  # reconnect with since = the last seq applied
                        if verdict == "ok":
                            yield text if isinstance(text, str) else text.decode(), msg
            except ConnectionClosed as exc:
                if exc.rcvd is not None and exc.rcvd.code == 1008:
                    raise SubscriptionError("unauthorised" if "unauth" in exc.rcvd.reason else "refused",
                                            exc.rcvd.reason or "the server closed the subscription (1008)") from None
            except InvalidStatus as exc:
                status = exc.response.status_code
                if 400 <= status < 500:  # the server will not change its mind: no retry
                    raise SubscriptionError(f"http_{status}",
                                            f"the server refused the WebSocket handshake ({status})") from None
                failures += 1
                if self.max_attempts is not None and failures >= self.max_attempts:
                    raise
            except InvalidURI:
                raise
            except (TimeoutError, OSError, InvalidHandshake):
                failures += 1
                if self.max_attempts is not None and failures >= self.max_attempts:
                    raise
            finally:
                self.ws = None
            await asyncio.sleep(min(self.reconnect_delay_s * 2 ** failures, self.max_delay_s))

    def _take(self, msg: dict[str, Any], text: str | bytes) -> str:
        """Apply one message: "ok", "old" (already applied: skip) or "gap" (something is missing)."""
        if msg.get("v") != CONTRACT_VERSION:
            raise ContractVersionError("version", f"server sends contract v{msg.get('v')}, this client "
                                                  f"reads v{CONTRACT_VERSION}")
        kind = msg.get("type")
        if kind == "error":  # on /live only a refused subscription; the server closes next
            raise SubscriptionError(msg.get("code", "error"), msg.get("message", ""))
        seq = msg["seq"]
        if kind == "snapshot":  # a full state resets everything, whatever came before
            self.state = _body(text)
            self.snapshots += 1
            self.resyncs += bool(msg.get("resync"))
        else:
            if self.state is None or self.seq is None:
                return "gap"
            if seq <= self.seq:
                return "old"
            if seq != self.seq + 1:
                return "gap"
            if kind == "delta":
                apply_delta(self.state, _body(text))
            if self._resuming:
                self.resumes += 1
        self._resuming = False
        self.seq = seq
        self.match_time_s, self.period = msg.get("match_time_s"), msg.get("period")
        return "ok"


def subscribe(url: str, match_id: str, *, view: str | None = None, every: float | None = None,
              token: str | None = None, **options: Any) -> Subscription:
    """A subscription to ``match_id`` on the server at ``url``; ``async for msg in`` it.

    ``view``: ``all`` (default), ``team:TEAM_ID`` or ``players:ID,ID``; ``every``: seconds
    between deltas (server default 1.0); ``token``: the view token, sent as a bearer header.
    """
    return Subscription(url, match_id, view=view, every=every, token=token, **options)


class SyncSubscription:
    """``for msg in subscribe_sync(...)`` from code without an event loop: the socket runs in
    a background thread; ``state`` is updated in the iterating thread as messages are taken."""

    def __init__(self, url: str, match_id: str, **kw: Any) -> None:
        self._sub = Subscription(url, match_id, **kw)
        self._queue: queue.Queue[tuple[str, dict[str, Any]] | BaseException | None] = queue.Queue()
        self.state: dict[str, Any] | None = None
        self.seq: int | None = None
        self._loop = asyncio.new_event_loop()
        self._task: asyncio.Task[None] | None = None
        self._ready = threading.Event()
        self._thread = threading.Thread(target=self._main, name=f"pacewire-client:{match_id}", daemon=True)
        self._thread.start()
        self._ready.wait()

    def _main(self) -> None:
        async def pump() -> None:
            try:
                async for item in self._sub.stream():
                    self._queue.put(item)
            except asyncio.CancelledError:
                pass
            except BaseException as exc:  # handed to the iterating thread
                self._queue.put(exc)
            finally:
                self._queue.put(None)

        asyncio.set_event_loop(self._loop)
        self._task = self._loop.create_task(pump())
        self._ready.set()
        try:
            self._loop.run_until_complete(self._task)
        finally:
            self._loop.close()

    def __iter__(self) -> Iterator[dict[str, Any]]:
        return self

    def __next__(self) -> dict[str, Any]:
        return self.get()

    def get(self, timeout: float | None = None) -> dict[str, Any]:
        """The next message (state applied); raises queue.Empty after ``timeout`` seconds."""
        item = self._queue.get(timeout=timeout)
        if item is None:
            self._queue.put(None)
            raise StopIteration
        if isinstance(item, BaseException):
            raise item
        text, msg = item
        if msg["type"] == "snapshot":
            self.state = _body(text)
        elif msg["type"] == "delta" and self.state is not None:
            apply_delta(self.state, _body(text))
        self.seq = msg["seq"]
        return msg

    def close(self) -> None:
        task = self._task
        if task is not None:
            try:
                self._loop.call_soon_threadsafe(task.cancel)
            except RuntimeError:  # the loop has already stopped
                pass
        self._thread.join(10)

    def __enter__(self) -> SyncSubscription:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


def subscribe_sync(url: str, match_id: str, **kw: Any) -> SyncSubscription:
    """The blocking form of :func:`subscribe` (same options); close it when done (or use ``with``)."""
    return SyncSubscription(url, match_id, **kw)


def run_until(url: str, match_id: str, until: Callable[[dict[str, Any], dict[str, Any]], bool],
              timeout: float | None = None, **kw: Any) -> dict[str, Any]:
    """Follow the stream until ``until(msg, state)`` is true; returns the state then.

    Raises TimeoutError after ``timeout`` seconds. Runs its own event loop (not from async code).
    """
    async def main() -> dict[str, Any]:
        async with Subscription(url, match_id, **kw) as sub:

            async def follow() -> dict[str, Any]:
                async for msg in sub:
                    if sub.state is not None and until(msg, sub.state):
                        return sub.state
                raise AssertionError("unreachable: the stream reconnects until stopped")

            return await asyncio.wait_for(follow(), timeout)

    return asyncio.run(main())
