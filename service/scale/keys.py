"""Redis key and channel names, stream entry ids, and the client factory.

One prefix for everything pacewire keeps in Redis; ``{m}`` is a match id
(MATCH_ID characters only), ``{g}`` a subscription stream key
(``view.key|every``).
"""
from __future__ import annotations

from typing import Any

PREFIX = "pw"
MATCHES = f"{PREFIX}:matches"  # set of match ids set up
WANT_CHANNEL = f"{PREFIX}:want"  # gateways announce a new (match, stream) here


def setup(m: str) -> str:
    return f"{PREFIX}:setup:{m}"  # {"meta": ..., "sheet": ...}


def frames(m: str) -> str:
    return f"{PREFIX}:frames:{m}"  # the durable log: one entry per frame (and per event)


def hr(m: str) -> str:
    return f"{PREFIX}:hr:{m}"  # heart-rate log: one entry per accepted sample (docs/wearables.md)


def events(m: str) -> str:
    return f"{PREFIX}:ev:{m}"  # CDF event log: one entry per accepted event version (corrections too)


def event_ids(m: str) -> str:
    return f"{PREFIX}:evid:{m}"  # hash: event id -> its accepted content, shared by ingest nodes


def hr_gate(m: str) -> str:
    return f"{PREFIX}:hrgate:{m}"  # hash: v (version), g (ingest's per-player heart-rate gate), shared by nodes


def counts(m: str) -> str:
    # hash: rejected / duplicates / late / resent / after_end (and hr_, event_ ones) counted at ingest
    return f"{PREFIX}:counts:{m}"


def ended(m: str) -> str:
    return f"{PREFIX}:ended:{m}"  # set while the match has ended: ingest refuses frames (a period_start clears it)


def lease(m: str) -> str:
    return f"{PREFIX}:lease:{m}"


def checkpoint(m: str) -> str:
    return f"{PREFIX}:checkpoint:{m}"


def recorded(m: str) -> str:
    """Hash: the stream positions the recorder role has written to disk (``frames``, ``hr``, ``ev``)."""
    return f"pw:recorded:{m}"


def snapshot(m: str) -> str:
    return f"{PREFIX}:snapshot:{m}"  # full snapshot message (REST reads)


def summary(m: str) -> str:
    return f"{PREFIX}:summary:{m}"


def want(m: str) -> str:
    return f"{PREFIX}:want:{m}"  # hash: stream key -> expiry (epoch ms)


def out_channel(m: str, g: str) -> str:
    return f"{PREFIX}:out:{m}:{g}"


def out_buffer(m: str, g: str) -> str:
    return f"{PREFIX}:buf:{m}:{g}"  # resume buffer: stream, entry id = seq-0


def out_snapshot(m: str, g: str) -> str:
    return f"{PREFIX}:gsnap:{m}:{g}"  # the stream's snapshot text at its latest seq


def stream_key(view_key: str, every: float) -> str:
    """The subscription stream a (view, cadence) pair maps to, as the broadcaster groups them."""
    return f"{view_key}|{round(every, 4)!r}"


def split_stream_key(g: str) -> tuple[str, float]:
    view_key, _, every = g.rpartition("|")
    return view_key, float(every)


def frame_entry_id(frame_id: int) -> str:
    """Explicit entry id ``(F+1)-0`` for frame F (events after it are ``(F+1)-1``, ``-2``...):
    Redis refuses an id not above the stream's top, so a duplicate or late frame is
    refused by Redis itself, whichever ingest node sends it."""
    return f"{frame_id + 1}-0"


def seq_of(text: str) -> int:
    """The seq of a message text (the envelope puts it third, after two plain strings)."""
    i = text.index('"seq":') + 6
    return int(text[i:text.index(",", i)])


def connect(url: str, timeout_s: float = 2.0, max_connections: int = 1000) -> Any:
    """An asyncio Redis client; errors say how to install redis-py if missing.

    The pool blocks: a burst of concurrent commands (hundreds of subscribers
    connecting at once) waits up to ``timeout_s`` for one of ``max_connections``
    connections, where redis-py's default pool (100 since redis-py 6) fails at once.
    """
    try:
        import redis.asyncio as aioredis
        from redis.backoff import NoBackoff
        from redis.retry import Retry
    except ImportError as exc:  # pragma: no cover - depends on the install
        raise SystemExit("pacewire: the scale roles need redis-py: pip install 'pacewire[scale]'") from exc
    pool = aioredis.BlockingConnectionPool.from_url(
        url, max_connections=max_connections, timeout=timeout_s, socket_timeout=timeout_s,
        socket_connect_timeout=timeout_s, retry=Retry(NoBackoff(), 1), health_check_interval=10)
    client = aioredis.Redis(connection_pool=pool)
    client.auto_close_connection_pool = True  # the client owns its pool, as from_url makes it
    return client
