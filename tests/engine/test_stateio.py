"""The checkpoint format: a state written (npz + JSON, no pickle) and read back goes on to the figures
of an uninterrupted run, wherever it was cut: mid-period, mid-gap, mid-effort."""
from __future__ import annotations

import copy
import pickle

import numpy as np
import pytest

from pacewire.analyze import add_heart_rate, analyze_folder, new_match, read_events
from pacewire.config import load_settings
from pacewire.engine import stateio
from pacewire.engine.rewind import checkpoint, resume
from pacewire.engine.snapshot import build_snapshot
from pacewire.replay.synth import write_match
from pacewire.wire.recording import open_recording

ALLOWED = ("pacewire.engine.", "pacewire.wire.")
BATCH = 50  # lines a step: cuts fall inside the periods, not only at their ends


@pytest.fixture(scope="module")
def match(tmp_path_factory):
    """Two fictional minutes at 25 Hz with the synthetic feed faults (an outage, dropouts, jumps)."""
    folder = write_match(tmp_path_factory.mktemp("sio") / "m", minutes=2, fps=25, seed=11)
    return folder, analyze_folder(folder).snapshot()


def _run(folder, cut_at: set[int] | None = None, through=None, at_gaps: bool = False):
    """The recording through the engine; at each batch index in ``cut_at`` (and, with ``at_gaps``,
    between the two frames of each feed gap over 0.5 s) the state and decoder go through ``through``
    (written and read back). Returns (snapshot, what each cut saw)."""
    settings = load_settings()
    rec = open_recording(folder)
    state, decoder = new_match(rec.meta, rec.sheet, settings)
    add_heart_rate(state, rec)
    state.ingest_events(read_events(state, rec))
    seen = []
    prev_t = None

    def cut(gap: bool) -> None:
        nonlocal state, decoder
        effort = any(bool(np.any(c.carry > 0)) for c in _counters(state))
        seen.append({"gap": gap, "effort": effort, "period": state.period_name()})
        state, decoder = through((state, decoder))

    for k, (first, lines) in enumerate(rec.batches(BATCH)):
        res = decoder.decode_lines(lines, first_line=first)
        b = res.block
        if cut_at is not None and k in cut_at:
            cut(False)
        if at_gaps and len(b):
            t = np.concatenate([[b.t[0] if prev_t is None else prev_t], b.t])
            jumps = np.flatnonzero(np.diff(t) > 0.5)
            if len(jumps):
                j = int(jumps[0])
                head, tail = copy.copy(res), copy.copy(res)
                head.block, tail.block = b.take(slice(0, j)), b.take(slice(j, None))
                tail.rejected = tail.duplicates = tail.late = tail.resent = 0
                state.ingest(head)
                cut(True)
                res = tail
        if len(b):
            prev_t = float(b.t[-1])
        state.ingest(res)
    state.finish()
    return build_snapshot(state), seen


def _counters(state):
    from pacewire.engine.exertion import EffortCounter

    stack, out, done = [state], [], set()
    while stack:
        o = stack.pop()
        if id(o) in done:
            continue
        done.add(id(o))
        if isinstance(o, EffortCounter):
            out.append(o)
        elif hasattr(o, "__dict__") and type(o).__module__.startswith("pacewire."):
            stack.extend(vars(o).values())
        elif isinstance(o, (list, tuple)):
            stack.extend(o)
    return out


def _npz_round_trip(pair):
    return stateio.from_npz(stateio.to_npz(pair, ALLOWED), ALLOWED)


def test_cut_anywhere_equals_an_uninterrupted_run(match):
    folder, want = match
    n = sum(1 for _ in open_recording(folder).batches(BATCH))
    cuts = set(range(1, n, 3))
    got, seen = _run(folder, cuts, _npz_round_trip, at_gaps=True)
    assert got["players"] == want["players"] and got["teams"] == want["teams"]
    # the cuts covered the hard places: inside an effort, right before a feed gap, both halves
    assert any(s["effort"] for s in seen)
    assert any(s["gap"] for s in seen)
    assert {s["period"] for s in seen} >= {"first_half", "second_half"}


def test_rewind_checkpoints_resume_to_the_same_figures(match):
    folder, want = match

    def through(pair):
        state, decoder = pair
        return resume(checkpoint(state)), decoder

    got, _ = _run(folder, {7, 20}, through)
    assert got["players"] == want["players"]


class Evil:
    def __reduce__(self):
        return (print, ("pwned",))


def test_a_checkpoint_builds_no_class_it_is_not_allowed_to():
    with pytest.raises(TypeError, match="not allowed"):
        stateio.to_npz({"x": Evil()}, ALLOWED)
    # a hand-made tree naming a builtin constructor is refused on reading, nothing called
    text = b'{"format": 1, "state": {"$c": "builtins:print", "args": {"$t": ["pwned"]}, "#": 0}}'
    with pytest.raises(stateio.StateFormatError, match="not allowed"):
        stateio.decode(text, lambda i: np.zeros(0), ALLOWED)
    # and a pickle is never read: np.load with allow_pickle=False refuses object arrays
    import io

    buf = io.BytesIO()
    np.savez(buf, __state_json__=np.array([Evil()], dtype=object))
    with pytest.raises(stateio.StateFormatError):
        stateio.from_npz(buf.getvalue(), ALLOWED)
    with pytest.raises(stateio.StateFormatError):
        stateio.from_npz(pickle.dumps({"a": 1}), ALLOWED)


def test_another_format_version_is_refused():
    text, arrays = stateio.encode({"a": np.arange(3)}, ALLOWED)
    assert stateio.decode(text, lambda i: arrays[i], ALLOWED)["a"].tolist() == [0, 1, 2]
    old = text.replace(b'"format":1', b'"format":0')
    with pytest.raises(stateio.StateFormatError, match="format 0"):
        stateio.decode(old, lambda i: arrays[i], ALLOWED)


def test_values_round_trip_with_their_types_and_sharing():
    shared = np.arange(4.0)
    obj = {"f": [1.5, float("nan"), float("-inf")], "t": (1, "a", None), "s": {3, 4}, "b": b"\x00\x01",
           "n": np.float32(2.5), "i": np.int64(7), (1, 2): "tuple key", "a1": shared, "a2": shared,
           "dt": np.dtype("int16")}
    back = stateio.from_npz(stateio.to_npz(obj, ALLOWED), ALLOWED)
    assert back["a1"] is back["a2"] and back["a1"].tolist() == [0.0, 1.0, 2.0, 3.0]
    assert back["f"][0] == 1.5 and np.isnan(back["f"][1]) and back["f"][2] == float("-inf")
    assert back["t"] == (1, "a", None) and back["s"] == {3, 4} and back["b"] == b"\x00\x01"
    assert type(back["n"]) is np.float32 and back["n"] == 2.5 and type(back["i"]) is np.int64
    assert back[(1, 2)] == "tuple key" and back["dt"] == np.dtype("int16")
