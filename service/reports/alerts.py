"""Player alerts: drop-off against the player's own peak and baseline, load budgets.

Rules, thresholds and budgets are data (``[alerts]`` in config/default.toml,
rules and budgets files, ``PUT /api/matches/{id}/budgets``), modelled and
validated in :mod:`pacewire.wire.rules`; this module evaluates them.

Evaluation is pure: a snapshot (plus each window's coverage and the current
15-minute block) in, alerts out. A drop-off alert fires once when the value
crosses below its limit and re-arms only when the value is back above the
limit by ``rearm_margin``; a budget level fires once per player, figure and
level (again only if the budget is changed).

Figures are estimates from positional data; an alert is a prompt to look,
and decisions stay with the club's qualified medical and performance staff.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from pacewire.config import Settings
from pacewire.wire.rules import Caps, DropOffPeak, LoadBudget, check_rules, load_rules

# rule figure -> (snapshot key of the window total, history rate figure, words)
FIGURES = {"distance": ("distance_m", "m_per_min", "distance"),
           "hsr": ("hsr_m", "hsr_m_per_min", "high-speed running")}


def rules_from_settings(settings: Settings) -> list[Any]:
    """The rules in force: the rules file when the config names one (read afresh), else ``[alerts]``'s
    own; a rule whose window the engine does not compute raises RulesError."""
    a = settings.alerts
    rules = load_rules(a.rules_file) if a.rules_file else list(a.rules)
    check_rules(rules, settings.windows.last_min, settings.windows.peak_min)
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
