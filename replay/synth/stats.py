"""Movement statistics of a simulated match per role (distance, sprints, peak speed
and acceleration): a plain numpy check of the generated movement against the
published role targets."""

from __future__ import annotations

import numpy as np
from scipy.signal import savgol_filter

from pacewire.replay.synth.match import SynthMatch


def _runs(mask: np.ndarray, min_len: int) -> int:
    """Number of runs of True at least ``min_len`` long in a 1-D mask."""
    padded = np.concatenate([[False], mask, [False]])
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    lengths = edges[1::2] - edges[0::2]
    return int((lengths >= min_len).sum())


def movement_stats(m: SynthMatch) -> dict[str, dict[str, float]]:
    """Per-role distance per 90 min (km), sprints per 90, max speed, max |accel|.

    Kinematics: centred Savitzky-Golay fit (1 s window, cubic) of the positions,
    speed and acceleration from the same fit (common practice). A sprint is
    >= 7.0 m/s held >= 1 s (Di Salvo et al. 2009 band; duration by common
    practice). Figures are pooled over each player stint of a role.
    """
    fps = m.timeline.fps
    win = fps + 1 - fps % 2  # odd window of about 1 s
    per_role: dict[str, list[tuple[float, float, float, float, float]]] = {}
    for start, n in m.timeline.halves:
        who = m.squad_index[start:start + n]
        for col in range(22):
            for sq in np.unique(who[:, col]):
                sel = who[:, col] == sq
                if sel.sum() < 3 * win:
                    continue
                p = m.positions[start:start + n, col][sel]
                xy = np.column_stack([p.real, p.imag])
                vel = savgol_filter(xy, win, 3, deriv=1, delta=1.0 / fps, axis=0)
                acc = savgol_filter(xy, win, 3, deriv=2, delta=1.0 / fps, axis=0)
                sp = np.hypot(vel[:, 0], vel[:, 1])
                row = (sp.sum() / fps, _runs(sp >= 7.0, fps), sp.max(), np.hypot(acc[:, 0], acc[:, 1]).max(),
                       sel.sum() / fps)
                per_role.setdefault(m.slot_roles[col], []).append(row)
    out = {}
    for role, rows in per_role.items():
        arr = np.array(rows)
        dist, spr, vmax, amax, secs = arr.T
        out[role] = {
            "km_per90": float(dist.sum() / secs.sum() * 5400.0 / 1000.0),
            "sprints_per90": float(spr.sum() / secs.sum() * 5400.0),
            "max_speed_ms": float(vmax.max()),
            "max_accel_ms2": float(amax.max()),
            "players": float(len(rows)),
        }
    return out
