"""The match id: the name of a match in every path, Redis key and data folder."""
from __future__ import annotations

import re

from pacewire.errors import PacewireError

MATCH_ID = re.compile(r"^[A-Za-z0-9_.-]{1,64}$")


class BadMatchId(PacewireError, ValueError):
    code = "bad_match_id"


def is_match_id(text: str) -> bool:
    """1-64 letters, digits, ``_ . -``, and not ``.`` or ``..`` (it names a folder)."""
    return bool(MATCH_ID.match(text)) and text not in (".", "..")


def check_match_id(text: str) -> str:
    if not is_match_id(text):
        raise BadMatchId(f"match id {text!r} must match {MATCH_ID.pattern} and not be . or ..")
    return text
