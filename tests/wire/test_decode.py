"""The frame decoder: every kind of bad frame is rejected with its reason; garbage never raises."""
from __future__ import annotations

import math

import numpy as np
import orjson
import pytest
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.wire.cdf import FrameDecoder, SetupError, parse_setup
from tests.support import cdf_build as cb


@pytest.fixture
def decoder() -> FrameDecoder:
    return FrameDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)))


def good(frame_id: int = 0, t: float = 0.0) -> dict:
    xy = np.array([[[-10.0, 1.0], [5.0, -3.0], [20.0, 4.0], [30.0, 0.0]]])
    return cb.frames(xy, cb.player_ids(2, 2), 2, t0=t, frame0=frame_id, status=np.array([True]), poss=np.array([1]))[0]


def test_good_frame_becomes_a_block(decoder):
    res = decoder.decode_objects([good(0), good(1, 0.04)])
    assert res.errors == [] and len(res.block) == 2
    assert res.block.xy.shape == (2, 4, 2)
    assert res.block.xy[0, 1].tolist() == [5.0, -3.0]
    assert res.block.slot.tolist() == [0, 1]
    assert res.block.ball.tolist() == [1, 1] and res.block.poss.tolist() == [1, 1]


def test_null_and_absent_players_are_unseen(decoder):
    f = good()
    f["teams"]["home"]["players"][0]["x"] = None
    f["teams"]["home"]["players"][0]["y"] = None
    del f["teams"]["away"]["players"][1]
    res = decoder.decode_objects([f])
    assert res.errors == []
    seen = ~np.isnan(res.block.xy[0, :, 0])
    assert seen.tolist() == [False, True, True, False]


def mutate(path: str, value):
    """A good frame with one field replaced (value ... deletes it)."""
    f = good()
    keys = path.split(".")
    node = f
    for k in keys[:-1]:
        node = node[int(k)] if k.isdigit() else node[k]
    last = keys[-1]
    if value is ...:
        del node[last]
    elif last.isdigit():
        node[int(last)] = value
    else:
        node[last] = value
    return f


BAD = [
    ("missing frame_id", mutate("frame_id", ...), "missing_field"),
    ("frame_id a string", mutate("frame_id", "7"), "bad_type"),
    ("frame_id a float", mutate("frame_id", 1.5), "bad_type"),
    ("missing timestamp", mutate("timestamp", ...), "missing_field"),
    ("timestamp not a date", mutate("timestamp", "yesterday"), "bad_timestamp"),
    ("timestamp without zone", mutate("timestamp", "2026-03-14T15:00:00.000"), "bad_timestamp"),
    ("unknown period", mutate("period", "third_half"), "bad_value"),
    ("missing teams", mutate("teams", ...), "missing_field"),
    ("teams not an object", mutate("teams", [1, 2]), "missing_field"),
    ("unknown home team", mutate("teams.home.id", "t_nobody"), "unknown_team"),
    ("players not a list", mutate("teams.home.players", {"id": "h1"}), "bad_type"),
    ("player x a string", mutate("teams.home.players.0.x", "1.0"), "bad_type"),
    ("player x a boolean", mutate("teams.home.players.0.x", True), "bad_type"),
    ("player far outside the pitch", mutate("teams.home.players.0.x", 400.0), "out_of_pitch"),
    ("unknown player", mutate("teams.home.players.0.id", "h99"), "unknown_player"),
    ("player of the other team", mutate("teams.home.players.0.id", "a1"), "unknown_player"),
    ("player entry not an object", mutate("teams.home.players.0", 5), "bad_type"),
    ("player without y", mutate("teams.home.players.0.y", ...), "missing_field"),
    ("wrong match", mutate("match.id", "m_other"), "wrong_match"),
    ("ball status not boolean", mutate("ball.status", "yes"), "bad_type"),
    ("ball possession unknown team", mutate("ball.poss_team_id", "t_nobody"), "unknown_team"),
    ("frame not an object", [1, 2, 3], "bad_type"),
]


@pytest.mark.parametrize("name,frame,code", BAD, ids=[b[0] for b in BAD])
def test_bad_frame_rejected_with_reason(decoder, name, frame, code):
    res = decoder.decode_objects([frame, good(1, 0.04)])
    assert res.rejected == 1
    assert [e.code for e in res.errors] == [code]
    assert res.errors[0].message
    # the good frame after it is still accepted, and nothing of the bad one leaked in
    assert res.block.frame_id.tolist() == [1]
    assert not np.isnan(res.block.xy[0, :, 0]).any()


def test_nan_and_infinite_numbers_rejected(decoder):
    # JSON has no NaN; a huge exponent is the nearest a provider can send
    line = orjson.dumps(good()).replace(b'"x":-10.0', b'"x":1e999')
    res = decoder.decode_lines([line])
    assert res.rejected == 1 and res.errors[0].code in ("bad_json", "out_of_pitch")
    obj = good()
    obj["teams"]["home"]["players"][0]["x"] = math.nan
    assert decoder.decode_objects([obj]).errors[0].code == "out_of_pitch"


def test_duplicate_and_late_frames_dropped_and_counted(decoder):
    res = decoder.decode_objects([good(0), good(2, 0.08), good(2, 0.08), good(1, 0.04)])
    assert res.block.frame_id.tolist() == [0, 2]
    assert res.duplicates == 1 and res.late == 1 and res.rejected == 0
    # across calls too
    res2 = decoder.decode_objects([good(2, 0.08), good(3, 0.12)])
    assert res2.duplicates == 1 and res2.block.frame_id.tolist() == [3]


def test_time_must_advance(decoder):
    res = decoder.decode_objects([good(0, 0.0), good(1, 0.01), good(2, -1.0)])
    assert [e.code for e in res.errors] == ["bad_timestamp", "bad_timestamp"]


def test_period_cannot_go_back(decoder):
    second = good(5, 3000.0)
    second["period"] = "second_half"
    res = decoder.decode_objects([second, good(6, 3000.04)])
    assert res.block.frame_id.tolist() == [5]
    assert res.errors[0].code == "bad_value" and "comes after" in res.errors[0].message


def test_bad_json_lines_report_their_line_numbers(decoder):
    lines = [orjson.dumps(good(0)), b"{not json", b"", orjson.dumps(good(1, 0.04)), b"[1,"]
    res = decoder.decode_lines(lines, first_line=10)
    assert [(e.code, e.line) for e in res.errors] == [("bad_json", 11), ("bad_json", 14)]
    assert res.block.frame_id.tolist() == [0, 1]


json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=8),
    lambda children: st.lists(children, max_size=4) | st.dictionaries(st.text(max_size=8), children, max_size=4),
    max_leaves=20,
)


@hsettings(max_examples=300, deadline=None)
@given(obj=json_values)
def test_garbage_objects_never_raise(obj):
    dec = FrameDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)))
    res = dec.decode_objects([obj, good(0)])
    assert res.block.frame_id.tolist() == [0]
    assert res.rejected + res.duplicates + res.late == 1


@hsettings(max_examples=200, deadline=None)
@given(path_value=st.sampled_from(["frame_id", "timestamp", "period", "teams", "teams.home", "teams.home.players",
                                   "teams.home.players.0", "teams.home.players.0.x", "teams.away.id", "ball",
                                   "ball.status", "ball.poss_team_id", "match", "match.id"]),
       value=json_values)
def test_garbage_in_any_field_never_raises(path_value, value):
    dec = FrameDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)))
    res = dec.decode_objects([mutate(path_value, value)])
    assert res.rejected + len(res.block) == 1
    if res.rejected:
        assert res.errors[0].message


@hsettings(max_examples=200, deadline=None)
@given(data=st.binary(max_size=200))
def test_garbage_bytes_never_raise(data):
    dec = FrameDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)))
    res = dec.decode_lines([data])
    assert len(res.block) + res.rejected + res.duplicates + res.late <= 1


def test_setup_errors_are_readable():
    with pytest.raises(SetupError, match="fps"):
        parse_setup({"match": {"id": "m"}, "teams": cb.meta()["teams"], "meta": {"tracking": {}}}, cb.sheet(1, 1))
    sheet = cb.sheet(1, 1)
    sheet["teams"]["home"]["id"] = "t_other"
    sheet["teams"]["home"]["players"][0]["team_id"] = "t_other"
    with pytest.raises(SetupError, match="differ"):
        parse_setup(cb.meta(), sheet)
    dup = cb.sheet(1, 1)
    dup["teams"]["away"]["players"][0]["id"] = "h1"
    with pytest.raises(SetupError, match="twice"):
        parse_setup(cb.meta(), dup)
    with pytest.raises(SetupError, match="differs from the match id"):
        parse_setup(cb.meta(), cb.sheet(1, 1), match_id="m_else")


def test_goalkeepers_from_position_group():
    roster = parse_setup(cb.meta(), cb.sheet(2, 2, gk=("h1", "a2")))
    assert [p.is_goalkeeper for p in roster.players] == [True, False, False, True]
