"""Messages out (the contract in README, "Consuming the stream"): the envelope, deltas between states,
and their codec."""
from __future__ import annotations

from typing import Any

import orjson

CONTRACT_VERSION = 1
_MISSING = object()


def envelope(kind: str, match_id: str, seq: int, match_time_s: float, period: str | None, /,
             **body: Any) -> dict[str, Any]:
    """Every message: type, match_id, seq, match_time_s, period, v; body fields beside them."""
    return {"type": kind, "match_id": match_id, "seq": seq, "match_time_s": match_time_s, "period": period,
            "v": CONTRACT_VERSION, **body}


def snapshot_message(match_id: str, snap: dict[str, Any]) -> dict[str, Any]:
    """The ``snapshot`` message of a snapshot body, outside any stream (REST reads, ``analyze --json``)."""
    body = {k: snap[k] for k in ("players", "teams", "health", "match_status", "alerts") if k in snap}
    return envelope("snapshot", match_id, 0, snap["match_time_s"], snap["period"], **body)


def diff(old: Any, new: Any) -> Any:
    """The leaves of ``new`` that differ from ``old`` (nested dicts); _MISSING if none.

    A key that disappeared is sent as None. A value that is the very object of ``old`` is skipped
    without looking inside (snapshots reuse unchanged parts, see service/engine/snapshot.py).
    """
    if old is new:
        return _MISSING
    if type(old) is not dict or type(new) is not dict:
        return _MISSING if old == new else new
    out: dict[str, Any] = {}
    get = old.get
    kept = 0  # keys of new also in old: when all of old's, none disappeared
    for key, value in new.items():
        prev = get(key, _MISSING)
        if prev is value:
            kept += 1
            continue
        if prev is _MISSING:
            out[key] = value
            continue
        kept += 1
        if type(value) is dict and type(prev) is dict:
            d = diff(prev, value)
            if d is not _MISSING:
                out[key] = d
        elif prev != value:
            out[key] = value
    if kept != len(old):
        for key in old:
            if key not in new:
                out[key] = None
    return out if out else _MISSING


def changed(old: Any, new: Any) -> dict[str, Any] | None:
    d = diff(old, new)
    return None if d is _MISSING else d


def apply_delta(state: dict[str, Any], delta: dict[str, Any]) -> dict[str, Any]:
    """Apply a delta body to a state dict in place (what a client does)."""
    for key, value in delta.items():
        if type(value) is dict and type(state.get(key)) is dict:
            apply_delta(state[key], value)
        else:
            state[key] = value
    return state


def dumps(msg: dict[str, Any]) -> bytes:
    return orjson.dumps(msg)
