"""A state as JSON plus numpy arrays: the checkpoint format, with no pickle anywhere.

The object graph (engine objects, their dicts, lists, tuples, sets, deques,
numpy arrays and scalars) is written as a JSON tree whose arrays are named
entries of a ``.npz`` archive, read back with ``allow_pickle=False``. Only
classes (and ``__reduce__`` constructors) from the modules the caller allows
are ever built on reading: reading a checkpoint runs no code a file chose.
Objects and mutable containers referenced twice come back as one object
(``{"$r": n}``), so shared arrays stay shared. The tree carries
:data:`FORMAT`; any other version is refused with :class:`StateFormatError`.
"""
from __future__ import annotations

import base64
import collections
import enum
import importlib
import io
import math
from collections.abc import Callable
from typing import Any

import numpy as np
import orjson

FORMAT = 1
_JSON_KEY = "__state_json__"


class StateFormatError(ValueError):
    """A checkpoint that cannot be read: damaged, of another format version, or naming a class not allowed."""


def _name(obj: Any) -> str:
    return f"{obj.__module__}:{obj.__qualname__}"


def _allowed(name: str, allowed: tuple[str, ...]) -> bool:
    return any(name.startswith(prefix) for prefix in allowed)


def _resolve(name: str, allowed: tuple[str, ...]) -> Any:
    if not _allowed(name, allowed):
        raise StateFormatError(f"a checkpoint names {name}, which is not allowed")
    module, _, qual = name.partition(":")
    try:
        obj: Any = importlib.import_module(module)
        for part in qual.split("."):
            obj = getattr(obj, part)
    except (ImportError, AttributeError):
        raise StateFormatError(f"a checkpoint names {name}, which does not exist") from None
    return obj


def _float(x: float) -> Any:
    return x if math.isfinite(x) else {"$f": repr(x)}


class _Writer:
    def __init__(self, allowed: tuple[str, ...], keep: Callable[[np.ndarray], np.ndarray]) -> None:
        self.allowed, self.keep = allowed, keep
        self.arrays: list[np.ndarray] = []
        self.memo: dict[int, int] = {}
        self.alive: list[Any] = []  # keeps every memoised object alive, so no id is reused meanwhile

    def _ref(self, obj: Any) -> int | None:
        n = self.memo.get(id(obj))
        if n is None:
            self.memo[id(obj)] = len(self.memo)
            self.alive.append(obj)
        return n

    def enc(self, obj: Any) -> Any:
        if obj is None or isinstance(obj, (bool, str)):
            return obj
        if isinstance(obj, int) and type(obj) is int:
            return obj
        if type(obj) is float:
            return _float(obj)
        if isinstance(obj, np.generic):
            return {"$n": obj.dtype.str, "v": self.enc(obj.item())}
        if isinstance(obj, bytes):
            return {"$b": base64.b64encode(obj).decode()}
        if isinstance(obj, tuple) and type(obj) is tuple:
            return {"$t": [self.enc(v) for v in obj]}
        if isinstance(obj, enum.Enum):
            return {"$e": _name(type(obj)), "v": obj.name}
        if isinstance(obj, np.dtype):
            return {"$dt": obj.str}
        if isinstance(obj, frozenset):
            return {"$fs": [self.enc(v) for v in obj]}
        n = self._ref(obj)
        if n is not None:
            return {"$r": n}
        n = self.memo[id(obj)]
        return self._mutable(obj, n)

    def _mutable(self, obj: Any, n: int) -> Any:
        if isinstance(obj, np.ndarray):
            if obj.dtype.hasobject:
                raise TypeError("an object array cannot be checkpointed")
            self.arrays.append(self.keep(obj))
            return {"$a": len(self.arrays) - 1, "#": n}
        t = type(obj)
        if t is list:
            return {"$l": [self.enc(v) for v in obj], "#": n}
        if t is dict:
            return {"$d": [[self.enc(k), self.enc(v)] for k, v in obj.items()], "#": n}
        if t is set:
            return {"$s": [self.enc(v) for v in obj], "#": n}
        if t is collections.deque:
            return {"$q": [self.enc(v) for v in obj], "max": obj.maxlen, "#": n}
        return self._object(obj, n)

    def _object(self, obj: Any, n: int) -> Any:
        t = type(obj)
        name = _name(t)
        if not _allowed(name, self.allowed):
            raise TypeError(f"{name} is not allowed in a checkpoint")
        if "__reduce__" in vars(t):  # a class that says how it is rebuilt (a constructor and its arguments)
            fn, args = obj.__reduce__()[:2]
            fname = _name(fn)
            if not _allowed(fname, self.allowed):
                raise TypeError(f"{fname} is not allowed in a checkpoint")
            return {"$c": fname, "args": self.enc(tuple(args)), "#": n}
        fields = dict(getattr(obj, "__dict__", {}))
        for slot in getattr(t, "__slots__", ()):
            if hasattr(obj, slot) and slot != "__dict__":
                fields[slot] = getattr(obj, slot)
        return {"$o": name, "f": {k: self.enc(v) for k, v in fields.items()}, "#": n}


class _Reader:
    def __init__(self, arrays: Callable[[int], np.ndarray], allowed: tuple[str, ...]) -> None:
        self.arrays, self.allowed = arrays, allowed
        self.memo: dict[int, Any] = {}

    def dec(self, v: Any) -> Any:
        if v is None or isinstance(v, (bool, int, float, str)):
            return v
        if isinstance(v, list):
            raise StateFormatError("a bare list in a checkpoint")
        if "$r" in v:
            return self.memo[v["$r"]]
        if "$f" in v:
            return float(v["$f"])
        if "$n" in v:
            return np.dtype(v["$n"]).type(self.dec(v["v"]))
        if "$b" in v:
            return base64.b64decode(v["$b"])
        if "$t" in v:
            return tuple(self.dec(x) for x in v["$t"])
        if "$fs" in v:
            return frozenset(self.dec(x) for x in v["$fs"])
        if "$dt" in v:
            return np.dtype(v["$dt"])
        if "$e" in v:
            return _resolve(v["$e"], self.allowed)[v["v"]]
        return self._mutable(v)

    def _mutable(self, v: dict[str, Any]) -> Any:
        n = v["#"]
        if "$a" in v:
            out: Any = self.arrays(v["$a"])
        elif "$l" in v:
            out = self.memo[n] = []
            out.extend(self.dec(x) for x in v["$l"])
        elif "$d" in v:
            out = self.memo[n] = {}
            for k, x in v["$d"]:
                out[self.dec(k)] = self.dec(x)
        elif "$s" in v:
            out = self.memo[n] = set()
            out.update(self.dec(x) for x in v["$s"])
        elif "$q" in v:
            out = self.memo[n] = collections.deque(maxlen=v["max"])
            out.extend(self.dec(x) for x in v["$q"])
        elif "$c" in v:
            out = _resolve(v["$c"], self.allowed)(*self.dec(v["args"]))
        elif "$o" in v:
            cls = _resolve(v["$o"], self.allowed)
            out = self.memo[n] = cls.__new__(cls)
            for k, x in v["f"].items():
                object.__setattr__(out, k, self.dec(x))
        else:
            raise StateFormatError(f"an unknown entry in a checkpoint: {sorted(v)}")
        self.memo[n] = out
        return out


def encode(obj: Any, allowed: tuple[str, ...], keep: Callable[[np.ndarray], np.ndarray] = np.copy
           ) -> tuple[bytes, list[np.ndarray]]:
    """``obj`` as JSON (bytes) and its arrays (each passed through ``keep``: a copy by default, or
    the array itself where the caller knows it is never written again)."""
    w = _Writer(allowed, keep)
    tree = {"format": FORMAT, "state": w.enc(obj)}
    return orjson.dumps(tree), w.arrays


def decode(text: bytes, arrays: Callable[[int], np.ndarray], allowed: tuple[str, ...]) -> Any:
    """The object :func:`encode` wrote; raises StateFormatError."""
    try:
        tree = orjson.loads(text)
    except orjson.JSONDecodeError as exc:
        raise StateFormatError(f"damaged checkpoint: {exc}") from None
    if not isinstance(tree, dict) or tree.get("format") != FORMAT:
        got = tree.get("format") if isinstance(tree, dict) else None
        raise StateFormatError(f"checkpoint format {got!r}, this pacewire reads {FORMAT}")
    try:
        return _Reader(arrays, allowed).dec(tree["state"])
    except (KeyError, TypeError, IndexError, ValueError) as exc:
        if isinstance(exc, StateFormatError):
            raise
        raise StateFormatError(f"damaged checkpoint: {exc!r}") from None


def to_npz(obj: Any, allowed: tuple[str, ...]) -> bytes:
    """``obj`` as the bytes of one ``.npz`` (compressed): its arrays and its JSON tree."""
    text, arrays = encode(obj, allowed, keep=lambda a: a)
    return npz_bytes(text, arrays)


def npz_bytes(text: bytes, arrays: list[np.ndarray]) -> bytes:
    """What :func:`encode` gave as the bytes of one compressed ``.npz``."""
    buf = io.BytesIO()
    entries: dict[str, Any] = {f"a{i}": a for i, a in enumerate(arrays)}
    entries[_JSON_KEY] = np.frombuffer(text, np.uint8)
    np.savez_compressed(buf, **entries)
    return buf.getvalue()


def from_npz(data: bytes, allowed: tuple[str, ...]) -> Any:
    """The object :func:`to_npz` wrote; raises StateFormatError (never unpickles)."""
    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            files = {k: z[k] for k in z.files}
    except (OSError, ValueError, EOFError) as exc:
        raise StateFormatError(f"damaged checkpoint: {exc}") from None
    if _JSON_KEY not in files:
        raise StateFormatError("damaged checkpoint: no state tree")

    def array(i: int) -> np.ndarray:
        try:
            return files[f"a{i}"]
        except KeyError:
            raise StateFormatError(f"damaged checkpoint: array {i} missing") from None

    return decode(files[_JSON_KEY].tobytes(), array, allowed)
