"""The wearables variant (docs/wearables.md): the home team only, GNSS fixes and heart
rate. Which units stream when, the 1 Hz heart-rate samples with their faults, the
heart-rate profiles of the squad and the GNSS calibration of the ground.

The model constants are module attributes read at call time, so a test can
override them (monkeypatch) for a control run.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from pacewire.replay.synth.clubs import HOME, PITCH_LENGTH_M, PITCH_WIDTH_M, player_id
from pacewire.replay.synth.faults import FaultRecord, fault_record
from pacewire.replay.synth.match import SynthMatch
from pacewire.replay.synth.timeline import PERIOD_NAMES, Timeline, duration_scale, iso_ms

if TYPE_CHECKING:
    from pacewire.wire.gnss import GnssPitch

# The centre spot of the wearables ground: open sea in the North Atlantic, so the
# location is plainly fictional. The bearing of +x (clockwise from north) is arbitrary.
GNSS_CENTRE = (47.5, -30.0)
GNSS_BEARING_DEG = 24.0
LATLON_DECIMALS = 7  # 1e-7 degree is about 1.1 cm of latitude, 0.75 cm of longitude here

# Heart-rate profiles of the home squad by jersey: (hr_max_bpm, hr_rest_bpm, sex).
# Invented; HRmax ~180-205 and HRrest ~40-60 bpm are usual for professional
# players (from memory). The competition is a men's league, so all are male.
HOME_HR_PROFILES: dict[int, tuple[int, int, str]] = {
    1: (186, 54, "male"), 3: (197, 47, "male"), 5: (191, 51, "male"), 4: (189, 56, "male"),
    2: (201, 44, "male"), 11: (199, 49, "male"), 8: (194, 42, "male"), 6: (192, 50, "male"),
    7: (203, 46, "male"), 10: (190, 53, "male"), 9: (195, 48, "male"), 13: (184, 58, "male"),
    15: (196, 52, "male"), 14: (198, 45, "male"), 17: (193, 55, "male"), 19: (200, 47, "male"),
}
# Jerseys whose resting heart rate the club never measured: left off the sheet, so
# the demo shows the "omitted, and why" path (the simulation still uses the value above).
HR_REST_UNKNOWN = frozenset({5})

# Heart-rate model (1 Hz). Target = HRrest + %HRR(v) x (HRmax - HRrest), with
# %HRR(v) = HRR_FLOOR + HRR_SPAN (1 - exp(-v / HRR_SPEED_MS)) rising with the running
# speed v (m/s) averaged over the second: heart rate rises with running speed and
# levels off near maximal speeds (common practice); the constants put an outfield
# player's match mean near 80-85 % HRmax (Stolen et al. 2005, Sports Med 35:501).
HRR_FLOOR = 0.40
HRR_SPAN = 0.60
HRR_SPEED_MS = 2.5
HRR_SEATED = 0.20  # on the bench, after being substituted, in the half-time break (from memory)
HRR_WARM_UP = 0.55  # warming up: substitutes before they come on, everyone before each kick-off (from memory)
WARM_UP_S = 300.0  # warm-up before coming on, in a full match (scaled like stoppages)
# First-order lag towards the target, per player: rising faster than falling
# (heart-rate on-kinetics ~20-40 s at the onset of running, slower recovery; from memory).
HR_TAU_UP_S = (25.0, 40.0)
HR_TAU_DOWN_S = (40.0, 60.0)
# Cardiovascular drift: a slow rise at the same running over each half
# (Coyle & Gonzalez-Alonso 2001, Exerc Sport Sci Rev 29:88); the half-time break resets it.
HR_DRIFT_BPM = (3.0, 6.0)
HR_NOISE_BPM = 1.2  # chest-strap measurement noise, sd (from memory: ~1-2 bpm)
# Faults of the heart-rate channel and of the units.
HR_DROPOUT_S = (60.0, 90.0)  # one strap loses contact
HR_SPIKE_BPM = 255  # one implausible sample (the server rejects > 230 bpm)
UNIT_LATE_S = 180.0  # one unit switched on late, in a full match (scaled like stoppages)
HR_EDGE_S = 5.0  # HR faults stay this far inside a period


def hr_lag(target: np.ndarray, start: np.ndarray, tau_up: np.ndarray, tau_down: np.ndarray,
           dt_s: float = 1.0) -> np.ndarray:
    """Heart rate (bpm) following ``target`` (G, P) bpm through a first-order lag.

    Each step moves the rate a share 1 - exp(-dt/tau) of the way to the target,
    with tau_up (s) while the target is above the rate and tau_down (s) below it.
    start: (P,) bpm before the first step. A loop per second (not per frame): the
    asymmetric lag has no closed form.
    """
    a_up = 1.0 - np.exp(-dt_s / np.asarray(tau_up, float))
    a_down = 1.0 - np.exp(-dt_s / np.asarray(tau_down, float))
    out = np.empty(target.shape)
    hr = np.asarray(start, float).copy()
    for k in range(target.shape[0]):
        gap = target[k] - hr
        hr = hr + gap * np.where(gap > 0, a_up, a_down)
        out[k] = hr
    return out


def hrr_of_speed(speed_ms: np.ndarray) -> np.ndarray:
    """Target share of the heart-rate reserve (0-1) at a running speed (m/s); see HRR_FLOOR."""
    return HRR_FLOOR + HRR_SPAN * (1.0 - np.exp(-np.asarray(speed_ms, float) / HRR_SPEED_MS))


@dataclass
class WearablesPlan:
    """What the wearables variant adds to a simulated match (home team only)."""

    unit_on: np.ndarray  # (S, 11) bool: the unit of the home player in each slot streams
    samples: list[tuple[int, str, int]]  # (ms after kick-off, player id, bpm), time-ordered
    records: list[FaultRecord]  # unit_late, hr_dropout, hr_spike (faults.json)
    profiles: dict[str, tuple[int, int, str]]  # player id -> (hr_max_bpm, hr_rest_bpm, sex)


def _home_speed(m: SynthMatch) -> np.ndarray:
    """Speed (S, 11) m/s in each home slot, from frame-to-frame steps within each half."""
    fps = m.timeline.fps
    out = np.empty((m.timeline.n_slots, 11))
    for start, n in m.timeline.halves:
        p = m.positions[start:start + n, :11]
        step = np.abs(np.diff(p, axis=0)) * fps
        out[start + 1:start + n] = step
        out[start] = step[0] if n > 1 else 0.0
    return out


def plan_wearables(m: SynthMatch, seed: int, faults: bool = True) -> WearablesPlan:
    """Units and heart rate of the home team: who streams when, 1 Hz samples, HR faults.

    Deterministic for a seed (its own random stream, so the tracking of the match
    is the normal demo's). Heart rate follows each player's running speed through
    the lag (hr_lag), plus cardiovascular drift over each half and strap noise,
    rounded to whole bpm. Samples exist while a player's unit is on and he is on
    the pitch in a period (the break is not streamed). One unit starts late
    (UNIT_LATE_S), one strap drops out (HR_DROPOUT_S) and one sample is a spike
    (HR_SPIKE_BPM); ``faults`` False leaves these three out.
    """
    rng = np.random.default_rng([seed, 2])
    tl = m.timeline
    scale = duration_scale(tl.play_minutes)
    ids = [player_id(HOME, j) for j, _, _, _ in HOME.squad]
    # each fault hits another outfield starter who plays the whole match
    home_subbed = {s.slot for s in m.subs if s.team == 0}
    steady = [s for s in range(1, 11) if s not in home_subbed]
    late_slot = int(rng.choice(steady))
    unit_on, records = _late_unit(tl, late_slot, ids[late_slot], scale, faults)
    grid = _sample_grid(rng, m, unit_on, _heart_rate(rng, m, scale))
    drop_slot = int(rng.choice([s for s in steady if s != late_slot]))
    records += _strap_dropout(rng, grid, drop_slot, ids[drop_slot], faults)
    spike_slot = int(rng.choice([s for s in steady if s not in (late_slot, drop_slot)]))
    records += _spike(rng, grid, tl, spike_slot, ids[spike_slot], faults)
    profiles = {ids[q]: HOME_HR_PROFILES[j] for q, (j, _, _, _) in enumerate(HOME.squad)}
    return WearablesPlan(unit_on, grid.samples(ids), records, profiles)


def _halves_ms(tl: Timeline) -> tuple[tuple[int, int], tuple[int, int]]:
    """(start, end) of each period, ms after kick-off."""
    return (0, tl.first_half_end_ms()), (tl.second_half_start_ms(), tl.second_half_end_ms())


def _late_unit(tl: Timeline, slot: int, pid: str, scale: float, faults: bool) -> tuple[np.ndarray, list[FaultRecord]]:
    """Which home units stream (S, 11) bool: all of them, except that with ``faults`` the
    unit in ``slot`` is switched on UNIT_LATE_S (scaled) after kick-off; and its record."""
    fps = tl.fps
    late_n = min(int(round(UNIT_LATE_S * scale * fps)), tl.n1 - fps) if faults else 0
    unit_on = np.ones((tl.n_slots, 11), bool)
    unit_on[:late_n, slot] = False
    if late_n <= 0:
        return unit_on, []
    return unit_on, [fault_record("unit_late", "first_half", iso_ms(0), late_n / fps, list(range(late_n)), pid)]


def _hrr_targets(m: SynthMatch, scale: float) -> np.ndarray:
    """Target share of the heart-rate reserve (seconds, squad) at each second of the match
    clock: from the mean running speed while on the pitch (hrr_of_speed), HRR_SEATED off
    it, HRR_WARM_UP while warming up (substitutes before they come on, everyone before
    the second half; WARM_UP_S scaled)."""
    tl = m.timeline
    n_slots, n_squad = tl.n_slots, len(HOME.squad)
    who = m.squad_index[:, :11]  # squad index of the home player in each slot
    speed = _home_speed(m)
    n_sec = int(tl.second_half_end_ms() // 1000) + 2
    sec = np.repeat(tl.frame_ms() // 1000, 11).reshape(n_slots, 11)
    flat = (sec * n_squad + who).ravel()
    sums = np.bincount(flat, weights=speed.ravel(), minlength=n_sec * n_squad).reshape(n_sec, n_squad)
    counts = np.bincount(flat, minlength=n_sec * n_squad).reshape(n_sec, n_squad)
    present = counts > 0
    hrr = np.full((n_sec, n_squad), HRR_SEATED)
    hrr[present] = hrr_of_speed(sums[present] / counts[present])
    warm = int(round(WARM_UP_S * scale))
    for q in range(11, n_squad):  # substitutes warm up before they come on
        on = np.flatnonzero(present[:, q])
        if on.size:
            hrr[max(on[0] - warm, 0):on[0], q] = HRR_WARM_UP
    kick2 = tl.second_half_start_ms() // 1000
    hrr[max(kick2 - warm, 0):kick2, :] = HRR_WARM_UP  # back out before the second half
    return hrr


def _heart_rate(rng: np.random.Generator, m: SynthMatch, scale: float) -> np.ndarray:
    """Heart rate (seconds, squad) bpm of the home squad at each second of the match clock:
    the target of _hrr_targets through each player's lag (HR_TAU_UP_S, HR_TAU_DOWN_S),
    plus cardiovascular drift (HR_DRIFT_BPM), never above HRmax."""
    squad = HOME.squad
    n_squad = len(squad)
    hr_max = np.array([HOME_HR_PROFILES[j][0] for j, _, _, _ in squad], float)
    hr_rest = np.array([HOME_HR_PROFILES[j][1] for j, _, _, _ in squad], float)
    target = hr_rest + _hrr_targets(m, scale) * (hr_max - hr_rest)
    tau_up = rng.uniform(*HR_TAU_UP_S, size=n_squad)
    tau_down = rng.uniform(*HR_TAU_DOWN_S, size=n_squad)
    hr = hr_lag(target, hr_rest + HRR_WARM_UP * (hr_max - hr_rest), tau_up, tau_down)
    # cardiovascular drift: grows over each half in proportion to the time played in it
    drift = rng.uniform(*HR_DRIFT_BPM, size=n_squad)
    grid_ms = np.arange(len(hr)) * 1000
    for h0, h1 in _halves_ms(m.timeline):
        inside = (grid_ms >= h0) & (grid_ms < h1)
        hr[inside] += ((grid_ms[inside] - h0) / (h1 - h0))[:, None] * drift[None, :]
    return np.minimum(hr, hr_max)


@dataclass
class _SampleGrid:
    """The 1 Hz heart-rate samples of the home squad: a row per second of the match
    clock, a column per squad member."""

    t: np.ndarray  # ms after kick-off of each sample (each unit has its own sub-second phase)
    frame: np.ndarray  # slot at the sample's time, -1 outside the periods
    valid: np.ndarray  # bool: the sample is sent
    bpm: np.ndarray  # int
    halves_ms: tuple[tuple[int, int], tuple[int, int]]

    def samples(self, ids: list[str]) -> list[tuple[int, str, int]]:
        """The samples sent, (ms after kick-off, player id, bpm), in time order."""
        t, bpm = self.t, self.bpm
        k_idx, q_idx = np.nonzero(self.valid)
        order = np.lexsort((q_idx, t[k_idx, q_idx]))
        return [(int(t[k, q]), ids[q], int(bpm[k, q])) for k, q in zip(k_idx[order], q_idx[order], strict=True)]


def _sample_grid(rng: np.random.Generator, m: SynthMatch, unit_on: np.ndarray, hr: np.ndarray) -> _SampleGrid:
    """1 Hz samples, each unit on its own sub-second phase, while the unit streams and its
    player is on the pitch in a period; bpm is the heart rate ``hr`` plus strap noise
    (HR_NOISE_BPM), rounded."""
    tl = m.timeline
    fps = tl.fps
    n_sec: int
    n_squad: int  # numpy types shape entries as Any, which picks rng.integers' scalar overload
    n_sec, n_squad = hr.shape
    on_q = np.zeros((tl.n_slots, n_squad), bool)
    on_q[np.arange(tl.n_slots)[:, None], m.squad_index[:, :11]] = unit_on
    phase = rng.integers(0, 1000, size=n_squad)
    noise = rng.normal(0.0, HR_NOISE_BPM, size=(n_sec, n_squad))
    t = (np.arange(n_sec) * 1000)[:, None] + phase[None, :]
    frame = np.full(t.shape, -1)
    halves_ms = _halves_ms(tl)
    for (h0, h1), (f0, n) in zip(halves_ms, tl.halves, strict=True):
        inside = (t >= h0) & (t < h1)
        frame[inside] = f0 + np.minimum((t[inside] - h0) * fps // 1000, n - 1)
    valid = frame >= 0
    valid[valid] = on_q[frame[valid], np.nonzero(valid)[1]]
    bpm = np.rint(hr + noise).astype(np.int64)
    return _SampleGrid(t, frame, valid, bpm, halves_ms)


def _strap_dropout(rng: np.random.Generator, grid: _SampleGrid, q: int, pid: str, faults: bool) -> list[FaultRecord]:
    """With ``faults``, squad member ``q``'s strap loses contact (HR_DROPOUT_S) in the
    longer half, HR_EDGE_S clear of its edges: his samples there are not sent."""
    h = int(np.argmax([h1 - h0 for h0, h1 in grid.halves_ms]))
    h0, h1 = grid.halves_ms[h]
    room_ms = h1 - h0 - 2 * HR_EDGE_S * 1000
    length_ms = int(min(rng.uniform(*HR_DROPOUT_S) * 1000, room_ms))
    if not faults or length_ms < 10_000:
        return []
    start_ms = int(h0 + HR_EDGE_S * 1000 + rng.uniform(0, room_ms - length_ms))
    col = grid.t[:, q]
    lost = grid.valid[:, q] & (col >= start_ms) & (col < start_ms + length_ms)
    kept = np.flatnonzero(grid.valid[:, q] & ~lost)
    idx = np.flatnonzero(lost)
    if not idx.size:
        return []
    before, after = kept[kept < idx[0]], kept[kept > idx[-1]]
    grid.valid[idx, q] = False
    duration_s = (int(col[idx[-1]]) - int(col[idx[0]])) / 1000.0 + 1.0
    return [fault_record(
        "hr_dropout", PERIOD_NAMES[h], iso_ms(int(col[idx[0]])), duration_s, [], pid,
        samples_missing=int(idx.size),
        last_sample_before=iso_ms(int(col[before[-1]])) if before.size else None,
        first_sample_after=iso_ms(int(col[after[0]])) if after.size else None,
    )]


def _spike(rng: np.random.Generator, grid: _SampleGrid, tl: Timeline, q: int, pid: str,
           faults: bool) -> list[FaultRecord]:
    """With ``faults``, one sample of squad member ``q`` inside a period (HR_EDGE_S clear of
    its edges) becomes the implausible HR_SPIKE_BPM."""
    col = grid.t[:, q]
    inner = np.zeros(len(col), bool)
    for h0, h1 in grid.halves_ms:
        inner |= (col >= h0 + HR_EDGE_S * 1000) & (col < h1 - HR_EDGE_S * 1000)
    cand = np.flatnonzero(grid.valid[:, q] & inner)
    if not faults or not cand.size:
        return []
    k = int(rng.choice(cand))
    grid.bpm[k, q] = HR_SPIKE_BPM
    period = tl.period(int(grid.frame[k, q]))
    return [fault_record("hr_spike", period, iso_ms(int(col[k])), 0.0, [], pid, bpm=HR_SPIKE_BPM)]


def gnss_calibration() -> GnssPitch:
    """The wearables ground's corner calibration (a ``GnssPitch``): the demo pitch at GNSS_CENTRE."""
    from pacewire.wire.gnss import rectangle

    return rectangle(GNSS_CENTRE[0], GNSS_CENTRE[1], PITCH_LENGTH_M, PITCH_WIDTH_M, GNSS_BEARING_DEG)
