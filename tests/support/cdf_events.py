"""Build CDF v0.3.2 event objects for tests (fictional match, teams and players of tests.support.cdf_build)."""
from __future__ import annotations

import copy
from typing import Any

from tests.support import cdf_build as cb


def event(eid: str, t: float, kind: str = "pass", team: str = cb.HOME, player: str = "h2", *,
          sub_type: str | None = None, ok: bool = True, outcome: str = "successful", receiver: str | None = None,
          receiver_team: str | None = None, receiver_t: float | None = None, x: float = 0.0, y: float = 0.0,
          period: str = "first_half", match_id: str = "m_test", **extra: Any) -> dict[str, Any]:
    """One CDF event line at ``t`` s after kick-off (tests.support.cdf_build.KICKOFF)."""
    ends = kind in ("pass", "shot")
    ev: dict[str, Any] = {
        "id": eid, "time": cb.stamp(t), "period": period, "type": kind, "sub_type": sub_type, "is_successful": ok,
        "outcome_type": outcome, "receiver_id": receiver,
        "receiver_time": None if receiver_t is None else cb.stamp(receiver_t),
        "receiver_team_id": receiver_team, "x": x, "y": y, "x_end": x + 5.0 if ends else None,
        "y_end": y if ends else None, "body_part": "right_foot" if ends else None, "related_event_ids": None,
    }
    if kind == "referee":
        ev["official_id"] = "ref_1"
    else:
        ev["team_id"], ev["player_id"] = team, player
    ev.update(extra)
    return {"match": {"id": match_id}, "meta": {"is_synced": False}, "event": ev}


def with_event(obj: dict[str, Any], **changes: Any) -> dict[str, Any]:
    """A copy of an event line with fields of ``event`` changed (a value of ... removes the field)."""
    out = copy.deepcopy(obj)
    for k, v in changes.items():
        if v is ...:
            out["event"].pop(k, None)
        else:
            out["event"][k] = v
    return out
