"""The report's first page: the match and where it stands, each team in a few figures, who dropped off
and when, and the alerts, sized to fit one screen (1280 × 900) and one printed A4 page; the detail follows.

Speeds on this page are km/h (as on the bench page); the JSON and CSV beside the report stay SI.
"""
from __future__ import annotations

import html
from collections.abc import Callable
from typing import Any

from pacewire.reports.table import player_order, tracked_teams

TITLES = {"half_time": "Half time", "full_time": "Full time"}
DROPS_SHOWN = 6  # the largest falls listed on the first page; the block table in the detail has them all
ALERTS_SHOWN = 4  # the latest alerts listed, one line each; the alerts section has every one


def _esc(v: Any) -> str:
    return html.escape("" if v is None else str(v), quote=True)


def _n(v: Any, nd: int = 0) -> str:
    return "–" if v is None else f"{float(v):,.{nd}f}".replace(",", "\u2009")


def _clock(seconds: Any) -> str:
    if seconds is None:
        return "–"
    s = int(round(float(seconds)))
    return f"{s // 60}:{s % 60:02d}"


def _who(pid: str, p: dict[str, Any], snapshot: dict[str, Any] | None = None) -> str:
    """Shirt number and name; given the snapshot, the team's mark first (two teams share numbers)."""
    side = ((snapshot or {}).get("teams", {}).get(p.get("team_id")) or {}).get("side")
    mark = f'<span class="mark {_esc(side)}" aria-hidden="true"></span>' if side in ("home", "away") else ""
    return f'{mark}{_esc(p.get("jersey_number"))} {_esc(p.get("name") or pid)}'


def team_glance(snapshot: dict[str, Any]) -> str:
    """A few outfield figures per tracked team, and its fastest player (km/h)."""
    teams = tracked_teams(snapshot)
    players = snapshot["players"]
    head = "".join(f'<th class="{_esc(t["side"])}"><span class="mark {_esc(t["side"])}" aria-hidden="true"></span>'
                   f'{_esc(t["name"] or tid)}</th>' for tid, t in teams)

    def fastest(tid: str) -> str:
        cand = [(p.get("max_speed_ms") or 0.0, pid, p) for pid, p in players.items() if p["team_id"] == tid]
        if not cand or not max(cand, key=lambda c: c[0])[0]:
            return "–"
        v, pid, p = max(cand, key=lambda c: c[0])
        return f"{_n(v * 3.6, 1)} <span class=\"who\">{_who(pid, p)}</span>"

    lines: list[tuple[str, Callable[[str, dict[str, Any]], str]]] = [
             ("distance, m", lambda tid, o: _n(o["distance_m"])),
             ("m/min per player", lambda tid, o: _n(o["per_player"]["m_per_min"])),
             ("high-speed running, m", lambda tid, o: _n(o["hsr_m"])),
             ("sprint distance, m", lambda tid, o: _n(o["sprint_m"])),
             ("sprints", lambda tid, o: _n(o["sprints"])),
             ("accelerations + decelerations", lambda tid, o: _n((o["accels"] or 0) + (o["decels"] or 0))),
             ("top speed, km/h", lambda tid, o: fastest(tid))]
    body = "".join(f'<tr><th class="l">{_esc(label)}</th>'
                   + "".join(f"<td>{fn(tid, t['outfield'])}</td>" for tid, t in teams) + "</tr>"
                   for label, fn in lines)
    return (f'<table class="glance-teams"><thead><tr><th class="l">outfield players</th>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table>")


def drop_offs(snapshot: dict[str, Any], blocks: list[tuple[str, str]] | None,
              per_min: dict[str, list[float | None]] | None) -> list[dict[str, Any]]:
    """Outfield players whose last block on the pitch ran slowest against their own best block (m/min on the
    pitch), largest fall first: player id, best and last block labels and rates, and last / best."""
    if not blocks or not per_min:
        return []
    labels = [label for label, _ in blocks]
    out = []
    for pid in player_order(snapshot):
        p = snapshot["players"][pid]
        vals = [(i, v) for i, v in enumerate(per_min.get(pid, [])) if v is not None and i < len(labels)]
        if p["is_goalkeeper"] or len(vals) < 2:
            continue
        best_i, best = max(vals, key=lambda iv: iv[1])
        last_i, last = vals[-1]
        if best <= 0 or last_i == best_i or last >= best:
            continue
        out.append({"player_id": pid, "best_block": labels[best_i], "best": best, "last_block": labels[last_i],
                    "last": last, "share": last / best})
    return sorted(out, key=lambda d: d["share"])


def _drops_html(snapshot: dict[str, Any], drops: list[dict[str, Any]], alerts: list[dict[str, Any]]) -> str:
    """The largest falls, each with the clock of any drop-off alert the bench got for that player."""
    players = snapshot["players"]
    told: dict[str, list[str]] = {}
    for a in alerts:
        if str(a.get("kind", "")).startswith("drop_off"):
            told.setdefault(str(a.get("player_id")), []).append(_clock(a.get("match_time_s")))
    rows = "".join(
        f'<tr><td class="l">{_who(d["player_id"], players[d["player_id"]], snapshot)}</td>'
        f'<td>{_n(d["best"])} <span class="when">{_esc(d["best_block"])}</span></td>'
        f'<td>{_n(d["last"])} <span class="when">{_esc(d["last_block"])}</span></td>'
        f'<td class="share">{d["share"]:.0%}</td><td>{_esc(", ".join(told.get(d["player_id"], [])) or "–")}</td></tr>'
        for d in drops[:DROPS_SHOWN])
    table = (f'<table class="glance-drops"><thead><tr><th class="l">player</th><th>best block, m/min</th>'
             '<th>last block, m/min</th><th>last / best</th><th>alert at</th></tr></thead>'
             f'<tbody>{rows}</tbody></table>'
             if rows else '<p class="note">No outfield player ran slower in his last block than in his best.</p>')
    n = sum(len(v) for v in told.values())
    note = (f'{n} drop-off alert{"s" if n != 1 else ""} for {len(told)} player{"s" if len(told) != 1 else ""} '
            "(all under Alerts below)." if n else "No drop-off alert was sent to the bench.")
    return table + f'<p class="note">{note}</p>'


UNITS = {"minutes": "min", "hsr_m": "m", "sprint_m": "m", "distance_m": "m", "sprints": "", "hsr_efforts": ""}


def _unit(a: dict[str, Any]) -> str:
    """The unit of an alert's value and limit: m/min for the drop-off rules, the budget figure's own otherwise."""
    if str(a.get("kind", "")).startswith("drop_off"):
        return " m/min"
    u = UNITS.get(str(a.get("figure")), "")
    return f" {u}" if u else ""


def _alerts_html(snapshot: dict[str, Any], alerts: list[dict[str, Any]]) -> str:
    if not alerts:
        return '<p class="note">No alerts.</p>'
    players = snapshot["players"]
    latest = sorted(alerts, key=lambda a: -float(a.get("match_time_s") or 0.0))[:ALERTS_SHOWN]
    items = "".join(f'<li><span class="when">{_clock(a.get("match_time_s"))}</span> '
                    f'{_who(str(a.get("player_id")), players.get(a.get("player_id")) or {}, snapshot)} · '
                    f'{_esc(str(a.get("rule", "")).replace("_", " "))} · {_n(a.get("value"), 1)}{_unit(a)} '
                    f'(limit {_n(a.get("limit"), 1)}{_unit(a)})</li>' for a in latest)
    more = len(alerts) - len(latest)
    return (f'<ul class="glance-list">{items}</ul>'
            + (f'<p class="note">{more} earlier: see Alerts below.</p>' if more > 0 else ""))


def summary_section(kind: str, snapshot: dict[str, Any], blocks: list[tuple[str, str]] | None,
                    per_min: dict[str, list[float | None]] | None, alerts: list[dict[str, Any]],
                    caution: str) -> list[str]:
    """The first page: where the match stands, the teams, who dropped off and when, the alerts."""
    status = {"ended": "match ended", "break": "break", "live": "in play"}.get(
        str(snapshot.get("match_status") or ""), "")
    where = " · ".join(x for x in (TITLES.get(kind, kind), f"clock {_clock(snapshot.get('match_time_s'))}",
                                   status) if x)
    drops = drop_offs(snapshot, blocks, per_min)
    return [
        '<section id="summary" class="summary">',
        f'<p class="status"><strong>{_esc(where)}</strong></p>',
        '<div class="glance">',
        '<div class="box"><h2>Teams <span class="n">outfield, goalkeepers left out</span></h2>'
        f'{team_glance(snapshot)}</div>',
        f'<div class="box"><h2>Who dropped off, and when <span class="n">per minute on the pitch, by block</span></h2>'
        f'{_drops_html(snapshot, drops, alerts)}</div>',
        f'<div class="box wide"><h2>Alerts <span class="n">{len(alerts)} in all, latest first</span></h2>'
        f'{_alerts_html(snapshot, alerts)}</div>',
        "</div>",
        f'<p class="caution-line">{_esc(caution)}</p>',
        "</section>",
    ]
