"""A subscription's view: the whole match, one team, or a list of players."""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pacewire.errors import PacewireError


class ViewError(PacewireError, ValueError):
    """A subscription asked for a view that does not exist."""

    code = "bad_request"


@dataclass(frozen=True)
class View:
    kind: str  # "all" | "team" | "players"
    ids: tuple[str, ...] = ()

    @property
    def key(self) -> str:
        return self.kind if self.kind == "all" else f"{self.kind}:{','.join(self.ids)}"

    @staticmethod
    def parse(text: str, team_ids: tuple[str, ...], player_ids: set[str]) -> View:
        if text == "all":
            return View("all")
        kind, _, rest = text.partition(":")
        ids = tuple(i for i in rest.split(",") if i)
        if kind == "team":
            if len(ids) != 1 or ids[0] not in team_ids:
                raise ViewError(f"view {text!r}: team must be one of {', '.join(team_ids)}")
            return View("team", ids)
        if kind == "players":
            unknown = [i for i in ids if i not in player_ids]
            if not ids or unknown:
                raise ViewError(f"view {text!r}: unknown players {', '.join(unknown) or '(none given)'}")
            return View("players", tuple(sorted(set(ids))))
        raise ViewError(f"view {text!r} is not 'all', 'team:ID' or 'players:ID,ID'")

    def body(self, snap: dict[str, Any]) -> dict[str, Any]:
        """The part of a snapshot this view shows (the match status, when the snapshot has one, in every view;
        its ``alerts`` are those about the players it shows, as the ``alert`` messages it gets)."""
        if self.kind == "all":
            out = {"players": snap["players"], "teams": snap["teams"], "health": snap["health"]}
        elif self.kind == "team":
            tid = self.ids[0]
            players = {k: v for k, v in snap["players"].items() if v["team_id"] == tid}
            out = {"players": players, "teams": {tid: snap["teams"][tid]}, "health": snap["health"]}
        else:
            players = {k: snap["players"][k] for k in self.ids}
            out = {"players": players, "teams": snap["teams"], "health": snap["health"]}
        if "match_status" in snap:
            out["match_status"] = snap["match_status"]
        if "alerts" in snap:
            alerts = snap["alerts"]
            out["alerts"] = alerts if self.kind == "all" else [
                a for a in alerts if self.shows_player(a.get("player_id"), a.get("team_id"))]
        return out

    def shows_player(self, player_id: str | None, team_id: str | None) -> bool:
        if self.kind == "all" or player_id is None:
            return True
        if self.kind == "team":
            return team_id == self.ids[0]
        return player_id in self.ids
