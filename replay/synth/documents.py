"""The JSON documents of the recording folder: the CDF meta (meta.json) and the CDF
match sheet (match.json), in the normal and the wearables variant."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from pacewire.replay.synth.clubs import (
    AWAY,
    CLUBS,
    FORMATIONS,
    HOME,
    OFFICIALS,
    PITCH_LENGTH_M,
    PITCH_WIDTH_M,
    POSITION_GROUP,
    VENUE,
    Club,
    player_id,
)
from pacewire.replay.synth.match import SynthMatch
from pacewire.replay.synth.timeline import iso_ms
from pacewire.replay.synth.wearables import HR_REST_UNKNOWN

if TYPE_CHECKING:
    from pacewire.wire.gnss import GnssPitch

MATCH_ID = "pw_synth_match"
CDF_VERSION = "0.3.2"
VENDOR = "pacewire synth"


def _player_entry(club: Club, idx: int, starter: bool, played: bool, position: str) -> dict[str, Any]:
    """Match-sheet player object."""
    jersey, first, last, pos = club.squad[idx]
    group = POSITION_GROUP.get(pos, pos)
    return {
        "id": player_id(club, jersey),
        "team_id": club.team_id,
        "jersey_number": jersey,
        "first_name": first,
        "last_name": last,
        "short_name": f"{first[0]}. {last}",
        "is_starter": starter,
        "has_played": played,
        "position_group": group,
        "position": position,
        "is_captain": idx == 5,
    }


def build_meta(m: SynthMatch) -> dict[str, Any]:
    """CDF meta object."""
    tl = m.timeline
    e1, s2, e2 = tl.first_half_end_ms(), tl.second_half_start_ms(), tl.second_half_end_ms()
    teams = {}
    for side, club in zip(("home", "away"), CLUBS, strict=True):
        teams[side] = {
            "id": club.team_id,
            "name": club.name,
            "jersey_colour": club.colour,
            "players": [
                {"id": player_id(club, j), "team_id": club.team_id, "jersey_number": j,
                 "is_starter": i < 11, "first_name": first, "last_name": last}
                for i, (j, first, last, _) in enumerate(club.squad)
            ],
        }
    return {
        "competition": {"id": "c_pacewire_demo", "name": "Pacewire Demo League (fictional)", "type": "mens"},
        "season": {"id": "s_2025_26", "name": "2025/26"},
        "match": {
            "id": MATCH_ID,
            "kickoff_time": iso_ms(0),
            "periods": [
                {"period": "first_half", "play_direction": "left_right", "start_time": iso_ms(0),
                 "end_time": iso_ms(e1), "frame_id_start": 0, "frame_id_end": tl.n1 - 1,
                 "left_team_id": HOME.team_id, "right_team_id": AWAY.team_id},
                {"period": "second_half", "play_direction": "right_left", "start_time": iso_ms(s2),
                 "end_time": iso_ms(e2), "frame_id_start": tl.n1, "frame_id_end": tl.n_slots - 1,
                 "left_team_id": AWAY.team_id, "right_team_id": HOME.team_id},
            ],
            "whistles": [
                {"type": "first_half", "sub_type": "start", "time": iso_ms(0)},
                {"type": "first_half", "sub_type": "end", "time": iso_ms(e1)},
                {"type": "second_half", "sub_type": "start", "time": iso_ms(s2)},
                {"type": "second_half", "sub_type": "end", "time": iso_ms(e2)},
            ],
            "round": "1",
            "scheduled_kickoff_time": iso_ms(0),
        },
        "teams": teams,
        "venue": {"id": VENUE["id"], "name": VENUE["name"], "pitch_length": PITCH_LENGTH_M,
                  "pitch_width": PITCH_WIDTH_M, "turf": VENUE["turf"]},
        "meta": {
            "video": None,
            "tracking": {"version": "0.1.0", "name": VENDOR, "fps": int(tl.fps), "collection_timing": "live"},
            "landmarks": None,
            "ball": None,
            "event": None,
            "meta": {"version": "0.1.0", "name": VENDOR},
            "cdf": {"version": CDF_VERSION},
        },
        "officials": _officials(),
    }


def build_sheet(m: SynthMatch) -> dict[str, Any]:
    """CDF match sheet (with the post-match fields the validator requires)."""
    tl = m.timeline
    ts = tl.timestamps()
    teams = {side: _sheet_team(m, t, club) for t, (side, club) in enumerate(zip(("home", "away"), CLUBS, strict=True))}
    goals, score, half_score = _goals(m, ts)
    winner = None if score[0] == score[1] else CLUBS[0 if score[0] > score[1] else 1].team_id
    subs = [{
        "team_id": CLUBS[s.team].team_id, "in_time": ts[s.frame], "period": tl.period(s.frame),
        "in_player_id": player_id(CLUBS[s.team], CLUBS[s.team].squad[s.in_index][0]),
        "out_time": ts[s.frame],
        "out_player_id": player_id(CLUBS[s.team], CLUBS[s.team].squad[s.out_index][0]),
    } for s in m.subs]
    cards = [{"team_id": CLUBS[t].team_id, "time": ts[f], "period": tl.period(f),
              "player_id": m.player_at(f, 11 * t + slot), "type": "yellow_card"} for t, f, slot in m.cards]
    return {
        "match": {
            "id": MATCH_ID,
            "status": {"is_neutral": False, "has_extratime": False, "has_shootout": False},
            "result": {
                "final": {"home": score[0], "away": score[1], "winning_team_id": winner},
                "first_half": {"home": half_score["first_half"][0], "away": half_score["first_half"][1]},
                "second_half": {"home": half_score["second_half"][0], "away": half_score["second_half"][1]},
            },
        },
        "teams": teams,
        "officials": _officials(),
        "events": {"goals": goals, "substitutions": subs, "cards": cards},
        "meta": {"vendor": VENDOR},
    }


def _sheet_team(m: SynthMatch, team: int, club: Club) -> dict[str, Any]:
    """A team of the match sheet: the starters in their formation positions, the bench
    (with the position taken by those who came on), the coach."""
    slot_pos = [p for p, _, _ in FORMATIONS[club.formation]]
    came_on = {s.in_index: slot_pos[s.slot] for s in m.subs if s.team == team}
    players = [_player_entry(club, i, True, True, slot_pos[i]) for i in range(11)]
    for i in range(11, len(club.squad)):
        players.append(_player_entry(club, i, False, i in came_on, came_on.get(i, "SUB")))
    return {"id": club.team_id, "short_name": club.short, "formation": club.formation,
            "players": players,
            "coaches": [{"id": f"c_{club.team_id[2:]}", "first_name": club.coach[0],
                         "last_name": club.coach[1]}]}


def _goals(m: SynthMatch, ts: list[str]) -> tuple[list[dict[str, Any]], list[int], dict[str, list[int]]]:
    """The goals of the match sheet, the final score (home, away) and the score at the end
    of each half; ts: the timestamp of every slot."""
    tl = m.timeline
    score = [0, 0]
    half_score = {"first_half": [0, 0], "second_half": [0, 0]}
    goals = []
    for g in m.goals:
        score[g.team] += 1
        for h in ("first_half", "second_half"):
            if h == "second_half" or tl.period(g.frame) == "first_half":
                half_score[h] = list(score)
        col = 11 * g.team
        goals.append({
            "time": ts[g.frame], "period": tl.period(g.frame), "team_id": CLUBS[g.team].team_id,
            "player_id": m.player_at(g.frame, col + g.scorer_slot),
            "assist_id": None if g.assist_slot is None else m.player_at(g.frame, col + g.assist_slot),
            "is_own_goal": False, "is_penalty": False, "score": {"home": score[0], "away": score[1]},
        })
    half_score["second_half"] = list(score)
    return goals, score, half_score


def _officials() -> list[dict[str, Any]]:
    """The match officials, as CDF meta and match sheet list them."""
    return [{"id": i, "first_name": first, "last_name": last, "short_name": f"{first[0]}. {last}", "type": t}
            for i, first, last, t in OFFICIALS]


def build_wearables_meta(m: SynthMatch, cal: GnssPitch) -> dict[str, Any]:
    """The CDF meta of the wearables variant: the same match, the away squad unknown,
    the venue with its GNSS calibration (``venue.gnss_pitch``, corner form)."""
    meta = build_meta(m)
    meta["teams"]["away"]["players"] = []
    meta["venue"]["gnss_pitch"] = cal.model_dump(exclude_none=True)
    return meta


def build_wearables_sheet(m: SynthMatch, profiles: dict[str, tuple[int, int, str]]) -> dict[str, Any]:
    """The match sheet of the wearables variant: home players with their heart-rate profile
    (pacewire extension fields), the away team without players, home events only
    (goals stay: they make the result)."""
    sheet = build_sheet(m)
    home_id = HOME.team_id
    for p in sheet["teams"]["home"]["players"]:
        hr_max, hr_rest, sex = profiles[p["id"]]
        p["hr_max_bpm"] = hr_max
        if p["jersey_number"] not in HR_REST_UNKNOWN:
            p["hr_rest_bpm"] = hr_rest
        p["sex"] = sex
    sheet["teams"]["away"]["players"] = []
    events = sheet["events"]
    events["substitutions"] = [s for s in events["substitutions"] if s["team_id"] == home_id]
    events["cards"] = [c for c in events["cards"] if c["team_id"] == home_id]
    return sheet
