"""The reports' page on physical output by game phase and by possession outcome: built offline from a
recording with an event stream, it shows the snapshot's figures; a feed that never tells possession gets
no such page."""
from __future__ import annotations

import orjson
import pytest

from pacewire.config import load_settings
from pacewire.replay import synth
from pacewire.reports.offline import build_offline
from pacewire.reports.page import num
from tests.support import cdf_build as cb
from tests.support.reports import parse_strict
from tests.support.trajectories import sway

PHASE_ROWS = ("attack", "defence", "attacking_transition", "defensive_transition", "dead_ball", "unknown")


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("phase_reports")
    folder = synth.write_match(tmp / "match", minutes=6, fps=25, seed=4, faults=False, compress=False)
    build_offline(folder, tmp / "out", load_settings(), progress=False)
    return tmp / "out"


def section(path) -> tuple[list[list[list[str]]], str]:
    """The tables of the phases section (rows of cell texts) and its text."""
    doc = parse_strict(path.read_text(encoding="utf-8"))
    sec = next(s for s in doc.iter("section") if s.get("id") == "phases")
    tables = [[["".join(c.itertext()).strip() for c in tr] for tr in t.iter("tr")] for t in sec.iter("table")]
    return tables, "".join(sec.itertext())


@pytest.mark.parametrize("kind", ["half_time", "full_time"])
def test_phase_page_shows_the_snapshots_figures(reports, kind):
    snap = orjson.loads((reports / kind / "snapshot.json").read_bytes())
    tables, text = section(reports / kind / "report.html")
    teams = [t for t in snap["teams"].values() if t["tracked"]]
    rows = {r[0]: r[1:] for r in tables[0][1:]}
    labels = list(rows)[:6]
    for label, key in zip(labels, PHASE_ROWS, strict=True):
        want = []
        for t in teams:
            f = t["outfield"]["phases"][key]
            want += [num(f["seconds"] / 60.0, 1), num(f["per_player_m_per_min"], 1), num(f["hsr_m"]),
                     num(f["sprint_m"])]
        assert rows[label] == want, label
    seq = {(r[0], r[1]): r[2:] for r in tables[1][1:]}
    for t in teams:
        q = t["outfield"]["sequences"]["shot"]
        assert seq[(t["name"], "ended in a shot")] == [num(q["count"]), num(q["mean_s"], 1), num(q["m_per_min"], 1),
                                                       num(q["hsr_m_per_min"], 1)]
    assert "Altmann et al. 2023" in text
    # the half-time report covers the first half: a team's phases add up to that half's time (one label
    # per team and second)
    played = snap["match_time_s"] if kind == "half_time" else None
    if played is not None:
        total = sum(f["seconds"] for f in teams[0]["outfield"]["phases"].values())
        assert abs(total - played) <= 1.0


def test_no_phase_page_without_possession(tmp_path):
    xy = sway(70, 4, (18.0, 12.0), (0.23, 0.31))
    folder = cb.write_folder(tmp_path / "noball", cb.meta(), cb.sheet(2, 2), cb.frames(xy, cb.player_ids(2, 2), 2))
    build_offline(folder, tmp_path / "out", load_settings(), progress=False)
    doc = parse_strict((tmp_path / "out" / "half_time" / "report.html").read_text(encoding="utf-8"))
    assert not any(s.get("id") == "phases" for s in doc.iter("section"))


@pytest.mark.parametrize("kind", ["half_time", "full_time"])
def test_feed_section_shows_the_event_streams_health(reports, kind):
    snap = orjson.loads((reports / kind / "snapshot.json").read_bytes())
    doc = parse_strict((reports / kind / "report.html").read_text(encoding="utf-8"))
    sec = next(s for s in doc.iter("section") if s.get("id") == "feed")
    rows = {r[0]: r[1] for r in ([["".join(c.itertext()).strip() for c in tr] for tr in sec.iter("tr")]) if len(r) == 2}
    ev = snap["health"]["events"]
    assert ev["events"] > 0  # the synthetic match writes its event stream
    assert (rows["event stream at build"], rows["events"], rows["events corrected"], rows["events refused"],
            rows["events repeated"]) == (ev["state"], num(ev["events"]), num(ev["corrections"]), num(ev["rejected"]),
                                         num(ev["duplicates"]))
