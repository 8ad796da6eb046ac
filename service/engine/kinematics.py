"""Streaming kinematics for one period: artefacts, gap bridging, smoothing, speed, acceleration.

The track is a deterministic function of the period's samples: feeding them one
frame at a time, in blocks, or all at once gives the same figures. Samples
become final a lag after they arrive: half the smoothing window when the data
is clean, more while a player's gap, jump, excursion or re-entry is still
undecided (up to about the excursion horizon plus a velocity span).

Steps, each vectorised over slots and players:

1. artefacts (:mod:`pacewire.engine.artefacts`): implausible steps, excursions
   and re-entry slides are removed (the gap they leave is bridged like any
   other); a jump with no return splits the track.
2. bridging: gaps up to ``bridge_gap_s`` between kept samples are filled by
   linear interpolation unless a split lies at their end (common practice) or
   the line across runs faster than ``bridge_speed_ms``.
3. runs of valid samples shorter than the smoothing window are dropped.
4. centred Savitzky-Golay fit (window ~1 s, order 3; derivatives from the same
   fit; Savitzky & Golay 1964); at the ends of a run the window is shifted
   inside the run (one-sided fit), like scipy's ``mode="interp"``.
5. physical bounds: a sample whose smoothed speed exceeds ``max_speed_ms`` or
   whose acceleration (vector length) exceeds ``max_accel_ms2`` is a gap: it
   credits no figure and counts as an artefact (never clipped to the bound).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from pacewire.engine import artefacts
from pacewire.engine.arrays import BIG, gather, next_true, prev_true, shift_up
from pacewire.engine.artefacts import ArtefactParams

_HALF_SQRT2 = math.sqrt(0.5)


def savgol_weights(window: int, order: int, deriv: int, delta: float, pos: int) -> np.ndarray:
    """Savitzky-Golay weights (Savitzky & Golay 1964): the least-squares polynomial of
    ``order`` over ``window`` samples, its ``deriv``-th derivative evaluated at sample
    ``pos``, as weights to dot with the window's samples in order. Same values as
    scipy's ``savgol_coeffs(..., use="dot")`` (a test checks), without loading scipy
    into the service (about 80 MB of memory)."""
    t = np.arange(window, dtype=float) - pos
    vander = t[:, None] ** np.arange(order + 1)[None, :]
    pinv = np.linalg.pinv(vander)  # (order + 1, window): polynomial coefficients from samples
    return pinv[deriv] * math.factorial(deriv) / delta ** deriv


class _Fit:
    """Savitzky-Golay coefficients of one (window, order, sample interval), shared by every
    track (read-only): ``coef[d, j]`` is derivative d evaluated at position j of the window;
    ``band(n)`` the banded matrix of the centred fit for n output rows."""

    def __init__(self, window: int, order: int, dt: float) -> None:
        self.window, self.order, self.dt = window, order, dt
        self.coef = np.stack([np.stack([savgol_weights(window, order, d, dt, j) for j in range(window)])
                              for d in range(3)])
        self.coef.flags.writeable = False
        self._band: dict[int, np.ndarray] = {}

    def band(self, n: int) -> np.ndarray:
        """(3n, n + window - 1): row d*n + i holds derivative d's centred coefficients for output row i."""
        m = self._band.get(n)
        if m is None:
            w = self.window
            m = np.zeros((3, n, n + w - 1))
            for i in range(n):
                m[:, i, i:i + w] = self.coef[:, w // 2, :]
            m = m.reshape(3 * n, n + w - 1)
            m.flags.writeable = False
            self._band[n] = m
        return m

    def __deepcopy__(self, memo: dict[int, Any]) -> _Fit:
        return self  # read-only: a copied track shares it

    def __reduce__(self) -> tuple[Any, ...]:
        return _fit, (self.window, self.order, self.dt)  # a checkpointed track carries no matrices (engine.stateio)


_FITS: dict[tuple[int, int, float], _Fit] = {}


def _fit(window: int, order: int, dt: float) -> _Fit:
    fit = _FITS.get((window, order, dt))
    if fit is None:
        fit = _FITS[(window, order, dt)] = _Fit(window, order, dt)
    return fit


@dataclass(frozen=True)
class KinematicParams:
    fps: int
    window: int  # samples, odd
    order: int
    bridge: int  # longest bridged gap, samples
    still_speed_ms: float
    max_speed_ms: float  # a smoothed speed above this is no running (physical bound)
    max_accel_ms2: float  # nor a smoothed acceleration (vector length) above this
    artefacts: ArtefactParams
    bridge_speed_ms: float = math.inf  # a gap is bridged only if the line across it is no faster than this

    @property
    def half(self) -> int:
        return self.window // 2

    @cached_property
    def context(self) -> int:
        """Slots kept before the first unfinished slot so every rule sees its inputs."""
        return self.clean_after + 2 * self.artefacts.lookback

    @cached_property
    def clean_after(self) -> int:
        """Slots into a stretch after which a player seen in every slot with no jump has every run
        decided: the cheap path (``Track._clean``) may take over."""
        return self.window + 3 * (self.bridge + 1) + 2

    @staticmethod
    def make(fps: int, *, window_s: float, order: int, bridge_s: float, still_ms: float, max_speed_ms: float,
             max_accel_ms2: float, step_speed_ms: float, step_tolerance_ms: float, excursion_s: float,
             velocity_span_s: float, tolerance_m: float, tolerance_ms2: float, reentry_gap_s: float,
             bridge_speed_ms: float = math.inf) -> KinematicParams:
        """From the settings' units (s, m/s) to samples at ``fps``."""
        w = max(int(round(window_s * fps)), order + 2)
        if w % 2 == 0:
            w += 1
        bridge = int(round(bridge_s * fps))
        art = ArtefactParams(dt=1.0 / fps, reach=bridge + 1, step_speed_ms=step_speed_ms,
                             step_tolerance_m=step_tolerance_ms / fps, horizon=max(int(round(excursion_s * fps)), 1),
                             span=max(int(round(velocity_span_s * fps)), 1), tolerance_m=tolerance_m,
                             tolerance_ms2=tolerance_ms2, reentry_gap=max(int(round(reentry_gap_s * fps)), 1))
        return KinematicParams(fps, w, order, bridge, still_ms, max_speed_ms, max_accel_ms2, art, bridge_speed_ms)


@dataclass
class Final:
    """Samples that became final in one call, shaped (n, players)."""

    slot0: int  # slot of the first row
    valid: np.ndarray  # bool: credited (seen or bridged, in a long-enough run, within the physical bounds)
    seen: np.ndarray  # bool: a raw sample was kept (not an artefact)
    xy: np.ndarray  # (n, P, 2) smoothed position, m
    speed: np.ndarray  # m/s (0 where not valid)
    accel: np.ndarray  # m/s^2, tangential: d|v|/dt (0 where not valid)
    full: bool = False  # every sample valid and seen (valid and seen are all True), no artefact
    artefact: np.ndarray | None = None  # bool: a seen sample removed as an artefact (None: none)

    def __len__(self) -> int:
        return int(self.valid.shape[0])


class Track:
    """All players' kinematics within one period."""

    def __init__(self, params: KinematicParams, n_players: int) -> None:
        self.p = params
        self.n = n_players
        self.dt = 1.0 / params.fps
        self._fit = _fit(params.window, params.order, self.dt)
        self.base = 0  # slot of buf[0]
        # buf is a window onto a larger store, so extending and trimming rarely copy
        self._store = np.full((256, n_players, 2), np.nan)
        self._off = 0
        self._rows = 0
        self._clean_upto = 0  # slots below this were checked uniform and jump-free
        self._clean_cols: np.ndarray | None = None
        self._clean_all = False  # _clean_cols is all True
        self._true: dict[int, np.ndarray] = {}  # all-True (rows, players) masks, by row count
        self.end = 0  # one past the last slot received
        self.fin = 0  # first slot not yet final
        self.jumps = 0  # jumps counted in final slots
        self.cut = 0  # slots below this belong to an earlier, closed stretch
        self._seen_before = np.full(n_players, -BIG, np.int64)  # each player's last seen slot before buf, -BIG none

    # -- input -----------------------------------------------------------------
    def feed(self, slots: np.ndarray, xy: np.ndarray) -> list[Final]:
        """Add samples at increasing slots (all >= ``self.end``); return what became final."""
        out: list[Final] = []
        if len(slots) == 0:
            return out
        first = int(slots[0])
        if first < self.end:
            raise ValueError(f"slot {first} is not after {self.end - 1}")
        if first - self.end > self.p.context and self.end > self.fin:
            # A gap longer than any rule looks across: finish the stretch before
            # it as if the empty slots had been pushed, then start afresh.
            self._extend(self.end + self.p.context)
            self._collect(out, self.advance())
        if first - self.end > self.p.context:
            self.base = self.end = self.fin = self.cut = first
            self._off, self._rows = 0, 0
            self._store[:] = np.nan
            self._clean_cols = None
        last = int(slots[-1])
        self._extend(last + 1)
        if last - first + 1 == len(slots):  # contiguous slots (the usual case): a slice, not a scatter
            self.buf[first - self.base: last + 1 - self.base] = xy
        else:
            self.buf[slots - self.base] = xy
        self._collect(out, self.advance())
        return out

    def close(self) -> list[Final]:
        """No more samples for this stretch: finalise the tail with one-sided fits."""
        out: list[Final] = []
        self._collect(out, self.advance(closed=True))
        return out

    def grow(self, k: int) -> None:
        """``k`` more players, not seen so far."""
        store = np.full((self._store.shape[0], self.n + k, 2), np.nan)
        store[:, : self.n] = self._store
        self._store = store
        self._seen_before = np.concatenate([self._seen_before, np.full(k, -BIG, np.int64)])
        self.n += k
        if self._clean_cols is not None:
            self._clean_cols = np.concatenate([self._clean_cols, np.zeros(k, bool)])
        self._clean_all = False
        self._true = {}

    @staticmethod
    def _collect(out: list[Final], item: Final | None) -> None:
        if item is not None and len(item):
            out.append(item)

    @property
    def buf(self) -> np.ndarray:
        return self._store[self._off: self._off + self._rows]

    def _extend(self, new_end: int) -> None:
        if new_end <= self.end:
            return
        rows = new_end - self.base
        if self._off + rows > self._store.shape[0]:
            cap = max(self._store.shape[0], 2 * rows)
            store = np.full((cap, self.n, 2), np.nan)
            store[: self._rows] = self.buf
            self._store, self._off = store, 0
        # rows past the old end are NaN already (new or reset store), except after a trim
        self._store[self._off + self._rows: self._off + rows] = np.nan
        self._rows = rows
        self.end = new_end

    # -- classification ----------------------------------------------------------
    def _classify(self, closed: bool) -> tuple[np.ndarray, ...]:
        """Per buffered slot: valid mask, kept mask, run bounds, bridged positions, the first slot per
        player whose status may still change (``doubt``), the jumps counted and the artefacts removed."""
        p = self.p
        buf = self.buf
        n_rows = buf.shape[0]
        rows = np.arange(n_rows)[:, None]
        seen = ~np.isnan(buf[..., 0])
        # slots before the cut were closed by a flush: treat the cut as a long gap
        lo = max(self.cut - self.base, 0)
        if lo:
            seen[:lo] = False
        prior = np.where(self._seen_before >= max(self.cut, 0), self._seen_before - self.base, -BIG)
        art = artefacts.classify(buf, seen, p.artefacts, closed, prior)
        kept = seen & ~art.removed
        valid1, xyb = self._bridge(buf, kept, art.split, rows)

        # runs: bounded by invalid slots and by splits
        run_s = np.maximum(prev_true(~valid1) + 1, prev_true(art.split))
        nsplit = shift_up(next_true(art.split), BIG)
        run_e = np.minimum(next_true(~valid1) - 1, nsplit - 1)
        run_e = np.minimum(run_e, n_rows - 1)

        doubt = np.full(self.n, n_rows, np.int64) if closed else self._doubt(kept, valid1, run_s, art.open_at)
        # a run's length counts only its decided part
        run_e_dec = np.minimum(run_e, doubt[None, :] - 1)
        valid = valid1 & (run_e_dec - run_s + 1 >= p.window) & (rows < doubt[None, :])
        return valid, kept, run_s, run_e, xyb, doubt, art.jumps, art.removed

    def _bridge(self, buf: np.ndarray, kept: np.ndarray, split: np.ndarray, rows: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
        """Bridging gaps of up to ``bridge`` slots between kept samples whose straight line runs no
        faster than ``bridge_speed_ms`` (a faster one is a position the track re-acquired off the player,
        not a run): the mask of kept or bridged slots, and the positions with bridged slots interpolated
        linearly. Decided from the gap's two ends alone, so it never changes once both are in."""
        n_rows = buf.shape[0]
        pk = prev_true(kept)
        nk = next_true(kept)
        nk_c = np.clip(nk, 0, n_rows - 1)
        bridged = ~kept & (pk >= 0) & (nk < BIG) & (nk - pk - 1 <= self.p.bridge) & ~gather(split, nk_c)
        xyb = np.where(kept[..., None], buf, np.nan)  # removed samples are gaps
        if bridged.any():
            pk_c = np.clip(pk, 0, n_rows - 1)
            span = np.maximum(nk_c - pk_c, 1)
            a = gather(buf, pk_c)
            b = gather(buf, nk_c)
            bridged &= np.hypot(*np.moveaxis(b - a, -1, 0)) <= self.p.bridge_speed_ms * span * self.dt
            xyb = np.where(bridged[..., None], a + (b - a) * (rows - pk_c)[..., None] / span[..., None], xyb)
        return kept | bridged, xyb

    def _doubt(self, kept: np.ndarray, valid1: np.ndarray, run_s: np.ndarray, frontier: np.ndarray) -> np.ndarray:
        """Per player, the first slot whose status future samples may still change (the slot count
        when none): an artefact verdict not yet final (``frontier``) and the gap before it, a trailing
        gap that may yet be bridged, or a run too short so far."""
        p = self.p
        n_rows = kept.shape[0]
        e = n_rows - 1
        cols = np.arange(self.n)
        rows = np.arange(n_rows)[:, None]
        last_k = prev_true(kept & (rows < frontier[None, :]))[-1]  # last decided kept slot, -1 if none
        have = last_k >= 0
        open_art = frontier < n_rows
        # the gap after the last decided kept sample is bridged or not once the verdict is in
        doubt = np.where(open_art & have, np.minimum(frontier, last_k + 1), frontier)
        # a short trailing gap may yet be bridged
        gap_open = ~open_art & have & (e - last_k > 0) & (e - last_k <= p.bridge)
        doubt = np.where(gap_open, last_k + 1, doubt)
        # the run that reaches the doubt slot must already be long enough
        last_row = np.clip(doubt - 1, 0, e)
        in_run = valid1[last_row, cols] & (doubt > 0)
        rs = run_s[last_row, cols]
        short = in_run & (last_row - rs + 1 < p.window)
        return np.where(short, rs, doubt)

    # -- output --------------------------------------------------------------------
    def advance(self, closed: bool = False) -> Final | None:
        """Finalise every slot whose figures can no longer change.

        ``closed``: no more samples will come for this stretch (period end, end
        of recording, or a stall flush); the tail is finalised with one-sided fits.
        """
        if self.end <= self.fin:
            if closed:
                self.cut = self.end
            return None
        h = self.p.half
        clean = None if closed else self._clean()
        if clean is not None:
            stop = self.end - h
            if stop <= self.fin:
                return None
            out = self._smooth_clean(self.fin - self.base, stop - self.base, clean)
            self.fin = stop
            self._trim(all_seen=self._clean_all)
            return out
        valid, kept, run_s, run_e, xyb, doubt, jumps, removed = self._classify(closed)
        if closed:
            stop = self.end
        else:
            # no player seen yet in the period (no columns): nothing in doubt
            stop = min(self.end - h, self.base + (int(doubt.min()) if doubt.size else self.end - self.base) - h)
        if stop <= self.fin:
            return None
        out = self._smooth(self.fin - self.base, stop - self.base, valid, kept, run_s, run_e, xyb, jumps, removed)
        self.fin = stop
        if closed:
            self.cut = self.end
        self._trim()
        return out

    def _trim(self, all_seen: bool = False) -> None:
        """Keep only the context the rules need. ``all_seen``: every player was seen in every buffered slot."""
        keep_from = max(self.fin - self.p.context, self.base)
        if keep_from > self.base:
            drop = keep_from - self.base
            if all_seen or not np.isnan(self.buf[drop - 1, :, 0]).any():  # usual: all seen in the last row dropped
                self._seen_before.fill(self.base + drop - 1)
            else:
                last = prev_true(~np.isnan(self.buf[:drop, :, 0]))[-1]
                self._seen_before = np.where(last >= 0, self.base + last, self._seen_before)
            self._off += drop
            self._rows -= drop
            self.base = keep_from

    def _clean(self) -> np.ndarray | None:
        """The common case, decided cheaply: every player either seen in every
        buffered slot with no jump, or not seen at all; the stretch started long
        enough ago. Returns the per-player seen mask, or None for the full rules."""
        p = self.p
        if self.fin - p.half - max(self.cut, self.base) < 0 or self.end - self.cut < p.clean_after:
            return None
        buf = self.buf
        # only rows not checked before (and the one before them, for the step)
        start = max(self._clean_upto - 1 - self.base, 0) if self._clean_cols is not None else 0
        part = buf[start:]
        lim = p.artefacts.step_speed_ms * self.dt + p.artefacts.step_tolerance_m
        d = part[1:] - part[:-1]  # unseen players give NaN, which compares False
        if start > 0 and self._clean_all and (not d.size or np.maximum.reduce(np.abs(d), axis=None) <= 0.7 * lim):
            # everyone seen in every slot so far, and no step component above 0.7 lim, so no step
            # above lim (0.98 lim^2 at most, whatever the rounding); a missing sample (NaN) fails
            self._clean_upto = self.end
            return self._clean_cols
        step2 = d[..., 0] * d[..., 0]
        step2 += d[..., 1] * d[..., 1]
        if start > 0 and self._clean_all and (step2 <= lim * lim).all():
            self._clean_upto = self.end
            return self._clean_cols
        seen = ~np.isnan(part[:, :, 0])
        cols = seen[0] if start == 0 or self._clean_cols is None else self._clean_cols  # start > 0: a mask exists
        if not (seen == cols).all() or (step2 > lim * lim).any():
            self._clean_cols = None
            return None
        self._clean_cols = cols
        self._clean_all = bool(cols.all())
        self._clean_upto = self.end
        return cols

    _CHUNK = 64  # rows per banded product: small enough that the band matrix stays cheap

    def _centred(self, src: np.ndarray, r0: int, r1: int) -> np.ndarray:
        """Centred fit for rows r0..r1 of ``src`` (rows r0-h .. r1+h-1 must exist)
        as one matrix product per chunk → (3, n, P, 2): position, velocity, acceleration."""
        h = self.p.half
        if r1 - r0 <= self._CHUNK:
            rows = src[r0 - h: r1 + h].reshape(r1 - r0 + 2 * h, self.n * 2)
            return (self._fit.band(r1 - r0) @ rows).reshape(3, r1 - r0, self.n, 2)
        out = np.empty((3, r1 - r0, self.n, 2))
        for a in range(r0, r1, self._CHUNK):
            b = min(a + self._CHUNK, r1)
            k = b - a
            rows = src[a - h: b + h].reshape(k + 2 * h, self.n * 2)
            out[:, a - r0: b - r0] = (self._fit.band(k) @ rows).reshape(3, k, self.n, 2)
        return out

    def _smooth_clean(self, r0: int, r1: int, cols: np.ndarray) -> Final:
        res = self._centred(self.buf, r0, r1)
        if self._clean_all:
            v = self._true.get(r1 - r0)
            if v is None:
                if len(self._true) >= 64:  # block sizes vary live: keep a few
                    self._true = {}
                v = self._true[r1 - r0] = np.ones((r1 - r0, self.n), bool)
                v.flags.writeable = False
            return self._finish(r0, r1, v, res, full=True)
        return self._finish(r0, r1, np.broadcast_to(cols, (r1 - r0, self.n)), res)

    def _smooth(self, r0: int, r1: int, valid: np.ndarray, kept: np.ndarray, run_s: np.ndarray,
                run_e: np.ndarray, xyb: np.ndarray, jumps: np.ndarray, removed: np.ndarray) -> Final:
        p = self.p
        w, h = p.window, p.half
        rows = np.arange(r0, r1)[:, None]
        v = valid[r0:r1]
        self.jumps += int(jumps[r0:r1].sum())
        # window start inside the run; rows with j != h use a one-sided fit
        w0 = np.clip(rows - h, run_s[r0:r1], run_e[r0:r1] - 2 * h)
        j = rows - w0
        # pad so that centred windows near the buffer ends exist; unseen values
        # become 0 (rows whose window holds one use a one-sided fit or are invalid)
        pad = np.zeros((h, self.n, 2))
        src = np.concatenate([pad, np.where(np.isnan(xyb), 0.0, xyb), pad])
        res = self._centred(src, r0 + h, r1 + h)
        edge = v & (j != h)
        if edge.any():
            win = sliding_window_view(src, w, axis=0)  # padded row i + h is buffer row i
            ei, ep = np.nonzero(edge)
            ew = win[w0[ei, ep] + h, ep]  # (m, 2, W)
            ec = self._fit.coef[:, j[ei, ep], :]  # (3, m, W)
            res[:, ei, ep] = np.einsum("mcw,dmw->dmc", ew, ec)
        return self._finish(r0, r1, v, res, kept[r0:r1], removed=removed[r0:r1])

    def _finish(self, r0: int, r1: int, v: np.ndarray, res: np.ndarray, kept: np.ndarray | None = None,
                full: bool = False, removed: np.ndarray | None = None) -> Final:
        """Speed and tangential acceleration (v·a/|v|, 0 below the still speed) from the fit.
        ``full``: ``v`` is all True. A sample beyond the physical bounds is a gap, never a figure:
        not credited, counted as an artefact. The bounds: speed ``max_speed_ms``; acceleration (vector
        length) ``max_accel_ms2``; tangential acceleration ``max_accel_ms2 (1 - speed / max_speed_ms)``,
        as a sprinter's largest acceleration falls linearly with speed (Samozino et al. 2016)."""
        p = self.p
        vel, acc = res[1], res[2]
        speed = np.hypot(vel[..., 0], vel[..., 1])
        moving = speed > p.still_speed_ms
        dot = vel[..., 0] * acc[..., 0]
        dot += vel[..., 1] * acc[..., 1]
        tang = np.zeros(speed.shape)
        np.divide(dot, speed, out=tang, where=moving)
        fv = speed * (p.max_accel_ms2 / p.max_speed_ms)
        fv += tang
        artefact = removed if removed is not None and removed.any() else None
        if kept is None:
            kept = v
        # maxima decide the usual case (nothing beyond a bound) without a mask: no speed above the bound,
        # no acceleration component above bound / sqrt 2 (so no vector above the bound), no F-v excess;
        # fmax skips the NaN of players not seen
        a_lim = p.max_accel_ms2
        if speed.size and (np.fmax.reduce(speed, axis=None) > p.max_speed_ms or np.fmax.reduce(fv, axis=None) > a_lim
                           or np.fmax.reduce(np.abs(acc), axis=None) > a_lim * _HALF_SQRT2):
            a2 = acc[..., 0] * acc[..., 0]
            a2 += acc[..., 1] * acc[..., 1]
            over = speed > p.max_speed_ms
            over |= a2 > a_lim * a_lim
            over |= fv > a_lim
            if not full:
                over &= v
            if over.any():
                full = False
                v = v & ~over
                artefact = over if artefact is None else artefact | over
        if not full:
            speed = np.where(v, speed, 0.0)
            tang = np.where(v, tang, 0.0)
        return Final(self.base + r0, v, kept, res[0], speed, tang, full, artefact)
