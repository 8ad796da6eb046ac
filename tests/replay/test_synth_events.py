"""The synthetic match's CDF event stream: valid CDF, consistent with its own ball and possession, and
its own faults where faults.json says, each switchable."""
from __future__ import annotations

import contextlib
import io
import warnings

import cdf
import numpy as np
import orjson
import pytest

from pacewire.analyze import analyze_folder
from pacewire.engine.eventlog import PeriodMarks
from pacewire.engine.phases import period_labels
from pacewire.replay import synth
from pacewire.replay.synth.event_faults import GAP_S, LAG_S
from pacewire.replay.synth.timeline import KICKOFF

FPS = 25


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    return synth.write_match(tmp_path_factory.mktemp("clean"), minutes=12, fps=FPS, seed=21, faults=False,
                             compress=False)


@pytest.fixture(scope="module")
def faulty(tmp_path_factory):
    return synth.write_match(tmp_path_factory.mktemp("faulty"), minutes=12, fps=FPS, seed=21, compress=False)


def lines(folder) -> list[dict]:
    return [orjson.loads(x) for x in (folder / "event.jsonl").read_bytes().splitlines()]


def faults(folder) -> list[dict]:
    return orjson.loads((folder / "faults.json").read_bytes())["faults"]


def secs(stamp: str) -> float:
    """Seconds after the fictional kick-off."""
    return float((np.datetime64(stamp.rstrip("Z"), "ms") - KICKOFF) / np.timedelta64(1, "ms")) / 1000.0


@pytest.mark.parametrize("which", ["clean", "faulty"])
def test_event_file_is_valid_cdf_in_the_validators_strictest_mode(request, which):
    folder = request.getfixturevalue(which)
    with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("error")  # an advisory (an unknown key) fails too
        cdf.EventSchemaValidator().validate_schema(sample=str(folder / "event.jsonl"), mode="extreme", limit=None)


def test_events_agree_with_the_ball_and_possession_of_the_tracking(clean):
    r = analyze_folder(clean)
    st = r.state
    assert r.event_errors == [] and len(st.event_log) == len(lines(clean))
    none = PeriodMarks(np.zeros(0), np.zeros(0, np.int8), np.zeros(0, np.int8))
    same = total = 0
    for per in st.periods:
        n = per.bins.complete
        by_events = period_labels(per.ball_poss, per.last_slot, per.t0, FPS, n, st.event_log.period(per.index),
                                  st.params.phases)
        by_tracking = period_labels(per.ball_poss, per.last_slot, per.t0, FPS, n, none, st.params.phases)
        same += int((by_events.codes == by_tracking.codes).all(axis=1).sum())
        total += n
    # the phases from the events' possession equal those from the frames' ball.poss_team_id: the seconds
    # that differ hold a change of possession a coder times at the kick, the tracking at the receipt
    assert same / total > 0.97
    frames = {o["frame_id"]: o for o in map(orjson.loads, (clean / "tracking.jsonl").read_bytes().splitlines())}
    acting = [(e["event"], e["tracking"]["frame_id"]) for e in lines(clean)
              if e["event"]["type"] in ("pass", "carry", "interception", "shot")]
    agree = sum(frames[f]["ball"]["poss_team_id"] == e["team_id"] for e, f in acting)
    assert agree == len(acting)  # every on-ball event is by the team the frame has in possession
    kinds = {e["event"]["type"] for e in lines(clean)}
    assert {"pass", "carry", "interception", "shot", "referee"} <= kinds
    subs = [e for e in lines(clean) if e["event"]["sub_type"] in ("kick_off", "throw_in", "goal_kick")]
    assert all(not frames[e["tracking"]["frame_id"] - 1]["ball"]["status"] for e in subs if e["event"]["sub_type"]
               != "kick_off")  # a restart follows a dead ball


def test_faults_are_where_faults_json_says_and_the_final_events_are_the_true_ones(clean, faulty):
    fs = faults(faulty)
    kinds = [f["kind"] for f in fs]
    assert kinds.count("event_gap") == 1 and kinds.count("event_lag") == 1 and kinds.count("event_correction") >= 3
    true = {e["event"]["id"]: e for e in lines(clean)}
    got = lines(faulty)
    gap = next(f for f in fs if f["kind"] == "event_gap")
    t0 = secs(gap["time"])
    sent_ids = {e["event"]["id"] for e in got}
    assert gap["event_ids"] and not sent_ids & set(gap["event_ids"])  # the gap's events never come
    assert all(t0 <= secs(true[i]["event"]["time"]) < t0 + GAP_S for i in gap["event_ids"])
    lag = next(f for f in fs if f["kind"] == "event_lag")
    order = [e["event"]["id"] for e in got]
    for i in lag["event_ids"][:5]:
        t = secs(true[i]["event"]["time"])
        # a late line sits after the lines of events up to LAG_S later (ties aside)
        later = [e["event"]["id"] for e in got if t < secs(e["event"]["time"]) < t + LAG_S - 1
                 and e["event"]["id"] not in lag["event_ids"]]
        assert all(order.index(j) < order.index(i) for j in later), i
    final: dict[str, dict] = {}
    for e in got:
        final[e["event"]["id"]] = e  # the last line of an id wins
    for f in (f for f in fs if f["kind"] == "event_correction"):
        (i,) = f["event_ids"]
        versions = [e for e in got if e["event"]["id"] == i]
        assert len(versions) == 2 and versions[0]["event"][f["field"]] != versions[1]["event"][f["field"]]
    assert final == {i: e for i, e in true.items() if i in sent_ids}
    snap = analyze_folder(faulty).snapshot()
    assert snap["health"]["events"]["corrections"] == kinds.count("event_correction")


def test_switches(tmp_path):
    assert synth.main(["--out", str(tmp_path / "a"), "--minutes", "12", "--no-event-gap", "--no-corrections"]) == 0
    kinds = {f["kind"] for f in faults(tmp_path / "a")}
    assert "event_lag" in kinds and not {"event_gap", "event_correction"} & kinds
    assert synth.main(["--out", str(tmp_path / "b"), "--minutes", "2", "--no-events"]) == 0
    assert not (tmp_path / "b" / "event.jsonl").exists()
    assert not any(f["kind"].startswith("event") for f in faults(tmp_path / "b"))
    assert synth.main(["--out", str(tmp_path / "c"), "--minutes", "2", "--wearables"]) == 0
    assert not (tmp_path / "c" / "event.jsonl").exists()  # a club's wearables come without an event feed
