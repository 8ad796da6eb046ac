"""The engine's parameters from the settings: the one place where settings reach the engine.

:mod:`pacewire.engine` reads no settings; it takes a :class:`MatchParams` built here
from the validated settings and the match's roster.
"""
from __future__ import annotations

from itertools import pairwise

import numpy as np

from pacewire.config import Settings
from pacewire.engine.eventhealth import EventHealthParams
from pacewire.engine.exertion import ExertionParams
from pacewire.engine.health import HealthParams
from pacewire.engine.heart import HeartParams, HeartProfile
from pacewire.engine.kinematics import KinematicParams
from pacewire.engine.params import MatchParams, SpeedZones, WindowParams
from pacewire.engine.phases import PhaseParams
from pacewire.engine.types import PERIODS, FeedProfile, Roster


def match_params(settings: Settings, roster: Roster) -> MatchParams:
    """The parameters of a :class:`pacewire.engine.match.MatchState` for ``roster``."""
    s = settings
    fps = roster.fps
    return MatchParams(
        kinematics=kinematic_params(s, fps, roster.feed_profile),
        exertion=ExertionParams(
            fps=fps, hsr_ms=s.speed.hsr_ms, sprint_ms=s.speed.sprint_ms,
            speed_min_n=int(round(s.efforts.speed_min_s * fps)), accel_min_n=int(round(s.efforts.accel_min_s * fps)),
            accel_ms2=s.efforts.accel_ms2, decel_ms2=s.efforts.decel_ms2, model=s.metabolic.model,
            kt=s.metabolic.kt, air_k=s.metabolic.air_k, flat_cost=s.metabolic.flat_cost_jkgm,
            high_power_wkg=s.metabolic.high_power_wkg, top_hold_n=max(int(round(s.speed.top_speed_hold_s * fps)), 1),
        ),
        health=HealthParams(s.health.rate_window_s, s.health.min_rate_share, s.health.max_dropout,
                            s.health.max_lag_s, s.health.stall_s, fast_feed_ratio=s.health.fast_feed_ratio,
                            max_clock_offset_s=s.health.max_clock_offset_s),
        heart=heart_params(s),
        heart_profiles=_heart_profiles(roster, s),
        zones=_speed_zones(roster, s),
        windows=WindowParams(last_min=tuple(s.windows.last_min), peak_min=tuple(s.windows.peak_min),
                             block_min=s.windows.block_min),
        period_min=tuple(int(getattr(s.periods, name)) for name in PERIODS),
        on_pitch_timeout_s=s.health.on_pitch_timeout_s,
        phases=PhaseParams(transition_s=s.phases.transition_s, stale_s=s.phases.stale_s,
                           dead_stale_s=s.phases.dead_stale_s, loose_s=s.phases.loose_s),
        event_health=EventHealthParams(gap_s=s.event_health.gap_s, stall_s=s.event_health.stall_s,
                                       max_lag_s=s.event_health.max_lag_s, window_s=s.event_health.window_s),
    )


def kinematic_params(settings: Settings, fps: int, profile: FeedProfile | None = None) -> KinematicParams:
    """Smoothing and artefact rules at ``fps`` for a feed profile (None: the config's ``feed_profile``)."""
    k = settings.kinematics.resolved(profile)
    return KinematicParams.make(
        fps, window_s=k.smooth_window_s, order=k.smooth_order, bridge_s=k.bridge_gap_s, still_ms=k.still_speed_ms,
        max_speed_ms=k.max_speed_ms, max_accel_ms2=k.max_accel_ms2, step_speed_ms=k.max_step_speed_ms,
        step_tolerance_ms=k.jump_tolerance_ms, excursion_s=k.excursion_s, velocity_span_s=k.velocity_span_s,
        tolerance_m=k.excursion_tolerance_m, tolerance_ms2=k.excursion_accel_ms2, reentry_gap_s=k.reentry_gap_s,
        bridge_speed_ms=k.bridge_speed_ms)


def heart_params(settings: Settings) -> HeartParams:
    """The heart-rate gate and accumulation parameters (the decoder needs only these)."""
    h = settings.heart_rate
    return HeartParams(min_bpm=h.min_bpm, max_bpm=h.max_bpm, max_jump_bpm_s=h.max_jump_bpm_s, jump_reset=h.jump_reset,
                       max_gap_s=h.max_gap_s, expected_hz=h.expected_hz, zone_edges_pct=tuple(h.zone_edges_pct),
                       edwards_weights=tuple(h.edwards_weights), banister_male=h.banister_male,
                       banister_female=h.banister_female, stale_s=h.stale_s)


def _heart_profiles(roster: Roster, s: Settings) -> tuple[HeartProfile, ...]:
    """Each player's profile: the match sheet's fields, else the profiles file's."""
    files = s.heart_rate.profiles
    out = []
    for p in roster.players:
        f = files.get(p.id)
        hr_max = p.hr_max_bpm if p.hr_max_bpm is not None else (f.hr_max_bpm if f else None)
        hr_rest = p.hr_rest_bpm if p.hr_rest_bpm is not None else (f.hr_rest_bpm if f else None)
        sex = p.sex if p.sex is not None else (f.sex if f else None)
        if hr_max is not None and hr_rest is not None and hr_rest >= hr_max:
            hr_rest = None  # sheet and file disagree: a resting rate above the maximum is not used
        out.append(HeartProfile(hr_max_bpm=hr_max, hr_rest_bpm=hr_rest, sex=sex))
    return tuple(out)


def _speed_zones(roster: Roster, s: Settings) -> SpeedZones:
    """Band edges, per-player scale and band names of the configured speed zones."""
    z = s.zones
    if z.mode == "absolute":
        edges = np.array(z.edges_ms, float)
        names = [f"{a:.1f}-{b:.1f}" for a, b in pairwise([0.0, *edges])] + [f"{edges[-1]:.1f}+"]
        return SpeedZones(z.mode, edges, np.ones(roster.n), tuple(names))
    pct = np.array(z.edges_pct, float)
    vmax = np.array([z.max_speed_ms.get(p.id) or p.max_speed_ms or z.default_max_speed_ms for p in roster.players])
    names = [f"{a:g}-{b:g}%" for a, b in pairwise([0.0, *pct])] + [f"{pct[-1]:g}%+"]
    return SpeedZones(z.mode, pct, vmax / 100.0, tuple(names))
