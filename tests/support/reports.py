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


def assert_csv_equals_snapshot(csv_text: str, snapshot: dict[str, Any]) -> None:
    """Every player is one row; every leaf of his snapshot object is a cell holding its value."""
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
