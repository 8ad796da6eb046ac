"""Feed faults injected into the recording: a 20 s outage, single-player dropouts,
position jumps, duplicated frames and swapped adjacent frames, each listed in
faults.json with its kind, period, time, duration_s, frame_ids and player_id.

When the outage is on, its slots are simply not written, so ``frame_id`` skips
over it (timestamps jump by the same amount).

Tracking artefacts (off by default, see :mod:`pacewire.replay.synth.artefacts`)
move the written positions off the players (``FaultPlan.shift``) or hide them
(camera-view gaps); they are listed in faults.json the same way.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pacewire.replay.synth import artefacts as models
from pacewire.replay.synth.artefacts import ArtefactPlanner
from pacewire.replay.synth.match import SynthMatch

OUTAGE_S = 20.0
FaultRecord = dict[str, Any]  # one entry of faults.json, as fault_record makes it


@dataclass
class FaultPlan:
    """Injected faults, in slot indices (frame ids)."""

    outage: set[int] = field(default_factory=set)
    hidden: dict[int, set[int]] = field(default_factory=dict)  # frame -> hidden column indices (0..21)
    jumps: dict[int, tuple[int, complex]] = field(default_factory=dict)  # frame -> (column, new position)
    duplicates: set[int] = field(default_factory=set)
    swaps: set[int] = field(default_factory=set)  # frame f: written as f+1 then f
    records: list[FaultRecord] = field(default_factory=list)
    shift: np.ndarray | None = None  # (slots, 22) complex, m: tracking artefacts added to the written positions


def fault_record(kind: str, period: str, time: str, duration_s: float, frame_ids: list[int],
                 player_id: str | None, **extra: object) -> FaultRecord:
    """One entry of faults.json: the fields every fault has, in this order, then its own."""
    return {"kind": kind, "period": period, "time": time, "duration_s": duration_s, "frame_ids": frame_ids,
            "player_id": player_id, **extra}


def _fault_counts(minutes: float) -> dict[str, int]:
    """How many faults of each kind for a recording of ``minutes``."""
    return {
        "dropout": max(4, int(round(minutes / 8.0))),
        "jump": max(3, int(round(minutes / 20.0))),
        "duplicate": max(3, int(round(minutes / 20.0))),
        "out_of_order": max(3, int(round(minutes / 20.0))),
    }


def plan_faults(rng: np.random.Generator, m: SynthMatch, minutes: float, *, outage: bool, dropouts: bool,
                duplicates: bool, out_of_order: bool, jumps: bool, slides: bool = False, camera_gaps: bool = False,
                gnss: bool = False) -> FaultPlan:
    """Choose non-overlapping fault windows (at least 1 s apart, away from period edges and subs);
    then the tracking artefacts switched on (``slides``, ``camera_gaps``, ``gnss``; see
    :mod:`pacewire.replay.synth.artefacts`), per player, clear of those windows."""
    planner = _Planner(rng, m)
    if outage:
        planner.outage()
    counts = _fault_counts(minutes)
    if dropouts:
        planner.dropouts(counts["dropout"])
    if jumps:
        planner.jumps(counts["jump"])
    if duplicates:
        planner.duplicates(counts["duplicate"])
    if out_of_order:
        planner.out_of_order(counts["out_of_order"])
    if slides or camera_gaps or gnss:
        planner.artefacts(slides=slides, camera_gaps=camera_gaps, gnss=gnss)
    fp = planner.plan
    fp.records.sort(key=lambda r: (r["frame_ids"][0] if r["frame_ids"] else -1, r["kind"]))  # whole-match first
    return fp


class _Planner:
    """Places the faults of one match, kind by kind, on a mask of busy slots: the
    first and last 2 s of each period, the substitutions, and every fault placed so
    far with a 1 s margin."""

    def __init__(self, rng: np.random.Generator, m: SynthMatch) -> None:
        tl = m.timeline
        self.rng, self.m, self.tl, self.fps = rng, m, tl, tl.fps
        self.margin = tl.fps  # 1 s
        self.busy = np.zeros(tl.n_slots, bool)
        for start, n in tl.halves:
            self.busy[start:start + 2 * self.fps] = True
            self.busy[max(start + n - 2 * self.fps, start):start + n] = True
        for s in m.subs:
            self.busy[max(s.frame - s.walk_frames - 2 * self.fps, 0):s.frame + 2 * self.fps] = True
        self.ts = tl.timestamps()
        self.plan = FaultPlan()

    def _occupy(self, f: int, length: int) -> None:
        self.busy[max(f - self.margin, 0):f + length + self.margin] = True

    def take(self, length: int) -> int | None:
        """A free window of ``length`` slots (200 random tries), marked busy; None if none found."""
        for _ in range(200):
            f = int(self.rng.integers(0, self.tl.n_slots - length))
            if not self.busy[max(f - self.margin, 0):f + length + self.margin].any():
                self._occupy(f, length)
                return f
        return None

    def record(self, kind: str, f: int, duration_s: float, frame_ids: list[int], player: str | None,
               **extra: object) -> None:
        """List a fault that starts at slot ``f`` (faults.json)."""
        self.plan.records.append(fault_record(kind, self.tl.period(f), self.ts[f], duration_s, frame_ids, player,
                                              **extra))

    def artefacts(self, *, slides: bool, camera_gaps: bool, gnss: bool) -> None:
        """The tracking artefacts switched on, into the plan's ``shift`` and ``hidden``."""
        art = ArtefactPlanner(self.rng, self.m, self.busy, self.record)
        if slides or camera_gaps:
            art.jitter(models.BROADCAST_JITTER_M, "broadcast")
        if slides:
            art.slides()
        if camera_gaps:
            art.camera_gaps()
        if gnss:
            art.gnss()
        self.plan.shift = art.shift
        for f, cols in art.hidden.items():
            self.plan.hidden.setdefault(f, set()).update(cols)

    def outage(self) -> None:
        """The feed outage (OUTAGE_S), in a half long enough for it, clear of the
        substitutions and the period edges when it can be."""
        tl, fps, rng = self.tl, self.fps, self.rng
        length = int(round(OUTAGE_S * fps))
        fits = [h for h, (s, n) in enumerate(tl.halves) if n >= length + 8 * fps]
        if not fits:
            return
        starts = self._clear_starts(length, fits)
        if starts:
            f = int(rng.choice(starts))
        else:
            h = int(rng.choice(fits))
            s, n = tl.halves[h]
            f = s + int(rng.uniform(0.3, 0.6) * (n - length))
        self._occupy(f, length)
        self.plan.outage = set(range(f, f + length))
        self.record("outage", f, OUTAGE_S, list(range(f, f + length)), None,
                    last_frame_before=f - 1, first_frame_after=f + length)

    def _clear_starts(self, length: int, fits: list[int]) -> list[int]:
        """Every start of an outage of ``length`` slots in the halves ``fits`` whose window
        (with the margin) is still free, at least 4 s inside the half."""
        cs = np.concatenate([[0], np.cumsum(self.busy)])
        starts: list[int] = []
        for h in fits:
            f0, f1 = self.tl.halves[h][0] + 4 * self.fps, sum(self.tl.halves[h]) - length - 4 * self.fps
            cand = np.arange(f0, max(f0, f1))
            starts += cand[cs[cand + length + self.margin] - cs[cand - self.margin] == 0].tolist()
        return starts

    def dropouts(self, count: int) -> None:
        """Single players missing from the frames for 0.5-3 s."""
        for _ in range(count):
            dur = float(self.rng.uniform(0.5, 3.0))
            length = max(1, int(round(dur * self.fps)))
            f = self.take(length)
            if f is None:
                continue
            col = int(self.rng.integers(0, 22))
            for g in range(f, f + length):
                self.plan.hidden.setdefault(g, set()).add(col)
            self.record("dropout", f, length / self.fps, list(range(f, f + length)), self.m.player_at(f, col))

    def jumps(self, count: int) -> None:
        """Single-frame position jumps of 15-30 m (staying on the pitch)."""
        for _ in range(count):
            f = self.take(1)
            if f is None:
                continue
            col = int(self.rng.integers(0, 22))
            p = self.m.positions[f, col]
            new = self._jump_to(p)
            if new is None:
                continue
            self.plan.jumps[f] = (col, new)
            self.record("jump", f, 1.0 / self.fps, [f], self.m.player_at(f, col),
                        displacement_m=round(float(abs(new - p)), 2))

    def _jump_to(self, p: complex) -> complex | None:
        """A position 15-30 m from ``p`` inside |x| <= 52, |y| <= 33.5 (32 tries), or None."""
        for _try in range(32):
            dist = float(self.rng.uniform(15.0, 30.0))
            new = p + dist * np.exp(1j * self.rng.uniform(0, 2 * np.pi))
            if abs(new.real) <= 52.0 and abs(new.imag) <= 33.5:
                return new
        return None

    def duplicates(self, count: int) -> None:
        """Frames written twice in a row."""
        for _ in range(count):
            f = self.take(1)
            if f is None:
                continue
            self.plan.duplicates.add(f)
            self.record("duplicate", f, 0.0, [f], None)

    def out_of_order(self, count: int) -> None:
        """Adjacent frames of one period written in swapped order."""
        for _ in range(count):
            f = self.take(2)
            if f is None or self.tl.period(f) != self.tl.period(f + 1):
                continue
            self.plan.swaps.add(f)
            self.record("out_of_order", f, 2.0 / self.fps, [f, f + 1], None, written_order=[f + 1, f])
