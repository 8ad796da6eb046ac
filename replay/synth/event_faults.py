"""Faults of the fictional event stream, and its lines in the order they arrive.

An event feed is coded by people and sent live; it fails in its own ways:

* ``event_gap``: the feed drops out and the events of 90 s of play never come;
* ``event_lag``: for three minutes the events come 20 s late (their lines sit after those of later events);
* ``event_correction``: an event first sent wrong (timed 3 s late, or naming a team-mate) and sent
  again under its id, correct, 30-90 s later. The final events are the true ones.

event.jsonl holds the lines in arrival order, as a live server would record them; each fault is listed in
faults.json with its kind, period, time, duration_s, no frame ids, and the event ids it touched.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pacewire.replay.synth.faults import FaultRecord, fault_record
from pacewire.replay.synth.match import SynthMatch

GAP_S = 90.0
LAG_WINDOW_S = 180.0
LAG_S = 20.0
WRONG_TIME_S = 3.0
EDGE_S = 120.0  # faults keep this far from the edges of a half, s


@dataclass
class EventFeed:
    """The event lines as they arrive, and the faults that shaped them."""

    objects: list[dict[str, Any]] = field(default_factory=list)  # arrival order
    records: list[FaultRecord] = field(default_factory=list)


def _window(rng: np.random.Generator, m: SynthMatch, length_s: float, busy: list[tuple[int, int]]
            ) -> tuple[int, int] | None:
    """A stretch of ``length_s`` inside a half, clear of the edges and of ``busy`` stretches (slots)."""
    fps = m.timeline.fps
    length = int(length_s * fps)
    for _try in range(100):
        start, n = m.timeline.halves[int(rng.integers(0, 2))]
        edge = min(int(EDGE_S * fps), n // 6)  # a short match: a sixth of the half
        lo, hi = start + edge, start + n - edge - length
        if hi <= lo:
            continue
        f = int(rng.integers(lo, hi))
        if all(f + length <= a or f >= b for a, b in busy):
            return f, f + length
    return None


def plan_event_feed(rng: np.random.Generator, m: SynthMatch, objs: list[dict[str, Any]], minutes: float, *,
                    gap: bool, lag: bool, corrections: bool) -> EventFeed:
    """Apply the event faults that are switched on to the true events ``objs`` (time order)."""
    fps = m.timeline.fps
    ts = m.timeline.timestamps()
    frames = [int(o["tracking"]["frame_id"]) for o in objs]
    arrival = [float(f) for f in frames]
    keep = [True] * len(objs)
    out = EventFeed()
    busy: list[tuple[int, int]] = []
    if gap and (w := _window(rng, m, GAP_S, busy)):
        busy.append(w)
        lost = [k for k, f in enumerate(frames) if w[0] <= f < w[1]]
        for k in lost:
            keep[k] = False
        out.records.append(fault_record("event_gap", m.timeline.period(w[0]), ts[w[0]], GAP_S, [], None,
                                        event_ids=[objs[k]["event"]["id"] for k in lost]))
    if lag and (w := _window(rng, m, LAG_WINDOW_S, busy)):
        busy.append(w)
        late = [k for k, f in enumerate(frames) if w[0] <= f < w[1]]
        for k in late:
            arrival[k] += LAG_S * fps
        out.records.append(fault_record("event_lag", m.timeline.period(w[0]), ts[w[0]], LAG_WINDOW_S, [], None,
                                        lag_s=LAG_S, event_ids=[objs[k]["event"]["id"] for k in late]))
    wrong: dict[int, dict[str, Any]] = {}
    later = _corrections(rng, m, objs, frames, keep, busy, minutes, out.records, wrong) if corrections else []
    sent = [(arrival[k], k, wrong.get(k, objs[k])) for k in range(len(objs)) if keep[k]] + later
    sent.sort(key=lambda a: (a[0], a[1]))
    out.objects = [o for _, _, o in sent]
    return out


def _corrections(rng: np.random.Generator, m: SynthMatch, objs: list[dict[str, Any]], frames: list[int],
                 keep: list[bool], busy: list[tuple[int, int]], minutes: float, records: list[FaultRecord],
                 wrong_lines: dict[int, dict[str, Any]]) -> list[tuple[float, int, dict[str, Any]]]:
    """Events sent wrong first and again, right, later: the wrong line of event k goes in ``wrong_lines[k]``
    (it takes the true line's place); returns (arrival, order, true line) of each later line."""
    fps = m.timeline.fps
    ts = m.timeline.timestamps()
    count = max(3, int(round(minutes / 15.0)))
    candidates = [k for k, o in enumerate(objs) if keep[k] and o["event"]["type"] in ("pass", "interception")
                  and all(not a <= frames[k] < b for a, b in busy)]
    later = []
    picks = sorted(rng.choice(len(candidates), min(count, len(candidates)), replace=False).tolist())
    for j, c in enumerate(picks):
        k = candidates[c]
        true = objs[k]
        wrong = copy.deepcopy(true)
        f = frames[k]
        if j % 2 == 0:
            field_name = "time"
            wrong["event"]["time"] = ts[min(f + int(WRONG_TIME_S * fps), len(ts) - 1)]
        else:
            field_name = "player_id"
            col = _col_of(m, f, true["event"]["player_id"])
            mates = [11 * (col // 11) + s for s in range(1, 11) if 11 * (col // 11) + s != col]  # outfield
            wrong["event"]["player_id"] = m.player_at(f, mates[int(rng.integers(0, len(mates)))])
        wrong_lines[k] = wrong
        delay = float(rng.uniform(30.0, 90.0))
        later.append((f + delay * fps, k, true))
        records.append(fault_record("event_correction", m.timeline.period(f), ts[f], round(delay, 2), [], None,
                                    event_ids=[true["event"]["id"]], field=field_name))
    return later


def _col_of(m: SynthMatch, f: int, pid: str) -> int:
    return next(c for c in range(22) if m.player_at(f, c) == pid)
