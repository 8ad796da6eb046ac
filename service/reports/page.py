"""The report page: one self-contained HTML file (inline CSS and SVG, no external asset), printable on A4."""
from __future__ import annotations

import html
import time
from collections.abc import Callable
from typing import Any

from pacewire.reports.alert_log import alert_rows, counts
from pacewire.reports.summary import summary_section
from pacewire.reports.table import has_heart_rate, one_team, player_order, tracked_teams

HEALTH_CAUTION = ("Figures are estimates from positional data; decisions on injury, return-to-play and "
                  "substitution stay with the club's qualified medical and performance staff.")
LIVE_CAVEAT = ("Live figures tend to run below post-match reprocessing of the same match; coverage says how "
               "much of each player's time on the pitch the feed saw.")
HR_CAVEAT = ("Heart-rate figures come from the players' straps; a strap that drops out lowers its coverage "
             "and leaves time uncounted: read low coverage as missing data, never as a low heart rate.")
TITLES = {"half_time": "Half-time report", "full_time": "Full-time report"}
# docs/wearables.md: the five zones of % HRmax (Edwards 1993), named as the snapshot names them
HR_ZONES = ("50-60%", "60-70%", "70-80%", "80-90%", "90-100%")
OMITTED_MARK = "\u2014"  # em dash: left out for lack of a profile (an en dash is "no value")

CSS = """
:root{--ink:#1f2a30;--paper:#fbf8f1;--card:#fffdf8;--sand:#efe7d4;--grid:#ddd6c6;--muted:#596267;--home:#12706b;
--away:#c8553d;--hsr:#e0a526;--warn:#8e3b46;--stripe:#f3ede0}
@media (prefers-color-scheme: dark){:root{--ink:#f1ebde;--paper:#10131b;--card:#191d28;--sand:#1f2432;--grid:#30364a;
--muted:#b1b5c2;--home:#45c9b4;--away:#ff8a6b;--hsr:#f3c54a;--warn:#ff8a8a;--stripe:#1f2432}
 svg.chart{border-radius:4px}}
*{box-sizing:border-box}
body{margin:0;background:var(--paper);color:var(--ink);font:15px/1.45 system-ui,-apple-system,"Segoe UI",Roboto,
"Helvetica Neue",Arial,sans-serif}
main{max-width:1180px;margin:0 auto;padding:14px 22px 40px}
.masthead{border-left:10px solid var(--home);padding:4px 0 6px 16px;margin-bottom:10px;
background:linear-gradient(90deg,var(--sand),transparent 70%)}
.kicker{font-size:14px;letter-spacing:.12em;text-transform:uppercase;color:var(--muted)}
h1{margin:.1em 0;font-size:26px;font-weight:750;letter-spacing:-.01em}
h1 .home{color:var(--home)} h1 .away{color:var(--away)} h1 .score{font-variant-numeric:tabular-nums;padding:0 .35em}
.meta{margin:0;color:var(--muted);font-size:14px}
h2{font-size:17px;margin:26px 0 8px;padding-bottom:3px;border-bottom:2px solid var(--ink);display:flex;gap:.6em;
align-items:baseline;flex-wrap:wrap} h2 .n{color:var(--muted);font-weight:500;font-size:14px}
h3{font-size:15px;margin:16px 0 6px}
.cautions{display:grid;grid-template-columns:1fr 1fr;gap:10px}
.cautions p{margin:0;padding:8px 11px;border:1px solid var(--grid);border-top:3px solid var(--warn);
background:var(--card)}
.cautions p.live{border-top-color:var(--hsr)} .cautions p.hr{border-top-color:var(--home)}
table{border-collapse:collapse;width:100%;font-variant-numeric:tabular-nums;font-size:14px;margin:4px 0 10px}
th,td{padding:3px 6px;text-align:right;border-bottom:1px solid var(--grid);white-space:nowrap}
th{font-weight:650;font-size:14px;color:var(--muted);border-bottom:1.5px solid var(--ink)}
td.l,th.l{text-align:left} tbody tr:nth-child(even){background:var(--stripe)}
td.low{color:var(--warn);font-weight:700} td.low::after{content:" \\25BE"}
td.gaps{font-weight:700} td.gaps .tag{font-size:14px;font-weight:700;letter-spacing:.04em;text-transform:uppercase;
border:1px dashed var(--warn);color:var(--warn);padding:0 3px;margin-left:4px;border-radius:2px}
td.omitted{color:var(--muted);cursor:help}
ul.why{margin:0 0 10px;padding-left:18px;color:var(--muted);font-size:14px}
.tracking{display:inline-block;margin-left:.5em;padding:1px 7px;border:1.5px solid var(--ink);border-radius:2px;
font-size:14px;font-weight:700;letter-spacing:.08em;text-transform:uppercase;vertical-align:middle}
.teamhead th.home{color:var(--home)} .teamhead th.away{color:var(--away)}
svg.chart{display:block;width:100%;height:auto;margin:6px 0 12px}
.note{color:var(--muted);font-size:14px;margin:2px 0 8px}
.unused{color:var(--muted);font-size:14px}
#intensity td,#intensity th{padding:2px 4px}
footer{margin-top:28px;border-top:1px solid var(--grid);padding-top:8px;color:var(--muted);font-size:14px}
.summary .status{margin:0 0 6px;font-size:17px}
.glance{display:grid;grid-template-columns:1fr 1fr;gap:10px 18px}
.glance .box{min-width:0} .glance .box.wide{grid-column:1/-1}
.glance h2{margin:4px 0 4px;font-size:16px}
.glance table{margin:2px 0 4px;table-layout:fixed} .glance td,.glance th{padding:2px 5px;white-space:normal;
overflow-wrap:anywhere} .glance-teams th.l{width:38%} .glance .who{display:block}
.glance .who,.glance .when{color:var(--muted);font-size:14px}
.glance td.share{font-weight:750;color:var(--warn)}
.glance-list{margin:0;padding-left:0;list-style:none}
.glance-list li{padding:1px 0;break-inside:avoid;white-space:nowrap;overflow:hidden;text-overflow:ellipsis}
.glance-drops th.l{width:30%}
.glance-teams th.home,.glance-teams th.away{color:var(--ink)}
.mark{display:inline-block;width:.75em;height:.75em;margin-right:.35em;border:2px solid var(--home);vertical-align:-1px}
.mark.home{background:var(--home)} .mark.away{border-color:var(--away);border-radius:50%}
.caution-line{margin:8px 0 0;padding:5px 10px;border-left:4px solid var(--warn);background:var(--card);font-size:14px}
@page{size:A4;margin:12mm 11mm}
@media print{
 :root{--ink:#1f2a30;--paper:#fff;--card:#fff;--sand:#efe7d4;--grid:#ddd6c6;--muted:#4f575c;--home:#12706b;
 --away:#c8553d;--stripe:#f4f4f4}
 body{background:#fff;font-size:9.5pt} main{max-width:none;padding:0}
 table,th,.note,.glance .who,.glance .when,.caution-line,.meta,.kicker{font-size:8.5pt}
 .masthead{background:none} h2{break-after:avoid;margin-top:14px}
 .summary{break-after:page} .glance{grid-template-columns:1fr 1fr}
 section{break-inside:auto} tr,svg.chart,.cautions p{break-inside:avoid}
 thead{display:table-header-group} svg.chart{max-width:188mm}
 tbody tr:nth-child(even){-webkit-print-color-adjust:exact;print-color-adjust:exact}
}
"""


def esc(v: Any) -> str:
    return html.escape("" if v is None else str(v), quote=True)


def num(v: Any, nd: int = 0) -> str:
    if v is None:
        return "–"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int) and nd == 0:
        return f"{v:,}".replace(",", "\u2009")
    return f"{float(v):,.{nd}f}".replace(",", "\u2009")


def kmh(ms: float | None) -> str:
    """A speed for the eye: km/h to 0.1 (the JSON and CSV keep m/s)."""
    return "–" if ms is None else num(ms * 3.6, 1)


def clock(seconds: float | None) -> str:
    if seconds is None or seconds < 0:
        return "–"
    s = int(round(seconds))
    return f"{s // 60}:{s % 60:02d}"


def _table(head: list[tuple[str, str]], rows: list[list[tuple[str, str]]], head_class: str = "") -> str:
    """head: (label, css class); rows: cells of (html, css class)."""
    th = "".join(f'<th class="{c}">{esc(h)}</th>' for h, c in head)
    body = "".join("<tr>" + "".join(f'<td class="{c}">{v}</td>' for v, c in r) + "</tr>" for r in rows)
    return f'<table><thead><tr class="{head_class}">{th}</tr></thead><tbody>{body}</tbody></table>'


def team_table(snapshot: dict[str, Any], possession: dict[str, dict[str, float]]) -> str:
    """Outfield totals, one column per tracked team (an untracked team has no figures, not zeros)."""
    teams = tracked_teams(snapshot)
    head = [("outfield players", "l")] + [(t["name"] or tid, t["side"]) for tid, t in teams]
    lines: list[tuple[str, Any]] = [
        ("players used", lambda o: num(o["players"])),
        ("distance, m", lambda o: num(o["distance_m"])),
        ("distance per player per 90 min on the pitch, m", lambda o: num(o["per_player"]["distance_m"])),
        ("m/min per player (mean over time on the pitch)", lambda o: num(o["per_player"]["m_per_min"])),
        ("HSR, m", lambda o: num(o["hsr_m"])),
        ("HSR per player per 90 min, m", lambda o: num(o["per_player"]["hsr_m"])),
        ("sprint, m", lambda o: num(o["sprint_m"])),
        ("sprint per player per 90 min, m", lambda o: num(o["per_player"]["sprint_m"])),
        ("HSR efforts", lambda o: num(o["hsr_efforts"])),
        ("sprints", lambda o: num(o["sprints"])),
        ("accelerations", lambda o: num(o["accels"])),
        ("decelerations", lambda o: num(o["decels"])),
        ("high-power distance, m", lambda o: num(o["high_power_m"])),
    ]
    rows = [[(esc(label), "l")] + [(fn(t["outfield"]), "") for _, t in teams] for label, fn in lines]
    if possession:
        for key, label in (("in_possession", "distance in possession, m"),
                           ("out_of_possession", "distance out of possession, m"),
                           ("out_of_play", "distance, ball out of play, m")):
            rows.append([(esc(label), "l")] + [(num(possession.get(tid, {}).get(key)), "") for tid, _ in teams])
    return _table(head, rows, "teamhead")


def player_table(players: list[tuple[str, dict[str, Any]]], low_coverage: float) -> str:
    head = [("#", ""), ("player", "l"), ("min", ""), ("dist m", ""), ("m/min", ""), ("HSR m", ""), ("sprint m", ""),
            ("HSR eff", ""), ("sprints", ""), ("acc", ""), ("dec", ""), ("top km/h", ""), ("HP m", ""),
            ("W/kg", ""), ("coverage", "")]
    rows = []
    for pid, p in players:
        cov = p.get("coverage")
        rows.append([
            (num(p["jersey_number"]), ""), (esc(p.get("name") or pid) + (" (GK)" if p["is_goalkeeper"] else ""), "l"),
            (num(p["minutes"], 1), ""), (num(p["distance_m"]), ""), (num(p["m_per_min"]), ""),
            (num(p["hsr_m"]), ""), (num(p["sprint_m"]), ""), (num(p["hsr_efforts"]), ""), (num(p["sprints"]), ""),
            (num(p["accels"]), ""), (num(p["decels"]), ""), (kmh(p["max_speed_ms"]), ""),
            (num(p["high_power_m"]), ""), (num(p["metabolic_power_wkg"], 1), ""),
            (f"{cov:.0%}" if cov is not None else "–", "low" if cov is not None and cov < low_coverage else ""),
        ])
    return _table(head, rows)


def peak_table(players: list[tuple[str, dict[str, Any]]], windows: list[int]) -> str:
    head = [("#", ""), ("player", "l")]
    for w in windows:
        head += [(f"peak {w}' m/min", ""), (f"{w}' HSR m", ""), ("from", "")]
    rows = []
    for pid, p in players:
        r = [(num(p["jersey_number"]), ""), (esc(p.get("name") or pid), "l")]
        for w in windows:
            win = (p.get("windows") or {}).get(f"peak_{w}min")
            if win:
                r += [(num(win["m_per_min"]), ""), (num(win["hsr_m"]), ""), (clock(win.get("start_s")), "")]
            else:
                r += [("–", ""), ("–", ""), ("–", "")]
        rows.append(r)
    return _table(head, rows)


def possession_table(players: list[tuple[str, dict[str, Any]]]) -> str:
    head = [("#", ""), ("player", "l"), ("in poss. m", ""), ("HSR", ""), ("out of poss. m", ""), ("HSR", ""),
            ("out of play m", ""), ("HSR", "")]
    rows = []
    for pid, p in players:
        pos = p.get("possession") or {}
        r = [(num(p["jersey_number"]), ""), (esc(p.get("name") or pid), "l")]
        for key in ("in_possession", "out_of_possession", "out_of_play"):
            c = pos.get(key) or {}
            r += [(num(c.get("distance_m")), ""), (num(c.get("hsr_m")), "")]
        rows.append(r)
    return _table(head, rows)


def _clock_or_dash(v: Any) -> str:
    return "–" if v is None else clock(v)


def _omitted_cell(reason: str) -> tuple[str, str]:
    """A figure left out for lack of a profile: an em dash, the reason on hover (and in the last column)."""
    return f'<span title="{esc(reason)}">{OMITTED_MARK}</span>', "omitted"


def zone_names(players: list[tuple[str, dict[str, Any]]]) -> list[str]:
    """The zone names the snapshot uses (the contract's five when no player has zones yet)."""
    for _, p in players:
        if p.get("hr_zones"):
            return list(p["hr_zones"])
    return list(HR_ZONES)


HR_LABELS = {"hr_pct_max": "% HRmax", "hr_zones": "zones", "trimp_edwards": "TRIMP Edwards",
             "trimp_banister": "TRIMP Banister"}


def omitted_groups(omitted: dict[str, str]) -> list[tuple[list[str], str]]:
    """(figure labels, reason) with the figures that share a reason together, in first-seen order."""
    groups: dict[str, list[str]] = {}
    for fig, why in omitted.items():
        groups.setdefault(why, []).append(HR_LABELS.get(fig, fig))
    return [(figs, why) for why, figs in groups.items()]


def heart_table(players: list[tuple[str, dict[str, Any]]], low_coverage: float) -> str:
    """Per player: mean and peak bpm, time in each %HRmax zone (m:ss), Edwards and Banister TRIMP,
    strap coverage (low coverage tagged as gaps, not as a low heart rate); a figure left out shows
    an em dash, and a list under the table says, per player, which figures and why."""
    zones = zone_names(players)
    head = ([("#", ""), ("player", "l"), ("mean bpm", ""), ("peak bpm", "")] + [(z, "") for z in zones]
            + [("TRIMP Edwards", ""), ("TRIMP Banister", ""), ("HR coverage", "")])
    rows = []
    notes = []
    for pid, p in players:
        omitted = p.get("hr_omitted") or {}
        name = esc(p.get("name") or pid)
        r = [(num(p["jersey_number"]), ""), (name, "l"), (num(p.get("hr_mean_bpm")), ""),
             (num(p.get("hr_peak_bpm")), "")]
        hz = p.get("hr_zones") or {}
        for z in zones:
            r.append(_omitted_cell(omitted["hr_zones"]) if "hr_zones" in omitted else (_clock_or_dash(hz.get(z)), ""))
        for fig in ("trimp_edwards", "trimp_banister"):
            r.append(_omitted_cell(omitted[fig]) if fig in omitted else (num(p.get(fig), 1), ""))
        cov = p.get("hr_coverage")
        if cov is None:
            r.append(("–", ""))
        elif cov < low_coverage:
            r.append((f'{cov:.0%}<span class="tag" title="strap dropped out: time missing, not a low heart rate">'
                      f'gaps</span>', "gaps"))
        else:
            r.append((f"{cov:.0%}", ""))
        groups = omitted_groups(omitted)
        if groups:
            notes.append(f'<li><strong>{num(p["jersey_number"])} {name}</strong>: ' + "; ".join(
                f"{esc(', '.join(figs))}: {esc(why)}" for figs, why in groups) + "</li>")
        rows.append(r)
    out = _table(head, rows)
    if notes:
        out += f'<ul class="why">{"".join(notes)}</ul>'
    return out


def intensity_table(players: list[tuple[str, dict[str, Any]]], blocks: list[str],
                    per_min: dict[str, list[float | None]]) -> str:
    """Distance per minute on the pitch, per player and block (``per_min[player_id]``)."""
    head = [("#", ""), ("player", "l")] + [(b, "") for b in blocks]
    rows = []
    for pid, p in players:
        vals = per_min.get(pid, [])
        rows.append([(num(p["jersey_number"]), ""), (esc(p.get("name") or pid), "l")]
                    + [(num(v) if v is not None else "", "") for v in vals])
    return _table(head, rows)


Played = list[tuple[str, dict[str, Any]]]  # (player id, snapshot player) in table order


def _head_and_masthead(kind: str, snapshot: dict[str, Any], source: str, created_at: float) -> list[str]:
    """The document head and the masthead: report kind, teams and score, clock, source, build time."""
    teams = tracked_teams(snapshot)
    every_team = list(snapshot["teams"].items())
    single = one_team(snapshot)
    title = TITLES.get(kind, kind)
    names = [t["name"] or tid for tid, t in every_team]
    scores = [t.get("score") for _, t in every_team]
    score = f"{scores[0]} – {scores[1]}" if None not in scores else "v"
    built = time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime(created_at))
    return [
        "<!doctype html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{esc(title)} · {esc(names[0])} {esc(score)} {esc(names[1])} · pacewire</title>",
        f"<style>{CSS}</style>", "</head>", "<body>", "<main>",
        '<header class="masthead">',
        f'<div class="kicker">pacewire · {esc(title)}</div>',
        f'<h1><span class="home">{esc(names[0])}</span><span class="score">{esc(score)}</span>'
        f'<span class="away">{esc(names[1])}</span>'
        + ('<span class="tracking" id="one-team">one team tracked</span>' if single else "") + "</h1>",
        f'<p class="meta">match {esc(snapshot["match_id"])} · clock {clock(snapshot.get("match_time_s"))} · '
        f'figures from {esc(source)} data · built {esc(built)}'
        + (f' · one team tracked: {esc(teams[0][1]["name"] or teams[0][0])} only, so no opponent comparison'
           if single else "") + "</p>",
        "</header>",
    ]


def _cautions(heart: bool) -> list[str]:
    return [
        '<section class="cautions" id="cautions">',
        f'<p class="live"><strong>Live data.</strong> {esc(LIVE_CAVEAT)}</p>',
        f'<p class="hr"><strong>Heart rate.</strong> {esc(HR_CAVEAT)}</p>' if heart else "",
        "</section>",
    ]


def _teams_section(snapshot: dict[str, Any], charts: dict[str, str],
                   possession: dict[str, dict[str, float]]) -> list[str]:
    head = ('<section id="teams"><h2>Team figures <span class="n">one team tracked · outfield players, goalkeepers '
            'excluded</span></h2>' if one_team(snapshot) else
            '<section id="teams"><h2>Team comparison <span class="n">outfield players, goalkeepers excluded'
            '</span></h2>')
    return [head, team_table(snapshot, possession), charts.get("possession", ""), "</section>"]


def _intensity_section(teams: list[tuple[str, dict[str, Any]]], charts: dict[str, str],
                       played_by_team: dict[str, Played], blocks: list[tuple[str, str]] | None,
                       per_min: dict[str, list[float | None]] | None) -> list[str]:
    """Team intensity chart, then per team its heat map and, by period, distance per minute per block."""
    parts = [
        '<section id="intensity"><h2>Intensity over time</h2>', charts.get("team-intensity", ""),
        '<p class="note">Team lines: outfield distance and HSR per player-minute on the pitch in each block. '
        'Player maps and tables: per minute on the pitch in each block; a blank cell: not on the pitch then. '
        'The dashed line marks the break between periods; a block marked + is stoppage time.</p>',
    ]
    for tid, t in teams:
        parts.append(charts.get(f"heatmap-{tid}", ""))
        if blocks and per_min is not None:
            parts.append(f'<h3>{esc(t["name"] or tid)}: distance per minute on the pitch, by block</h3>')
            for period in dict.fromkeys(p for _, p in blocks):  # one table per period: fits an A4 page
                cols = [i for i, (_, p) in enumerate(blocks) if p == period]
                parts.append(intensity_table(played_by_team[tid], [blocks[i][0] for i in cols],
                                             {pid: [v[i] for i in cols] for pid, v in per_min.items()}))
    parts.append("</section>")
    return parts


def _players_section(snapshot: dict[str, Any], charts: dict[str, str], played_by_team: dict[str, Played],
                     low_coverage: float) -> list[str]:
    """Per team the player table, who did not play, and the bar chart."""
    players = snapshot["players"]
    order = player_order(snapshot)
    parts = ['<section id="players"><h2>Players</h2>']
    for tid, t in tracked_teams(snapshot):
        unused = [pid for pid in order if players[pid]["team_id"] == tid and not players[pid]["minutes"]]
        parts.append(f'<h3>{esc(t["name"] or tid)}</h3>')
        parts.append(player_table(played_by_team[tid], low_coverage))
        if unused:
            names = ", ".join(f'{esc(players[pid]["jersey_number"])} {esc(players[pid].get("name") or pid)}'
                              for pid in unused)
            parts.append(f'<p class="unused">Did not play: {names}</p>')
        parts.append(charts.get(f"bars-{tid}", ""))
    parts.append(f'<p class="note">Coverage is the share of time on the pitch the feed credited; below '
                 f'{low_coverage:.0%} it is marked ▾. {esc(LIVE_CAVEAT)}</p></section>')
    return parts


def _peaks_section(snapshot: dict[str, Any], charts: dict[str, str], played_by_team: dict[str, Played]) -> list[str]:
    """Every player's peak windows (the lengths any player has), per team."""
    windows = sorted({int(k[5:-3]) for p in snapshot["players"].values() for k, v in (p.get("windows") or {}).items()
                      if k.startswith("peak_") and v is not None})
    parts = ['<section id="peaks"><h2>Peak windows <span class="n">highest rolling distance, '
             'and when it began (match clock)</span></h2>']
    for tid, t in tracked_teams(snapshot):
        parts.append(f'<h3>{esc(t["name"] or tid)}</h3>')
        parts.append(peak_table(played_by_team[tid], windows))
        parts.append(charts.get(f"peaks-{tid}", ""))
    parts.append("</section>")
    return parts


def _possession_section(teams: list[tuple[str, dict[str, Any]]], played_by_team: dict[str, Played]) -> list[str]:
    parts = ['<section id="possession"><h2>Ball context <span class="n">distance and HSR in possession, '
             'out of possession, ball out of play</span></h2>']
    for tid, t in teams:
        parts.append(f'<h3>{esc(t["name"] or tid)}</h3>')
        parts.append(possession_table(played_by_team[tid]))
    parts.append("</section>")
    return parts


def _heart_section(teams: list[tuple[str, dict[str, Any]]], charts: dict[str, str],
                   played_by_team: dict[str, Played], low_coverage: float) -> list[str]:
    parts = ['<section id="heart"><h2>Heart rate <span class="n">time in zones of % HRmax (m:ss), '
             'TRIMP (Edwards 1993; Banister 1991)</span></h2>']
    for tid, t in teams:
        parts.append(f'<h3>{esc(t["name"] or tid)}</h3>')
        parts.append(heart_table(played_by_team[tid], low_coverage))
        parts.append(charts.get(f"hr-zones-{tid}", ""))
    parts.append(f'<p class="note">Mean heart rate is time-weighted over the time the strap was credited. '
                 f'HR coverage is the share of expected strap samples received while on the pitch; below '
                 f'{low_coverage:.0%} it is tagged GAPS: the strap dropped out and that time is missing, which '
                 f'is not a low heart rate. {OMITTED_MARK}: left out because the player\'s profile lacks '
                 f'HRmax, resting HR or sex (the reasons are listed under the table).</p></section>')
    return parts


def _alerts_section(snapshot: dict[str, Any], alerts: list[dict[str, Any]]) -> list[str]:
    """Every alert raised up to the report, oldest first, after a count per rule."""
    parts = ['<section id="alerts"><h2>Alerts <span class="n">as the bench received them; a prompt to look, '
             'not a verdict</span></h2>']
    if not alerts:
        return [*parts, '<p class="note">No alerts.</p>', "</section>"]
    summary = [[(esc(rule), "l"), (num(c["alerts"]), ""), (num(c["players"]), ""), (num(c["most"]), "")]
               for rule, c in counts(alerts).items()]
    parts.append(_table([("rule", "l"), ("alerts", ""), ("players", ""), ("most for one player", "")], summary))
    rows = [[(clock(r["match_time_s"]), ""), (esc(r["period"] or ""), "l"), (num(r["jersey_number"]), ""),
             (esc(r["name"] or r["player_id"]), "l"), (esc(r["rule"]), "l"), (num(r["value"], 1), ""),
             (num(r["limit"], 1), ""), (esc(r["message"]), "l")] for r in alert_rows(snapshot, alerts)]
    parts.append(_table([("clock", ""), ("period", "l"), ("#", ""), ("player", "l"), ("rule", "l"), ("value", ""),
                         ("limit", ""), ("message", "l")], rows))
    return [*parts, "</section>"]


def _feed_section(health: dict[str, Any]) -> list[str]:
    """The feed's health counters at build time (heart-rate ones when the match had a strap channel)."""
    rows = [
        [("state at build", "l"), (esc(health.get("state")), "")],
        [("frames applied", "l"), (num(health.get("frames")), "")],
        [("nominal frame rate, Hz", "l"), (num(health.get("fps_nominal")), "")],
        [("rejected frames", "l"), (num(health.get("rejected")), "")],
        [("duplicates", "l"), (num(health.get("duplicates")), "")],
        [("late frames", "l"), (num(health.get("late")), "")],
        [("position jumps removed", "l"), (num(health.get("jumps")), "")],
        [("tracking artefacts removed, s", "l"), (num(health.get("artefact_s"), 1), "")],
    ]
    if any(k in health for k in ("hr_rejected", "hr_duplicates", "hr_late")):
        rows += [
            [("heart-rate samples refused", "l"), (num(health.get("hr_rejected")), "")],
            [("heart-rate duplicates", "l"), (num(health.get("hr_duplicates")), "")],
            [("heart-rate late samples", "l"), (num(health.get("hr_late")), "")],
        ]
    ev = health.get("events")
    if ev is not None:  # the CDF event stream's own health
        rows += [
            [("event stream at build", "l"), (esc(ev.get("state")), "")],
            [("events", "l"), (num(ev.get("events")), "")],
            [("events corrected", "l"), (num(ev.get("corrections")), "")],
            [("events refused", "l"), (num(ev.get("rejected")), "")],
            [("events repeated", "l"), (num(ev.get("duplicates")), "")],
        ]
    return ['<section id="feed"><h2>Feed</h2>', _table([("feed", "l"), ("value", "")], rows), "</section>"]


def page(kind: str, snapshot: dict[str, Any], charts: dict[str, str], possession: dict[str, dict[str, float]],
         source: str, created_at: float, low_coverage: float,
         blocks: list[tuple[str, str]] | None = None, per_min: dict[str, list[float | None]] | None = None,
         alerts: list[dict[str, Any]] | None = None,
         more: Callable[[list[tuple[str, dict[str, Any]]], dict[str, Played]], list[str]] | None = None,
         steady_per_min: dict[str, list[float | None]] | None = None) -> str:
    """The whole report page. ``charts``: inline SVGs by name (see builder); ``blocks``:
    (label, period) of each block; ``per_min``: each player's distance per minute in them;
    ``alerts``: those raised up to the report; ``more``: further sections, given the tracked teams and
    the players of each who played (game phases); ``steady_per_min``: ``per_min`` keeping only blocks a
    player spent most of on the pitch (the first page's drop-offs; ``per_min`` when not given)."""
    teams = tracked_teams(snapshot)
    heart = has_heart_rate(snapshot)
    players = snapshot["players"]
    order = player_order(snapshot)
    # the players of each tracked team who played, in table order
    played_by_team = {tid: [(pid, players[pid]) for pid in order
                            if players[pid]["team_id"] == tid and players[pid]["minutes"]] for tid, _ in teams}
    parts = [
        *_head_and_masthead(kind, snapshot, source, created_at),
        *summary_section(kind, snapshot, blocks, steady_per_min if steady_per_min is not None else per_min,
                         alerts or [], HEALTH_CAUTION),
        *_cautions(heart),
        *_teams_section(snapshot, charts, possession),
        *_intensity_section(teams, charts, played_by_team, blocks, per_min),
        *_players_section(snapshot, charts, played_by_team, low_coverage),
        *_peaks_section(snapshot, charts, played_by_team),
        *(_possession_section(teams, played_by_team) if possession else []),
        *(more(teams, played_by_team) if more is not None else []),
        *(_heart_section(teams, charts, played_by_team, low_coverage) if heart else []),
        *_alerts_section(snapshot, alerts or []),
        *_feed_section(snapshot["health"]),
        f"<footer>{esc(HEALTH_CAUTION)} Report by pacewire; CSV and JSON copies sit beside this file.</footer>",
        "</main>", "</body>", "</html>",
    ]
    return "\n".join(parts) + "\n"
