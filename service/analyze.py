"""Offline analysis of a recording with the same engine the live service runs."""
from __future__ import annotations

import copy
import gzip
import math
import sys
import threading
from bisect import bisect_right
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from pacewire.config import Settings, load_settings
from pacewire.engine.match import CLOCK_START_MIN, MatchState
from pacewire.engine.rewind import Checkpoint, checkpoint, resume
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import PERIOD_INDEX, PERIODS
from pacewire.errors import PacewireError
from pacewire.events import applies_by, apply_event
from pacewire.params import match_params
from pacewire.wire.cdf import FrameDecoder, FrameError, gnss_tolerances, parse_setup
from pacewire.wire.events import EventDecoder, EventResult
from pacewire.wire.heart import HrDecoder
from pacewire.wire.recording import EVENT_FILE, Recording, open_recording


@dataclass
class AnalyzeResult:
    state: MatchState
    errors: list[FrameError] = field(default_factory=list)
    error_count: int = 0
    event_errors: list[FrameError] = field(default_factory=list)  # refused lines of event.jsonl (line numbers)

    def snapshot(self) -> dict[str, Any]:
        return build_snapshot(self.state)


class StrictError(PacewireError, ValueError):
    """A frame refused under ``--strict``; the message names its line, code and reason."""

    def __init__(self, error: FrameError, file: str = "") -> None:
        super().__init__(f"{file}line {error.line}: {error.code}: {error.message}")
        self.error = error


def new_match(meta: dict[str, Any], sheet: dict[str, Any], settings: Settings,
              match_id: str | None = None) -> tuple[MatchState, FrameDecoder]:
    """Engine state and decoder for a match set up from CDF meta + sheet."""
    roster = parse_setup(meta, sheet, match_id, gnss_tolerances(settings))
    decoder = FrameDecoder(roster, settings.decode.outside_margin_m, settings.decode.recent_ids)
    return MatchState(roster, match_params(settings, roster)), decoder


def add_heart_rate(state: MatchState, rec: Recording) -> list[FrameError]:
    """The recording's heart-rate samples (hr.jsonl), if any, into the state; they count as
    tracking reaches their time, so adding them all first gives the live figures. Returns
    the lines refused."""
    if rec.hr is None:
        return []
    res = HrDecoder(state.roster, state.params.heart, recorded=True).decode_lines(rec.hr_lines())
    state.ingest_heart(res)
    return res.errors


def read_events(state: MatchState, rec: Recording) -> EventResult:
    """The recording's CDF events (event.jsonl), if any, decoded in file order (corrections after what
    they correct, as they arrived); the phases depend on the final events only."""
    return EventDecoder(state.roster).decode_lines(rec.event_lines())


def analyze_folder(folder: str | Path, settings: Settings | None = None, strict: bool = False,
                   on_error: Callable[[FrameError], None] | None = None,
                   keep_errors: int = 100, batch: int = 250) -> AnalyzeResult:
    """Run the engine over a CDF folder; bad lines are skipped and counted.

    ``batch``: lines decoded and applied at a time; the figures do not depend on it.
    Ten seconds of 25 Hz frames keep a batch's objects and arrays in the CPU caches
    (1500 lines took ~20% longer)."""
    settings = settings or load_settings()
    rec = open_recording(folder)
    state, decoder = new_match(rec.meta, rec.sheet, settings)
    result = AnalyzeResult(state)
    for err in add_heart_rate(state, rec):
        if strict:
            raise StrictError(err)
        result.error_count += 1
        if len(result.errors) < keep_errors:
            result.errors.append(err)
        if on_error is not None:
            on_error(err)
    events = read_events(state, rec)
    if events.errors and strict:
        raise StrictError(events.errors[0], f"{EVENT_FILE} ")
    result.event_errors = events.errors[:keep_errors]
    state.ingest_events(events)
    for first, lines in rec.batches(batch):
        res = decoder.decode_lines(lines, first_line=first)
        if res.errors:
            if strict:
                raise StrictError(res.errors[0])
            result.error_count += len(res.errors)
            for err in res.errors:
                if len(result.errors) < keep_errors:
                    result.errors.append(err)
                if on_error is not None:
                    on_error(err)
        state.ingest(res)
    state.finish()
    return result


def print_table(snapshot: dict[str, Any], out: Any = sys.stdout) -> None:
    """A readable per-player table of the final figures."""
    cols = [("#", "jersey_number", "{:>3}"), ("team", "team_id", "{:<10.10}"), ("player", "name", "{:<22.22}"),
            ("min", "minutes", "{:>6.1f}"), ("dist m", "distance_m", "{:>8.0f}"), ("m/min", "m_per_min", "{:>6.1f}"),
            ("HSR m", "hsr_m", "{:>6.0f}"), ("spr m", "sprint_m", "{:>6.0f}"), ("HSR#", "hsr_efforts", "{:>5}"),
            ("spr#", "sprints", "{:>5}"), ("acc", "accels", "{:>4}"), ("dec", "decels", "{:>4}"),
            ("vmax", "max_speed_ms", "{:>5.2f}"), ("W/kg", "metabolic_power_wkg", "{:>5.2f}"),
            ("cov", "coverage", "{:>5.2f}")]
    head = "  ".join(f"{h:>{len(fmt.format(0) if 'f' in fmt or '>' in fmt else h)}}" for h, _, fmt in cols)
    print(head, file=out)
    players = sorted(snapshot["players"].items(), key=lambda kv: (kv[1]["team_id"], kv[1]["jersey_number"]))
    for pid, p in players:
        if not p["minutes"]:
            continue
        cells = []
        for _, key, fmt in cols:
            v = p.get(key)
            cells.append(fmt.format(v if v is not None else 0) if key != "name" else fmt.format(p.get("name") or pid))
        print("  ".join(cells), file=out)
    h = snapshot["health"]
    print(f"\nframes {h['frames']}  rejected {h['rejected']}  duplicates {h['duplicates']}  late {h['late']}  "
          f"jumps {h['jumps']}", file=out)
    print("Figures are estimates from positional data; decisions on injury, return-to-play and "
          "substitution stay with the club's qualified medical and performance staff.", file=out)


class MatchTimeError(PacewireError, ValueError):
    """A match time that names no single moment of the recorded match; the message says what to add."""

    code = "bad_request"


def figures_at(folder: Path, settings: Settings, match_id: str, at_s: float,
               events: list[dict[str, Any]], period: str | None = None) -> dict[str, Any]:
    """The snapshot body as it was at match clock ``at_s`` (of ``period``, or of the one period whose
    recorded clock holds it): the engine over the recorded frames up to then (the tail finalised, as a
    stalled feed shows it) plus the match events and CDF events up to then. Blocking: run it in a thread. Each call
    reads the whole recording up to then; :class:`FiguresIndex` keeps checkpoints instead."""
    return FiguresIndex(folder, settings, match_id).figures(at_s, events, period)


@dataclass
class _Point:
    """All frames before byte ``offset`` (line ``line``) of the tracking file applied, and nothing after."""

    key: int  # _key of the last frame applied (-1: none)
    offset: int
    line: int
    state: Checkpoint
    decoder: FrameDecoder


def _key(period: np.ndarray | int, slot: np.ndarray | int) -> Any:
    """Frames in recording order as one increasing number: period index, then slot."""
    return np.asarray(period, np.int64) * (1 << 40) + np.asarray(slot, np.int64)


class FiguresIndex:
    """Figures at an earlier match time without reading the whole recording each time.

    The first call runs the engine over the recording and keeps a checkpoint every ``every_s`` of
    match clock (:mod:`pacewire.engine.rewind`: they share the per-second history, so a 95-minute
    match keeps a few MB); later calls go on from where the recording had reached (a live match
    grows) and answer from the last checkpoint before the asked time, so they run the engine over
    at most ``every_s`` of frames. The answer equals :func:`figures_at`'s reading from the start
    (the engine's figures do not depend on how frames are split into blocks). A heart-rate file that
    changed, or a tracking file that shrank, starts the index afresh. Thread-safe."""

    def __init__(self, folder: Path, settings: Settings, match_id: str | None = None, every_s: float = 120.0) -> None:
        self.folder = Path(folder)
        self.settings = settings
        self.match_id = match_id
        self.every_s = every_s
        self._lock = threading.Lock()
        self._points: list[_Point] = []
        self._head: tuple[MatchState, FrameDecoder, int, int] | None = None  # state, decoder, offset, line
        self._hr_size = -1
        self._read_all = False
        self.rec: Recording | None = None

    def figures(self, at_s: float, events: list[dict[str, Any]], period: str | None = None) -> dict[str, Any]:
        """The snapshot body at match clock ``at_s`` (s) of ``period`` (a PERIODS name; None: the one
        recorded period whose clock holds ``at_s``). Raises MatchTimeError when that is ambiguous or
        names a period the recording does not hold."""
        with self._lock:
            self._extend()
            head = self._head
            assert head is not None and self.rec is not None
            target, period_idx = self._target(head[0], at_s, period)
            point = self._points[max(bisect_right([p.key for p in self._points], target) - 1, 0)]
            state, decoder = resume(point.state), _copy_decoder(point.decoder)
            for first, lines, _ in _lines_from(self.rec.tracking, point.offset, point.line, 250):
                res = decoder.decode_lines(lines, first_line=first)
                b = res.block
                if len(b):
                    keep = int(np.searchsorted(_key(b.period, b.slot), target, side="right"))
                    if keep < len(b):
                        res.block = b.take(slice(0, keep))
                        state.ingest(res)
                        break
                state.ingest(res)
            cdf = read_events(state, self.rec)  # those of the match time so far: what had happened by the cut
            cdf.events = [e for e in cdf.events if state.last_t is not None and e.t <= state.last_t]
            state.ingest_events(cdf)
        last_fid = state.last_frame_id if state.frames else None
        for ev in events:
            if _happened(ev, last_fid, period_idx, at_s):
                apply_event(state, ev)
        state.freeze()
        return build_snapshot(state)

    def _target(self, head: MatchState, at_s: float, period: str | None) -> tuple[int, int | None]:
        """The key of the last frame to keep for ``at_s`` of ``period`` (see figures), and that period's
        index (None: before the first period)."""
        fps = head.fps
        spans = {}
        for p in head.periods:
            lo = CLOCK_START_MIN[p.name] * 60.0
            spans[p.name] = (p.index, lo, lo + max(p.last_slot, 0) / fps)
        if period is None:
            holding = [name for name, (_, lo, hi) in spans.items() if lo <= at_s <= hi + 1.0 / fps]
            if len(holding) > 1:
                raise MatchTimeError(f"match time {_clock(at_s)} is in {' and in '.join(holding)} (stoppage time "
                                     f"overlaps the next period's clock): add period={holding[0]} or "
                                     f"period={holding[1]}")
            before = [name for name, (_, lo, _) in spans.items() if lo <= at_s]
            if not before:
                return -1, None  # before the first frame
            period = holding[0] if holding else before[-1]  # in a break or after the last frame: all before it
        if period not in PERIOD_INDEX:
            raise MatchTimeError(f"period must be one of {', '.join(PERIODS)}")
        if period not in spans:
            raise MatchTimeError(f"the recording holds no {period} (it has {', '.join(spans) or 'no period'})")
        idx, lo, _ = spans[period]
        if at_s < lo:
            raise MatchTimeError(f"{period} starts at {_clock(lo)}: {_clock(at_s)} is before it")
        return int(_key(idx, math.floor((at_s - lo) * fps + 1e-6))), idx

    def extend(self) -> None:
        """Read what the recording holds beyond the last call now (a live match warms its index at each
        report, so a later question waits for little). Blocking: run it in a thread."""
        with self._lock:
            self._extend()

    def _extend(self) -> None:
        """Read the recording on from the head, keeping a checkpoint every ``every_s`` of match clock."""
        rec = open_recording(self.folder)
        if self._head is not None and self._read_all:
            return  # a gzip recording is a finished one: read once
        hr_size = rec.hr.stat().st_size if rec.hr is not None else 0
        if self._head is not None and (hr_size != self._hr_size or _size_of(rec.tracking) < self._head[2]):
            self._points, self._head = [], None  # heart rate came since, or the recording was cut: afresh
        if self._head is None:
            state, decoder = new_match(rec.meta, rec.sheet, self.settings, self.match_id)
            add_heart_rate(state, rec)  # samples after a cut stay pending: tracking never reaches them
            self._head, self._hr_size = (state, decoder, 0, 1), hr_size
            self._points = [_Point(-1, 0, 1, checkpoint(state), _copy_decoder(decoder))]
        self.rec = rec
        state, decoder, offset, line = self._head
        due = self._next_due(state)
        for first, lines, end in _lines_from(rec.tracking, offset, line, 250):
            state.ingest(decoder.decode_lines(lines, first_line=first))
            offset, line = end, first + len(lines)
            if state.frames and _elapsed(state) >= due:
                cur = state.current
                assert cur is not None
                key = int(_key(cur.index, cur.last_slot))
                self._points.append(_Point(key, offset, line, checkpoint(state), _copy_decoder(decoder)))
                due = self._next_due(state)
        self._head = (state, decoder, offset, line)
        self._read_all = rec.tracking.suffix == ".gz"

    def _next_due(self, state: MatchState) -> float:
        return (math.floor(_elapsed(state) / self.every_s) + 1) * self.every_s


def _copy_decoder(decoder: FrameDecoder) -> FrameDecoder:
    """A decoder with its own frame gate (the roster and its projection are shared: never changed)."""
    return copy.deepcopy(decoder, {id(decoder.roster): decoder.roster})


def _happened(ev: dict[str, Any], last_fid: int | None, period_idx: int | None, at_s: float) -> bool:
    """Whether a match event had happened by then: by its frame when it names one, else by its period
    and match clock (the clocks of two periods overlap in stoppage time)."""
    p = ev.get("period")
    if "frame_id" not in ev and p in PERIOD_INDEX and period_idx is not None and PERIOD_INDEX[p] != period_idx:
        return PERIOD_INDEX[p] < period_idx
    return applies_by(ev, last_fid, at_s)


def _elapsed(state: MatchState) -> float:
    """Seconds of play applied over every period (grows with every frame, across the breaks)."""
    return sum(max(p.last_slot, 0) + 1 for p in state.periods) / state.fps


def _clock(at_s: float) -> str:
    s = int(round(at_s))
    return f"{s // 60}:{s % 60:02d}"


def _size_of(path: Path) -> int:
    """Bytes of the tracking file as lines are read from it (uncompressed for a gzip file)."""
    if path.suffix == ".gz":
        return 1 << 62  # a finished recording: never cut
    return path.stat().st_size


def _lines_from(path: Path, offset: int, line: int, size: int) -> Iterator[tuple[int, list[bytes], int]]:
    """(first line number, lines, byte offset after them) in batches of ``size`` complete lines, from byte
    ``offset`` (line number ``line``); a last line still being written (no newline yet) is left for later."""
    opener: Any = gzip.open if path.suffix == ".gz" else open
    with opener(path, "rb") as fh:
        fh.seek(offset)
        batch: list[bytes] = []
        for raw in fh:
            if not raw.endswith(b"\n"):
                break
            batch.append(raw)
            offset += len(raw)
            if len(batch) >= size:
                yield line, batch, offset
                line += len(batch)
                batch = []
        if batch:
            yield line, batch, offset
