"""Player alerts: drop-off against the player's own peak and baseline, load budgets.

Rules, thresholds and budgets are data (``[alerts]`` in config/default.toml,
rules and budgets files, ``PUT /api/matches/{id}/budgets``), modelled and
validated in :mod:`pacewire.wire.rules`; this module evaluates them.

Evaluation is pure: a snapshot (plus each window's coverage and the current
15-minute block) in, alerts out; the match clock is the snapshot's. A
drop-off alert fires once when the value crosses below its limit and re-arms
only after the value has recovered clearly: back above the limit by
``rearm_margin`` (the rule's own, or ``[alerts]``'s) for ``rearm_hold_s`` of
match clock, then falling again. A rule against the player's own peak starts
disarmed (its first alert is a fall from a clear stretch too); one against a
baseline starts armed (below his usual band from the start is news). Each rule
alerts a player at most ``cap_count`` times in each ``cap_window_min``
window of the match clock (a crossing beyond the cap disarms the rule as an
alert would, silently). A budget level fires once per player, figure and
level (again only if the budget is changed). Every alert raised is kept
(``raised``) for the snapshot and the reports.

Figures are estimates from positional data; an alert is a prompt to look,
and decisions stay with the club's qualified medical and performance staff.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from pacewire.config import Settings
from pacewire.engine.blocks import clock_block, window_coverage
from pacewire.engine.match import CLOCK_START_MIN, MatchState
from pacewire.wire.rules import Caps, DropOffBaseline, DropOffPeak, LoadBudget, check_rules, load_rules

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


def new_alerter(settings: Settings, rules: list[Any], player_ids: tuple[str, ...]) -> Alerter:
    """An Alerter for a match with the settings' re-arm and cap rules."""
    a = settings.alerts
    lengths = {name: int(getattr(settings.periods, name)) for name in CLOCK_START_MIN}
    return Alerter(rules, player_ids, a.rearm_margin, a.rearm_hold_s, a.cap_count, a.cap_window_min, lengths)


def evaluate_state(alerter: Alerter, state: MatchState, snap: dict[str, Any], settings: Settings) -> list[Alert]:
    """The alerts of a match state and its snapshot, at a completed second (live once per second;
    offline at every second of a recording): each rule's window coverage and the history block."""
    windows = {r.window_min for r in alerter.rules if hasattr(r, "window_min")}
    cov = {w: window_coverage(state, w) for w in windows}
    period = state.period_name()
    length = int(getattr(settings.periods, period)) if period else 0
    block = clock_block(period, state.match_time_s(), settings.history.block_min, length)
    return alerter.evaluate(snap, cov, block)


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
    match_time_s: float = 0.0  # match clock of the snapshot that raised it
    period: str | None = None

    def body(self) -> dict[str, Any]:
        """The alert message's body (and the snapshot's ``alerts`` entry): its match clock and period
        are the alert's own."""
        out: dict[str, Any] = {"rule": self.rule, "kind": self.kind, "player_id": self.player_id,
                               "team_id": self.team_id, "figure": self.figure, "value": self.value,
                               "limit": self.limit, "message": self.message}
        if self.level is not None:
            out["level"] = self.level
        out["match_time_s"] = self.match_time_s
        out["period"] = self.period
        return out


@dataclass
class Alerter:
    """Alert state of one match: who is armed, since when a value has recovered, how many alerts each
    rule gave each player in the current cap window, which budget levels have fired, every alert raised."""

    rules: list[Any]
    player_ids: tuple[str, ...]
    rearm_margin: float = 0.05
    rearm_hold_s: float = 0.0
    cap_count: int = 1_000_000
    cap_window_min: int = 15
    period_min: dict[str, int] = field(default_factory=dict)  # nominal lengths: the last cap window takes stoppage
    budgets: dict[str, Caps] = field(default_factory=dict)
    # player -> 15-minute block key -> history rate figure -> band
    baselines: dict[str, dict[str, dict[str, Band]]] = field(default_factory=dict)
    raised: list[dict[str, Any]] = field(default_factory=list)  # every alert's body, oldest first
    _armed: dict[str, np.ndarray] = field(default_factory=dict)
    _clear_since: dict[str, np.ndarray] = field(default_factory=dict)  # match clock, NaN: not recovered now
    _counts: dict[tuple[str, str, str], int] = field(default_factory=dict)  # (rule, player, cap window) -> alerts
    _fired: set[tuple[str, str, str, float]] = field(default_factory=set)

    def set_budgets(self, budgets: dict[str, Caps]) -> None:
        """Replace the budgets; levels of a changed player's budget may fire again."""
        changed = {p for p in set(budgets) | set(self.budgets) if budgets.get(p) != self.budgets.get(p)}
        self._fired = {f for f in self._fired if f[1] not in changed}
        self.budgets = dict(budgets)

    def evaluate(self, snap: dict[str, Any], coverage: dict[int, np.ndarray], block: str | None) -> list[Alert]:
        """Alerts newly crossed in this snapshot (also added to ``raised``). ``coverage[w]``: each
        player's coverage over the last ``w`` minutes (roster order); ``block``: the current 15-minute
        block key (for baselines)."""
        players = snap["players"]
        rows = [players[pid] for pid in self.player_ids]
        out: list[Alert] = []
        for rule in self.rules:
            if isinstance(rule, LoadBudget):
                out += self._budgets(rule, players)
            else:
                out += self._drop_off(rule, rows, coverage.get(rule.window_min), block, snap)
        when = {"match_time_s": snap["match_time_s"], "period": snap["period"]}
        out = [replace(a, **when) for a in out]
        self.raised += [a.body() for a in out]
        return out

    def cap_window(self, period: str | None, match_time_s: float) -> str:
        """The cap window of a match clock: ``first_half:0``, ``first_half:1``, ... (the period's last
        nominal window takes its stoppage time)."""
        into = max(match_time_s / 60.0 - CLOCK_START_MIN.get(period or "", 0), 0.0)
        k = int(into // self.cap_window_min)
        length = self.period_min.get(period or "", 0)
        if length > 0:
            k = min(k, max(math.ceil(length / self.cap_window_min), 1) - 1)
        return f"{period}:{k}"

    def restore(self, raised: list[dict[str, Any]]) -> None:
        """Alerts raised before a restart: kept, counted against the caps, and their rules disarmed for
        the player (they re-arm after a clear recovery, as after any alert)."""
        for body in raised:
            self.raised.append(body)
            rule, pid = body.get("rule"), body.get("player_id")
            if pid not in self.player_ids or not isinstance(rule, str):
                continue
            if body.get("level") is not None:
                self._fired.add((rule, pid, str(body.get("figure")), float(body["level"])))
                continue
            key = (rule, pid, self.cap_window(body.get("period"), float(body.get("match_time_s") or 0.0)))
            self._counts[key] = self._counts.get(key, 0) + 1
            start = any(isinstance(r, DropOffBaseline) and r.id == rule for r in self.rules)
            self._armed.setdefault(rule, np.full(len(self.player_ids), start))[self.player_ids.index(pid)] = False

    # -- drop-off ----------------------------------------------------------------------------
    def _drop_off(self, rule: Any, rows: list[dict[str, Any]], cov: np.ndarray | None,
                  block: str | None, snap: dict[str, Any]) -> list[Alert]:
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
        lim = np.nan_to_num(limit)
        val = np.nan_to_num(value)
        margin = self.rearm_margin if rule.rearm_margin is None else rule.rearm_margin
        # against the player's own peak an alert marks a fall from a clear stretch above the limit, so the
        # rule starts disarmed; below his usual band (a baseline) from the start is news, so it starts armed
        clear = ok & (val >= lim * (1.0 + margin))
        fire = ok & self._rearm(rule.id, clear, snap["match_time_s"], isinstance(rule, DropOffBaseline))
        fire &= val < lim
        self._armed[rule.id][fire] = False
        window = self.cap_window(snap["period"], snap["match_time_s"])
        out = []
        for i in np.flatnonzero(fire):
            tag = (rule.id, self.player_ids[i], window)
            self._counts[tag] = self._counts.get(tag, 0) + 1
            if self._counts[tag] > self.cap_count:
                continue  # over the cap: disarmed all the same, so only a clear recovery brings it back
            r = rows[i]
            out.append(Alert(rule.id, rule.kind, self.player_ids[i], r["team_id"], rate_fig,
                             round(float(val[i]), 1), round(float(lim[i]), 1),
                             f"{_label(self.player_ids[i], r)}: {words} {val[i]:.0f} m/min over the last {w} min is "
                             f"{extra[i]}; limit {lim[i]:.0f} m/min"))
        return out

    def _rearm(self, rule_id: str, clear: np.ndarray, t: float, start_armed: bool) -> np.ndarray:
        """Who is armed for ``rule_id`` once this evaluation's recoveries count: a value clearly above
        its limit (``clear``) since at least ``rearm_hold_s`` of match clock (re-)arms; anything else (a
        dip, an evaluation the rule skips, a new period) restarts the recovery."""
        n = len(self.player_ids)
        armed = self._armed.setdefault(rule_id, np.full(n, start_armed))
        since = self._clear_since.setdefault(rule_id, np.full(n, np.nan))
        since[~clear] = np.nan
        since[clear & np.isnan(since)] = t
        armed |= clear & (t - np.nan_to_num(since, nan=t) >= self.rearm_hold_s)
        return armed

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
