"""Reports from a recording, offline: ``pacewire report FOLDER --out DIR``.

The recording runs through the same engine as live (decoder, MatchState),
then the same report builder writes the half-time report (the state as it
stood when the first half ended) and the full-time report. For the same
frames, the CSV and JSON equal those the live service wrote.
"""
from __future__ import annotations

import argparse
import copy
import sys
import time
from dataclasses import replace
from pathlib import Path
from typing import Any, TextIO

from pacewire.config import Settings
from pacewire.engine.blocks import block_series
from pacewire.engine.match import MatchState
from pacewire.engine.snapshot import build_snapshot
from pacewire.engine.types import PERIOD_INDEX, Roster
from pacewire.reports.alerts import Alerter, evaluate_state, new_alerter, rules_from_settings
from pacewire.reports.builder import ReportInput, build_report, report_kind
from pacewire.wire.recording import Recording, open_recording
from pacewire.wire.rules import load_budgets


class ProgressBar:
    """A one-line progress bar on stderr (redrawn at most ten times a second)."""

    def __init__(self, total: int, label: str, stream: TextIO | None = None, width: int = 30) -> None:
        self.total = max(total, 1)
        self.label = label
        self.stream = stream or sys.stderr
        self.width = width
        self.done = 0
        self.t0 = time.monotonic()
        self._drawn = -1.0

    def update(self, n: int) -> None:
        self.done += n
        now = time.monotonic()
        if now - self._drawn >= 0.1:
            self._draw(now)

    def _draw(self, now: float) -> None:
        self._drawn = now
        share = min(self.done / self.total, 1.0)
        fill = int(round(share * self.width))
        self.stream.write(f"\r{self.label} [{'#' * fill}{'.' * (self.width - fill)}] {share:4.0%} "
                          f"{now - self.t0:5.1f} s")
        self.stream.flush()

    def close(self, note: str = "") -> None:
        self.done = self.total
        self._draw(time.monotonic())
        self.stream.write(f"  {note}\n" if note else "\n")
        self.stream.flush()


def _size(rec: Recording) -> int:
    """Uncompressed bytes of the tracking file (gzip keeps it, mod 2^32, in its last 4 bytes)."""
    if rec.tracking.suffix == ".gz":
        with open(rec.tracking, "rb") as fh:
            fh.seek(-4, 2)
            return int.from_bytes(fh.read(4), "little")
    return rec.tracking.stat().st_size


def run_recording(folder: str | Path, settings: Settings, progress: bool = True, batch: int = 1500,
                  alerts: bool = False) -> tuple[MatchState, Recording, int, list[dict[str, Any]]]:
    """Run a recording through the engine (as ``pacewire analyze`` does) with a progress
    bar on stderr. Returns (finished state, recording, bad lines skipped, alerts). Heart-rate
    samples (hr.jsonl) go in first: they count as tracking reaches their time, as live; so do the
    CDF events (event.jsonl): the phases depend on the final events only. With ``alerts`` (and
    alerts enabled in the settings), the config's rules and budgets are evaluated at every completed
    second, as live (no history baselines offline), the frames going in a second at a time."""
    from pacewire.analyze import add_heart_rate, new_match, read_events

    rec = open_recording(folder)
    state, decoder = new_match(rec.meta, rec.sheet, settings)
    alerter = offline_alerter(settings, state.roster) if alerts else None
    bad = len(add_heart_rate(state, rec))
    events = read_events(state, rec)
    bad += events.rejected
    state.ingest_events(events)
    bar = ProgressBar(_size(rec), f"{state.roster.match_id}: frames") if progress else None
    second: tuple[int, int] | None = None
    for first, lines in rec.batches(state.fps if alerter is not None else batch):
        res = decoder.decode_lines(lines, first_line=first)
        bad += len(res.errors)
        state.ingest(res)
        cur = state.current
        if alerter is not None and cur is not None and (cur.index, cur.bins.complete) != second:
            second = (cur.index, cur.bins.complete)
            evaluate_state(alerter, state, build_snapshot(state), settings)
        if bar is not None:
            bar.update(sum(len(line) for line in lines))
    state.finish()
    if bar is not None:
        bar.close(f"{state.frames} frames, {bad} bad lines skipped")  # tracking and heart-rate lines
    return state, rec, bad, list(alerter.raised) if alerter is not None else []


def offline_alerter(settings: Settings, roster: Roster) -> Alerter | None:
    """The alerter a recording gets offline: the config's rules and budgets file (None when alerts are off)."""
    if not settings.alerts.enabled:
        return None
    alerter = new_alerter(settings, rules_from_settings(settings), tuple(p.id for p in roster.players))
    if settings.alerts.budgets_file:
        ids = set(roster.index)
        alerter.set_budgets({pid: c for pid, c in load_budgets(settings.alerts.budgets_file).players.items()
                             if pid in ids})
    return alerter


def state_until(state: MatchState, period_index: int) -> MatchState:
    """The state as it stood when period ``period_index`` ended: later periods left out.

    Ended periods never change again, so a shallow copy sharing them is safe;
    the copy gets its own snapshot cache. Heart-rate sums are kept per period
    too: the view keeps those of its periods only. (The latest and the peak
    bpm are the match's as received: the engine keeps no per-period copy.)"""
    if state.current is None or state.current.index <= period_index:
        return state
    view = copy.copy(state)
    view.periods = [p for p in state.periods if p.index <= period_index]
    view.__dict__.pop("_snapshot_cache", None)
    heart = getattr(state, "heart", None)
    if heart is not None:
        view.heart = copy.copy(heart)
        view.heart.bins = {k: b for k, b in heart.bins.items() if k <= period_index}
    return view


def report_input(state: MatchState, period_index: int, source: str, created_at: float, intensity_block_min: int,
                 now: float | None = None, extra_reasons: list[dict[str, str]] | None = None,
                 score: list[int] | None = None) -> ReportInput:
    """What a report of the match up to the end of ``period_index`` is built from
    (cheap: one snapshot and the block sums of ``intensity_block_min`` minutes; run it
    where the state lives)."""
    view = state_until(state, period_index)
    snap = build_snapshot(view, now=now, extra_reasons=extra_reasons)
    if score is not None:
        for k, tid in enumerate(state.roster.team_ids):
            snap["teams"][tid]["score"] = score[k]
    series = block_series(view, intensity_block_min, "split")
    name = view.period_name() or "first_half"
    return ReportInput(report_kind(name), snap, series, source, created_at)


def source_of(meta: dict[str, Any]) -> str:
    """replay for data collected live (the same engine gives the live figures), offline otherwise."""
    timing = ((meta.get("meta") or {}).get("tracking") or {}).get("collection_timing")
    return "replay" if timing == "live" else "offline"


def build_offline(folder: str | Path, out: str | Path, settings: Settings, progress: bool = True
                  ) -> list[dict[str, Any]]:
    """Write the half-time and full-time reports of a recording under ``out``."""
    state, rec, _, alerts = run_recording(folder, settings, progress, alerts=True)
    source = source_of(rec.meta)
    out = Path(out)
    entries = []
    indices = sorted({p.index for p in state.periods})
    wanted = []
    if PERIOD_INDEX["first_half"] in indices:
        wanted.append(PERIOD_INDEX["first_half"])
    if indices and indices[-1] > PERIOD_INDEX["first_half"]:
        wanted.append(indices[-1])
    for idx in wanted:
        t0 = time.perf_counter()
        inp = report_input(state, idx, source, time.time(), settings.reports.intensity_block_min)
        inp = replace(inp, alerts=[a for a in alerts if PERIOD_INDEX.get(a.get("period") or "", 0) <= idx])
        entry = build_report(inp, out, settings.reports.low_coverage)
        entries.append(entry)
        if progress:
            print(f"{inp.kind}: {out / inp.kind / 'report.html'} ({time.perf_counter() - t0:.1f} s)", file=sys.stderr)
    return entries


def cli_report(args: argparse.Namespace) -> int:
    """``pacewire report``; errors go up to the command line, which prints them once."""
    from pacewire.config import load_settings

    entries = build_offline(args.folder, args.out, load_settings(args.config), progress=not args.quiet)
    if not entries:
        print("pacewire: the recording holds no period to report on", file=sys.stderr)
        return 1
    for e in entries:
        print(Path(args.out) / e["kind"] / "report.html")
    return 0


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("folder", help="a CDF folder (meta.json, match.json, tracking.jsonl[.gz], hr.jsonl if any)")
    p.add_argument("--out", required=True, help="folder for half_time/ and full_time/")
    p.add_argument("--config", help="a TOML file overriding config/default.toml")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
