"""The snapshot built frame by frame (rows reused while their inputs are unchanged) equals the
snapshot built from nothing, byte for byte, through both halves, feed faults, a red card, a
stalled feed's finalised view and heart rate (docs/wearables.md)."""
from __future__ import annotations

import copy
import random
from pathlib import Path

import orjson
import pytest

from pacewire.analyze import new_match
from pacewire.config import load_settings
from pacewire.engine.snapshot import build_health, build_snapshot
from pacewire.replay import synth
from pacewire.wire.heart import HrDecoder

NOW = 1.9e9  # a wall clock for health (any fixed value: both builds see the same)


def _fresh(state):
    """The same state with no snapshot cache: every part is built from nothing."""
    view = copy.copy(state)
    view.__dict__.pop("_snapshot_cache", None)
    return view


@pytest.fixture(scope="module", params=["optical", "wearables"])
def recording(request, tmp_path_factory) -> Path:
    # replay/synth/: the fictional demo match (both halves, substitutions, feed faults), 3 minutes
    return synth.write_match(tmp_path_factory.mktemp(request.param), minutes=3, fps=25, seed=3, compress=False,
                             wearables=request.param == "wearables")


def test_incremental_snapshot_equals_a_fresh_build(recording):
    meta = orjson.loads((recording / "meta.json").read_bytes())
    sheet = orjson.loads((recording / "match.json").read_bytes())
    state, dec = new_match(meta, sheet, load_settings())
    frames = (recording / "tracking.jsonl").read_bytes().splitlines()
    hr_path = recording / "hr.jsonl"
    hr = hr_path.read_bytes().splitlines() if hr_path.exists() else []
    hr_dec = HrDecoder(state.roster, state.params.heart)
    rng = random.Random(5)
    i = j = checked = reused = 0
    prev = None
    while i < len(frames):
        k = rng.choice([1, 1, 1, 2, 7, 25, 80])  # live single frames and replay-sized blocks
        block = frames[i:i + k]
        i += k
        if hr:  # heart-rate samples up to this block's time, as a strap sends them
            last = orjson.loads(block[-1])["timestamp"]
            n = j
            while n < len(hr) and orjson.loads(hr[n])["timestamp"] <= last:
                n += 1
            if n > j:
                state.ingest_heart(hr_dec.decode_lines(hr[j:n]))
                j = n
        state.ingest(dec.decode_lines(block), now=NOW)
        if i > len(frames) // 2 and rng.random() < 0.01:
            state.substitute(rng.choice(list(state.roster.index)), None)  # a red card
        views = [state]
        if rng.random() < 0.02:
            views.append(state.provisional())  # a stalled feed's finalised copy, as ingest shows it
        for view in views:
            got = build_snapshot(view, now=NOW)
            want = build_snapshot(_fresh(view), now=NOW)
            assert orjson.dumps(got) == orjson.dumps(want), f"after {i} frames"
            assert build_health(view, NOW, None) == got["health"]
            checked += 1
        if prev is not None and state.heart is None:
            pairs = zip(got["players"].values(), prev["players"].values(), strict=True)
            reused += sum(got_p is prev_p for got_p, prev_p in pairs)
        prev = got
    state.finish()
    assert orjson.dumps(build_snapshot(state, now=NOW)) == orjson.dumps(build_snapshot(_fresh(state), now=NOW))
    assert checked > 100
    if state.heart is None:
        # substitutes not yet on keep their player object from one snapshot to the next (diffs skip them)
        assert reused > 0


def test_players_who_stop_or_leave_the_feed_show_it_at_once():
    """Constructed: h2 runs then leaves the feed (a unit switched off), h3 stands still, h4 is a
    substitute never seen, the away side jogs; one frame at a time, the incremental snapshot equals
    a fresh build (speed_ms turns null a second after h2's last sample, on_pitch false 5 s after it,
    while his figures stay the same)."""
    import numpy as np

    from tests.support import cdf_build as cb

    fps, T = 25, 25 * 40
    t = np.arange(T) / fps
    xy = np.zeros((T, 6, 2))
    xy[:, 0] = np.c_[-40 + 0.0 * t, 0 * t]  # h1, goalkeeper, still
    xy[:, 1] = np.c_[-30 + 4.0 * (t % 10), 5 + 0 * t]  # h2 runs at 4 m/s ...
    xy[T // 2:, 1] = np.nan  # ... and leaves the feed half-way
    xy[:, 2] = np.c_[-10 + 0 * t, -5 + 0 * t]  # h3 stands still
    xy[:, 3] = np.nan  # h4: substitute, never seen
    xy[:, 4] = np.c_[40 + 0 * t, 0 * t]  # a1, goalkeeper
    xy[:, 5] = np.c_[30 - 2.0 * (t % 10), -8 + 0 * t]  # a2 jogs
    status = np.ones(T, bool)
    poss = (np.arange(T) // (5 * fps)) % 2
    lines = cb.lines(cb.frames(xy, cb.player_ids(4, 2), 4, status=status, poss=poss))
    # off the pitch 5 s after the last sample instead of 30 s (config [health] on_pitch_timeout_s)
    state, dec = new_match(cb.meta(), cb.sheet(4, 2, bench=("h4",)),
                           load_settings(overrides={"health": {"on_pitch_timeout_s": 5.0}}))
    seen_null = seen_off = False
    for k, line in enumerate(lines):
        state.ingest(dec.decode_lines([line]), now=NOW + k / fps)
        got = build_snapshot(state, now=NOW + k / fps)
        assert orjson.dumps(got) == orjson.dumps(build_snapshot(_fresh(state), now=NOW + k / fps)), f"frame {k}"
        seen_null |= k > T // 2 and got["players"]["h2"]["speed_ms"] is None
        seen_off |= k > T // 2 and got["players"]["h2"]["on_pitch"] is False
    assert seen_null and seen_off
