"""Heart rate in: the sample decoder and its gate (docs/wearables.md). The engine's sums and figures
are tested in tests/engine/test_heart.py."""
from __future__ import annotations

import math

import numpy as np
import orjson
import pytest
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.engine.heart import HeartParams, HeartProfile, HeartRate
from pacewire.wire.cdf import parse_setup
from pacewire.wire.heart import HrDecoder
from tests.support import cdf_build as cb

P = HeartParams()
T0 = 1_773_500_400.0  # 2026-03-14T15:00:00Z, a fictional kick-off
CODES = {"bad_json", "bad_type", "missing_field", "bad_timestamp", "unknown_player", "bad_value",
         "implausible_bpm", "hr_jump", "duplicate", "late"}


@pytest.fixture
def dec() -> HrDecoder:
    return HrDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)), P)


def s(pid: str = "h2", t: float = 0.0, bpm: float = 150) -> dict:
    return {"player_id": pid, "timestamp": cb.stamp(t), "bpm": bpm}


def only_error(res, code: str) -> str:
    assert len(res) == 0 and [e.code for e in res.errors] == [code], res.errors
    return res.errors[0].message


def test_good_samples_are_accepted(dec):
    res = dec.decode_objects([s("h2", 0, 150), s("a1", 0, 140.5), s("h2", 1, 152)])
    assert res.errors == [] and res.accepted == [0, 1, 2]
    assert res.player.tolist() == [1, 2, 1] and res.bpm.tolist() == [150.0, 140.5, 152.0]
    assert res.t.dtype == np.float64 and res.t[2] - res.t[0] == 1.0
    assert res.t[0] == T0  # cb.stamp(0) is the fictional kick-off 2026-03-14T15:00:00Z
    # an offset other than Z is the same instant
    res = dec.decode_objects([{"player_id": "h2", "timestamp": "2026-03-14T16:00:05+01:00", "bpm": 151}])
    assert res.errors == [] and res.t.tolist() == [T0 + 5]


@pytest.mark.parametrize("obj, code, words", [
    ([1, 2], "bad_type", "must be a JSON object"),
    ({"timestamp": cb.stamp(0), "bpm": 150}, "missing_field", "'player_id'"),
    ({"player_id": "h2", "bpm": 150}, "missing_field", "'timestamp'"),
    ({"player_id": "h2", "timestamp": cb.stamp(0)}, "missing_field", "'bpm'"),
    ({**s(), "rr_ms": 400, "x": 1}, "bad_value", "'rr_ms', 'x'"),
    ({**s(), "player_id": 7}, "bad_type", "player_id must be a string"),
    (s("zz9"), "unknown_player", "'zz9' is not in the match sheet"),
    ({**s(), "timestamp": "2026-03-14T15:00:00.000"}, "bad_timestamp", "no UTC offset"),
    ({**s(), "timestamp": "yesterday"}, "bad_timestamp", "not an RFC 3339"),
    ({**s(), "timestamp": 1773500400}, "bad_timestamp", "not an RFC 3339"),
    ({**s(), "bpm": "150"}, "bad_type", "bpm must be a number"),
    ({**s(), "bpm": True}, "bad_type", "bpm must be a number, got bool"),
    ({**s(), "bpm": None}, "bad_type", "bpm must be a number"),
    ({**s(), "bpm": math.nan}, "bad_value", "not a finite number"),
    ({**s(), "bpm": math.inf}, "bad_value", "not a finite number"),
    (s(bpm=29.9), "implausible_bpm", "outside [30, 230]"),
    (s(bpm=231), "implausible_bpm", "outside [30, 230]"),
    (s(bpm=10**400), "implausible_bpm", "outside [30, 230]"),
])
def test_each_bad_sample_is_rejected_with_its_reason(dec, obj, code, words):
    res = dec.decode_objects([obj])
    assert words in only_error(res, code)
    assert res.rejected == 1


def test_plausible_range_is_inclusive(dec):
    # docs/wearables.md: implausible means bpm < 30 or > 230
    res = dec.decode_objects([s("h1", 0, 30), s("h2", 0, 230)])
    assert res.errors == [] and res.bpm.tolist() == [30.0, 230.0]


def test_bad_json_in_lines_and_messages(dec):
    lines = [orjson.dumps(s("h2", 0)), b"", b"{nope", b"   ", orjson.dumps(s("h2", 1)), b"[1,"]
    res = dec.decode_lines(lines, first_line=10)
    assert [(e.code, e.line) for e in res.errors] == [("bad_json", 12), ("bad_json", 15)]
    assert res.accepted == [0, 4]  # positions in the input, so the caller records those raw lines
    assert res.rejected == 2
    assert only_error(dec.decode_message(b"{nope"), "bad_json").startswith("not valid JSON")
    res = dec.decode_message(orjson.dumps([s("a2", 0), s("a2", 1)]))
    assert res.errors == [] and len(res) == 2
    assert len(dec.decode_message(orjson.dumps(s("a2", 2)))) == 1


def test_duplicate_and_late(dec):
    assert len(dec.decode_objects([s("h2", 10)])) == 1
    res = dec.decode_objects([s("h2", 10, 151), s("h2", 9.5), s("h1", 9.5)])
    assert [e.code for e in res.errors] == ["duplicate", "late"]
    assert "'h2' already has a sample at 2026-03-14T15:00:10.000Z" in res.errors[0].message
    assert "older than that player's last accepted sample" in res.errors[1].message
    assert (res.duplicates, res.late, res.rejected) == (1, 1, 0)
    assert res.accepted == [2]  # another player's older time is fine


def test_hr_jump_limit_scales_with_time(dec):
    # docs/wearables.md: more than 40 bpm per second elapsed, taking at least 1 s
    dec.decode_objects([s("h2", 0, 100)])
    assert "by more than 40" in only_error(dec.decode_objects([s("h2", 0.5, 141)]), "hr_jump")
    assert len(dec.decode_objects([s("h2", 0.5, 140)])) == 1  # 40 bpm in 0.5 s: the 1 s floor allows it
    assert dec.decode_objects([s("h2", 2.5, 221)]).errors[0].code == "hr_jump"  # 81 > 40 × 2
    assert len(dec.decode_objects([s("h2", 2.5, 220)])) == 1  # exactly 80 = 40 × 2


def test_jump_reset_after_three(dec):
    # docs/wearables.md: after 3 jump rejections in a row the next sample is accepted
    dec.decode_objects([s("h2", 0, 100)])
    # within 1.75 s of the last accepted sample the limit stays under 70 bpm, so only the reset admits 183
    res = dec.decode_objects([s("h2", 1, 180), s("h2", 1.25, 181), s("h2", 1.5, 182), s("h2", 1.75, 183),
                              s("h2", 2, 184)])
    assert [e.code for e in res.errors] == ["hr_jump"] * 3 and res.rejected == 3
    assert res.accepted == [3, 4] and res.bpm.tolist() == [183.0, 184.0]
    # an accepted sample in between starts the count again
    dec.decode_objects([s("a1", 0, 100)])
    res = dec.decode_objects([s("a1", 1, 180), s("a1", 1.25, 180), s("a1", 1.5, 110), s("a1", 1.75, 190),
                              s("a1", 2, 190), s("a1", 2.25, 190), s("a1", 2.5, 190)])
    assert [e.code for e in res.errors] == ["hr_jump"] * 5 and res.accepted == [2, 6]


def test_checkpoint_restore_undoes_a_batch(dec):
    dec.decode_objects([s("h2", 0, 100)])
    cp = dec.gate.checkpoint()
    batch = [s("h2", 1, 180), s("h2", 1.25, 180), s("h2", 1.5, 180), s("h2", 1.75, 180), s("h1", 4, 120)]
    first = dec.decode_objects(batch)
    assert first.accepted == [3, 4]
    dec.gate.restore(cp)  # the recorder could not write them: as if never seen
    again = dec.decode_objects(batch)
    assert again.accepted == [3, 4] and [e.code for e in again.errors] == ["hr_jump"] * 3
    assert np.array_equal(again.t, first.t)


def test_decoder_into_engine_end_to_end(dec):
    # 10 min at 75 % HRmax through the wire: Edwards 1993, 3 × 10 = 30.0 AU
    lines = [orjson.dumps(s("a2", k, 150)) for k in range(601)]
    res = dec.decode_lines(lines)
    assert res.errors == [] and len(res) == 601
    h = HeartRate(P, [HeartProfile()] * 3 + [HeartProfile(hr_max_bpm=200)])
    h.add(res.player, res.t, res.bpm)
    h.settle([(0, T0, T0 + 700)], math.inf)
    assert h.figures(h.match_sums(), np.full(4, 600.0))["trimp_edwards"] == [None, None, None, 30.0]


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-2**70, 2**70) | st.floats() | st.text(max_size=12),
    lambda c: st.lists(c, max_size=4) | st.dictionaries(st.text(max_size=8), c, max_size=4),
    max_leaves=15,
)


def near(values):
    """Samples close to valid, each field sometimes replaced by junk from ``values``."""
    return st.fixed_dictionaries(
        {"player_id": st.sampled_from(["h1", "h2", "a1", "a2", "zz", ""]) | values,
         "timestamp": st.sampled_from([cb.stamp(0), cb.stamp(0.5), cb.stamp(1.5), "0001-01-01T00:00:00+01:00",
                                       "9999-12-31T23:59:59-01:00", "2026-03-14 15:00:00Z"]) | values,
         "bpm": st.integers(0, 300) | st.floats() | values},
        optional={"extra": values},
    )


near_samples = near(json_values)


@hsettings(max_examples=400, deadline=None)
@given(st.lists(near_samples | json_values, max_size=12))
def test_garbage_never_raises(objs):
    dec = HrDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)), P)
    res = dec.decode_objects(objs)
    assert all(e.code in CODES and e.message for e in res.errors)
    assert not any(e.message.startswith("sample could not be read") for e in res.errors)  # every rule foresaw it
    assert res.rejected + res.duplicates + res.late + len(res) == len(objs)
    assert len(res.errors) == len(objs) - len(res)
    assert ((res.bpm >= 30) & (res.bpm <= 230)).all() and np.isfinite(res.t).all()
    for p in range(4):  # each player's accepted samples strictly in time order
        assert (np.diff(res.t[res.player == p]) > 0).all()


wire_values = st.recursive(  # what JSON can carry: 64-bit integers (orjson), NaN written as null
    st.none() | st.booleans() | st.integers(-2**63, 2**63 - 1) | st.floats() | st.text(max_size=12),
    lambda c: st.lists(c, max_size=4) | st.dictionaries(st.text(max_size=8), c, max_size=4),
    max_leaves=15,
)


@hsettings(max_examples=300, deadline=None)
@given(st.lists(st.binary(max_size=40) | (wire_values | near(wire_values) | st.lists(near(wire_values), max_size=4))
                .map(orjson.dumps), max_size=8))
def test_garbage_bytes_never_raise(chunks):
    dec = HrDecoder(parse_setup(cb.meta(), cb.sheet(2, 2)), P)
    res = dec.decode_lines(chunks)
    assert all(e.code in CODES and e.message for e in res.errors)
    for c in chunks:
        res = dec.decode_message(c)
        assert all(e.code in CODES and e.message for e in res.errors)
        # every message yields a sample or an error, but for an empty array
        assert len(res.errors) + len(res) >= 1 or orjson.loads(c) == []
