"""Pydantic models of every message out (README, "Consuming the stream") and their JSON Schemas (2020-12).

The models are the one source of truth for the published schemas: ``docs/schema/``
is written from them (``make schema``), ``GET /api/schema/messages`` serves them,
and the tests check that both agree with the models and with what a real server
sends. The models describe; the server builds its messages elsewhere
(``pacewire.engine.snapshot``, ``pacewire.live``), so a test validates real
messages against these schemas.

Units are SI and part of every field name (``_m`` metres, ``_ms`` m/s, ``_s``
seconds, ``_wkg`` W/kg, ``_jkg`` J/kg). Window keys, zone band names and period
keys depend on ``config/default.toml``, so they are described by patterns.

The published schemas are open (unknown fields allowed): within a contract
version fields are only added. :func:`strict` closes every object, which the
tests use to catch a field the server sends but the models do not describe.

Run ``python -m pacewire.wire.schema --out docs/schema`` to write the files.
"""
from __future__ import annotations

import argparse
import copy
import json
import sys
import types
import typing
from pathlib import Path
from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, create_model

from pacewire.engine.precision import WIRE
from pacewire.engine.types import PERIODS
from pacewire.wire.messages import CONTRACT_VERSION

JSON_SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"

Period = Literal[PERIODS]  # type: ignore[valid-type]  # mypy reads no Literal of a run-time tuple
WINDOW_KEY = r"^(last_[0-9]+min|peak_[0-9]+min|block_[0-9]+_[0-9]+)$"
LAST_WINDOW_KEY = r"^last_[0-9]+min$"
ZONE_KEY = r"^[0-9]+(\.[0-9]+)?(-[0-9]+(\.[0-9]+)?%?|%?\+)$"
ID = Annotated[str, Field(min_length=1)]


def _to(kind: str, unit: str) -> str:
    """The precision a kind of figure carries on the wire (pacewire.engine.precision), for a description:
    ``to 1 m``, ``to 0.1 W/kg``; ``to 0.01`` for a share. Digits below it are never sent."""
    return f"to {WIRE.unit(kind):g}{' ' + unit if unit else ''}"


def _optional_key(description: str, **bounds: Any) -> Any:
    """A key a message leaves out where it does not apply; when present it is never null, so the
    annotation stays non-optional and the None default only makes the key not required."""
    return Field(None, description=description, **bounds)



class _Shape(BaseModel):
    # described, not enforced: the published schema stays open for added fields
    model_config = ConfigDict(extra="ignore")


# -- the snapshot body -------------------------------------------------------------------------
class WindowFigures(_Shape):
    """Distance and effort figures over a stretch of play (window, block, period, team). Each figure
    carries the precision its description states; a delta sends it only when it changed at it."""

    distance_m: float = Field(ge=0, description=f"Distance covered, m, {_to('distance', 'm')}.")
    hsr_m: float = Field(ge=0, description="High-speed running distance, 5.5-7.0 m/s (19.8-25.2 km/h), m "
                                           f"(Bradley et al. 2009; Di Salvo et al. 2009), {_to('distance', 'm')}.")
    sprint_m: float = Field(ge=0, description="Sprint distance, >= 7.0 m/s (25.2 km/h), m (Di Salvo et al. 2009), "
                                              f"{_to('distance', 'm')}.")
    hsr_efforts: int = Field(ge=0, description="High-speed efforts: >= 5.5 m/s held >= 1 s (a sprint is one too), "
                                               "count.")
    sprints: int = Field(ge=0, description="Sprint efforts: >= 7.0 m/s held >= 1 s, count.")
    accels: int = Field(ge=0, description="Accelerations above +3 m/s^2 held >= 0.5 s, count (Akenhead et al. 2013).")
    decels: int = Field(ge=0, description="Decelerations below -3 m/s^2 held >= 0.5 s, count (Akenhead et al. 2013).")
    energy_jkg: float = Field(ge=0, description="Metabolic energy spent, J/kg (di Prampero et al. 2005; "
                                                f"Osgnach et al. 2010), {_to('energy', 'J/kg')}.")
    high_power_m: float = Field(ge=0, description="Distance covered while metabolic power exceeded 20 W/kg, m "
                                                  f"(Osgnach et al. 2010), {_to('distance', 'm')}.")
    m_per_min: float | None = Field(description=f"Distance per minute on the pitch, m/min, {_to('rate', 'm/min')}; "
                                                "null before any time on the pitch.")
    metabolic_power_wkg: float | None = Field(description="Mean metabolic power, W/kg, "
                                                          f"{_to('power', 'W/kg')}; null before any time on the pitch.")


HR_ZONE_KEY = r"^[0-9]+(\.[0-9]+)?-[0-9]+(\.[0-9]+)?%$"


class HeartWindow(_Shape):
    """Heart-rate figures over a stretch of play; present once the match has heart-rate samples
    (docs/wearables.md). Estimates from a strap: decisions stay with qualified staff."""

    hr_mean_bpm: float | None = Field(None, description="Time-weighted mean heart rate, bpm; "
                                                        "null without credited samples.")
    trimp_edwards: float | None = Field(None, ge=0, description="Edwards' TRIMP: minutes in the 50-60 ... 90-100 % "
                                                                "HRmax zones weighted 1-5, AU (Edwards 1993); "
                                                                "null without hr_max_bpm.")
    trimp_banister: float | None = Field(None, ge=0, description="Banister's TRIMP: minutes x HRr x a*exp(b*HRr), "
                                                                 "AU (Banister 1991); "
                                                                 "null without hr_max_bpm, hr_rest_bpm and sex.")


class HeartZones(_Shape):
    """Seconds in each heart-rate zone, % of HRmax (``50-60%`` ... ``90-100%``; Edwards 1993)."""

    model_config = ConfigDict(json_schema_extra={"patternProperties": {HR_ZONE_KEY: {"type": "number", "minimum": 0}}})


class HeartFigures(HeartWindow):
    hr_zones: HeartZones | None = Field(None, description="Seconds per heart-rate zone; null without hr_max_bpm.")
    hr_coverage: float | None = Field(None, ge=0, le=1, description="Heart-rate samples credited / "
                                                                    "(seconds on the pitch x expected rate); "
                                                                    "null before time on the pitch.")


class Window(WindowFigures, HeartWindow):
    """A rolling window (``last_Nmin``), a fixed block (``block_A_B``) or a peak (``peak_Nmin``)."""

    span_s: float = Field(ge=0, description="Seconds of play the window covers (shorter than N minutes early on), "
                                            f"{_to('seconds', 's')}.")
    start_s: float = _optional_key(description=f"Peak windows only: match clock at the window's start, s, "
                                               f"{_to('seconds', 's')}.")


class Zones(_Shape):
    """Distance per speed band, m; band names come from the configured edges, e.g. ``0.0-2.0`` (m/s)
    and ``7.0+``, or ``0-30%`` and ``85%+`` (share of the player's max speed)."""

    model_config = ConfigDict(json_schema_extra={"patternProperties": {ZONE_KEY: {
        "type": "number", "minimum": 0, "description": f"Distance in the band, m, {_to('distance', 'm')}."}}})


class PeriodFigures(WindowFigures, HeartFigures):
    """A player's figures over one stretch of the match (the whole match, or one period)."""

    minutes: float = Field(ge=0, description=f"Minutes on the pitch, {_to('minutes', 'min')}.")
    max_speed_ms: float = Field(ge=0, description=f"Top speed, m/s, {_to('speed', 'm/s')}.")
    coverage: float = Field(ge=0, le=1, description="Credited samples / samples on the pitch (1 = no gaps), "
                                                    f"{_to('share', '')}.")
    zones: Zones = Field(description="Distance per speed band, m.")


class ContextFigures(_Shape):
    distance_m: float = Field(ge=0, description=f"Distance covered in this ball context, m, {_to('distance', 'm')}.")
    hsr_m: float = Field(ge=0, description="High-speed running distance in this ball context, m, "
                                           f"{_to('distance', 'm')}.")


class Possession(_Shape):
    """Distance split by ball context (only when the feed carries ball status and possession)."""

    in_possession: ContextFigures
    out_of_possession: ContextFigures
    out_of_play: ContextFigures


PhaseName = Literal["attack", "defence", "attacking_transition", "defensive_transition", "dead_ball", "unknown"]


class PhaseFigures(_Shape):
    """Figures over the seconds of one game phase (its team's phase, second by second)."""

    seconds: float = Field(ge=0, description="Seconds in this phase: a player's while seen on the pitch, a team's "
                                             "of match time, to 0.1 s.")
    distance_m: float = Field(ge=0, description=f"Distance covered in this phase, m, {_to('distance', 'm')}.")
    m_per_min: float | None = Field(description=f"Distance per minute of this phase, m/min, {_to('rate', 'm/min')}; "
                                                "null before any.")
    hsr_m: float = Field(ge=0, description=f"High-speed running distance in this phase, m, {_to('distance', 'm')}.")
    sprint_m: float = Field(ge=0, description=f"Sprint distance in this phase, m, {_to('distance', 'm')}.")


class TeamPhaseFigures(PhaseFigures):
    per_player_m_per_min: float | None = Field(description="Outfield distance per outfield player-minute in this "
                                                           f"phase, m/min, {_to('rate', 'm/min')}.")


PHASES_DESCRIPTION = ("Figures by game phase: attack and defence (organised possession and out of possession), "
                      "attacking_transition and defensive_transition (the first seconds after the ball was won or "
                      "lost in open play, phases.transition_s), dead_ball, and unknown (a loose ball, or no context). "
                      "Possession from the CDF event stream, else the tracking's ball; the phases partition the "
                      "totals.")


BaselineRate = Literal["m_per_min", "hsr_m_per_min", "sprint_m_per_min", "accel_decel_per_min"]
BLOCK_LABEL = r"^[0-9]+-[0-9]+$"


class BaselineBand(_Shape):
    """One rate over the player's past live and replayed matches: the median, and median -/+
    history.band_spreads x spread (spread: 1.4826 x median absolute deviation, Rousseeuw & Croux 1993);
    per minute on the pitch, to 0.01."""

    median: float = Field(description="Median over the matches behind the band.")
    low: float = Field(description="Lower edge: median - band_spreads x spread (the baseline alert rule's limit).")
    high: float = Field(description="Upper edge: median + band_spreads x spread.")


class BaselineBands(_Shape):
    match: dict[BaselineRate, BaselineBand] = Field(description="Whole-match rates (the sum of the blocks).")
    blocks: dict[Annotated[str, Field(pattern=BLOCK_LABEL)], dict[BaselineRate, BaselineBand]] = Field(
        description="15-minute blocks of the match clock: 0-15, 15-30, 30-45 (with first-half stoppage time), "
                    "45-60, 60-75, 75-90 (with second-half stoppage time); extra time 90-105, 105-120. A block "
                    "appears once history.min_matches matches hold minutes in it.")


class VersusRate(_Shape):
    ratio: float = Field(description="This match's rate (per minute on the pitch) / the band's median, to 0.01.")
    below: bool = Field(description="This match's rate is under the band's low edge.")


class VersusBaseline(_Shape):
    block_key: str | None = Field(description="The block in progress (the latest with data); null before any.")
    block: dict[BaselineRate, VersusRate] | None = Field(
        description="The block in progress against its band; null without minutes in it or a band for it.")
    match: dict[BaselineRate, VersusRate] | None = Field(description="The match so far against the match band.")


class MatchRef(_Shape):
    match_id: ID = Field(description="The match's name in the history (its match id unless imported under another).")
    kickoff: float | None = Field(description="Kick-off, epoch seconds (UTC); null when unknown.")


class Baseline(_Shape):
    """The player against his own past live and replayed matches (history.sqlite), fixed at the match's start.
    Without enough matches only ``matches`` and ``required`` are sent: no bands, never zeros."""

    matches: int = Field(ge=0, description="His qualifying matches: live or replayed, at least history.min_minutes "
                                           "played, the last history.baseline_matches.")
    required: int = Field(ge=1, description="The minimum for bands (history.min_matches).")
    match_ids: list[MatchRef] = _optional_key(description="The matches behind the bands, newest first.")
    bands: BaselineBands = _optional_key(description="The bands.")
    formed_by: dict[str, list[MatchRef]] = _optional_key(
        description="Per scope (match, or a block) the matches whose figures formed its bands.")
    vs_baseline: VersusBaseline = _optional_key(description="This match against the bands.")


class Player(PeriodFigures):
    """One player: identity, whole-match figures, windows, per-period figures."""

    team_id: ID = Field(description="The player's team (a key of ``teams``).")
    jersey_number: int = Field(description="Shirt number from the match sheet.")
    name: str = Field(description="Display name from the match sheet (may be empty).")
    is_goalkeeper: bool = Field(description="position_group GK in the match sheet; "
                                            "goalkeepers are left out of team figures.")
    on_pitch: bool = Field(description="On the pitch now (seen recently, or brought on by a substitution event).")
    speed_ms: float | None = Field(description=f"Current speed, m/s, {_to('speed', 'm/s')}; "
                                               "null when not seen in the last second.")
    windows: dict[Annotated[str, Field(pattern=WINDOW_KEY)], Window | None] = Field(
        description="last_Nmin: rolling windows of the current period; peak_Nmin: the best N-minute window so far "
                    "(null until N minutes were played; Fereday et al. 2020); block_A_B: fixed blocks of the "
                    "match clock, minutes A to B.")
    periods: dict[Period, PeriodFigures] = Field(description="The same figures per period played.")
    possession: Possession = _optional_key(description="Distance by ball context; "
                                                       "present when the feed has possession.")
    phases: dict[PhaseName, PhaseFigures] = Field(description=PHASES_DESCRIPTION)
    m_per_min_in_play: float | None = Field(description="Distance per minute of effective playing time (the ball in "
                                                        "play), m/min (Altmann et al. 2023), "
                                                        f"{_to('rate', 'm/min')}; null before any.")
    hr_bpm: float | None = Field(None, description="Latest heart rate, bpm; null when older than heart_rate.stale_s.")
    hr_pct_max: float | None = Field(None, description="hr_bpm as % of the player's HRmax; null without hr_max_bpm.")
    hr_peak_bpm: float | None = Field(None, description="Highest accepted heart rate, bpm.")
    hr_omitted: dict[str, str] = _optional_key(description="Heart-rate figures left out for this player, each with why "
                                                           "(a profile value is missing).")
    baseline: Baseline = _optional_key(description="Against his own past matches (live service; absent offline).")


class PerPlayer(_Shape):
    """Kept for clients of the first version: ``per_90min``'s distances and the team's ``m_per_min``."""

    distance_m: float | None = Field(description="per_90min.distance_m: distance per outfield player per 90 minutes "
                                                  f"on the pitch, m, {_to('distance', 'm')}.")
    hsr_m: float | None = Field(description=f"per_90min.hsr_m, m, {_to('distance', 'm')}.")
    sprint_m: float | None = Field(description=f"per_90min.sprint_m, m, {_to('distance', 'm')}.")
    m_per_min: float | None = Field(description=f"The team's m_per_min, m/min, {_to('rate', 'm/min')}.")


class Per90Min(_Shape):
    """Per outfield player per 90 minutes on the pitch: the team's outfield total divided by its outfield
    players' minutes on the pitch, x 90 (the weights of the team's m_per_min)."""

    distance_m: float = Field(ge=0, description=f"Distance per 90 minutes on the pitch, m, {_to('distance', 'm')}.")
    hsr_m: float = Field(ge=0, description=f"HSR distance per 90 minutes on the pitch, m, {_to('distance', 'm')}.")
    sprint_m: float = Field(ge=0, description="Sprint distance per 90 minutes on the pitch, m, "
                                              f"{_to('distance', 'm')}.")
    high_power_m: float = Field(ge=0, description="High-power distance per 90 minutes on the pitch, m, "
                                                  f"{_to('distance', 'm')}.")
    energy_jkg: float = Field(ge=0, description="Metabolic energy per 90 minutes on the pitch, J/kg, "
                                                f"{_to('energy', 'J/kg')}.")
    hsr_efforts: float = Field(ge=0, description=f"HSR efforts per 90 minutes on the pitch, {_to('per_90_count', '')}.")
    sprints: float = Field(ge=0, description=f"Sprints per 90 minutes on the pitch, {_to('per_90_count', '')}.")
    accels: float = Field(ge=0, description=f"Accelerations per 90 minutes on the pitch, {_to('per_90_count', '')}.")
    decels: float = Field(ge=0, description=f"Decelerations per 90 minutes on the pitch, {_to('per_90_count', '')}.")


class PerMin(_Shape):
    """Per outfield player per minute on the pitch: the team's outfield total divided by its outfield
    players' minutes on the pitch."""

    distance_m: float = Field(ge=0, description="Distance per minute on the pitch, m, "
                                                f"{_to('per_min_distance', 'm')}.")
    hsr_m: float = Field(ge=0, description=f"HSR distance per minute on the pitch, m, {_to('per_min_distance', 'm')}.")
    sprint_m: float = Field(ge=0, description="Sprint distance per minute on the pitch, m, "
                                              f"{_to('per_min_distance', 'm')}.")
    high_power_m: float = Field(ge=0, description="High-power distance per minute on the pitch, m, "
                                                  f"{_to('per_min_distance', 'm')}.")
    energy_jkg: float = Field(ge=0, description="Metabolic energy per minute on the pitch, J/kg, "
                                                f"{_to('per_min_energy', 'J/kg')}.")
    hsr_efforts: float = Field(ge=0, description=f"HSR efforts per minute on the pitch, {_to('per_min_count', '')}.")
    sprints: float = Field(ge=0, description=f"Sprints per minute on the pitch, {_to('per_min_count', '')}.")
    accels: float = Field(ge=0, description=f"Accelerations per minute on the pitch, {_to('per_min_count', '')}.")
    decels: float = Field(ge=0, description=f"Decelerations per minute on the pitch, {_to('per_min_count', '')}.")


_NO_TEAM_ENERGY = ("Always null for a team: a sum of per-kilogram figures means nothing (per_90min.energy_jkg and "
                   "metabolic_power_wkg give the team's energy per player).")


class TeamWindow(WindowFigures):
    """A rolling window of the current period over the team's outfield players: distances and counts are
    totals; the rates are means per outfield player over the seconds each was credited in the window (a
    player substituted off stops counting when he left)."""

    energy_jkg: None = Field(description=_NO_TEAM_ENERGY)  # type: ignore[assignment]
    m_per_min: float | None = Field(description="Outfield distance / outfield players' credited minutes in the "
                                                f"window: the mean per player, m/min, {_to('rate', 'm/min')}; "
                                                "null before any.")
    metabolic_power_wkg: float | None = Field(description="Outfield energy / outfield players' credited seconds in "
                                                          "the window: the time-weighted mean of the players, W/kg, "
                                                          f"{_to('power', 'W/kg')}; null before any.")
    span_s: float = Field(ge=0, description=f"Seconds of play the window covers, {_to('seconds', 's')}.")


class SequenceFigures(_Shape):
    """A team's possession sequences (spells with the ball in play) of one outcome."""

    count: int = Field(ge=0, description="Sequences, count.")
    seconds: float = Field(ge=0, description="Their total duration, s.")
    mean_s: float | None = Field(description="Their mean duration, s; null without any.")
    m_per_min: float | None = Field(description="Outfield distance per outfield player-minute during them, m/min, "
                                                f"{_to('rate', 'm/min')}.")
    hsr_m_per_min: float | None = Field(description="Outfield high-speed running per outfield player-minute during "
                                                    f"them, m/min, {_to('rate', 'm/min')}.")


class Sequences(_Shape):
    """Possession sequences by outcome (Bradley & Ade 2018): those in which the team shot, and the others."""

    shot: SequenceFigures
    no_shot: SequenceFigures


class Outfield(WindowFigures):
    """A team's outfield players (goalkeepers excluded; every outfield player who has been on the pitch).
    distance_m, hsr_m, sprint_m, high_power_m and the four counts are the team's totals; m_per_min and
    metabolic_power_wkg are means per player weighted by time on the pitch; per_90min and per_min are
    per-player averages over time on the pitch. No per-kilogram figure is summed."""

    energy_jkg: None = Field(description=_NO_TEAM_ENERGY)  # type: ignore[assignment]
    m_per_min: float | None = Field(description="Outfield distance / outfield players' minutes on the pitch: the "
                                                "time-weighted mean of the players' m_per_min (the work rate of the "
                                                f"average player, not a sum of rates), m/min, {_to('rate', 'm/min')}; "
                                                "null before any time on the pitch.")
    metabolic_power_wkg: float | None = Field(description="Outfield energy / outfield players' seconds on the pitch: "
                                                          "the time-weighted mean of the players' mean metabolic "
                                                          f"power, W/kg, {_to('power', 'W/kg')}; null before any "
                                                          "time on the pitch.")
    players: int = Field(ge=0, description="Outfield players who have been on the pitch.")
    minutes: float = Field(ge=0, description=f"Minutes of match time played, {_to('minutes', 'min')}.")
    player_minutes: float = Field(ge=0, description="The outfield players' minutes on the pitch, summed (the "
                                                    f"weights of every average here), {_to('minutes', 'min')}.")
    per_90min: Per90Min | None = Field(description="Per outfield player per 90 minutes on the pitch; null before "
                                                   "any time on the pitch.")
    per_min: PerMin | None = Field(description="Per outfield player per minute on the pitch; null before any time "
                                               "on the pitch.")
    per_player: PerPlayer = Field(description="Kept for clients of the first version: per_90min's distances and "
                                              "m_per_min (its distance was the total divided by the players used).")
    windows: dict[Annotated[str, Field(pattern=LAST_WINDOW_KEY)], TeamWindow] = Field(
        description="Rolling windows of the current period over the outfield players.")
    phases: dict[PhaseName, TeamPhaseFigures] = Field(description=PHASES_DESCRIPTION + " m_per_min: per minute "
                                                                  "of match time in the phase, as m_per_min above.")
    m_per_min_in_play: float | None = Field(description="Outfield distance per minute of effective playing time, "
                                                        f"m/min (Altmann et al. 2023), {_to('rate', 'm/min')}.")
    in_play_s: float = Field(ge=0, description="Effective playing time so far (the ball in play), s.")
    sequences: Sequences = _optional_key(description="Possession sequences by outcome; present when the match has "
                                                     "a CDF event stream (shots come from it).")


class Team(_Shape):
    name: str = Field(description="Team name from the set-up.")
    side: Literal["home", "away"]
    score: int = _optional_key(ge=0, description="Goals from match events (live service only).")
    tracked: bool = Field(description="The feed tracks this team's players; false for the other team of a "
                                      "one-team (wearables) feed, which then has no outfield figures.")
    outfield: Outfield = _optional_key(description="Outfield totals; absent for a team the feed does not track.")


class Reason(_Shape):
    code: str = Field(description="Machine-readable reason: no_frames, low_rate, dropout, late_delivery, recorder, ...")
    message: str = Field(description="Human-readable explanation.")


class ArtefactCount(_Shape):
    """Seen samples taken out as tracking artefacts (excursions, re-entry slides, implausible steps,
    samples beyond the physical bounds): they credit no figure and lower ``coverage``."""

    samples: int = Field(ge=0, description="Samples removed, count.")
    seconds: float = Field(ge=0, description="Their duration at the nominal frame rate, s.")


class EventStreamHealth(_Shape):
    """The CDF event stream's own health."""

    state: Literal["ok", "degraded", "stalled"]
    reasons: list[Reason] = Field(
        description="Empty when ok: no_events, event_gap, event_stall, event_lag, event_ahead.")
    events: int = Field(ge=0, description="Distinct events accepted (by id), count.")
    events_per_min: float | None = Field(description="Events timed within the last window of match time, per minute.")
    lag_s: float | None = Field(description="Median of how far events arrive behind the tracking, s; null offline.")
    lag_p95_s: float | None = Field(description="95th percentile of that lag, s.")
    since_last_s: float | None = Field(description="Seconds of play (the ball not known dead) since the latest "
                                                   "event, s.")
    corrections: int = Field(ge=0, description="Events sent again under their id with other content (the latest "
                                               "wins), count.")
    duplicates: int = Field(ge=0, description="Events sent again unchanged (dropped), count.")
    rejected: int = Field(ge=0, description="Events refused as invalid, count.")


class Health(_Shape):
    """Feed health: its state, why, and the counters behind it."""

    state: Literal["ok", "degraded", "stalled", "finished"] = Field(
        description="ok, degraded (see reasons), stalled (no frame for health.stall_s), or finished: the match "
                    "has ended, no frame is due (never stalled after full time).")
    reasons: list[Reason] = Field(description="Empty when ok.")
    fps_observed: float = Field(ge=0, description="Frames per second over the rate window, 1/s: per second of wall "
                                                  "time, or per second of the frames' own time while rate_clock is "
                                                  "frames (a fast replay shows its feed's rate, not the replay's).")
    fps_nominal: int = Field(gt=0, description="Frame rate of the set-up, 1/s.")
    feed_speed: float | None = Field(description="Frame time covered per second of wall time over the rate window: "
                                                 "1 for a live feed, 20 for a replay at 20x; 0.1 precision; null "
                                                 "without frames in the window.")
    rate_clock: Literal["wall", "frames"] = Field(description="The clock fps_observed is counted on: frames while "
                                                              "feed_speed exceeds health.fast_feed_ratio.")
    dropout: float = Field(ge=0, le=1, description="Share of expected samples of players on the pitch missing.")
    lag_s: float | None = Field(description="Median arrival lag behind the frame timestamps, s; null when unknown "
                                            "or not measured (lag_note says why).")
    lag_p95_s: float | None = Field(description="95th percentile of the arrival lag, s; null as lag_s.")
    lag_note: str | None = Field(description="Why the lag is not measured: the timestamps are not wall-clock time "
                                             "(a fast feed, or an offset beyond health.max_clock_offset_s); "
                                             "null otherwise.")
    late: int = Field(ge=0, description="Frames dropped for arriving after a later frame, never received before, "
                                        "count.")
    duplicates: int = Field(ge=0, description="Frames dropped as repeats of one of the recently applied frame ids "
                                              "(decode.recent_ids), count.")
    resent: int = Field(ge=0, description="Frames dropped because the service already held them from longer ago "
                                          "(a provider resending a stretch), count.")
    after_end: int = Field(ge=0, description="Frames refused because the match had ended (match_status ended), "
                                             "count.")
    rejected: int = Field(ge=0, description="Frames refused as invalid, count.")
    jumps: int = Field(ge=0, description="Implausible position steps (> 12.5 m/s plus noise) that started an "
                                         "excursion removed or split the track, count.")
    frames: int = Field(ge=0, description="Frames applied, count.")
    coverage: dict[str, float] = Field(description="Per player id: credited samples / samples on the pitch, 0-1, "
                                                   f"{_to('share', '')}; samples removed as artefacts are not "
                                                   "credited.")
    artefacts: dict[str, ArtefactCount] = Field(description="Per player id: samples removed as tracking artefacts.")
    artefact_samples: int = Field(ge=0, description="Samples removed as tracking artefacts, all players, count.")
    artefact_s: float = Field(ge=0, description="Their duration, all players, s.")
    hr_coverage: dict[str, float | None] = _optional_key(description="Per player on the pitch: heart-rate samples "
                                                                     "over the last minute / expected "
                                                                     "(a strap dropping out shows here).")
    hr_rejected: int = _optional_key(ge=0, description="Heart-rate samples refused (implausible, jumps, bad shape), "
                                                       "count.")
    hr_duplicates: int = _optional_key(ge=0, description="Heart-rate samples dropped as repeats, count.")
    hr_late: int = _optional_key(ge=0, description="Heart-rate samples dropped as older than the player's last, count.")
    events: EventStreamHealth = _optional_key(description="The CDF event stream's health; present once the match "
                                                          "has one.")


MatchStatus = Literal["not_started", "live", "break", "ended"]
MATCH_STATUS = ("not_started: no frame yet; live: a period is being played; break: between periods (a period_end "
                "event, or the period's nominal length played and no frame for reports.period_timeout_s); ended: "
                "after the last period of the set-up (meta.match.periods; the second half when it lists none).")


class AlertFields(_Shape):
    """What an alert says: the rule, the player, the figure, its value and the limit it crossed."""

    rule: str = Field(description="Rule id from the configuration ([alerts] rules).")
    kind: str = Field(description="Kind of rule: drop_off_peak, drop_off_baseline, load_budget, ...")
    player_id: ID
    team_id: ID
    figure: str = Field(description="The figure the rule watches.")
    value: float = Field(description="The player's value of that figure (its unit).")
    limit: float = Field(description="The limit it crossed (same unit).")
    level: float = _optional_key(description="Load budgets only: the share of the budget this alert marks.")
    message: str = Field(description="Human-readable text.")


class Alert(AlertFields):
    """An alert raised earlier in the match, as its ``alert`` message said it."""

    match_time_s: float = Field(ge=0, description="Match clock when it was raised, s.")
    period: Period | None = Field(description="Period when it was raised.")


class SnapshotBody(_Shape):
    """The full state of a match (also ``GET /api/matches/{id}/snapshot``)."""

    players: dict[str, Player] = Field(description="Per player id.")
    teams: dict[str, Team] = Field(description="Per team id.")
    health: Health
    match_status: MatchStatus = _optional_key(description=f"Live service only. {MATCH_STATUS}")
    alerts: list[Alert] = _optional_key(description="Every alert raised so far, oldest first (a view gets those about "
                                                    "the players it shows); the live service and reports only. A "
                                                    "delta carries the whole list when it grew; each new alert "
                                                    "also comes as an alert message.")


# -- messages ------------------------------------------------------------------------------------
class Envelope(_Shape):
    """Fields every message carries; the body's fields sit beside them."""

    match_id: ID
    seq: int = Field(ge=0, description="Position in this subscription's stream: one more per message; 0 on errors.")
    match_time_s: float = Field(ge=0, description="Match clock of the state the message reflects, s.")
    period: Period | None = Field(description="Current period; null before the first frame.")
    # mypy reads no Literal of a name
    v: Literal[CONTRACT_VERSION] = Field(  # type: ignore[valid-type]
        description="Contract major version; within it fields are only added, never removed or renamed.")


class SnapshotMessage(SnapshotBody, Envelope):
    """The full state: on connect, and on resync."""

    type: Literal["snapshot"]
    resync: Literal[True] = _optional_key(description="Present (true) when it replaces messages "
                                                      "a resume could not deliver.")


class HealthMessage(Envelope):
    """The feed-health state or the kinds of its reasons changed."""

    type: Literal["health"]
    health: Health


class PeriodMessage(Envelope):
    """A period started or ended."""

    type: Literal["period"]
    event: Literal["start", "end"]
    frame_id: int | None = Field(description="Frame that started (or ended) the period, when known.")


class AlertMessage(AlertFields, Envelope):
    """A player crossed a configured rule; match_time_s and period are the alert's own."""

    type: Literal["alert"]


class StatusMessage(Envelope):
    """The match status changed (the snapshot's match_status, and a delta, change with it)."""

    type: Literal["status"]
    match_status: MatchStatus = Field(description=MATCH_STATUS)
    cause: Literal["frames", "period_start", "period_end", "timeout"] | None = Field(
        description="What moved it: frames (of a period), period_start or period_end (an event), timeout (the "
                    "period's nominal length played and a silent feed); null before any frame.")
    message: str = Field(description="Human-readable explanation.")


class ReportMessage(Envelope):
    """A report is ready."""

    type: Literal["report"]
    kind: Literal["half_time", "full_time"]
    url: str = Field(description="Where to fetch it (path on this server).")


class ErrorMessage(Envelope):
    """A bad frame (ingest socket) or a refused subscription (live socket, then closed with 1008, or 1013
    when the service is unavailable, and the message as the close reason, cut to 123 bytes)."""

    type: Literal["error"]
    code: str = Field(description="Machine-readable: bad_json, duplicate, resent, late, match_ended, unknown_team, "
                                  "unknown_match, bad_request, too_many_subscribers, not_stored, ...")
    message: str = Field(description="Human-readable explanation.")
    param: str = _optional_key(description="The subscription's parameter that was refused (every, view, since).")
    frame_id: int = _optional_key(description="The frame's id, when it could be read.")
    line: int = _optional_key(description="Line number within an HTTP batch.")


def partial(model: type[BaseModel], suffix: str = "Delta") -> type[BaseModel]:
    """The same shape with every field optional and nullable (a delta: changed leaves only;
    null means the key went away). Nested models become partial too."""
    cache: dict[type, type[BaseModel]] = {}

    def conv(tp: Any) -> Any:
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            return make(tp)
        origin = typing.get_origin(tp)
        args = typing.get_args(tp)
        if origin is Annotated:
            return Annotated[(conv(args[0]), *tp.__metadata__)]
        if origin in (Union, types.UnionType):
            # a Union of a run-time tuple has no X | Y spelling
            return Union[tuple(conv(a) for a in args)]  # noqa: UP007
        if origin is dict:
            return types.GenericAlias(dict, (args[0], conv(args[1]) | None))
        return tp

    def make(m: type[BaseModel]) -> type[BaseModel]:
        if m not in cache:
            fields: dict[str, Any] = {}
            for name, info in m.model_fields.items():
                tp = conv(info.annotation)
                if info.metadata:  # keep the bounds (ge, le, pattern) of the full shape
                    tp = Annotated[(tp, *info.metadata)]
                fields[name] = (tp | None, Field(None, description=info.description))
            extra = m.model_config.get("json_schema_extra")
            cache[m] = create_model(f"{m.__name__}{suffix}", __base__=_Shape, __doc__=m.__doc__, **fields)
            if extra:
                cache[m].model_config["json_schema_extra"] = extra
                cache[m].model_rebuild(force=True)
        return cache[m]

    return make(model)


PlayerDelta = partial(Player)
TeamDelta = partial(Team)
HealthDelta = partial(Health)


class DeltaMessage(Envelope):
    """Only the leaves that changed since the previous message to this view: a partial snapshot.
    Apply it by merging nested objects; a null value means the key went away."""

    type: Literal["delta"]
    # models made at run time by partial(): mypy cannot read them as types
    players: dict[str, PlayerDelta | None] | None = None  # type: ignore[valid-type]
    teams: dict[str, TeamDelta | None] | None = None  # type: ignore[valid-type]
    health: HealthDelta | None = None  # type: ignore[valid-type]
    match_status: MatchStatus | None = None
    alerts: list[Alert] | None = Field(None, description="The snapshot's alerts, whole, when they changed.")


MESSAGES: dict[str, type[Envelope]] = {
    "snapshot": SnapshotMessage,
    "delta": DeltaMessage,
    "health": HealthMessage,
    "period": PeriodMessage,
    "status": StatusMessage,
    "alert": AlertMessage,
    "report": ReportMessage,
    "error": ErrorMessage,
}

# built at run time from MESSAGES: a value for TypeAdapter, not an annotation (and with no X | Y spelling)
Message: Any = Annotated[Union[tuple(MESSAGES.values())], Field(discriminator="type")]  # noqa: UP007


# -- JSON Schema --------------------------------------------------------------------------------------
def _tidy(node: Any) -> None:
    """Drop what pydantic adds but the wire does not mean: property titles and defaults
    (an absent field is just absent)."""
    if isinstance(node, dict):
        node.pop("default", None)
        for prop in (node.get("properties") or {}).values():
            if isinstance(prop, dict):
                prop.pop("title", None)
        for v in node.values():
            _tidy(v)
    elif isinstance(node, list):
        for v in node:
            _tidy(v)


def _document(schema: dict[str, Any], name: str) -> dict[str, Any]:
    _tidy(schema)
    return {"$schema": JSON_SCHEMA_DIALECT, "$comment": f"pacewire contract v{CONTRACT_VERSION}: {name}", **schema}


def json_schemas() -> dict[str, dict[str, Any]]:
    """Every published JSON Schema by name: one per message type, ``snapshot_body`` and
    ``message`` (any message, chosen by ``type``)."""
    from pydantic import TypeAdapter

    out = {kind: _document(model.model_json_schema(), kind) for kind, model in MESSAGES.items()}
    out["snapshot_body"] = _document(SnapshotBody.model_json_schema(), "snapshot_body")
    union = TypeAdapter(Message).json_schema()
    union["title"] = "Message"
    union["description"] = "Any message on /live/{match_id} (and error messages on /ingest/{match_id})."
    out["message"] = _document(union, "message")
    return out


def strict(schema: dict[str, Any]) -> dict[str, Any]:
    """A copy with every described object closed (``additionalProperties: false``)."""
    s = copy.deepcopy(schema)

    def walk(node: Any) -> None:
        if isinstance(node, dict):
            if node.get("type") == "object" and ("properties" in node or "patternProperties" in node) \
                    and "additionalProperties" not in node:
                node["additionalProperties"] = False
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)

    walk(s)
    return s


def dump(schema: dict[str, Any]) -> str:
    return json.dumps(schema, indent=2, ensure_ascii=False) + "\n"


def write(out: Path) -> list[Path]:
    """Write every schema to ``out/NAME.json``; stale ``*.json`` files there are removed."""
    out.mkdir(parents=True, exist_ok=True)
    schemas = json_schemas()
    written = []
    for name, schema in schemas.items():
        path = out / f"{name}.json"
        path.write_text(dump(schema), encoding="utf-8")
        written.append(path)
    for old in out.glob("*.json"):
        if old.stem not in schemas:
            old.unlink()
    return written


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m pacewire.wire.schema", description=__doc__.splitlines()[0])
    p.add_argument("--out", type=Path, help="folder to write NAME.json files into (default: print `message`)")
    args = p.parse_args(argv)
    if args.out is None:
        sys.stdout.write(dump(json_schemas()["message"]))
        return 0
    for path in write(args.out):
        print(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
