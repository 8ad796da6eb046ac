"""Player alert rules: drop-off against the player's own peak and baseline, load budgets.

Rules, thresholds and budgets are data: ``[alerts]`` in config/default.toml,
a rules file (TOML or JSON, ``[[rules]]``), a budgets file, or
``PUT /api/matches/{id}/budgets``; all validated here by pydantic, and a bad
one is refused with an error naming the rule and the key.

Evaluation is pure: a snapshot (plus each window's coverage and the current
15-minute block) in, alerts out. A drop-off alert fires once when the value
crosses below its limit and re-arms only when the value is back above the
limit by ``rearm_margin``; a budget level fires once per player, figure and
level (again only if the budget is changed).

Figures are estimates from positional data; an alert is a prompt to look,
and decisions stay with the club's qualified medical and performance staff.
"""
from __future__ import annotations

import json
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal, Union

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

if TYPE_CHECKING:
    from pacewire.config import Settings

# rule figure -> (snapshot key of the window total, history rate figure, words)
FIGURES = {"distance": ("distance_m", "m_per_min", "distance"),
           "hsr": ("hsr_m", "hsr_m_per_min", "high-speed running")}
BUDGET_FIGURES = ("minutes", "hsr_m", "sprint_m", "sprints")
_ID = r"^[a-z0-9_]{1,64}$"


class RulesError(ValueError):
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
    def _levels(self) -> "LoadBudget":
        if any(not 0 < v <= 2 for v in self.levels) or any(b <= a for a, b in zip(self.levels, self.levels[1:])):
            raise ValueError("levels must be shares of the cap in (0, 2], strictly increasing")
        return self


Rule = Annotated[Union[DropOffPeak, DropOffBaseline, LoadBudget], Field(discriminator="kind")]


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
    def _ids(self) -> "AlertsSection":
        _unique(self.rules)
        return self


class RulesFile(_Model):
    rules: list[Rule] = Field(max_length=50)

    @model_validator(mode="after")
    def _ids(self) -> "RulesFile":
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
    def _some(self) -> "Caps":
        if all(getattr(self, k) is None for k in BUDGET_FIGURES):
            raise ValueError(f"give at least one cap: {', '.join(BUDGET_FIGURES)}")
        return self

    def items(self) -> list[tuple[str, float]]:
        return [(k, float(v)) for k in BUDGET_FIGURES if (v := getattr(self, k)) is not None]


class Budgets(_Model):
    players: dict[str, Caps] = Field(max_length=200)


def _explain(exc: ValidationError, source: str) -> RulesError:
    parts = []
    for err in exc.errors()[:10]:
        where = ".".join(str(p) for p in err["loc"]) or "body"
        parts.append(f"{where}: {err['msg']}")
    return RulesError(f"invalid {source}: " + "; ".join(parts))


def _read_data(path: Path, what: str) -> Any:
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise RulesError(f"{what} {path} is not UTF-8 text: {exc}") from None
    except OSError as exc:
        raise RulesError(f"cannot read {what} {path}: {exc.strerror}") from None
    except ValueError as exc:  # a NUL in the name
        raise RulesError(f"cannot read {what} {str(path)!r}: {exc}") from None
    try:
        return json.loads(text) if path.suffix.lower() == ".json" else tomllib.loads(text)
    except json.JSONDecodeError as exc:
        raise RulesError(f"{what} {path} is not valid JSON: {exc}") from None
    except tomllib.TOMLDecodeError as exc:
        raise RulesError(f"{what} {path} is not valid TOML: {exc}") from None
    except RecursionError:
        raise RulesError(f"{what} {path} nests too deeply to read") from None


def load_rules(path: str | Path) -> list[Any]:
    """Rules from a TOML or JSON file (``rules = [...]`` / ``[[rules]]``)."""
    path = Path(path)
    data = _read_data(path, "rules file")
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
    path = Path(path)
    return parse_budgets(_read_data(path, "budgets file"), f"budgets file {path}")


def check_rules(rules: list[Any], settings: "Settings") -> None:
    """Rules against the rest of the config: their windows must be computed."""
    for i, r in enumerate(rules):
        if isinstance(r, (DropOffPeak, DropOffBaseline)) and r.window_min not in settings.windows.last_min:
            raise RulesError(f"rules.{i} ({r.id}).window_min: {r.window_min} is not in windows.last_min "
                             f"{settings.windows.last_min}")
        if isinstance(r, DropOffPeak) and r.window_min not in settings.windows.peak_min:
            raise RulesError(f"rules.{i} ({r.id}).window_min: {r.window_min} is not in windows.peak_min "
                             f"{settings.windows.peak_min}")


def rules_from_settings(settings: "Settings") -> list[Any]:
    a = settings.alerts
    rules = load_rules(a.rules_file) if a.rules_file else list(a.rules)
    check_rules(rules, settings)
    return rules


@dataclass(frozen=True)
class Band:
    """A baseline: median and spread of one figure over the player's last matches."""

    median: float
    spread: float
    n: int


@dataclass(frozen=True)
class Alert:
    rule: str
    kind: str
    player_id: str
    team_id: str
    figure: str
    value: float
    limit: float
    message: str
    level: float | None = None

    def body(self) -> dict[str, Any]:
        out = {"rule": self.rule, "kind": self.kind, "player_id": self.player_id, "team_id": self.team_id,
               "figure": self.figure, "value": self.value, "limit": self.limit, "message": self.message}
        if self.level is not None:
            out["level"] = self.level
        return out


@dataclass
class Alerter:
    """Alert state of one match: who is armed, which budget levels have fired."""

    rules: list[Any]
    player_ids: tuple[str, ...]
    rearm_margin: float = 0.05
    budgets: dict[str, Caps] = field(default_factory=dict)
    # player -> 15-minute block key -> history rate figure -> band
    baselines: dict[str, dict[str, dict[str, Band]]] = field(default_factory=dict)
    _armed: dict[str, np.ndarray] = field(default_factory=dict)
    _fired: set[tuple[str, str, str, float]] = field(default_factory=set)

    def set_budgets(self, budgets: dict[str, Caps]) -> None:
        """Replace the budgets; levels of a changed player's budget may fire again."""
        changed = {p for p in set(budgets) | set(self.budgets) if budgets.get(p) != self.budgets.get(p)}
        self._fired = {f for f in self._fired if f[1] not in changed}
        self.budgets = dict(budgets)

    def evaluate(self, snap: dict[str, Any], coverage: dict[int, np.ndarray], block: str | None) -> list[Alert]:
        """Alerts newly crossed in this snapshot. ``coverage[w]``: each player's
        coverage over the last ``w`` minutes (roster order); ``block``: the
        current 15-minute block key (for baselines)."""
        players = snap["players"]
        rows = [players[pid] for pid in self.player_ids]
        out: list[Alert] = []
        for rule in self.rules:
            if isinstance(rule, LoadBudget):
                out += self._budgets(rule, players)
            else:
                out += self._drop_off(rule, rows, coverage.get(rule.window_min), block)
        return out

    # -- drop-off ----------------------------------------------------------------------------
    def _drop_off(self, rule: Any, rows: list[dict[str, Any]], cov: np.ndarray | None,
                  block: str | None) -> list[Alert]:
        key, rate_fig, words = FIGURES[rule.figure]
        w = rule.window_min
        n = len(rows)
        last = [r["windows"].get(f"last_{w}min") or {} for r in rows]
        span = np.array([x.get("span_s") or 0.0 for x in last], float)
        total = np.array([x.get(key) or 0.0 for x in last], float)
        value = np.where(span > 0, total / np.maximum(span, 1e-9) * 60.0, np.nan)
        ok = np.array([bool(r["on_pitch"]) and (rule.goalkeepers or not r["is_goalkeeper"]) for r in rows])
        ok &= np.array([r["minutes"] for r in rows], float) >= rule.min_on_pitch_min
        ok &= span >= w * 60 - 0.5  # a full window only
        ok &= (cov if cov is not None else np.zeros(n)) >= rule.min_coverage  # feed-quality guard
        extra: list[str] = [""] * n
        if isinstance(rule, DropOffPeak):
            peaks = [r["windows"].get(f"peak_{w}min") for r in rows]
            ref = np.array([p[key] / w if p else np.nan for p in peaks], float)
            limit = rule.share * ref
            extra = [f"below {rule.share:.0%} of the player's peak {w}-min window this match ({v:.0f} m/min)"
                     for v in np.nan_to_num(ref)]
        else:
            bands = [self.baselines.get(pid, {}).get(block or "", {}).get(rate_fig) for pid in self.player_ids]
            limit = np.array([b.median - rule.spreads * b.spread if b and b.n >= rule.min_matches else np.nan
                              for b in bands], float)
            extra = [f"below the baseline band for {block} (median {b.median:.0f} m/min of {b.n} matches)" if b else ""
                     for b in bands]
        ok &= np.isfinite(limit) & np.isfinite(value) & (np.nan_to_num(limit) > 0)
        armed = self._armed.setdefault(rule.id, np.ones(n, bool))
        lim = np.nan_to_num(limit)
        val = np.nan_to_num(value)
        fire = ok & armed & (val < lim)
        armed[ok & (val >= lim * (1.0 + self.rearm_margin))] = True
        armed[fire] = False
        out = []
        for i in np.flatnonzero(fire):
            r = rows[i]
            out.append(Alert(rule.id, rule.kind, self.player_ids[i], r["team_id"], rate_fig,
                             round(float(val[i]), 1), round(float(lim[i]), 1),
                             f"{_label(self.player_ids[i], r)}: {words} {val[i]:.0f} m/min over the last {w} min is "
                             f"{extra[i]}; limit {lim[i]:.0f} m/min"))
        return out

    # -- budgets -------------------------------------------------------------------------------
    def _budgets(self, rule: LoadBudget, players: dict[str, Any]) -> list[Alert]:
        out = []
        for pid, caps in self.budgets.items():
            p = players.get(pid)
            if p is None:
                continue
            for fig, cap in caps.items():
                value = float(p.get(fig) or 0.0)
                for level in rule.levels:
                    tag = (rule.id, pid, fig, level)
                    if tag in self._fired or value < level * cap:
                        continue
                    self._fired.add(tag)
                    out.append(Alert(rule.id, rule.kind, pid, p["team_id"], fig, round(value, 2), round(level * cap, 2),
                                     f"{_label(pid, p)}: {fig} {value:g} has reached {level:.0%} of the load budget "
                                     f"({cap:g})", level=level))
        return out


def _label(pid: str, p: dict[str, Any]) -> str:
    return f"#{p.get('jersey_number')} {p.get('name') or pid}"
