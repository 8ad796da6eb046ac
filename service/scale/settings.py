"""The ``[scale]`` config table (read from ``Settings.extra``), validated here.

Defaults are common practice for lease-based work claiming (a lease a few
seconds long, renewed at a third of it) and are overridden from the user's
TOML file like every other threshold.
"""
from __future__ import annotations

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from pacewire.config import ConfigError, Settings


class ScaleSettings(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    # Aggregator lease on a match, ms: a dead aggregator's matches move after this (common practice).
    lease_ms: int = Field(default=5000, ge=200, le=600_000)
    # Most matches one aggregator claims (0: no limit).
    max_matches: int = Field(default=0, ge=0)
    # Aggregator state checkpoint every this many s, so a successor replays only the stream after it.
    checkpoint_s: float = Field(default=30.0, gt=0, le=3600)
    # Redis socket timeout, s: a dead Redis is an error this fast rather than a hang.
    redis_timeout_s: float = Field(default=2.0, gt=0, le=60)
    # Redis connections per process at most; a burst beyond waits for one (up to redis_timeout_s).
    # Above one blocking stream read per claimed match, below Redis's default maxclients (10,000).
    redis_connections: int = Field(default=1000, ge=4, le=100_000)
    # A gateway's interest in a subscription stream lasts this long without renewal, s.
    want_ttl_s: float = Field(default=30.0, gt=1, le=3600)
    # Entries read from the match stream at once.
    read_count: int = Field(default=2000, ge=1, le=100_000)


def scale_settings(settings: Settings) -> ScaleSettings:
    try:
        return ScaleSettings.model_validate(settings.extra.get("scale", {}))
    except ValidationError as exc:
        lines = [f"scale.{'.'.join(str(p) for p in e['loc'])}: {e['msg']}" for e in exc.errors()]
        raise ConfigError("invalid config: " + "; ".join(lines)) from None
