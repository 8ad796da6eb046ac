"""Build CDF v0.3.2 objects from numpy trajectories, for tests (fictional teams and players)."""
from __future__ import annotations

import gzip
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import orjson

KICKOFF = datetime(2026, 3, 14, 15, 0, 0, tzinfo=UTC)
HOME, AWAY = "t_harbour", "t_quarry"


def player_ids(n_home: int, n_away: int) -> list[str]:
    return [f"h{i + 1}" for i in range(n_home)] + [f"a{i + 1}" for i in range(n_away)]


def meta(match_id: str = "m_test", fps: int = 25, **extra: Any) -> dict[str, Any]:
    """The live subset of a CDF meta object, plus the fields the validator requires."""
    m = {
        "competition": {"id": "c_fict"}, "season": {"id": "s_2026"},
        "match": {"id": match_id, "kickoff_time": "2026-03-14T15:00:00Z",
                  "periods": [{"period": "first_half", "play_direction": "left_right"},
                              {"period": "second_half", "play_direction": "right_left"}],
                  "whistles": []},
        "teams": {"home": {"id": HOME, "name": "Harbour Town"}, "away": {"id": AWAY, "name": "Quarry Lane"}},
        "venue": {"id": "v_fict", "pitch_length": 105.0, "pitch_width": 68.0},
        "meta": {"video": None,
                 "tracking": {"version": "0.1.0", "name": "test", "fps": fps, "collection_timing": "live"},
                 "event": None, "landmarks": None, "meta": None, "ball": None, "cdf": {"version": "0.3.2"}},
    }
    m.update(extra)
    return m


def sheet(n_home: int, n_away: int, gk: tuple[str, ...] = ("h1", "a1"), bench: tuple[str, ...] = ()) -> dict[str, Any]:
    def team(tid: str, prefix: str, n: int) -> dict[str, Any]:
        players = []
        for i in range(n):
            pid = f"{prefix}{i + 1}"
            players.append({"id": pid, "team_id": tid, "jersey_number": i + 1, "is_starter": pid not in bench,
                            "position_group": "GK" if pid in gk else "MF", "first_name": "Test",
                            "last_name": pid.upper()})
        return {"id": tid, "name": tid, "players": players}
    return {"teams": {"home": team(HOME, "h", n_home), "away": team(AWAY, "a", n_away)}}


def stamp(t: float) -> str:
    return (KICKOFF + timedelta(seconds=t)).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"


def frames(xy: np.ndarray, ids: list[str], n_home: int, fps: int = 25, match_id: str = "m_test",
           period: str = "first_half", t0: float = 0.0, frame0: int = 0,
           ball: np.ndarray | None = None, status: np.ndarray | None = None,
           poss: np.ndarray | None = None) -> list[dict[str, Any]]:
    """CDF frames from positions (T, P, 2); NaN positions are left out (not seen)."""
    out = []
    T = xy.shape[0]
    for k in range(T):
        teams = {"home": {"id": HOME, "players": []}, "away": {"id": AWAY, "players": []}}
        for j, pid in enumerate(ids):
            x, y = xy[k, j]
            if np.isnan(x):
                continue
            side = "home" if j < n_home else "away"
            teams[side]["players"].append({"id": pid, "x": round(float(x), 3), "y": round(float(y), 3)})
        b: dict[str, Any] = {"x": 0.0, "y": 0.0, "z": 0.0}
        if ball is not None:
            b = {"x": float(ball[k, 0]), "y": float(ball[k, 1]), "z": 0.1}
        if status is not None:
            b["status"] = bool(status[k])
        if poss is not None and poss[k] >= 0:
            b["poss_team_id"] = (HOME, AWAY)[int(poss[k])]
        out.append({"frame_id": frame0 + k, "timestamp": stamp(t0 + k / fps), "period": period,
                    "match": {"id": match_id}, "teams": teams, "ball": b})
    return out


def lines(objs: list[dict[str, Any]]) -> list[bytes]:
    return [orjson.dumps(o) for o in objs]


def write_folder(folder: Path, meta_obj: dict, sheet_obj: dict, frame_objs: list[dict], gz: bool = False) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "meta.json").write_bytes(orjson.dumps(meta_obj))
    (folder / "match.json").write_bytes(orjson.dumps(sheet_obj))
    body = b"".join(orjson.dumps(f) + b"\n" for f in frame_objs)
    if gz:
        (folder / "tracking.jsonl.gz").write_bytes(gzip.compress(body))
    else:
        (folder / "tracking.jsonl").write_bytes(body)
    return folder


def meta_with_rosters(meta_obj: dict[str, Any], sheet_obj: dict[str, Any]) -> dict[str, Any]:
    """A copy of a meta object with each team's players copied from the sheet (the CDF
    validator requires ``teams.*.players`` in meta; pacewire's live setup does not)."""
    out = orjson.loads(orjson.dumps(meta_obj))
    for side in ("home", "away"):
        out["teams"][side]["players"] = [
            {k: p[k] for k in ("id", "team_id", "jersey_number", "is_starter") if k in p}
            for p in sheet_obj["teams"][side]["players"]
        ]
    return out


def post_match_sheet(sheet_obj: dict[str, Any], match_id: str = "m_test",
                     vendor: str = "pacewire tests") -> dict[str, Any]:
    """A copy of a live sheet with the post-match fields the CDF validator requires
    (match status and a goalless result, officials, empty events, meta.vendor,
    ``has_played``): what a full-time match sheet holds. Fictional officials."""
    out = orjson.loads(orjson.dumps(sheet_obj))
    for side in ("home", "away"):
        for p in out["teams"][side]["players"]:
            p.setdefault("first_name", "Test")
            p.setdefault("last_name", p["id"].upper())
            p.setdefault("has_played", bool(p.get("is_starter", False)))
    nil = {"home": 0, "away": 0}
    out["match"] = {"id": match_id, "status": {"is_neutral": False, "has_extratime": False, "has_shootout": False},
                    "result": {"final": {**nil, "winning_team_id": None}, "first_half": dict(nil),
                               "second_half": dict(nil)}}
    out["officials"] = [{"id": "o_ref", "type": "main_referee", "first_name": "Test", "last_name": "Referee"}]
    out["events"] = {"goals": [], "substitutions": [], "cards": []}
    out["meta"] = {"vendor": vendor}
    return out
