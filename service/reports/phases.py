"""The report's page on physical output by game phase and by possession outcome.

Read from the snapshot (``teams.{id}.outfield.phases``, ``sequences``, players' ``phases`` and
``m_per_min_in_play``): how hard each team worked in attack, in defence and in the transitions
between them, and whether its possessions that ended in a shot were run at a higher intensity
than the others (Bradley & Ade 2018, on reading physical output by tactical context).
"""
from __future__ import annotations

from typing import Any

from pacewire.reports.page import Played, _table, esc, num

PHASES = (("attack", "attack"), ("defence", "defence"), ("attacking_transition", "won the ball (transition)"),
          ("defensive_transition", "lost the ball (transition)"), ("dead_ball", "ball dead"),
          ("unknown", "unknown context"))


def has_phases(teams: list[tuple[str, dict[str, Any]]]) -> bool:
    """Phases say something once the feed told possession: a ball in the frames or an event stream."""
    return any((t.get("outfield") or {}).get("in_play_s", 0) > 0 or "sequences" in (t.get("outfield") or {})
               for _, t in teams)


def team_phase_table(teams: list[tuple[str, dict[str, Any]]]) -> str:
    """Per phase and team: minutes, m/min per outfield player, HSR and sprint metres."""
    head = [("phase", "l")]
    for tid, t in teams:
        name = esc(t["name"] or tid)
        head += [(f"{name} min", t["side"]), ("m/min per player", ""), ("HSR m", ""), ("sprint m", "")]
    rows = []
    for key, label in PHASES:
        r = [(esc(label), "l")]
        for _, t in teams:
            f = t["outfield"]["phases"][key]
            r += [(num(f["seconds"] / 60.0, 1), ""), (num(f["per_player_m_per_min"], 1), ""), (num(f["hsr_m"]), ""),
                  (num(f["sprint_m"]), "")]
        rows.append(r)
    r = [("ball in play (effective time)", "l")]
    for _, t in teams:
        o = t["outfield"]
        r += [(num(o["in_play_s"] / 60.0, 1), ""), ("", ""), ("", ""), ("", "")]
    rows.append(r)
    return _table(head, rows, "teamhead")


def sequence_table(teams: list[tuple[str, dict[str, Any]]]) -> str:
    """Possession sequences by outcome, per team: count, mean length, the outfield players' intensity."""
    head = [("team", "l"), ("sequences", "l"), ("count", ""), ("mean s", ""), ("m/min per player", ""),
            ("HSR m/min per player", "")]
    rows = []
    for tid, t in teams:
        seq = t["outfield"].get("sequences")
        if seq is None:
            continue
        for key, label in (("shot", "ended in a shot"), ("no_shot", "no shot")):
            q = seq[key]
            rows.append([(esc(t["name"] or tid), "l"), (label, "l"), (num(q["count"]), ""), (num(q["mean_s"], 1), ""),
                         (num(q["m_per_min"], 1), ""), (num(q["hsr_m_per_min"], 1), "")])
    return _table(head, rows)


def player_phase_table(players: Played) -> str:
    """Per player: m/min over effective playing time, and m/min in each phase of play."""
    head = [("#", ""), ("player", "l"), ("m/min in play", "")] + [(f"{label} m/min", "") for _, label in PHASES[:4]]
    rows = []
    for pid, p in players:
        ph = p.get("phases") or {}
        rows.append([(num(p["jersey_number"]), ""), (esc(p.get("name") or pid), "l"),
                     (num(p.get("m_per_min_in_play"), 1), "")]
                    + [(num((ph.get(key) or {}).get("m_per_min"), 1), "") for key, _ in PHASES[:4]])
    return _table(head, rows)


def phases_section(teams: list[tuple[str, dict[str, Any]]], played_by_team: dict[str, Played]) -> list[str]:
    """The page's section on game phases; nothing when the feed never told possession."""
    if not has_phases(teams):
        return []
    parts = ['<section id="phases"><h2>Physical output by game phase <span class="n">outfield players; '
             'transitions are the first seconds after the ball was won or lost in open play</span></h2>',
             team_phase_table(teams)]
    if any("sequences" in t["outfield"] for _, t in teams):
        parts += ['<h3>Possessions by outcome</h3>', sequence_table(teams)]
    for tid, t in teams:
        parts.append(f'<h3>{esc(t["name"] or tid)}</h3>')
        parts.append(player_phase_table(played_by_team[tid]))
    parts.append('<p class="note">Possession comes from the event stream where it is recent, else from the '
                 "tracking's ball; a second is counted in one phase, so the phases add up to the totals. "
                 'Effective playing time counts the ball in play only (Altmann et al. 2023).</p></section>')
    return parts
