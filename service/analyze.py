"""Offline analysis of a recording with the same engine the live service runs."""
from __future__ import annotations

import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from pacewire.config import Settings, load_settings
from pacewire.engine.match import CLOCK_START_MIN, MatchState
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import PERIODS
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


_CLOCK_S = np.array([CLOCK_START_MIN[p] * 60.0 for p in PERIODS])  # match clock at each period's start, s


def figures_at(folder: Path, settings: Settings, match_id: str, at_s: float,
               events: list[dict[str, Any]]) -> dict[str, Any]:
    """The snapshot body as it was at match time ``at_s``: the engine over the recorded frames
    up to then (the tail finalised, as a stalled feed shows it) plus the match events up to then.
    Blocking: run it in a thread."""
    rec = open_recording(folder)
    state, decoder = new_match(rec.meta, rec.sheet, settings, match_id)
    add_heart_rate(state, rec)  # samples after the cut stay pending: tracking never reaches them
    fps = state.fps
    for first, lines in rec.batches():
        res = decoder.decode_lines(lines, first_line=first)
        b = res.block
        if len(b):
            clock = _CLOCK_S[b.period] + b.slot / fps
            keep = int(np.searchsorted(clock, at_s + 1e-9, side="right"))  # frames are in match-clock order
            if keep < len(b):
                res.block = b.take(slice(0, keep))
                state.ingest(res)
                break
        state.ingest(res)
    cdf = read_events(state, rec)  # those of the match time so far: what had happened by the cut
    cdf.events = [e for e in cdf.events if state.last_t is not None and e.t <= state.last_t]
    state.ingest_events(cdf)
    last_fid = state.last_frame_id if state.frames else None
    for ev in events:
        if applies_by(ev, last_fid, at_s):
            apply_event(state, ev)
    state.freeze()
    return build_snapshot(state)
