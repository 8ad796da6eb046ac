"""The decoder's bulk path (the players of a whole batch checked at once) gives exactly what
decoding the same frames one by one gives: blocks, errors with their codes, messages and
lines, counts, and the gate state the next batch meets."""
from __future__ import annotations

import copy

import numpy as np
from hypothesis import given, settings as hsettings, strategies as st

from pacewire.wire.cdf import DecodeResult, FrameDecoder, parse_setup
from tests.support import cdf_build as cb

N_HOME, N_AWAY = 3, 3
IDS = cb.player_ids(N_HOME, N_AWAY)


def new_decoder() -> FrameDecoder:
    return FrameDecoder(parse_setup(cb.meta(), cb.sheet(N_HOME, N_AWAY)))


def frame(i: int, seed: int) -> dict:
    """A good frame with id i, 40 ms after frame i - 1, players near their spots."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(-30, 30, (1, N_HOME + N_AWAY, 2))
    return cb.frames(xy, IDS, N_HOME, t0=i * 0.04, frame0=i, status=np.array([bool(i % 3)]),
                     poss=np.array([i % 2]))[0]


def _set(f: dict, path: tuple, value) -> dict:
    node = f
    for k in path[:-1]:
        node = node[k]
    if value is ...:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return f


# (what, path inside the frame, value): faults the per-player checks reject, faults found
# before or after the players, and entries that are fine but not for the bulk check (nulls)
FAULTS = [
    ("null player (unseen, accepted)", ("teams", "home", "players", 0, "x"), None),
    ("x a string", ("teams", "home", "players", 1, "x"), "1.0"),
    ("x a boolean", ("teams", "away", "players", 0, "y"), True),
    ("far outside", ("teams", "away", "players", 2, "x"), 400.0),
    ("unknown player", ("teams", "home", "players", 0, "id"), "h99"),
    ("player of the other team", ("teams", "home", "players", 2, "id"), "a1"),
    ("entry not an object", ("teams", "away", "players", 1), 5),
    ("no y", ("teams", "home", "players", 1, "y"), ...),
    ("ball status a string", ("ball", "status"), "yes"),
    ("ball possession unknown", ("ball", "poss_team_id"), "t_nobody"),
    ("bad timestamp", ("timestamp",), "yesterday"),
    ("wrong match", ("match", "id"), "m_other"),
    ("integer coordinate (accepted)", ("teams", "home", "players", 0, "x"), 3),
]


def both_faults(f: dict) -> dict:
    """A bad player and a bad ball in one frame: frame by frame the player is reported."""
    _set(f, ("teams", "home", "players", 1, "x"), "far")
    return _set(f, ("ball", "status"), "maybe")


batches = st.lists(
    st.tuples(st.integers(-2, 3),  # frame id step: repeats and going back give duplicate / late
              st.one_of(st.none(), st.none(), st.none(), st.sampled_from([*range(len(FAULTS)), "both"])),
              st.integers(0, 2**16)),
    min_size=1, max_size=60,
)


def build(spec: list, start: int = 0) -> list:
    objs, i = [], start
    for step, fault, seed in spec:
        i = max(i + step, 0)
        f = frame(i, seed)
        if fault == "both":
            f = both_faults(f)
        elif fault is not None:
            f = _set(f, *FAULTS[fault][1:])
        objs.append(f)
    return objs


def one_by_one(dec: FrameDecoder, objs: list, lines: list[int]) -> tuple[DecodeResult, list[int]]:
    results = [dec.decode_objects([o], [ln]) for o, ln in zip(objs, lines, strict=True)]
    accepted = [k for k, r in enumerate(results) if len(r.block)]
    return DecodeResult.merge(results), accepted


def same(a: DecodeResult, b: DecodeResult) -> None:
    assert a.errors == b.errors
    assert (a.rejected, a.duplicates, a.late) == (b.rejected, b.duplicates, b.late)
    for name in ("frame_id", "t", "period", "slot", "ball", "poss"):
        assert np.array_equal(getattr(a.block, name), getattr(b.block, name)), name
    assert np.array_equal(a.block.xy, b.block.xy, equal_nan=True)


@hsettings(max_examples=300, deadline=None)
@given(first=batches, second=batches)
def test_bulk_batch_equals_frame_by_frame(first, second):
    bulk, single = new_decoder(), new_decoder()
    objs = build(first)
    lines = list(range(1, len(objs) + 1))
    got = bulk.decode_objects(copy.deepcopy(objs), lines)
    ref, accepted = one_by_one(single, objs, lines)
    same(got, ref)
    assert got.accepted == accepted
    # the gate the next batch meets is the same (duplicates, late frames, slots)
    more = build(second, start=len(objs) * 3 + 2)
    same(bulk.decode_objects(copy.deepcopy(more)), one_by_one(single, more, [None] * len(more))[0])


def test_a_clean_batch_takes_the_bulk_path_and_a_faulty_one_falls_back(monkeypatch):
    # source: the decoder's own contract (one result whichever path decodes a batch)
    dec = new_decoder()
    calls = []
    real = FrameDecoder._players_bulk

    def spy(self, plists):
        out = real(self, plists)
        calls.append(out is not None)
        return out

    monkeypatch.setattr(FrameDecoder, "_players_bulk", spy)
    clean = [frame(i, i) for i in range(20)]
    res = dec.decode_objects(clean)
    assert calls == [True] and len(res.block) == 20 and not res.errors
    faulty = [frame(i, i) for i in range(20, 40)]
    _set(faulty[5], ("teams", "home", "players", 0, "x"), "far")
    res = dec.decode_objects(faulty)
    assert calls == [True, False]
    assert [e.code for e in res.errors] == ["bad_type"] and len(res.block) == 19
