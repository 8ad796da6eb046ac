"""The event stream's health in the engine: an event stamped far ahead of play (a provider's clock or
time-zone fault) neither hides a gap in the stream nor passes unnoticed."""
from __future__ import annotations

from pacewire.engine.snapshot import build_snapshot
from pacewire.wire.events import EventDecoder
from tests.engine.test_phases import SCRIPT, match
from tests.support import cdf_events as ce

AHEAD = ce.event("z1", 120.0 + 3600.0, "pass", player="h3")  # stamped an hour ahead of a 2-minute feed


def events_health(state, now: float | None = None) -> dict:
    return build_snapshot(state, now=now)["health"]["events"]


def test_an_event_stamped_ahead_of_play_does_not_hide_a_gap():
    # the script's last event is at 55 s; 65 s of play follow (the frames say in play throughout)
    want = events_health(match(120, SCRIPT))
    got = events_health(match(120, [*SCRIPT, AHEAD]))
    assert want["since_last_s"] >= 60 and [r["code"] for r in want["reasons"]] == ["event_gap"]
    assert got["since_last_s"] == want["since_last_s"] and got["reasons"] == want["reasons"]
    assert got["events"] == want["events"] + 1  # accepted and counted: only its time is out of line
    only = events_health(match(120, [AHEAD]))  # no event at or before play at all: silent since the start
    assert only["since_last_s"] >= 119 and only["state"] == "stalled"


def test_events_stamped_ahead_of_play_live_are_flagged():
    state = match(120, [])
    dec = EventDecoder(state.roster)
    state.ingest_events(dec.decode_objects([ce.event("k0", 118.0, "pass", sub_type="kick_off")]), now=1000.0)
    assert [r["code"] for r in events_health(state, 1000.0)["reasons"]] == []  # 2 s behind: fine (limit 10 s)
    late = [ce.event(f"a{i}", 120.0 + 30.0 + i, "pass", player="h3") for i in range(3)]
    state.ingest_events(dec.decode_objects(late), now=1001.0)
    h = events_health(state, 1001.0)  # wall clock: the lag is measured live only
    # the last frame at 119.96 s: lags 1.96, -30.04, -31.04, -32.04 s, median -30.54 s, beyond the 10 s limit
    # (config event_health.max_lag_s)
    assert h["lag_s"] == -30.54
    assert [r["code"] for r in h["reasons"]] == ["event_ahead"] and h["state"] == "degraded"
