"""What the report tests share: a small fictional two-team match (four home, three away players at
25 Hz) and an engine state of it, the reports' messages on a live socket, and strict reading of the
HTML and CSV files a report holds."""
from __future__ import annotations

import csv
import io
from typing import Any

import html5lib
import numpy as np
import orjson

from pacewire.config import load_settings
from pacewire.engine.match import MatchState
from pacewire.params import match_params
from pacewire.reports.table import flatten, parse_cell
from pacewire.wire.cdf import FrameDecoder, parse_setup
from tests.support import cdf_build as cb
from tests.support.sockets import collect
from tests.support.trajectories import drawn_rates, sway

N_HOME, N_AWAY = 4, 3
IDS = cb.player_ids(N_HOME, N_AWAY)


def trajectory(seconds: float, seed: int) -> np.ndarray:
    """Smooth fictional movement (m) with some high-speed runs, inside the pitch: 20 x 14 m sways, 2 m apart."""
    n = len(IDS)
    centre = np.c_[2.0 * np.arange(n), np.zeros(n)]
    return sway(seconds, n, (20.0, 14.0), drawn_rates(n, 0.15, 0.5, seed), centre=centre)


def tiny_state() -> MatchState:
    """90 s of the match through the decoder and the engine, finished."""
    settings = load_settings()
    roster = parse_setup(cb.meta("m_t"), cb.sheet(N_HOME, N_AWAY))
    state = MatchState(roster, match_params(settings, roster))
    dec = FrameDecoder(roster, settings.decode.outside_margin_m, settings.decode.recent_ids)
    state.ingest(dec.decode_lines(cb.lines(cb.frames(trajectory(90, 5), IDS, N_HOME, match_id="m_t"))))
    state.finish()
    return state


async def collect_reports(ws_url: str, n_reports: int, timeout: float = 90.0) -> list[dict[str, Any]]:
    """The messages of one subscriber up to its ``n_reports``-th report message."""
    texts: list[str] = []
    reports = 0

    def enough(msg: dict[str, Any]) -> bool:
        nonlocal reports
        reports += msg["type"] == "report"
        return reports >= n_reports

    await collect(ws_url, texts, enough, timeout)
    return [orjson.loads(t) for t in texts]


def read_csv(text: str) -> tuple[list[str], list[dict[str, str]]]:
    """(header, rows) of a report's CSV."""
    rows = list(csv.DictReader(io.StringIO(text)))
    return list(rows[0].keys()) if rows else [], rows


# what a report CSV column's name must end in: its SI unit, minutes, a count (per minute), or one of the id /
# share / flag columns (the comparison with a player's own matches: a ratio, below-band flag, the match ids)
UNIT_ENDINGS = ("_m", "_s", "_ms", "_wkg", "_jkg", "_m_per_min", "_bpm", "minutes", "m_per_min", "_per_min",
                "_ratio", "_below", "_matches")
COUNT_OR_ID = {"player_id", "team_id", "jersey_number", "name", "is_goalkeeper", "on_pitch", "hsr_efforts", "sprints",
               "accels", "decels", "coverage", "hr_coverage", "trimp_edwards", "trimp_banister", "hr_omitted"}


def expected_cell(p: dict[str, Any], col: str) -> tuple[bool, Any]:
    """(known, value): a report CSV column's value re-derived from the player's snapshot object by its name
    (the naming rule of export.csv, written out here again so the test does not read the code's own map)."""
    if col in p and not isinstance(p[col], dict):
        return True, p[col]
    for prefix, key in (("zone_", "zones"), ("hr_zone_", "hr_zones")):
        if col.startswith(prefix):
            band = col[len(prefix):].rsplit("_", 1)[0]
            return True, (p.get(key) or {}).get(band)
    if col.startswith("peak_"):
        win, _, fig = col.partition("min_")
        w = (p.get("windows") or {}).get(win + "min")
        return True, (w or {}).get(fig) if w else None
    if col.startswith("possession_"):
        for ctx in ("in_possession", "out_of_possession", "out_of_play"):
            if col.startswith(f"possession_{ctx}_"):
                return True, ((p.get("possession") or {}).get(ctx) or {}).get(col[len(f"possession_{ctx}_"):])
    return False, None


def assert_report_csv(csv_text: str, snapshot: dict[str, Any]) -> list[str]:
    """Every player is one row; every column names its unit (or is an id, a count or a share); every column
    the snapshot holds equals it. Returns the columns (blocks, HR omissions) the snapshot does not hold."""
    columns, rows = read_csv(csv_text)
    assert sorted(r["player_id"] for r in rows) == sorted(snapshot["players"])
    unitless = [c for c in columns if c not in COUNT_OR_ID and not c.endswith(UNIT_ENDINGS)]
    assert not unitless, f"columns without a unit: {unitless}"
    other = []
    for c in columns[1:]:  # after player_id
        for r in rows:
            known, want = expected_cell(snapshot["players"][r["player_id"]], c)
            if not known:
                other.append(c)
                break
            assert parse_cell(r[c]) == want, (r["player_id"], c)
    return other


def assert_csv_equals_snapshot(csv_text: str, snapshot: dict[str, Any]) -> None:
    """Every player is one row; every leaf of his snapshot object is a cell holding its value (``to_csv``)."""
    _, rows = read_csv(csv_text)
    assert sorted(r["player_id"] for r in rows) == sorted(snapshot["players"])
    for r in rows:
        flat = flatten(snapshot["players"][r["player_id"]])
        for key, value in flat.items():
            assert parse_cell(r[key]) == value, (r["player_id"], key)
        assert set(r) - {"player_id"} >= set(flat)


def parse_strict(text: str) -> Any:
    """html5lib in strict mode raises on any parse error (WHATWG HTML parsing rules)."""
    return html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(text)
