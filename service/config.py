"""Settings: config/default.toml, overridden by a user file, validated by one model.

Every threshold the engine uses is read from here; an invalid value fails at
start-up with a message naming the key (``kinematics.smooth_order: ...``).
"""
from __future__ import annotations

from itertools import pairwise
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from pacewire.errors import PacewireError, describe_validation
from pacewire.wire.cdf import FeedProfile
from pacewire.wire.datafile import read_data_file
from pacewire.wire.rules import AlertsSection  # alert rules arrive as files and HTTP bodies: wire models

# Shipped inside the package; in the repository a link to config/default.toml, the one source.
DEFAULT_PATH = Path(__file__).with_name("default.toml")


class ConfigError(PacewireError, ValueError):
    """A configuration file is unreadable or holds an invalid value."""


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Decode(_Section):
    outside_margin_m: float = Field(ge=0, le=100)
    recent_ids: int = Field(ge=1, le=1_000_000)


class Gnss(_Section):
    side_tolerance: float = Field(gt=0, le=0.1)
    angle_tolerance_deg: float = Field(gt=0, le=10)


class HeartProfileModel(_Section):
    """A player's heart-rate profile (docs/wearables.md)."""

    hr_max_bpm: float | None = Field(None, ge=100, le=250)
    hr_rest_bpm: float | None = Field(None, ge=20, le=120)
    sex: Literal["male", "female"] | None = None

    @model_validator(mode="after")
    def _rest_below_max(self) -> HeartProfileModel:
        if self.hr_max_bpm is not None and self.hr_rest_bpm is not None and self.hr_rest_bpm >= self.hr_max_bpm:
            raise ValueError("hr_rest_bpm must be below hr_max_bpm")
        return self


class HeartProfiles(_Section):
    players: dict[str, HeartProfileModel] = Field(max_length=500)


class HeartRate(_Section):
    min_bpm: float = Field(gt=0, le=100)
    max_bpm: float = Field(gt=100, le=300)
    max_jump_bpm_s: float = Field(gt=0, le=300)
    jump_reset: int = Field(ge=1, le=100)
    max_gap_s: float = Field(gt=0, le=60)
    expected_hz: float = Field(gt=0, le=100)
    stale_s: float = Field(gt=0, le=600)
    zone_edges_pct: list[float] = Field(min_length=5, max_length=5)
    edwards_weights: list[float] = Field(min_length=5, max_length=5)
    banister_male: tuple[float, float]
    banister_female: tuple[float, float]
    profiles_file: str
    profiles: dict[str, HeartProfileModel] = Field(default_factory=dict)  # read from profiles_file

    @model_validator(mode="before")
    @classmethod
    def _load_profiles(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("profiles_file") and "profiles" not in data:
            data = {**data, "profiles": load_heart_profiles(data["profiles_file"]).players}
        return data

    @model_validator(mode="after")
    def _increasing(self) -> HeartRate:
        e = self.zone_edges_pct
        if any(b <= a for a, b in pairwise(e)) or e[0] <= 0 or e[-1] >= 100:
            raise ValueError("zone_edges_pct must be strictly increasing within (0, 100)")
        if self.min_bpm >= self.max_bpm:
            raise ValueError("min_bpm must be below max_bpm")
        return self


def load_heart_profiles(path: str | Path) -> HeartProfiles:
    """Per-player heart-rate profiles from a TOML or JSON file; ConfigError names the bad key."""
    path = Path(path)
    data = read_data_file(path, "heart-rate profiles file", ConfigError)
    try:
        return HeartProfiles.model_validate(data)
    except ValidationError as exc:
        raise ConfigError(f"invalid heart-rate profiles file {path}: {describe_validation(exc, limit=5)}") from None


class KinematicsValues(_Section):
    """Smoothing and artefact settings of one feed profile (every key optional: what it overrides)."""

    smooth_window_s: float | None = Field(None, gt=0, le=5)
    smooth_order: int | None = Field(None, ge=1, le=5)
    bridge_gap_s: float | None = Field(None, ge=0, le=10)
    bridge_speed_ms: float | None = Field(None, gt=0, le=50)
    max_step_speed_ms: float | None = Field(None, gt=0, le=50)
    jump_tolerance_ms: float | None = Field(None, ge=0, le=100)
    still_speed_ms: float | None = Field(None, ge=0, le=1)
    max_speed_ms: float | None = Field(None, gt=0, le=50)
    max_accel_ms2: float | None = Field(None, gt=0, le=100)
    excursion_s: float | None = Field(None, gt=0, le=5)
    velocity_span_s: float | None = Field(None, gt=0, le=2)
    excursion_tolerance_m: float | None = Field(None, ge=0, le=10)
    excursion_accel_ms2: float | None = Field(None, ge=0, le=50)
    reentry_gap_s: float | None = Field(None, gt=0, le=60)


class Kinematics(_Section):
    feed_profile: FeedProfile
    smooth_window_s: float = Field(gt=0, le=5)
    smooth_order: int = Field(ge=1, le=5)
    bridge_gap_s: float = Field(ge=0, le=10)
    bridge_speed_ms: float = Field(gt=0, le=50)
    max_step_speed_ms: float = Field(gt=0, le=50)
    jump_tolerance_ms: float = Field(ge=0, le=100)
    still_speed_ms: float = Field(ge=0, le=1)
    max_speed_ms: float = Field(gt=0, le=50)
    max_accel_ms2: float = Field(gt=0, le=100)
    excursion_s: float = Field(gt=0, le=5)
    velocity_span_s: float = Field(gt=0, le=2)
    excursion_tolerance_m: float = Field(ge=0, le=10)
    excursion_accel_ms2: float = Field(ge=0, le=50)
    reentry_gap_s: float = Field(gt=0, le=60)
    profiles: dict[FeedProfile, KinematicsValues] = Field(default_factory=dict)

    def resolved(self, profile: FeedProfile | None = None) -> Kinematics:
        """These settings with ``profile``'s table (default: ``feed_profile``'s) applied over them."""
        name = profile or self.feed_profile
        over = self.profiles.get(name)
        changes = over.model_dump(exclude_none=True) if over is not None else {}
        return self.model_copy(update={**changes, "feed_profile": name})


class Speed(_Section):
    hsr_ms: float = Field(gt=0, le=15)
    sprint_ms: float = Field(gt=0, le=15)
    top_speed_hold_s: float = Field(ge=0, le=5)

    @model_validator(mode="after")
    def _ordered(self) -> Speed:
        if self.sprint_ms <= self.hsr_ms:
            raise ValueError("sprint_ms must be above hsr_ms")
        return self


class Efforts(_Section):
    speed_min_s: float = Field(gt=0, le=10)
    accel_min_s: float = Field(gt=0, le=10)
    accel_ms2: float = Field(gt=0, le=10)
    decel_ms2: float = Field(lt=0, ge=-10)


class Metabolic(_Section):
    model: Literal["osgnach2010", "diprampero2018"]
    kt: float = Field(gt=0, le=3)
    air_k: float = Field(ge=0, le=0.1)
    flat_cost_jkgm: float = Field(gt=0, le=10)
    high_power_wkg: float = Field(gt=0, le=100)


class Zones(_Section):
    mode: Literal["absolute", "relative"]
    edges_ms: list[float] = Field(min_length=1, max_length=10)
    edges_pct: list[float] = Field(min_length=1, max_length=10)
    default_max_speed_ms: float = Field(gt=0, le=15)
    max_speed_ms: dict[str, float] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _increasing(self) -> Zones:
        for name in ("edges_ms", "edges_pct"):
            edges = getattr(self, name)
            if any(b <= a for a, b in pairwise(edges)) or edges[0] <= 0:
                raise ValueError(f"{name} must be positive and strictly increasing")
        if any(not 0 < v <= 15 for v in self.max_speed_ms.values()):
            raise ValueError("max_speed_ms values must be in (0, 15] m/s")
        return self


class Windows(_Section):
    last_min: list[int] = Field(min_length=1, max_length=8)
    peak_min: list[int] = Field(min_length=1, max_length=8)
    block_min: int = Field(ge=1, le=45)

    @model_validator(mode="after")
    def _positive(self) -> Windows:
        if any(m < 1 or m > 120 for m in [*self.last_min, *self.peak_min]):
            raise ValueError("window lengths must be 1..120 minutes")
        return self


class Periods(_Section):
    first_half: int = Field(ge=0, le=60)
    second_half: int = Field(ge=0, le=60)
    first_half_extratime: int = Field(ge=0, le=30)
    second_half_extratime: int = Field(ge=0, le=30)
    shootout: int = Field(ge=0, le=0)


class Health(_Section):
    rate_window_s: float = Field(gt=0, le=120)
    min_rate_share: float = Field(gt=0, le=1)
    max_dropout: float = Field(ge=0, le=1)
    max_lag_s: float = Field(gt=0, le=600)
    stall_s: float = Field(gt=0, le=600)
    on_pitch_timeout_s: float = Field(gt=0, le=3600)
    fast_feed_ratio: float = Field(gt=1, le=1000)
    max_clock_offset_s: float = Field(gt=0, le=86_400)


class Phases(_Section):
    transition_s: float = Field(gt=0, le=60)
    stale_s: float = Field(gt=0, le=600)
    dead_stale_s: float = Field(gt=0, le=3600)
    loose_s: float = Field(ge=0, le=60)


class EventHealth(_Section):
    gap_s: float = Field(gt=0, le=3600)
    stall_s: float = Field(gt=0, le=3600)
    max_lag_s: float = Field(gt=0, le=3600)
    window_s: float = Field(gt=0, le=3600)

    @model_validator(mode="after")
    def _ordered(self) -> EventHealth:
        if self.stall_s <= self.gap_s:
            raise ValueError("stall_s must be above gap_s")
        return self


class Server(_Section):
    max_message_bytes: int = Field(ge=1024, le=64 * 1024 * 1024)
    max_batch_frames: int = Field(ge=1, le=1_000_000)
    max_subscribers: int = Field(ge=1, le=1_000_000)
    resume_buffer_s: float = Field(ge=0, le=24 * 3600)
    resume_buffer_mb: float = Field(gt=0, le=4096)
    subscriber_queue: int = Field(ge=1, le=100_000)
    fsync_interval_s: float = Field(gt=0, le=60)
    health_check_s: float = Field(gt=0, le=10)
    default_every_s: float = Field(gt=0, le=3600)
    max_every_s: float = Field(gt=0, le=3600)


class Reports(_Section):
    enabled: bool
    period_timeout_s: float = Field(gt=0, le=3600)
    intensity_block_min: int = Field(ge=1, le=15)
    low_coverage: float = Field(ge=0, le=1)
    worker_process: bool


class History(_Section):
    enabled: bool
    path: str = Field(min_length=1)
    baseline_matches: int = Field(ge=1, le=50)
    min_minutes: float = Field(ge=0, le=150)
    block_min: int = Field(ge=1, le=45)
    min_matches: int = Field(ge=1, le=50)
    band_spreads: float = Field(ge=0, le=10)
    min_spread_share: dict[Literal["m_per_min", "hsr_m_per_min", "sprint_m_per_min", "accel_decel_per_min"],
                           Annotated[float, Field(ge=0, le=1)]]


class Archive(_Section):
    grace_s: float = Field(ge=0, le=7 * 24 * 3600)
    check_s: float = Field(gt=0, le=3600)
    checkpoint_s: float = Field(ge=0, le=3600)


class Settings(_Section):
    decode: Decode
    gnss: Gnss
    kinematics: Kinematics
    speed: Speed
    efforts: Efforts
    metabolic: Metabolic
    zones: Zones
    windows: Windows
    periods: Periods
    heart_rate: HeartRate
    health: Health
    phases: Phases
    event_health: EventHealth
    server: Server
    reports: Reports
    alerts: AlertsSection
    history: History
    archive: Archive
    # Sections owned by the shell (server, limits, ...) validate themselves there.
    extra: dict[str, Any] = Field(default_factory=dict)


def _merge(base: dict[str, Any], over: dict[str, Any]) -> dict[str, Any]:
    out = dict(base)
    for key, value in over.items():
        if isinstance(value, dict) and isinstance(out.get(key), dict):
            out[key] = _merge(out[key], value)
        else:
            out[key] = value
    return out


def _read(path: Path) -> dict[str, Any]:
    """A config file: TOML only."""
    return read_data_file(path, "config file", ConfigError, allow_json=False)


def settings_from_dict(data: dict[str, Any], source: str = "config") -> Settings:
    """Validate a merged config dict; errors name the offending key."""
    known = set(Settings.model_fields) - {"extra"}
    core = {k: v for k, v in data.items() if k in known}
    core["extra"] = {k: v for k, v in data.items() if k not in known}
    try:
        return Settings.model_validate(core)
    except ValidationError as exc:
        raise ConfigError(f"invalid {source}: {describe_validation(exc, limit=None)}") from None


def load_settings(path: str | Path | None = None, overrides: dict[str, Any] | None = None) -> Settings:
    """Defaults from config/default.toml, then the user file, then ``overrides``."""
    data = _read(DEFAULT_PATH)
    source = "config"
    if path is not None:
        data = _merge(data, _read(Path(path)))
        source = f"config file {path}"
    if overrides:
        data = _merge(data, overrides)
    return settings_from_dict(data, source)
