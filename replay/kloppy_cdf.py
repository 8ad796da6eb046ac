"""kloppy tracking datasets as CDF v0.3.2: meta, match sheet and frames.

A reusable bridge (and the sketch for ``pacewire import``): any loader kloppy
has gives a ``TrackingDataset``; this module moves it into the CDF frame of
reference (metres, origin at the centre spot, x along the touchlines, y along
the goal lines pointing up: Anzer et al. 2025) and writes the live
subset of the CDF objects pacewire reads.

kloppy loaders default to normalised 0-1 coordinates with the origin top-left
and y pointing down (kloppy docs, ``KloppyCoordinateSystem``): without
``to_cdf_coordinates`` every distance would be in pitch fractions.

kloppy is imported where it is used, so importing this module costs nothing.
"""
from __future__ import annotations

import math
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

import orjson

if TYPE_CHECKING:
    from kloppy.domain import CustomCoordinateSystem, TrackingDataset

CDF_VERSION = "0.3.2"
# kloppy period ids → CDF period names (Anzer et al. 2025).
CDF_PERIODS = {1: "first_half", 2: "second_half", 3: "first_half_extratime", 4: "second_half_extratime",
               5: "shootout"}
# kloppy position groups → CDF position_group values.
CDF_POSITION_GROUPS = {"Goalkeeper": "GK", "Defender": "DF", "Midfielder": "MF", "Attacker": "FW"}
# kloppy providers whose tracking is derived from the broadcast video (SkillCorner's own description of its
# data): the recording names the broadcast feed profile.
BROADCAST_PROVIDERS = frozenset({"skillcorner"})
# Used when a provider gives periods relative to an unknown kick-off (a fictional date).
_FALLBACK_KICKOFF = datetime(2000, 1, 1, tzinfo=UTC)


def cdf_coordinate_system(pitch_length_m: float, pitch_width_m: float) -> CustomCoordinateSystem:
    """kloppy coordinate system equal to CDF's: metres, origin at the centre spot, y up."""
    from kloppy.domain import CustomCoordinateSystem, Dimension, MetricPitchDimensions, Origin, VerticalOrientation

    dims = MetricPitchDimensions(
        x_dim=Dimension(-pitch_length_m / 2, pitch_length_m / 2),
        y_dim=Dimension(-pitch_width_m / 2, pitch_width_m / 2),
        pitch_length=pitch_length_m, pitch_width=pitch_width_m, standardized=False,
    )
    return CustomCoordinateSystem(origin=Origin.CENTER, vertical_orientation=VerticalOrientation.BOTTOM_TO_TOP,
                                  pitch_dimensions=dims)


def pitch_size(dataset: TrackingDataset) -> tuple[float, float]:
    """The dataset's real pitch size in metres; 105 x 68 when the provider gives none (common practice)."""
    cs = dataset.metadata.coordinate_system
    return float(cs.pitch_length or 105.0), float(cs.pitch_width or 68.0)


def to_cdf_coordinates(dataset: TrackingDataset) -> TrackingDataset:
    """The same dataset with positions in CDF coordinates (metres, centre origin, y up)."""
    length, width = pitch_size(dataset)
    return dataset.transform(to_coordinate_system=cdf_coordinate_system(length, width))


def _sides(dataset: TrackingDataset) -> list[tuple[str, Any]]:
    """[("home", team), ("away", team)] from the teams' grounds."""
    from kloppy.domain import Ground

    teams = dataset.metadata.teams
    home = [t for t in teams if t.ground == Ground.HOME]
    away = [t for t in teams if t.ground == Ground.AWAY]
    if len(home) != 1 or len(away) != 1:
        home, away = [teams[0]], [teams[1]]
    return [("home", home[0]), ("away", away[0])]


def _position_group(player: Any) -> str | None:
    """CDF position group of a kloppy player; some loaders give the position as a plain string."""
    from kloppy.domain import PositionType

    pos = player.starting_position
    if isinstance(pos, str):
        pos = next((t for t in PositionType if pos in (t.name, t.long_name, t.code)), None)
    if pos is None:
        return None
    return CDF_POSITION_GROUPS.get(pos.position_group.name)


def as_utc(value: Any) -> datetime:
    """A kloppy period start (aware or naive UTC datetime, or a timedelta) as an aware datetime."""
    if isinstance(value, timedelta):
        return _FALLBACK_KICKOFF + value
    if value.tzinfo is None:
        return value.replace(tzinfo=UTC)
    return value.astimezone(UTC)


def rfc3339(dt: datetime) -> str:
    """RFC 3339 UTC with milliseconds and a trailing Z (the CDF validator's form)."""
    return dt.astimezone(UTC).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def _players(team: Any) -> list[dict[str, Any]]:
    out = []
    for p in team.players:
        entry: dict[str, Any] = {"id": str(p.player_id), "team_id": str(team.team_id),
                                 "jersey_number": int(p.jersey_no), "is_starter": bool(p.starting)}
        group = _position_group(p)
        if group is not None:
            entry["position_group"] = group
        if p.first_name:
            entry["first_name"] = p.first_name
        if p.last_name:
            entry["last_name"] = p.last_name
        if p.name and not (p.first_name or p.last_name):
            entry["short_name"] = p.name
        out.append(entry)
    return out


def play_directions(dataset: TrackingDataset) -> dict[int, str]:
    """Home team's direction of play per kloppy period id: "left_right" or "right_left".

    From the data where the period has frames (the home team's mean x in its first frame:
    a team starts a period in its own half, Laws of the Game), else from kloppy's
    orientation, else by alternation from a known period (teams change ends at half time).
    Needs a dataset in CDF coordinates.
    """
    from kloppy.domain import Ground, Orientation

    md = dataset.metadata
    out: dict[int, str] = {}
    for fr in dataset.frames:
        pid = fr.period.id
        if pid in out:
            continue
        xs = [float(d.coordinates.x) for pl, d in fr.players_data.items()
              if pl.team.ground == Ground.HOME and d.coordinates is not None and _num(d.coordinates.x) is not None]
        if xs:
            out[pid] = "left_right" if sum(xs) / len(xs) < 0 else "right_left"
    flip = {"left_right": "right_left", "right_left": "left_right"}
    first = {Orientation.HOME_AWAY: "left_right", Orientation.AWAY_HOME: "right_left",
             Orientation.STATIC_HOME_AWAY: "left_right", Orientation.STATIC_AWAY_HOME: "right_left"}
    static = md.orientation in (Orientation.STATIC_HOME_AWAY, Orientation.STATIC_AWAY_HOME)
    for per in md.periods:
        if per.id in out:
            continue
        if md.orientation in first:
            d = first[md.orientation]
            out[per.id] = d if static or per.id % 2 == 1 else flip[d]
        elif out:
            known, d = next(iter(out.items()))
            out[per.id] = d if (per.id - known) % 2 == 0 else flip[d]
        else:
            out[per.id] = "left_right"  # nothing to go on; irrelevant to load figures
    return out


def meta(dataset: TrackingDataset, match_id: str | None = None) -> dict[str, Any]:
    """CDF meta object (with rosters and play directions, so the CDF validator accepts it).

    Needs a dataset in CDF coordinates (for the play directions).
    """
    md = dataset.metadata
    length, width = pitch_size(dataset)
    mid = match_id or str(md.game_id or "kloppy_match")
    directions = play_directions(dataset)
    sides = dict(_sides(dataset))
    periods = []
    for per in md.periods:
        entry: dict[str, Any] = {"period": CDF_PERIODS[per.id]}
        if CDF_PERIODS[per.id] != "shootout":
            d = directions[per.id]
            entry["play_direction"] = d
            left, right = (sides["home"], sides["away"]) if d == "left_right" else (sides["away"], sides["home"])
            entry["left_team_id"], entry["right_team_id"] = str(left.team_id), str(right.team_id)
        if per.start_timestamp is not None and per.end_timestamp is not None:
            entry["start_time"] = rfc3339(as_utc(per.start_timestamp))
            entry["end_time"] = rfc3339(as_utc(per.end_timestamp))
        periods.append(entry)
    kickoff = as_utc(md.periods[0].start_timestamp) if md.periods else _FALLBACK_KICKOFF
    provider = str(md.provider.value if md.provider else "unknown")
    tracking: dict[str, Any] = {"version": "unknown", "name": provider, "fps": int(round(md.frame_rate)),
                                "collection_timing": "post_match"}
    if provider in BROADCAST_PROVIDERS:
        tracking["feed_profile"] = "broadcast"  # its smoothing and artefact settings (config/default.toml)
    teams = {side: {"id": str(t.team_id), "name": t.name, "players": _players(t)} for side, t in _sides(dataset)}
    return {
        "competition": {"id": "unknown"}, "season": {"id": "unknown"},
        "match": {"id": mid, "kickoff_time": rfc3339(kickoff), "periods": periods, "whistles": []},
        "teams": teams,
        "venue": {"id": "unknown", "pitch_length": length, "pitch_width": width},
        "meta": {"video": None,
                 "tracking": tracking,
                 "event": None, "landmarks": None, "meta": None, "ball": None, "cdf": {"version": CDF_VERSION}},
    }


def sheet(dataset: TrackingDataset) -> dict[str, Any]:
    """The live subset of a CDF match sheet: teams and their players."""
    return {"teams": {side: {"id": str(t.team_id), "name": t.name, "players": _players(t)}
                      for side, t in _sides(dataset)}}


def _num(v: Any) -> float | None:
    if v is None:
        return None
    v = float(v)
    return None if math.isnan(v) else v


def frames(dataset: TrackingDataset, match_id: str | None = None, renumber: bool = True) -> Iterator[dict[str, Any]]:
    """CDF frames from a dataset already in CDF coordinates (see ``to_cdf_coordinates``).

    ``renumber``: frame ids from 0 (the CDF validator's whole-file rule); else the provider's ids.
    Unseen players are left out of the arrays (the validator rejects null x/y).
    """
    from kloppy.domain import BallState

    md = dataset.metadata
    mid = match_id or str(md.game_id or "kloppy_match")
    sides = _sides(dataset)
    side_of = {t.team_id: side for side, t in sides}
    team_ids = {side: str(t.team_id) for side, t in sides}
    starts = {per.id: as_utc(per.start_timestamp) for per in md.periods}
    for k, fr in enumerate(dataset.frames):
        teams: dict[str, Any] = {side: {"id": team_ids[side], "players": []} for side, _ in sides}
        for player, pdata in fr.players_data.items():
            c = pdata.coordinates
            if c is None:
                continue
            x, y = _num(c.x), _num(c.y)
            if x is None or y is None:
                continue
            teams[side_of[player.team.team_id]]["players"].append(
                {"id": str(player.player_id), "x": round(x, 3), "y": round(y, 3)})
        b = fr.ball_coordinates
        ball: dict[str, Any] = {"x": None, "y": None, "z": None}
        if b is not None:
            ball = {"x": _num(b.x), "y": _num(b.y), "z": _num(getattr(b, "z", None))}
            ball = {key: (round(v, 3) if v is not None else None) for key, v in ball.items()}
        if fr.ball_state is not None:
            ball["status"] = fr.ball_state == BallState.ALIVE
        if fr.ball_owning_team is not None and fr.ball_owning_team.team_id in side_of:
            ball["poss_team_id"] = str(fr.ball_owning_team.team_id)
        yield {"frame_id": k if renumber else int(fr.frame_id),
               "timestamp": rfc3339(starts[fr.period.id] + fr.timestamp),
               "period": CDF_PERIODS[fr.period.id], "match": {"id": mid}, "teams": teams, "ball": ball}


def provider_figures(dataset: TrackingDataset) -> dict[str, dict[str, Any]]:
    """The provider's own per-player figures, where it supplies per-sample speed and distance.

    ``distance_m``: sum of the provider's per-sample distance (None if it gives none);
    ``max_speed_ms``: max of its per-sample speed; ``samples``: frames with a position.
    """
    out: dict[str, dict[str, Any]] = {}
    for fr in dataset.frames:
        for player, pdata in fr.players_data.items():
            row = out.setdefault(str(player.player_id), {"distance_m": None, "max_speed_ms": None, "samples": 0})
            if pdata.coordinates is not None and _num(pdata.coordinates.x) is not None:
                row["samples"] += 1
            if pdata.distance is not None:
                row["distance_m"] = (row["distance_m"] or 0.0) + float(pdata.distance)
            if pdata.speed is not None:
                row["max_speed_ms"] = max(row["max_speed_ms"] or 0.0, float(pdata.speed))
    return out


def write_folder(dataset: TrackingDataset, folder: Path, match_id: str | None = None) -> Path:
    """A CDF recording folder (meta.json, match.json, tracking.jsonl) from a dataset in CDF coordinates."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "meta.json").write_bytes(orjson.dumps(meta(dataset, match_id)))
    (folder / "match.json").write_bytes(orjson.dumps(sheet(dataset)))
    with open(folder / "tracking.jsonl", "wb") as fh:
        for f in frames(dataset, match_id):
            fh.write(orjson.dumps(f) + b"\n")
    return folder
