"""Tracking artefacts in raw positions: implausible steps, excursions and re-entry slides.

A tracking system that loses a player and locks on again (an optical or
broadcast tracker re-acquiring him, a GNSS receiver on a reflected signal)
puts him metres away for a few samples and then glides back onto him. Each
step of such an excursion may be short enough to pass a per-step speed bound;
the whole is not a path a player can run. The rules, vectorised over rows
(samples) and players of a buffer:

1. **Steps.** A sample whose step from the previous seen sample is longer than
   ``step_speed_ms`` allows (plus a noise allowance ``step_tolerance_m``, fixed
   per step, so the largest accepted step speed does not grow with the frame
   rate) is a jump (common practice; world-record sprint peak about 12.4 m/s).
2. **Re-entries.** After a gap of at least ``reentry_gap`` samples, the first
   samples must lead onto the path the player runs once the track has
   settled: the path ``horizon`` samples later, extrapolated back with its own
   velocity. Samples from the re-entry up to the last one off that path
   (beyond a tolerance growing with time, below) are removed.
3. **Excursions.** After a jump, the samples from it up to the first one back on
   the path of the track before it are removed, if that return comes within
   ``horizon`` samples of the jump; an isolated outlier is the one-sample case.
   The path starts at the anchor, the last settled sample at least half a
   ``span`` before the jump (a track may drift off in short steps before it
   jumps), with the anchor's velocity (mean over ``span`` samples). A sample is
   back on it when the chord from the anchor runs at the mean of the
   velocities either side (the anchor's, and its own over the ``span`` samples
   after it): exact for a player speeding up or turning at a constant rate,
   while a sample still gliding back is off twice over. It must also be off by
   under half the jump's own offset: a track that stays offset (a multipath
   reflection held) never returns. A jump with no return is a split: the
   track starts afresh there (nothing is bridged across it), and its first
   samples are checked as a re-entry.

The tolerance is ``tolerance_m + tolerance_ms2 * t^2 / 2``, t seconds from
the anchor: position noise, plus the error of velocities estimated over a few
noisy samples and of changes of acceleration (common practice: a kinematic
prediction with an acceleration allowance). Without an anchor velocity (no
samples before the anchor), the return is judged by the step rule over the
samples skipped.

Each decision reads a bounded stretch of later samples (``horizon + 2 span``), so
it becomes final a bounded time after the samples it removes: ``open_at`` says
from which row a player's decisions may still change.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pacewire.engine.arrays import BIG, flat, next_true, norm, prev_true, shift_down, shift_up, take


@dataclass(frozen=True)
class ArtefactParams:
    """The rules' parameters; counts are samples at the match's frame rate."""

    dt: float  # s per sample
    reach: int  # a step is tested against a previous seen sample at most this many samples back
    step_speed_ms: float
    step_tolerance_m: float
    horizon: int  # longest excursion from its jump; anchor of a re-entry this far on
    span: int  # samples of a velocity estimate
    tolerance_m: float
    tolerance_ms2: float
    reentry_gap: int  # a gap at least this long before a sample makes it a re-entry

    @property
    def lead(self) -> int:
        """The anchor of an excursion lies at least this many samples before its jump (half a span)."""
        return max(self.span // 2, 1)

    @property
    def lookback(self) -> int:
        """Rows before a row that its decisions may read (anchor, its velocity, the step, the gap)."""
        return self.horizon + 3 * self.span + self.reach + self.reentry_gap + 1

    @property
    def lookahead(self) -> int:
        """Rows after a row that its decisions may read."""
        return self.horizon + 2 * self.span + 1


@dataclass
class Artefacts:
    """The rules' verdict over a buffer (rows, players)."""

    removed: np.ndarray  # bool: a seen sample taken out as an artefact
    split: np.ndarray  # bool: the track starts afresh at this (kept) sample
    jumps: np.ndarray  # bool: an implausible step that starts an excursion or a split (counted)
    open_at: np.ndarray  # (players,) first row whose verdict may still change; rows when none


def classify(buf: np.ndarray, seen: np.ndarray, p: ArtefactParams, closed: bool, prior: np.ndarray) -> Artefacts:
    """The verdict over ``buf`` (rows, players, 2) with ``seen`` its non-NaN mask. ``closed``: no
    later sample will come. ``prior``: (players,) row of each player's last sample before the
    buffer (negative), or -BIG if none in this stretch: a player's first sample is no re-entry."""
    n = buf.shape[0]
    rows = np.arange(n)[:, None]
    prev_s = shift_down(prev_true(seen), -1)  # previous seen row, strictly before
    jump = _steps(buf, seen, prev_s, rows, p)
    before = np.where(prev_s >= 0, prev_s, prior[None, :])
    starts = seen & (before > -BIG) & (rows - before - 1 >= p.reentry_gap)
    frontier = np.full(seen.shape[1], n, np.int64)  # first row whose status may still change
    removed = _settle(buf, seen, starts, p, closed, frontier)
    ok = seen & ~removed
    ex_removed, split, counted = _excursions(buf, ok, jump & ok, p, closed, frontier)
    removed |= ex_removed
    ok &= ~ex_removed
    settled = _settle(buf, ok, split, p, closed, frontier)
    if settled.any():
        removed |= settled
        ok &= ~settled
        # the track starts afresh at the first sample kept after a split: nothing is bridged across it
        sr, sc = np.nonzero(split & settled)
        to = next_true(ok)[sr, sc]
        split[sr, sc] = False
        split[to[to < BIG], sc[to < BIG]] = True
    return Artefacts(removed, split, counted, frontier)


def _steps(buf: np.ndarray, seen: np.ndarray, prev_s: np.ndarray, rows: np.ndarray, p: ArtefactParams) -> np.ndarray:
    """Jumps: a step from the previous seen sample (within ``reach``) beyond the step bound."""
    n = buf.shape[0]
    prev_c = np.clip(prev_s, 0, n - 1)
    step = norm(buf - take(buf, flat(prev_c)))
    has_prev = seen & (prev_s >= 0) & (rows - prev_s <= p.reach)
    return has_prev & (step > p.step_speed_ms * p.dt * (rows - prev_c) + p.step_tolerance_m)


def _tolerance(p: ArtefactParams, steps: np.ndarray) -> np.ndarray:
    """How far off the extrapolated path a sample ``steps`` samples from the anchor may lie, m."""
    t = steps * p.dt
    return p.tolerance_m + 0.5 * p.tolerance_ms2 * t * t


def _first_ok(nxt: np.ndarray, r: np.ndarray, cols: np.ndarray) -> np.ndarray:
    """First ok row at or after rows ``r`` (BIG when none in the buffer), per event column."""
    n = nxt.shape[0]
    return np.where(r < n, nxt[np.minimum(r, n - 1), cols], BIG)


def _settle(buf: np.ndarray, ok: np.ndarray, starts: np.ndarray, p: ArtefactParams, closed: bool,
            frontier: np.ndarray) -> np.ndarray:
    """Samples removed at the start of a stretch (a re-entry or a split): from the start up to the
    last sample off the path of the settled track ``horizon`` samples on, extrapolated back with
    the velocity over the ``span`` samples after it. A start whose anchor is not in yet is open
    (``frontier`` lowered to it); one whose stretch ends first keeps its samples."""
    n = buf.shape[0]
    removed = np.zeros(ok.shape, bool)
    sr, sc = np.nonzero(starts & (np.arange(n)[:, None] < frontier[None, :]))
    if not sr.size:
        return removed
    nxt = next_true(ok)
    b = _first_ok(nxt, sr + p.horizon, sc)
    c = _first_ok(nxt, b + p.span, sc)
    later = shift_up(next_true(starts), BIG)[sr, sc]  # the next start after this one
    # the anchor and its velocity sample must lie before the next start and close to where they belong
    usable = (c < BIG) & (later > c) & (b <= sr + p.horizon + p.span) & (c <= b + 2 * p.span)
    # not in yet: open, unless the stretch already ended (a later start) or none will come
    waiting = (c >= BIG) & (later >= BIG) & (not closed)
    # a verdict that reads a row whose own status may change is open too
    waiting |= usable & (c >= frontier[sc])
    np.minimum.at(frontier, sc[waiting], sr[waiting])
    use = usable & ~waiting
    if not use.any():
        return removed
    sr, sc, b, c = sr[use], sc[use], b[use], c[use]
    pb, pc = buf[b, sc], buf[c, sc]
    vel = (pc - pb) / ((c - b) * p.dt)[:, None]
    k = np.arange(p.horizon)[:, None]
    q = sr[None, :] + k  # (horizon, events): rows from the start towards the anchor
    inside = q < b[None, :]
    qc = np.minimum(q, n - 1)
    back = (b[None, :] - q).astype(float)
    path = pb[None] - vel[None] * (back * p.dt)[..., None]
    off = ok[qc, sc[None, :]] & inside & (norm(buf[qc, sc[None, :]] - path) > _tolerance(p, back))
    last = np.where(off, q, -1).max(axis=0)
    hit = last >= 0
    span = np.zeros((n + 1, ok.shape[1]), np.int64)
    np.add.at(span, (sr[hit], sc[hit]), 1)
    np.add.at(span, (last[hit] + 1, sc[hit]), -1)
    return (np.cumsum(span[:-1], axis=0) > 0) & ok


def _excursions(buf: np.ndarray, ok: np.ndarray, jump: np.ndarray, p: ArtefactParams, closed: bool,
                frontier: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(removed, split, counted): each jump's excursion, from the jump to the first sample back on
    the anchor's path within ``horizon`` samples of the anchor; a jump with none is a split. A jump
    inside an earlier excursion (or at its return) is part of it. Undecided jumps lower ``frontier``."""
    n, m = ok.shape
    removed = np.zeros((n, m), bool)
    split = np.zeros((n, m), bool)
    counted = np.zeros((n, m), bool)
    jr, jc = np.nonzero(jump & (np.arange(n)[:, None] < frontier[None, :]))
    if not jr.size:
        return removed, split, counted
    # anchor: the last settled sample at least ``lead`` before the jump (a track may drift off in steps
    # short of a jump before it jumps, a reflection building up: those samples do not set the path; they
    # stay, as deciding on them would need a longer lag)
    settled = ok & ~jump
    a = np.where(jr >= p.lead, prev_true(settled)[np.maximum(jr - p.lead, 0), jc], -1)
    has_a = (a >= 0) & (jr - a <= p.horizon + p.lead)
    ac = np.maximum(a, 0)
    back = prev_true(ok)[np.maximum(ac - p.span, 0), jc]  # velocity sample, ``span`` before the anchor
    has_v = has_a & (ac >= p.span) & (back >= 0) & (ac - back <= 2 * p.span)
    pa = buf[ac, jc]
    vel = np.where(has_v[:, None], (pa - buf[np.maximum(back, 0), jc]) / (np.maximum(ac - back, 1) * p.dt)[:, None],
                   0.0)
    k = np.arange(1, p.horizon + 1)[:, None]
    r = jr[None, :] + k  # (horizon, events): candidate returns
    rc = np.minimum(r, n - 1)
    cols = jc[None, :]
    steps = (r - ac[None, :]).astype(float)
    cand = (r < n) & ok[rc, cols] & (steps <= p.horizon + p.lead) & has_a[None, :]
    pr = buf[rc, cols]
    t = (steps * p.dt)[..., None]
    # velocity after a candidate, over the ``span`` samples that follow it
    c = _first_ok(next_true(ok), r + p.span, cols)
    has_vr = (c < BIG) & (c - r <= 2 * p.span)
    cc = np.minimum(c, n - 1)
    vr = (buf[cc, cols] - pr) / (np.maximum(cc - r, 1) * p.dt)[..., None]
    # back on the path: the chord from the anchor runs at the mean of the velocities on either side (exact
    # at a constant acceleration, so a player turning or speeding up is not an excursion), while a sample
    # still gliding back is off it twice over (its offset and its glide point the same way along the chord)
    # ... and it is back only once off by under half the jump's own offset: a track that stays offset
    # (a multipath reflection held) never returns, it splits
    t_jump = ((jr - ac) * p.dt)[:, None]
    tol = np.minimum(_tolerance(p, steps), 0.5 * norm(buf[jr, jc] - pa - vel * t_jump)[None, :])
    trap = norm(pr - pa[None] - 0.5 * (vel[None] + vr) * t) <= tol
    fwd = norm(pr - pa[None] - vel[None] * t)
    known_v = has_v[None, :]
    skip = fwd <= p.step_speed_ms * p.dt * steps + p.step_tolerance_m  # no anchor velocity: the step rule
    good = cand & np.where(known_v & has_vr, trap, np.where(known_v, fwd <= tol, skip))
    # a candidate whose following samples may still come is undecided
    unknown = cand & known_v & (c >= BIG) & (r + 2 * p.span >= n) & (not closed)
    good &= ~unknown
    found = good.any(axis=0)
    first = np.where(found, np.argmax(good, axis=0), p.horizon)
    ret = jr + 1 + first
    undecided = unknown.any(axis=0) & (np.argmax(unknown, axis=0) < first)
    # a return read from a row whose status may change (up to its velocity sample), an anchor there,
    # a candidate still undecided, or a search not over: open
    reads = np.maximum(ret, cc[np.minimum(first, p.horizon - 1), np.arange(len(jr))])
    waiting = (found & (reads >= frontier[jc])) | (has_a & (ac >= frontier[jc])) | undecided
    waiting |= ~found & has_a & (ac + p.horizon >= n) & (not closed)
    found &= ~undecided
    # jumps inside an earlier excursion, or at its return, belong to it
    ends = np.full((n, m), -1, np.int64)
    ends[jr[found], jc[found]] = ret[found]
    covered = jr <= shift_down(np.maximum.accumulate(ends, axis=0), -1)[jr, jc]
    own = ~covered
    np.minimum.at(frontier, jc[waiting & own], jr[waiting & own])
    act = own & ~waiting & (jr < frontier[jc])
    counted[jr[act], jc[act]] = True
    cut = act & ~found
    split[jr[cut], jc[cut]] = True
    ex = act & found
    span = np.zeros((n + 1, m), np.int64)
    np.add.at(span, (jr[ex], jc[ex]), 1)
    np.add.at(span, (ret[ex], jc[ex]), -1)
    return (np.cumsum(span[:-1], axis=0) > 0) & ok, split, counted
