"""Reading a recording: a CDF folder with meta.json, match.json and tracking.jsonl[.gz],
hr.jsonl[.gz] when the match had a heart-rate channel (docs/wearables.md), and event.jsonl[.gz],
the CDF event stream, when it had one (pacewire's own control events are events.jsonl)."""
from __future__ import annotations

import gzip
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import orjson

from pacewire.errors import PacewireError

EVENT_FILE = "event.jsonl"  # the CDF event file, named as in the CDF validator's samples (Anzer et al. 2025)


class RecordingError(PacewireError, ValueError):
    """The folder is not a readable CDF recording."""


@dataclass(frozen=True)
class Recording:
    folder: Path
    meta: dict[str, Any]
    sheet: dict[str, Any]
    tracking: Path
    hr: Path | None = None  # heart-rate samples, one JSON object per line
    events: Path | None = None  # CDF events, one per line, in arrival order (corrections after what they correct)

    def lines(self) -> Iterator[bytes]:
        """The tracking file's lines, raw bytes, in file order."""
        yield from _read_lines(self.tracking)

    def hr_lines(self) -> Iterator[bytes]:
        """The heart-rate file's lines (none when the recording has no hr.jsonl)."""
        if self.hr is not None:
            yield from _read_lines(self.hr)

    def event_lines(self) -> Iterator[bytes]:
        """The CDF event file's lines (none when the recording has no event.jsonl)."""
        if self.events is not None:
            yield from _read_lines(self.events)

    def batches(self, size: int = 1500) -> Iterator[tuple[int, list[bytes]]]:
        """(first line number, lines) in batches of ``size`` lines."""
        batch: list[bytes] = []
        first = 1
        for i, line in enumerate(self.lines(), start=1):
            if not batch:
                first = i
            batch.append(line)
            if len(batch) >= size:
                yield first, batch
                batch = []
        if batch:
            yield first, batch


def _read_lines(path: Path) -> Iterator[bytes]:
    opener = gzip.open if path.suffix == ".gz" else open
    with opener(path, "rb") as fh:
        yield from fh


def _first_file(folder: Path, names: tuple[str, ...]) -> Path | None:
    return next((folder / n for n in names if (folder / n).is_file()), None)


def _load_json(path: Path) -> dict[str, Any]:
    try:
        data = orjson.loads(path.read_bytes())
    except FileNotFoundError:
        raise RecordingError(f"{path.name} is missing in {path.parent}") from None
    except orjson.JSONDecodeError as exc:
        raise RecordingError(f"{path} is not valid JSON: {exc}") from None
    if not isinstance(data, dict):
        raise RecordingError(f"{path} must hold a JSON object")
    return data


def open_recording(folder: str | Path) -> Recording:
    """Open a CDF folder; raises RecordingError naming what is missing."""
    folder = Path(folder)
    if not folder.is_dir():
        raise RecordingError(f"{folder} is not a folder")
    meta = _load_json(folder / "meta.json")
    sheet = _load_json(folder / "match.json")
    tracking = _first_file(folder, ("tracking.jsonl", "tracking.jsonl.gz"))
    if tracking is None:
        raise RecordingError(f"no tracking.jsonl or tracking.jsonl.gz in {folder}")
    return Recording(folder, meta, sheet, tracking, _first_file(folder, ("hr.jsonl", "hr.jsonl.gz")),
                     _first_file(folder, (EVENT_FILE, EVENT_FILE + ".gz")))
