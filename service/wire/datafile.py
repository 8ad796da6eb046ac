"""TOML and JSON data files (config, alert rules, load budgets, heart-rate profiles), read with
errors that name the file and what is wrong with it."""
from __future__ import annotations

import json
import tomllib
from pathlib import Path
from typing import Any


def read_data_file(path: Path, what: str, error: type[Exception] = ValueError, allow_json: bool = True) -> Any:
    """The data of a UTF-8 file: JSON when its name ends in ``.json`` (and ``allow_json``), else TOML.

    ``what`` names the file in messages (``"rules file"``); a file that cannot be read or parsed
    raises ``error`` with that name and the path, e.g. ``rules file r.toml is not valid TOML: ...``.
    """
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:  # a ValueError: before the NUL-in-the-name case below
        raise error(f"{what} {path} is not UTF-8 text: {exc.reason} at byte {exc.start}") from None
    except OSError as exc:
        raise error(f"cannot read {what} {path}: {exc.strerror}") from None
    except ValueError as exc:  # a NUL in the name
        raise error(f"cannot read {what} {str(path)!r}: {exc}") from None
    is_json = allow_json and path.suffix.lower() == ".json"
    try:
        return json.loads(text) if is_json else tomllib.loads(text)
    except json.JSONDecodeError as exc:
        raise error(f"{what} {path} is not valid JSON: {exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{what} {path} is not valid TOML: {exc}") from None
    except RecursionError:
        raise error(f"{what} {path} nests tables or arrays too deeply") from None
