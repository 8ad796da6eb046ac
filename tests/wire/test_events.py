"""CDF events in: the decoder's checks, corrections and duplicates, and what each event means for the
phases (its marks). The CDF validator package (Anzer et al. 2025) is the oracle: whatever the decoder
accepts, the validator accepts in its strictest mode."""
from __future__ import annotations

import contextlib
import copy
import io
import warnings

import cdf
import jsonschema
import orjson
import pytest
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

from pacewire.engine.eventlog import ACTIVITY, DEAD, LOOSE, ON_BALL, RESTART, SHOT
from pacewire.wire.cdf import parse_setup
from pacewire.wire.events import EventDecoder
from tests.support import cdf_build as cb, cdf_events as ce

CODES = {"bad_json", "bad_type", "missing_field", "bad_value", "bad_timestamp", "wrong_match", "unknown_team",
         "unknown_player", "out_of_pitch", "duplicate", "bad_event"}


@pytest.fixture
def dec() -> EventDecoder:
    return EventDecoder(parse_setup(cb.meta(), cb.sheet(3, 3)))


def strict_ok(obj: dict) -> bool:
    """The CDF validator's verdict on one event line in its strictest mode (unknown keys are errors too)."""
    with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("ignore")
        try:
            cdf.EventSchemaValidator().validate_schema(sample=copy.deepcopy(obj), mode="extreme")
        except jsonschema.ValidationError:
            return False
    return True


GOOD = [
    ce.event("e1", 0.0, "pass", sub_type="kick_off", receiver="h3", receiver_team=cb.HOME, receiver_t=1.2),
    ce.event("e2", 3.0, "shot", team=cb.AWAY, player="a2", outcome="wide", x=40.0, y=-3.5),
    ce.event("e3", 5.0, "referee", sub_type="foul", outcome="successful", match_clock="00:05.00"),
    ce.event("e4", 6.0, "defending", team=cb.AWAY, player="a3", sub_type="interception", ok=True,
             metrics={"xpass": 0.4}, var={"reviewed": False, "upheld": False}, related_event_ids=["e_3"]),
    {**ce.event("e5", 7.0, "carry"), "tracking": {"frame_id": 175, "frame_id_end": 200, "player": {"x": 1.0, "y": 2}}},
]


def test_good_events_are_accepted_and_the_validator_agrees(dec):
    res = dec.decode_objects(GOOD)
    assert res.errors == [] and res.accepted == [0, 1, 2, 3, 4] and len(res) == 5
    assert [e.id for e in res.events] == ["e1", "e2", "e3", "e4", "e5"]
    assert [e.key for e in res.events] == [0, 1, 2, 3, 4]
    assert all(strict_ok(obj) for obj in GOOD)  # the oracle: CDF validator 0.1.1, extreme mode


def test_marks_say_who_has_the_ball_and_when_it_is_dead(dec):
    res = dec.decode_objects(GOOD)
    marks = [e.marks for e in res.events]
    t0 = res.events[0].t
    rel = [[(round(t - t0, 3), team, eff) for t, team, eff in m] for m in marks]
    assert rel[0] == [(0.0, 0, ACTIVITY), (0.0, 0, RESTART)]  # a kick-off: play restarts, home on the ball
    assert rel[1] == [(3.0, 1, ACTIVITY), (3.0, 1, ON_BALL), (3.0, 1, SHOT), (3.0, -1, DEAD)]  # wide: dead
    assert rel[2] == [(5.0, -1, ACTIVITY), (5.0, -1, DEAD)]  # a foul stops play
    assert rel[3] == [(6.0, 1, ACTIVITY), (6.0, 1, ON_BALL)]  # a successful interception wins the ball
    assert rel[4] == [(7.0, 0, ACTIVITY), (7.0, 0, ON_BALL)]
    more = dec.decode_objects([
        ce.event("p1", 10.0, "pass", ok=False, outcome="intercepted", receiver="a1", receiver_team=cb.AWAY,
                 receiver_t=11.5),
        ce.event("p2", 12.0, "pass", team=cb.AWAY, player="a1", ok=False, outcome="out_of_play", receiver_t=13.0),
        ce.event("c1", 14.0, "clearance", team=cb.AWAY, player="a2"),
        ce.event("s1", 15.0, "shot", outcome="successful"),
    ])
    rel = [[(round(t - t0, 3), team, eff) for t, team, eff in e.marks] for e in more.events]
    assert rel[0][-1] == (11.5, 1, ON_BALL)  # intercepted: the other team has it on receipt
    assert rel[1][-1] == (13.0, -1, DEAD)  # out of play when it crossed the line
    assert rel[2][-1] == (14.0, -1, LOOSE)
    assert rel[3][-2:] == [(15.0, 0, SHOT), (15.0, -1, DEAD)]  # a goal: dead until the kick-off


BAD = [
    ("not an object", [1], "bad_type", "must be an object"),
    ("no event", {"match": {"id": "m_test"}, "meta": {"is_synced": False}}, "missing_field", "'event'"),
    ("unknown top field", {**GOOD[0], "extra": 1}, "bad_value", "unknown field the event line.extra"),
    ("wrong match", {**GOOD[0], "match": {"id": "m_other"}}, "wrong_match", "'m_other'"),
    ("meta", {**GOOD[0], "meta": {}}, "missing_field", "meta.is_synced"),
    ("missing required", ce.with_event(GOOD[0], receiver_time=...), "missing_field", "event.receiver_time"),
    ("unknown event field", ce.with_event(GOOD[0], speed=3), "bad_value", "unknown field event.speed"),
    ("id", ce.with_event(GOOD[0], id=7), "bad_type", "event.id must be a non-empty string"),
    ("time not UTC", ce.with_event(GOOD[0], time="2026-03-14T16:00:00+01:00"), "bad_timestamp", "UTC"),
    ("time garbage", ce.with_event(GOOD[0], time="soon"), "bad_timestamp", "event.time 'soon'"),
    ("period", ce.with_event(GOOD[0], period="third_half"), "bad_value", "event.period 'third_half'"),
    ("type case", ce.with_event(GOOD[0], type="Pass"), "bad_value", "event.type 'Pass' must be snake_case"),
    ("sub_type", ce.with_event(GOOD[0], sub_type=3), "bad_type", "event.sub_type"),
    ("is_successful", ce.with_event(GOOD[0], is_successful="yes"), "bad_type", "event.is_successful"),
    ("outcome null", ce.with_event(GOOD[0], outcome_type=None), "bad_type", "event.outcome_type"),
    ("referee with player", ce.with_event(GOOD[2], player_id="h1"), "bad_value", "no event.player_id"),
    ("referee no official", ce.with_event(GOOD[2], official_id=...), "bad_type", "event.official_id"),
    ("player event with official", ce.with_event(GOOD[0], official_id="r1"), "bad_value", "referee events only"),
    ("no team", ce.with_event(GOOD[0], team_id=...), "bad_type", "event.team_id"),
    ("unknown team", ce.with_event(GOOD[0], team_id="t_x"), "unknown_team", "'t_x'"),
    ("unknown player", ce.with_event(GOOD[0], player_id="z9"), "unknown_player", "'z9' is not in the match sheet"),
    ("player of the other team", ce.with_event(GOOD[0], player_id="a2"), "unknown_player", "does not play for"),
    ("receiver team", ce.with_event(GOOD[0], receiver_team_id="t_x"), "unknown_team", "receiver_team_id"),
    ("receiver", ce.with_event(GOOD[0], receiver_id="a9"), "unknown_player", "receiver_id 'a9'"),
    ("receiver time", ce.with_event(GOOD[0], receiver_time="2026-03-14 15:00:01"), "bad_timestamp",
     "receiver_time"),
    ("x bool", ce.with_event(GOOD[0], x=True), "bad_type", "event.x must be a number, got bool"),
    ("x far", ce.with_event(GOOD[0], x=70.0), "out_of_pitch", "event.x 70.0"),
    ("y far", ce.with_event(GOOD[0], y=-43.0), "out_of_pitch", "event.y -43.0"),
    ("pass without end", ce.with_event(GOOD[0], x_end=None), "bad_type", "event.x_end must be a number"),
    ("shot without body part", ce.with_event(GOOD[1], body_part=None), "bad_value", "event.body_part None"),
    ("body part", ce.with_event(GOOD[3], body_part="knee"), "bad_value", "'knee'"),
    ("related ids", ce.with_event(GOOD[0], related_event_ids=["E12"]), "bad_value", "'E12' must be snake_case"),
    ("related not list", ce.with_event(GOOD[0], related_event_ids="e2"), "bad_type", "related_event_ids"),
    ("metrics", ce.with_event(GOOD[0], metrics={"xg": "high"}), "bad_type", "event.metrics.xg"),
    ("metrics key", ce.with_event(GOOD[0], metrics={"xt": 0.1}), "bad_value", "event.metrics.xt"),
    ("var", ce.with_event(GOOD[0], var={"reviewed": 1}), "bad_type", "event.var.reviewed"),
    ("tracking frame", {**GOOD[0], "tracking": {"frame_id": -4}}, "bad_type", "tracking.frame_id"),
    ("tracking player", {**GOOD[0], "tracking": {"player": {"x": 99}}}, "out_of_pitch", "tracking.player.x"),
]


@pytest.mark.parametrize("obj, code, words", [b[1:] for b in BAD], ids=[b[0] for b in BAD])
def test_every_malformed_kind_is_refused_with_its_reason(dec, obj, code, words):
    res = dec.decode_objects([obj])
    assert len(res) == 0 and res.rejected == 1 and [e.code for e in res.errors] == [code], res.errors
    assert words in res.errors[0].message
    assert dec.content == {}  # nothing of it kept


def test_the_validator_refuses_what_the_decoder_refuses_for_schema_reasons():
    # the CDF validator's own verdict on the faults above (extreme mode: unknown keys too); the roster
    # faults (teams, players, match id) and negative frame ids are beyond its schema and it lets them pass
    beyond = {"wrong match", "unknown team", "unknown player", "player of the other team", "receiver team",
              "receiver", "not an object", "tracking frame"}
    for name, obj, _code, _words in BAD:
        if name not in beyond:
            assert not strict_ok(obj), name
        elif name != "not an object":
            assert strict_ok(obj), name


def test_duplicates_and_corrections_by_id(dec):
    a = ce.event("e1", 0.0, "pass")
    res = dec.decode_objects([a, a])
    assert len(res) == 1 and res.duplicates == 1 and res.errors[0].code == "duplicate"
    assert res.errors[0].as_dict()["event_id"] == "e1"
    moved = ce.with_event(a, time=cb.stamp(2.0))
    res = dec.decode_objects([moved, ce.event("e2", 1.0)])
    assert res.corrections == 1 and [e.correction for e in res.events] == [True, False]
    assert [e.key for e in res.events] == [0, 1]  # a correction keeps its id's key
    assert dec.decode_objects([moved]).duplicates == 1  # the corrected content again: a duplicate


def test_a_batch_that_was_not_stored_is_forgotten(dec):
    first = dec.decode_objects([ce.event("e1", 0.0)])
    assert len(first) == 1
    batch = dec.decode_objects([ce.with_event(ce.event("e1", 0.0), x=3.0), ce.event("e2", 1.0)])
    dec.rollback(batch)
    assert set(dec.keys) == {"e1"}
    again = dec.decode_objects([ce.with_event(ce.event("e1", 0.0), x=3.0), ce.event("e2", 1.0)])
    assert again.corrections == 1 and len(again) == 2 and [e.key for e in again.events] == [0, 1]


def test_json_lines_and_messages(dec):
    lines = [orjson.dumps(GOOD[0]), b"", b"{nope", orjson.dumps(GOOD[1])]
    res = dec.decode_lines(lines)
    assert res.accepted == [0, 3] and [(e.code, e.line) for e in res.errors] == [("bad_json", 3)]
    res = dec.decode_message(orjson.dumps([GOOD[2], GOOD[3]]))
    assert len(res) == 2
    assert dec.decode_message(b"[").errors[0].code == "bad_json"


def test_one_team_feed_names_any_player_of_the_untracked_team():
    dec = EventDecoder(parse_setup(cb.meta(), cb.sheet(3, 0)))
    res = dec.decode_objects([ce.event("e1", 0.0, team=cb.AWAY, player="opp_9")])
    assert len(res) == 1 and res.events[0].marks[-1][1] == 1
    assert dec.decode_objects([ce.event("e2", 0.0, player="opp_9")]).errors[0].code == "unknown_player"


json_values = st.recursive(
    st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats(allow_nan=False) | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=10), inner, max_size=4),
    max_leaves=12)
FIELDS = [*GOOD[0]["event"], "team_id", "player_id", "official_id", "match_clock", "metrics", "var"]


@hsettings(max_examples=600, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(base=st.sampled_from(GOOD), key=st.sampled_from(FIELDS), value=json_values, drop=st.booleans())
def test_mutated_events_never_raise_and_what_passes_is_valid_cdf(dec, base, key, value, drop):
    obj = ce.with_event(base, **{key: ... if drop else value})
    obj["event"]["id"] = f"h_{len(dec.keys)}"  # a fresh id: judged on its own, never a duplicate
    res = dec.decode_objects([obj])
    assert len(res) + res.rejected == 1
    for e in res.errors:
        assert e.code in CODES and e.message
    if len(res):
        assert strict_ok(obj), obj  # never more lenient than the CDF validator


@hsettings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(junk=json_values | st.dictionaries(st.sampled_from(["match", "meta", "event", "tracking", "x"]), json_values))
def test_garbage_never_raises(dec, junk):
    res = dec.decode_objects([junk])
    assert len(res) + res.rejected == 1 and all(e.code in CODES for e in res.errors)
    res = dec.decode_message(orjson.dumps(junk))
    assert all(e.code in CODES for e in res.errors)


# the kinds of BAD a JSON Schema can see alone (no match sheet needed)
SCHEMA_BAD = ("no event", "unknown top field", "meta", "missing required", "unknown event field", "id",
              "time not UTC", "period", "type case", "sub_type", "is_successful", "outcome null", "x bool", "x far",
              "y far", "body part", "related not list", "tracking frame")


def test_the_asyncapi_event_payload_is_what_the_decoder_accepts():
    """The AsyncAPI document describes /ingest/{match_id}/events with the decoder's own fields: it takes every
    good event (and the demo clip's stream) and refuses the malformed kinds a schema can see."""
    from pathlib import Path

    from pacewire.wire.asyncapi import asyncapi_document
    from pacewire.wire.events import EVENT_OPTIONAL, EVENT_REQUIRED

    doc = asyncapi_document()
    assert doc["channels"]["ingest_events"]["address"] == "/ingest/{match_id}/events"
    payload = doc["components"]["messages"]["cdf_event"]["payload"]
    assert set(payload["properties"]["event"]["properties"]) == set(EVENT_REQUIRED + EVENT_OPTIONAL)
    check = jsonschema.Draft202012Validator(payload)
    clip = Path(__file__).resolve().parents[2] / "demo_feeds" / "clip" / "event.jsonl"
    for obj in [*GOOD, *(orjson.loads(line) for line in clip.read_bytes().splitlines())]:
        assert [e.message for e in check.iter_errors(obj)] == [], obj["event"]["id"]
    bad = {b[0]: b[1] for b in BAD}
    assert [name for name in SCHEMA_BAD if check.is_valid(bad[name])] == []
