"""Player alert rules and load budgets as data: their pydantic models, files and HTTP bodies.

Rules, thresholds and budgets arrive as ``[alerts]`` in config/default.toml,
a rules file (TOML or JSON, ``[[rules]]``), a budgets file, or the body of
``PUT /api/matches/{id}/budgets``; all are validated here by pydantic, and a
bad one is refused with an error naming the rule and the key. Evaluating the
rules against the figures is :mod:`pacewire.reports.alerts`.
"""
from __future__ import annotations

from collections.abc import Sequence
from itertools import pairwise
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from pacewire.errors import PacewireError, describe_validation
from pacewire.wire.datafile import read_data_file

BUDGET_FIGURES = ("minutes", "hsr_m", "sprint_m", "sprints")
_ID = r"^[a-z0-9_]{1,64}$"


class RulesError(PacewireError, ValueError):
    """A rule, rules file or budget is invalid; the message names what and where."""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class _DropOff(_Model):
    id: str = Field(pattern=_ID)
    figure: Literal["distance", "hsr"]
    window_min: int = Field(ge=1, le=30)
    min_on_pitch_min: float = Field(ge=0, le=150)
    min_coverage: float = Field(ge=0, le=1)  # the feed-quality guard: coverage in the window
    goalkeepers: bool = False
    rearm_margin: float | None = Field(default=None, ge=0, le=2)  # this rule's own; None: [alerts] rearm_margin


class DropOffPeak(_DropOff):
    """Last-N-minute rate below ``share`` of the player's own peak N-minute window this match."""

    kind: Literal["drop_off_peak"]
    share: float = Field(gt=0, lt=1)


class DropOffBaseline(_DropOff):
    """Last-N-minute rate below the player's baseline band (median − spreads × spread)
    for the current 15-minute block, from his last matches in the history."""

    kind: Literal["drop_off_baseline"]
    spreads: float = Field(gt=0, le=5)
    min_matches: int = Field(ge=1, le=50)


class LoadBudget(_Model):
    """Per-player caps (minutes, HSR distance, sprint distance, sprints): alert at each level."""

    id: str = Field(pattern=_ID)
    kind: Literal["load_budget"]
    levels: list[float] = Field(min_length=1, max_length=5)

    @model_validator(mode="after")
    def _levels(self) -> LoadBudget:
        if any(not 0 < v <= 2 for v in self.levels) or any(b <= a for a, b in pairwise(self.levels)):
            raise ValueError("levels must be shares of the cap in (0, 2], strictly increasing")
        return self


Rule = Annotated[DropOffPeak | DropOffBaseline | LoadBudget, Field(discriminator="kind")]


def _unique(rules: list[Any]) -> None:
    ids = [r.id for r in rules]
    dup = sorted({i for i in ids if ids.count(i) > 1})
    if dup:
        raise ValueError(f"rule ids must be unique: {', '.join(dup)}")


class AlertsSection(_Model):
    """``[alerts]`` of the config."""

    enabled: bool
    rules_file: str
    budgets_file: str
    rearm_margin: float = Field(ge=0, le=1)
    rearm_hold_s: float = Field(ge=0, le=3600)
    cap_count: int = Field(ge=1, le=1000)
    cap_window_min: int = Field(ge=1, le=150)
    rules: list[Rule] = Field(max_length=50)

    @model_validator(mode="before")
    @classmethod
    def _files(cls, data: Any) -> Any:
        """A rules file replaces the inline rules; both files are checked when the config loads."""
        if isinstance(data, dict):
            try:  # a file name that is not a string is left to the field's own check
                if isinstance(data.get("rules_file"), str) and data["rules_file"]:
                    data = {**data, "rules": [r.model_dump() for r in load_rules(data["rules_file"])]}
                if isinstance(data.get("budgets_file"), str) and data["budgets_file"]:
                    load_budgets(data["budgets_file"])
            except RulesError as exc:
                raise ValueError(str(exc)) from None
        return data

    @model_validator(mode="after")
    def _ids(self) -> AlertsSection:
        _unique(self.rules)
        return self


class RulesFile(_Model):
    rules: list[Rule] = Field(max_length=50)

    @model_validator(mode="after")
    def _ids(self) -> RulesFile:
        _unique(self.rules)
        return self


class Caps(_Model):
    """One player's load budget for a match; at least one cap."""

    # numbers only: true or "12" as a cap is a mistake to name, not to guess at
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    minutes: float | None = Field(default=None, gt=0, le=150)
    hsr_m: float | None = Field(default=None, gt=0, le=10000)
    sprint_m: float | None = Field(default=None, gt=0, le=10000)
    sprints: int | None = Field(default=None, gt=0, le=500)

    @model_validator(mode="after")
    def _some(self) -> Caps:
        if all(getattr(self, k) is None for k in BUDGET_FIGURES):
            raise ValueError(f"give at least one cap: {', '.join(BUDGET_FIGURES)}")
        return self

    def items(self) -> list[tuple[str, float]]:
        return [(k, float(v)) for k in BUDGET_FIGURES if (v := getattr(self, k)) is not None]


class Budgets(_Model):
    players: dict[str, Caps] = Field(max_length=200)


def _explain(exc: ValidationError, source: str) -> RulesError:
    return RulesError(f"invalid {source}: {describe_validation(exc)}")


def load_rules(path: str | Path) -> list[Any]:
    """Rules from a TOML or JSON file (``rules = [...]`` / ``[[rules]]``)."""
    path = Path(path)
    data = read_data_file(path, "rules file", RulesError)
    try:
        return list(RulesFile.model_validate(data).rules)
    except ValidationError as exc:
        raise _explain(exc, f"rules file {path}") from None


def parse_budgets(data: Any, source: str = "budgets", player_ids: set[str] | None = None) -> Budgets:
    """Validate budgets (``{"players": {id: {"minutes": .., "hsr_m": .., ...}}}``);
    with ``player_ids``, every player must be in the match sheet."""
    try:
        b = Budgets.model_validate(data)
    except ValidationError as exc:
        raise _explain(exc, source) from None
    if player_ids is not None:
        unknown = sorted(set(b.players) - player_ids)
        if unknown:
            raise RulesError(f"invalid {source}: players.{unknown[0]}: not in the match sheet"
                             + (f" (nor {', '.join(unknown[1:])})" if len(unknown) > 1 else ""))
    return b


def load_budgets(path: str | Path) -> Budgets:
    """Budgets from a TOML or JSON file, as :func:`parse_budgets` checks them."""
    path = Path(path)
    return parse_budgets(read_data_file(path, "budgets file", RulesError), f"budgets file {path}")


def check_rules(rules: list[Any], last_min: Sequence[int], peak_min: Sequence[int]) -> None:
    """Rules against the windows the engine computes (config ``windows.last_min`` and
    ``windows.peak_min``, minutes): a drop-off rule's window must be among them."""
    for i, r in enumerate(rules):
        if isinstance(r, (DropOffPeak, DropOffBaseline)) and r.window_min not in last_min:
            raise RulesError(f"rules.{i} ({r.id}).window_min: {r.window_min} is not in windows.last_min "
                             f"{last_min}")
        if isinstance(r, DropOffPeak) and r.window_min not in peak_min:
            raise RulesError(f"rules.{i} ({r.id}).window_min: {r.window_min} is not in windows.peak_min "
                             f"{peak_min}")
