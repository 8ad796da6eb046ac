"""Game phases per team and second: scripted possession timelines with their expected seconds, the
phases partitioning every figure, corrections relabelling exactly the seconds they move, effective
playing time, and possession sequences by outcome."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings as hsettings, strategies as st

from pacewire.analyze import new_match
from pacewire.config import load_settings
from pacewire.engine import exertion as ex
from pacewire.engine.phases import PHASES
from pacewire.engine.snapshot import build_snapshot
from pacewire.wire.events import EventDecoder
from tests.support import cdf_build as cb, cdf_events as ce
from tests.support.trajectories import FPS, drawn_rates, sway

N_HOME, N_AWAY = 3, 3
IDS = cb.player_ids(N_HOME, N_AWAY)
H, A = cb.HOME, cb.AWAY


def positions(seconds: float, seed: int = 0) -> np.ndarray:
    """Six players swaying 18 x 12 m about points 4 m apart (fictional movement), (T, 6, 2)."""
    centre = np.c_[4.0 * np.arange(6) - 10.0, np.zeros(6)]
    # rates up to 0.5 Hz: the fastest player peaks near 9.6 m/s, within the physical bounds (config [kinematics])
    return sway(seconds, 6, (18.0, 12.0), drawn_rates(6, 0.15, 0.5, seed), centre=centre)


IN_PLAY = "in play throughout"


def match(seconds: float, events: list[dict], *, status=IN_PLAY, poss=None, overrides: dict | None = None,
          frame_chunks: int = 1, event_chunks: int = 1, seed: int = 0):
    """A match of ``seconds`` at 25 Hz (both teams' outfield only) with these CDF events; returns the state.
    ``status``: the frames' ball status per frame (None: the frames carry none). Frames and events go in
    ``*_chunks`` interleaved pieces."""
    state, dec = new_match(cb.meta(), cb.sheet(N_HOME, N_AWAY, gk=()), load_settings(overrides=overrides))
    n = int(seconds * FPS)
    status = np.ones(n, bool) if status is IN_PLAY else status
    lines = cb.lines(cb.frames(positions(seconds, seed), IDS, N_HOME, status=status, poss=poss))
    edec = EventDecoder(state.roster)
    fcut = np.linspace(0, len(lines), frame_chunks + 1).astype(int)
    ecut = np.linspace(0, len(events), event_chunks + 1).astype(int)
    for k in range(max(frame_chunks, event_chunks)):
        if k < event_chunks:
            state.ingest_events(edec.decode_objects(events[ecut[k]:ecut[k + 1]]))
        if k < frame_chunks:
            state.ingest(dec.decode_lines(lines[fcut[k]:fcut[k + 1]]))
    state.finish()
    return state


def seconds_by_phase(state, team: int) -> dict[str, float]:
    snap = build_snapshot(state)
    tid = state.roster.team_ids[team]
    return {ph: snap["teams"][tid]["outfield"]["phases"][ph]["seconds"] for ph in PHASES}


def labels(state, period: int = 0) -> np.ndarray:
    state.phases()
    return state._phases[period][1].labels.codes.copy()


SCRIPT = [  # a fictional minute: who has the ball, from the events
    ce.event("k0", 0.0, "pass", sub_type="kick_off"),  # home from 0 s
    ce.event("p1", 6.0, "pass", player="h3"),
    ce.event("i1", 12.2, "interception", team=A, player="a2"),  # away wins it in open play at 12.2 s
    ce.event("p2", 20.0, "pass", team=A, player="a3"),
    ce.event("f1", 25.4, "referee", sub_type="foul"),  # dead from 25.4 s
    ce.event("r1", 31.0, "pass", sub_type="free_kick", player="h2"),  # home restarts at 31 s: no transition
    ce.event("c1", 40.0, "carry", player="h3"),
    ce.event("t1", 44.6, "defending", team=A, player="a1", sub_type="tackle", ok=True),  # away: second 45 on
    ce.event("s1", 52.0, "shot", team=A, player="a3", outcome="saved"),
    ce.event("g1", 55.0, "goalkeeping", sub_type="claim", team=H, player="h1", ok=True),  # home regains at 55 s
]


def test_a_scripted_minute_gives_the_expected_seconds_per_phase():
    # no ball status in the frames: in play and dead ball come from the events; seconds labelled at their middle
    state = match(60, SCRIPT, status=None)
    home = seconds_by_phase(state, 0)
    away = seconds_by_phase(state, 1)
    # home (each second labelled at its middle): attack 0-11 (12 s), defensive transition 12-16 (5 s:
    # phases.transition_s), defence 17-24 (8 s), dead ball 25-30 (6 s), attack 31-44 (14 s: the tackle at
    # 44.6 s comes after 44.5 s), defensive transition 45-49, defence 50-54, attacking transition 55-59
    assert home == {"attack": 26.0, "defence": 13.0, "attacking_transition": 5.0, "defensive_transition": 10.0,
                    "dead_ball": 6.0, "unknown": 0.0}
    assert away == {"attack": 13.0, "defence": 26.0, "attacking_transition": 10.0, "defensive_transition": 5.0,
                    "dead_ball": 6.0, "unknown": 0.0}


def test_tracking_possession_when_there_are_no_events():
    n = 40 * FPS
    status = np.ones(n, bool)
    status[20 * FPS:25 * FPS] = False  # dead ball 20-25 s
    poss = np.zeros(n, int)
    poss[10 * FPS:] = 1  # away from 10 s
    poss[18 * FPS:19 * FPS] = -1  # a loose second
    poss[25 * FPS:] = 0  # home restarts
    state = match(40, [], status=status, poss=poss)
    home = seconds_by_phase(state, 0)
    # home attack 0-9 and 25-39 (25 s), defensive transition 10-14, defence 15-17 (3 s), loose 18 (unknown),
    # defence 19 (the loose second bridged: still away's possession), dead ball 20-24
    assert home == {"attack": 25.0, "defence": 4.0, "attacking_transition": 0.0, "defensive_transition": 5.0,
                    "dead_ball": 5.0, "unknown": 1.0}
    snap = build_snapshot(state)
    assert "sequences" not in snap["teams"][H]["outfield"]  # no events: no shots known


def test_stale_events_hand_over_to_the_tracking():
    n = 60 * FPS
    poss = np.ones(n, int)  # the tracking says away throughout
    state = match(60, [ce.event("k0", 0.0, "pass", sub_type="kick_off")], poss=poss)
    home = seconds_by_phase(state, 0)
    # events say home until they are phases.stale_s (15 s) old at a second's middle: seconds 0-14; then the
    # tracking: away, a possession the home team lost (last known home at 14 s): transition 15-19
    assert home["attack"] == 15.0 and home["defensive_transition"] == 5.0 and home["defence"] == 40.0


def test_phases_partition_every_figure_exactly():
    state = match(120, SCRIPT + [ce.event("x1", 70.0, "pass", team=A, player="a2"),
                                 ce.event("x2", 95.0, "ball_out", team=A, player="a2")], seed=3)
    ph = state.phases()
    totals = np.zeros((state.n, ex.N_FIG), np.int64)
    for per in state.periods:
        totals += per.sums
    assert (ph.player.sum(axis=1) == totals).all()  # every figure, in micro-units: exact
    snap = build_snapshot(state)
    for pid, p in snap["players"].items():
        # published to 1 m each (service/engine/precision.py): six phases and the total, 7 x 0.5 m at most
        assert sum(p["phases"][k]["distance_m"] for k in PHASES) == pytest.approx(p["distance_m"], abs=3.5), pid
        assert sum(p["phases"][k]["seconds"] for k in PHASES) == pytest.approx(120.0, abs=0.05)
    team_s = ph.team_s.sum(axis=1)
    assert team_s.tolist() == [120.0, 120.0]


def test_a_correction_relabels_exactly_the_seconds_it_moves():
    before = match(60, SCRIPT)
    moved = [e if e["event"]["id"] != "i1" else ce.with_event(e, time=cb.stamp(16.2)) for e in SCRIPT]
    after = match(60, moved)
    changed = np.flatnonzero((labels(before) != labels(after)).any(axis=1)).tolist()
    # the regain moves from 12.2 s to 16.2 s: for home, 12-15 go from defensive transition to attack, 16
    # stays in transition (now its first second), 17-20 go from defence to transition; nothing else moves
    assert changed == [12, 13, 14, 15, 17, 18, 19, 20]
    # the same correction sent live, after the original: the figures of the corrected stream
    live = match(60, [*SCRIPT, ce.with_event(SCRIPT[2], time=cb.stamp(16.2))], event_chunks=3, frame_chunks=7)
    assert build_snapshot(live)["players"] == build_snapshot(after)["players"]
    assert live.event_feed.corrections == 1


@hsettings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(frame_chunks=st.integers(1, 40), event_chunks=st.integers(1, 10), order=st.permutations(range(len(SCRIPT))))
def test_how_frames_and_events_are_split_and_ordered_changes_nothing(frame_chunks, event_chunks, order):
    want = build_snapshot(match(60, SCRIPT))
    events = [SCRIPT[i] for i in order]
    got = build_snapshot(match(60, events, frame_chunks=frame_chunks, event_chunks=event_chunks))
    assert got["players"] == want["players"] and got["teams"] == want["teams"]


def test_effective_playing_time_rates():
    n = 60 * FPS
    status = np.ones(n, bool)
    status[30 * FPS:45 * FPS] = False  # 15 s out of play
    state = match(60, [], status=status, poss=np.zeros(n, int))
    snap = build_snapshot(state)
    ph = state.phases()
    for i, pid in enumerate(IDS):
        p = snap["players"][pid]
        dist = (ph.player[i, :, ex.DIST].sum() - ph.player[i, 4, ex.DIST]) / 1e6
        # 45 s of play; published to 1 m/min (service/engine/precision.py)
        assert p["m_per_min_in_play"] == pytest.approx(dist / 45.0 * 60.0, abs=0.5)
    out = snap["teams"][H]["outfield"]
    assert out["in_play_s"] == 45.0  # Altmann et al. 2023: effective time counts the ball in play only


def test_possession_sequences_by_outcome():
    state = match(60, SCRIPT, status=None)  # the ball's status from the events: the foul stops play
    seq = build_snapshot(state)["teams"]
    # away: 12-24 (no shot: the foul ends it) and 45-54 (the shot at 52 s): one of each
    away = seq[A]["outfield"]["sequences"]
    assert (away["shot"]["count"], away["shot"]["seconds"]) == (1, 10.0)
    assert (away["no_shot"]["count"], away["no_shot"]["seconds"]) == (1, 13.0)
    home = seq[H]["outfield"]["sequences"]  # 0-11, 31-44 and 55-59
    assert home["shot"]["count"] == 0 and (home["no_shot"]["count"], home["no_shot"]["seconds"]) == (3, 31.0)
    assert away["shot"]["m_per_min"] > 0 and away["shot"]["hsr_m_per_min"] >= 0


def hand_labels(spans: list[tuple[str, int, int]], n: int) -> np.ndarray:
    lab = np.full(n, "", object)
    for name, first, last in spans:
        lab[first:last + 1] = name
    return lab


MIRROR = {"attack": "defence", "defence": "attack", "attacking_transition": "defensive_transition",
          "defensive_transition": "attacking_transition", "dead_ball": "dead_ball"}


def test_figures_per_phase_are_the_distance_run_in_those_seconds():
    """A check by hand: the scripted minute's seconds labelled from the script alone (as in the test above),
    each player's distance summed straight from the raw positions over those seconds, against the engine's
    smoothed figures by phase; and the team's figures are its players' sums."""
    state = match(60, SCRIPT, status=None)
    snap = build_snapshot(state)
    home = hand_labels([("attack", 0, 11), ("defensive_transition", 12, 16), ("defence", 17, 24),
                        ("dead_ball", 25, 30), ("attack", 31, 44), ("defensive_transition", 45, 49),
                        ("defence", 50, 54), ("attacking_transition", 55, 59)], 60)
    away = np.array([MIRROR[x] for x in home], object)
    pos = positions(60)
    step = np.zeros(pos.shape[:2])
    step[1:] = np.linalg.norm(np.diff(pos, axis=0), axis=-1)  # m per frame, raw
    per_s = step.reshape(60, FPS, -1).sum(axis=1)  # (seconds, players): the frames of each second
    team_m = {H: dict.fromkeys(MIRROR, 0.0), A: dict.fromkeys(MIRROR, 0.0)}
    for i, pid in enumerate(IDS):
        lab = home if i < N_HOME else away
        got = snap["players"][pid]["phases"]
        for ph in MIRROR:
            want = float(per_s[lab == ph, i].sum())
            team_m[H if i < N_HOME else A][ph] += want
            # the engine smooths (Savitzky-Golay) and counts a frame step in the second it ends in: from memory,
            # a few tenths of a metre on tens of metres; 0.5 m holds here, a second mislabelled moves ~6 m;
            # plus 0.5 m (1 m/min) as the figures are published to 1 m (service/engine/precision.py)
            assert got[ph]["distance_m"] == pytest.approx(want, abs=1.0), (pid, ph)
            assert got[ph]["seconds"] == float((lab == ph).sum()), (pid, ph)
            assert got[ph]["m_per_min"] == pytest.approx(want / (lab == ph).sum() * 60.0, abs=2.0), (pid, ph)
    for tid, by_phase in team_m.items():
        out = snap["teams"][tid]["outfield"]["phases"]
        for ph, want in by_phase.items():
            assert out[ph]["distance_m"] == pytest.approx(want, abs=2.0), (tid, ph)


def test_events_at_the_same_instant_keep_the_order_their_ids_first_came_in():
    """A duel stamped at one instant: the provider's sequence decides who has the ball after it (the later
    one); resending or correcting either event later does not change that order."""
    carry = ce.event("d_home", 33.0, "carry", player="h3")
    tackle = ce.event("d_away", 33.0, "defending", team=A, player="a1", sub_type="tackle", ok=True)
    won = seconds_by_phase(match(60, [*SCRIPT, carry, tackle], status=None), 0)
    kept = seconds_by_phase(match(60, [*SCRIPT, tackle, carry], status=None), 0)
    # home attacks from the free kick at 31 s; with the tackle last, away has the ball from 33 s, so home attacks
    # 0-11 and 31-32 only (14 s); with the carry last, home keeps it to the script's tackle at 44.6 s (26 s)
    assert (won["attack"], kept["attack"]) == (14.0, 26.0)
    resent = match(60, [*SCRIPT, carry, tackle, ce.with_event(carry, x=1.0)], status=None, event_chunks=3)
    assert seconds_by_phase(resent, 0) == won  # a correction of the first keeps its place
