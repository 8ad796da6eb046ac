"""The root of pacewire's own exceptions, and the one way a pydantic error becomes a message.

Every error pacewire raises on purpose derives from :class:`PacewireError`;
each keeps the builtin base it had (``ValueError`` for bad input,
``RuntimeError`` for a missing service, ``OSError`` for storage), so callers
may catch either. Inside the service these are raised; on the wire they
become ``error`` messages or ``{"error": {...}}`` bodies, rendered in one place
(:mod:`pacewire.api.errors`).
"""
from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from pydantic import ValidationError


class PacewireError(Exception):
    """Base of every exception pacewire raises on purpose.

    ``code`` is the error's name on the wire (``error`` messages and ``{"error": ...}`` bodies).
    """

    code = "error"


def describe_validation(exc: ValidationError, prefix: str = "", limit: int | None = 10) -> str:
    """One line per problem, ``key.path: message``, joined by ``; ``.

    ``prefix`` is put before every key (``"scale"`` gives ``scale.lease_ms: ...``); a problem at
    the top of the document is named ``prefix`` or, without one, ``body``. pydantic's
    ``Value error, `` lead-in is dropped: the key already says where the value is.
    """
    parts = []
    for err in exc.errors()[:limit]:
        key = ".".join([*([prefix] if prefix else []), *(str(p) for p in err["loc"])]) or "body"
        parts.append(f"{key}: {err['msg'].removeprefix('Value error, ')}")
    return "; ".join(parts)


class NotStored(PacewireError, RuntimeError):
    """The recording or the store could not keep what was sent: nothing of it counts; send it again."""

    code = "not_stored"
