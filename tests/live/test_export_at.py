"""``export.json?at=`` on a real server for a match whose first half ran into stoppage time: a clock two
periods share is refused with what to add; a period and a clock, MM:SS, stoppage time (45+2:00) or a plain
match time each give the figures an offline run over the recording cut there gives."""
from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from pacewire.analyze import FiguresIndex, analyze_folder
from pacewire.config import load_settings
from pacewire.reports.export import FIGURE_COLUMNS
from tests.support import cdf_build as cb
from tests.support.live_server import LiveServer
from tests.support.trajectories import drawn_rates, sway

FPS = 5  # few frames for 50 minutes of play; the engine works at any rate
IDS = cb.player_ids(2, 2)
MID = "m_at"
FIRST_S, BREAK_S, SECOND_S = 47 * 60, 15 * 60, 3 * 60  # a first half of 45 + 2 minutes of stoppage time


def _frames(seconds: int, seed: int, **kw: Any) -> list[dict[str, Any]]:
    xy = sway(seconds, len(IDS), (12.0, 8.0), drawn_rates(len(IDS), 0.1, 0.4, seed), fps=FPS)
    return cb.frames(xy, IDS, 2, fps=FPS, match_id=MID, **kw)


@pytest.fixture(scope="module")
def match(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[LiveServer, list[dict], list[dict], Path]]:
    tmp = tmp_path_factory.mktemp("export_at")
    srv = LiveServer(tmp / "data").start()
    first = _frames(FIRST_S, 1, period="first_half")
    second = _frames(SECOND_S, 2, period="second_half", t0=FIRST_S + BREAK_S, frame0=len(first))
    try:
        r = httpx.put(f"{srv.http}/api/matches/{MID}", json={"meta": cb.meta(MID, fps=FPS), "sheet": cb.sheet(2, 2)},
                      timeout=10)
        assert r.status_code == 201, r.text
        objs = first + second
        for i in range(0, len(objs), 2000):
            r = httpx.post(f"{srv.http}/api/matches/{MID}/frames", content=b"\n".join(cb.lines(objs[i:i + 2000])),
                           timeout=60)
            assert r.status_code == 200 and r.json()["accepted"] == len(objs[i:i + 2000]), r.text
        yield srv, first, second, tmp
    finally:
        srv.stop()


def export(srv: LiveServer, **params: str) -> httpx.Response:
    return httpx.get(f"{srv.http}/api/matches/{MID}/export.json", params=params, timeout=60)


def offline(tmp: Path, name: str, frames: list[dict[str, Any]]) -> dict[str, Any]:
    """The snapshot of an offline run over the frames up to the cut."""
    return analyze_folder(cb.write_folder(tmp / name, cb.meta(MID, fps=FPS), cb.sheet(2, 2), frames)).snapshot()


def assert_same(body: dict[str, Any], snap: dict[str, Any]) -> None:
    for row in body["players"]:
        p = snap["players"][row["player_id"]]
        for c in FIGURE_COLUMNS:
            if c != "speed_ms":  # a finished recording shows no current speed
                assert row[c] == p[c], (row["player_id"], c)


def test_a_clock_two_periods_share_is_refused_with_what_to_add(match):
    srv = match[0]
    for at in ("2820", "47:00", "46:10"):  # the second half's clock starts at 45:00 (Laws of the Game)
        r = export(srv, at=at)
        assert r.status_code == 422, (at, r.text)
        msg = r.json()["error"]["message"]
        assert r.json()["error"]["code"] == "bad_request" and "period=first_half" in msg and "period=second_half" in msg
    for params, needle in (({"at": "45+2", "period": "second_half"}, "first_half stoppage time"),
                           ({"at": "60+1"}, "stoppage time follows"), ({"at": "10", "period": "half"}, "period must"),
                           ({"at": "100", "period": "first_half_extratime"}, "holds no first_half_extratime"),
                           ({"period": "first_half"}, "period goes with at"), ({"at": "soon"}, "at must be")):
        r = export(srv, **params)
        assert r.status_code == 422 and needle in r.json()["error"]["message"], (params, r.text)


def test_first_half_stoppage_time_by_period_or_by_its_notation(match):
    srv, first, _, tmp = match
    want = offline(tmp, "cut_47_first", [f for f in first if f["frame_id"] / FPS <= 2820 + 1e-9])
    for params in ({"at": "47:00", "period": "first_half"}, {"at": "45+2:00"}, {"at": "2820", "period": "first_half"}):
        r = export(srv, **params)
        assert r.status_code == 200, (params, r.text)
        body = r.json()
        # the last first-half frame is at 46:59.8 (47 minutes of frames at 5 Hz, from 0:00)
        assert body["period"] == "first_half" and body["match_time_s"] == 2819.8 and body["at"] == 2820.0
        assert_same(body, want)


def test_the_second_half_at_a_clock_the_first_half_also_reached(match):
    srv, first, second, tmp = match
    # 46:10 in the second half: its first 70 s (the second half kicks off at 45:00)
    cut = first + [f for f in second if (f["frame_id"] - len(first)) / FPS <= 70 + 1e-9]
    r = export(srv, at="46:10", period="second_half")
    assert r.status_code == 200, r.text
    assert r.json()["period"] == "second_half" and r.json()["match_time_s"] == 2770.0
    assert_same(r.json(), offline(tmp, "cut_second_46_10", cut))


def test_plain_match_times_that_name_one_moment(match):
    srv, first, second, tmp = match
    r = export(srv, at="1800")  # 30:00: the first half alone holds it
    assert r.status_code == 200 and r.json()["period"] == "first_half"
    assert_same(r.json(), offline(tmp, "cut_30", [f for f in first if f["frame_id"] / FPS <= 1800 + 1e-9]))
    r = export(srv, at="60:00")  # after the last frame (48:00 of the second half): every frame
    assert r.status_code == 200 and r.json()["period"] == "second_half" and r.json()["match_time_s"] == 2879.8
    assert_same(r.json(), offline(tmp, "all", first + second))


def test_the_checkpoints_follow_a_recording_that_grows(tmp_path):
    """As live: the index is built, the recorder appends (its last line half written), and a later question
    sees the new frames (and not the torn line), with the answer of a reading from the start."""
    frames = _frames(600, 3, period="first_half")
    folder = cb.write_folder(tmp_path / "rec", cb.meta(MID, fps=FPS), cb.sheet(2, 2), frames[:1500])
    index = FiguresIndex(folder, load_settings(), MID, every_s=60)
    early = index.figures(100.0, [])
    assert early["match_time_s"] == 100.0
    assert len(index._points) > 3  # a checkpoint a minute of the 300 s recorded
    with open(folder / "tracking.jsonl", "ab") as fh:
        fh.write(b"".join(line + b"\n" for line in cb.lines(frames[1500:2500])) + cb.lines(frames[2500:2501])[0][:40])
    later = index.figures(450.0, [])
    assert later["match_time_s"] == 450.0
    assert later == FiguresIndex(folder, load_settings(), MID, every_s=1e9).figures(450.0, [])
    assert_same({"players": [{"player_id": pid, **p} for pid, p in later["players"].items()]},
                offline(tmp_path, "cut_450", [f for f in frames[:2500] if f["frame_id"] / FPS <= 450 + 1e-9]))
    assert index.figures(100.0, []) == early  # earlier answers stand
