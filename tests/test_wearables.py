"""Wearable feeds end to end (docs/wearables.md): one team, GNSS fixes, heart rate.

Engine-level checks use constructed paths; the live checks run a real server
and compare its figures with ``analyze`` over the folder it recorded.
Each expected value names its source.
"""
from __future__ import annotations

import asyncio
import math

import httpx
import jsonschema
import numpy as np
import orjson
import pytest

from pacewire.analyze import analyze_folder, new_match
from pacewire.config import load_settings
from pacewire.engine.snapshot import build_snapshot
from pacewire.wire.cdf import SetupError, parse_setup
from pacewire.wire.heart import HrDecoder
from pacewire.wire.schema import json_schemas, strict
from tests.support import cdf_build as cb
from tests.support.trajectories import FPS, distance, ramped
from tests.support.wearables import (
    calibration,
    hr_figures,
    hr_samples,
    jog,
    one_team_frames,
    send_hr,
    wearable_meta,
    wearable_sheet,
)


def touchline_speeds(seconds: float) -> np.ndarray:
    """A jog, a sprint, a stop and a walk (common practice shapes), each speed reached as a sprint start
    reaches it (first-order lag, tau 1 s; Furusawa et al. 1927), m/s per frame."""
    return ramped([(2.5, 10), (8.5, 4), (0.5, 6), (1.0, seconds - 20)], tau_s=1.0)


def touchline_run(seconds: float) -> np.ndarray:
    """One player running along a touchline (y = -33 m) from the x = -52 m end, at ``touchline_speeds``."""
    x = -52.0 + distance(touchline_speeds(seconds))[:-1]
    assert x[-1] < 52.5  # still on the pitch: no turn
    xy = np.zeros((len(x), 1, 2))
    xy[:, 0, 0], xy[:, 0, 1] = x, -33.0
    return xy


def analyse(frames: list[dict], hr: list[dict] | None = None, n_home: int = 1, gnss: bool = True,
            chunks: list[int] | None = None, hr_first: bool = True) -> dict:
    state, dec = new_match(wearable_meta(gnss=gnss), wearable_sheet(n_home), load_settings())
    hdec = HrDecoder(state.roster, state.params.heart)
    lines = cb.lines(frames)
    if hr and hr_first:
        state.ingest_heart(hdec.decode_lines(cb.lines(hr)))
    i = 0
    for c in chunks or [len(lines)]:
        res = dec.decode_lines(lines[i:i + c])
        assert not res.errors, res.errors[:3]
        state.ingest(res)
        i += c
    assert i == len(lines)
    if hr and not hr_first:
        state.ingest_heart(hdec.decode_lines(cb.lines(hr)))
    state.finish()
    return build_snapshot(state)


# -- GNSS ------------------------------------------------------------------------------------
def test_run_along_a_touchline_in_gnss_gives_the_figures_of_the_run_in_metres():
    xy = touchline_run(60)
    by_gnss = analyse(one_team_frames(xy, gnss=True))["players"]["h1"]
    by_xy = analyse(one_team_frames(xy, gnss=False), gnss=False)["players"]["h1"]
    # the projection round-trips within 1 mm (tests/wire/test_gnss.py, Karney 2013 geodesics): figures agree
    for key in ("distance_m", "hsr_m", "sprint_m", "energy_jkg"):
        assert by_gnss[key] == pytest.approx(by_xy[key], abs=0.2), key
    for key in ("sprints", "hsr_efforts", "accels", "decels", "minutes"):
        assert by_gnss[key] == by_xy[key], key
    # the constructed run's own length (by construction), within 1 %
    assert by_gnss["distance_m"] == pytest.approx(float(touchline_speeds(60)[:-1].sum() / FPS), rel=0.01)
    assert by_gnss["sprints"] == 1


def test_calibration_faults_are_refused_naming_the_corner_or_key():
    cal = calibration()
    moved = orjson.loads(orjson.dumps(cal))
    moved["corners"]["x_max_y_max"]["lat"] += 3.0 / 111_000  # the flag 3 m off (1 degree of latitude is ~111 km)
    meta = wearable_meta()
    meta["venue"]["gnss_pitch"] = moved
    with pytest.raises(SetupError, match="x_max_y_max"):
        parse_setup(meta, wearable_sheet(2))
    meta = wearable_meta()
    meta["venue"]["pitch_length"] = 100.0  # the calibration says 105 m: 4.8% off
    with pytest.raises(SetupError, match="pitch_length"):
        parse_setup(meta, wearable_sheet(2))
    meta = wearable_meta()
    meta["venue"]["gnss_pitch"] = {"corners": {"x_min_y_min": {"lat": 47.5, "long": -30.0}}}
    with pytest.raises(SetupError, match="gnss_pitch.corners"):
        parse_setup(meta, wearable_sheet(2))
    # the calibration gives the pitch size when the meta has none
    roster = parse_setup(wearable_meta(), wearable_sheet(2))
    assert (roster.pitch_length_m, roster.pitch_width_m) == pytest.approx((105.0, 68.0), abs=0.01)


def test_lat_long_without_a_calibration_is_refused_and_bad_fixes_are_named():
    xy = touchline_run(30)[:10]
    frames = one_team_frames(xy, gnss=True)
    state, dec = new_match(wearable_meta(gnss=False), wearable_sheet(1), load_settings())
    res = dec.decode_lines(cb.lines(frames[:3]))
    assert [e.code for e in res.errors] == ["no_calibration"] * 3 and len(res.block) == 0
    state, dec = new_match(wearable_meta(), wearable_sheet(1), load_settings())
    far = orjson.loads(orjson.dumps(frames[0]))
    far["teams"]["home"]["players"][0]["lat"] += 0.01  # ~1.1 km north
    nan = orjson.loads(orjson.dumps(frames[1]))
    nan["teams"]["home"]["players"][0]["long"] = "west"
    res = dec.decode_lines(cb.lines([far, nan, frames[2]]))
    assert [e.code for e in res.errors] == ["out_of_pitch", "bad_type"]
    assert "h1" in res.errors[0].message and len(res.block) == 1


# -- one team ---------------------------------------------------------------------------------
def test_one_team_feed_has_no_opponent_figures_and_players_join_and_leave():
    secs = 120
    t = np.arange(secs * FPS) / FPS
    xy = np.zeros((len(t), 3, 2))
    for j in range(3):
        xy[:, j, 0] = -30 + 3.0 * t % 60  # jogging at 3 m/s, back to the start every 20 s
        xy[:, j, 1] = -20 + 15 * j
    xy[: 40 * FPS, 1] = np.nan  # h2's unit switched on 40 s late
    xy[70 * FPS:, 2] = np.nan  # h3's unit off after 70 s (beyond the 30 s on-pitch timeout by the end)
    snap = analyse(one_team_frames(xy, gnss=False), n_home=3, gnss=False)
    away = snap["teams"][cb.AWAY]
    assert away["tracked"] is False and set(away) == {"name", "side", "tracked"}  # absent, not zeros
    home = snap["teams"][cb.HOME]
    assert home["tracked"] is True and home["outfield"]["players"] == 3
    players = snap["players"]
    assert all("possession" not in p for p in players.values())  # no ball: no possession split
    # minutes on the pitch count the time seen (by construction), to 0.1 min on the wire (half a step of slack)
    assert players["h1"]["minutes"] == pytest.approx(2.0, abs=0.07)
    assert players["h2"]["minutes"] == pytest.approx(80 / 60, abs=0.07)
    assert players["h3"]["minutes"] == pytest.approx(70 / 60, abs=0.07)
    # m/min per minute seen: the same jog for all three (by construction, 3 m/s with turns)
    assert players["h2"]["m_per_min"] == pytest.approx(players["h1"]["m_per_min"], rel=0.03)
    assert players["h3"]["m_per_min"] == pytest.approx(players["h1"]["m_per_min"], rel=0.03)
    assert players["h2"]["coverage"] == pytest.approx(1.0, abs=0.01)


# -- heart rate in the engine ------------------------------------------------------------------
def test_heart_rate_worked_values_through_the_match():
    secs = 600
    frames = one_team_frames(jog(secs), gnss=True)
    hr = hr_samples("h1", np.full(secs, 150.0)) + hr_samples("h3", np.full(secs, 150.0))
    hr.sort(key=lambda s: s["timestamp"])
    p = analyse(frames, hr, n_home=3)["players"]
    h1 = p["h1"]
    credited_min = (secs - 1) / 60  # 1 Hz: every sample but the first credits 1 s (docs/wearables.md)
    # Edwards 1993: 150 of 190 bpm = 78.9% HRmax, zone 70-80 weight 3
    assert h1["trimp_edwards"] == pytest.approx(3 * credited_min, abs=0.06)
    assert h1["hr_zones"]["70-80%"] == pytest.approx(secs - 1, abs=0.1)
    assert sum(h1["hr_zones"].values()) == pytest.approx(secs - 1, abs=0.1)
    # Banister 1991 (male a = 0.64, b = 1.92, as commonly quoted): HRr = (150 - 50) / (190 - 50), worked by hand here
    hrr = 100 / 140
    assert h1["trimp_banister"] == pytest.approx(credited_min * hrr * 0.64 * math.exp(1.92 * hrr), abs=0.06)
    assert h1["hr_mean_bpm"] == 150.0 and h1["hr_peak_bpm"] == 150.0
    assert h1["hr_bpm"] == 150.0 and h1["hr_pct_max"] == pytest.approx(78.9, abs=0.05)
    # 1 Hz expected (config heart_rate.expected_hz)
    assert h1["hr_coverage"] == pytest.approx((secs - 1) / secs, abs=0.002)
    assert h1["hr_omitted"] == {}
    # h3 has hr_max but no hr_rest_bpm nor sex: Banister is left out, and the snapshot says why
    h3 = p["h3"]
    assert h3["trimp_banister"] is None and "hr_rest_bpm" in h3["hr_omitted"]["trimp_banister"]
    assert h3["trimp_edwards"] is not None
    # h2 sent no samples: no heart rate, coverage zero while on the pitch
    assert p["h2"]["hr_mean_bpm"] is None and p["h2"]["hr_coverage"] == 0.0
    # windows carry the heart-rate figures of their stretch: the last minute is 60 samples at 150 bpm
    w = h1["windows"]["last_1min"]
    assert w["hr_mean_bpm"] == 150.0 and w["trimp_edwards"] == pytest.approx(3.0, abs=0.02)
    assert p["h1"]["periods"]["first_half"]["trimp_edwards"] == h1["trimp_edwards"]


def test_heart_rate_in_the_half_time_break_and_ahead_of_tracking_credits_nothing():
    first = one_team_frames(jog(60, 1), gnss=False)
    second = one_team_frames(jog(60, 1), gnss=False, period="second_half", t0=900.0, frame0=len(first))
    # 1 Hz from kick-off to 30 s after the second half's tracking ended
    hr = hr_samples("h1", np.full(990, 120.0))
    snap = analyse(first + second, hr, gnss=False)
    p = snap["players"]["h1"]
    # credited (docs/wearables.md): the samples at 1..60 s fall in the first half's span [0, 60 s] (last
    # frame + one frame), 1 s each; 900..959 s in the second half's, up to its last frame; the break's and
    # the one after the last frame (tracking never reaches it) credit nothing
    assert p["periods"]["first_half"]["hr_zones"]["60-70%"] == pytest.approx(60.0, abs=0.01)
    assert p["periods"]["second_half"]["hr_zones"]["60-70%"] == pytest.approx(60.0, abs=0.01)
    assert p["hr_zones"]["60-70%"] == pytest.approx(120.0, abs=0.01)
    assert p["hr_bpm"] == 120.0  # the latest sample still shows


@pytest.mark.parametrize("chunks,hr_first", [([1] * 250 + [1250], True), ([250] * 6, False), ([7, 600, 893], True)])
def test_heart_rate_figures_do_not_depend_on_arrival_order_or_blocks(chunks, hr_first):
    secs = 60
    frames = one_team_frames(jog(secs), gnss=False)
    rng = np.random.default_rng(3)
    hr = []
    for pid in ("h1", "h2", "h3"):
        hr += hr_samples(pid, np.clip(140 + np.cumsum(rng.normal(0, 2, secs)), 60, 200).round(), t0=rng.uniform(0, 1))
    hr.sort(key=lambda s: s["timestamp"])
    whole = analyse(frames[:1500], hr, n_home=3, gnss=False)
    split = analyse(frames[:1500], hr, n_home=3, gnss=False, chunks=chunks, hr_first=hr_first)
    assert orjson.dumps(split["players"]) == orjson.dumps(whole["players"])


# -- live --------------------------------------------------------------------------------------
def test_live_wearable_match_equals_analyze_and_survives_a_restart(server, tmp_path):
    secs = 90
    mid = "m_wear"
    frames = one_team_frames(jog(secs), gnss=True, match_id=mid)
    rng = np.random.default_rng(5)
    hr = []
    for pid in ("h1", "h2", "h3"):
        hr += hr_samples(pid, (130 + 10 * np.sin(np.arange(secs) / 9) + rng.normal(0, 1, secs)).round())
    hr.sort(key=lambda s: s["timestamp"])
    bad = [{"player_id": "h1", "timestamp": cb.stamp(0.5), "bpm": 250},  # implausible_bpm (> 230 bpm)
           {"player_id": "h2", "timestamp": cb.stamp(0.5), "bpm": 190},  # hr_jump: +60 bpm in 0.5 s
           {"player_id": "h1", "timestamp": cb.stamp(0.0), "bpm": 130},  # duplicate of the first sample
           {"player_id": "h3", "timestamp": "yesterday", "bpm": 100}]
    http = server.http
    r = httpx.put(f"{http}/api/matches/{mid}", json={"meta": wearable_meta(mid), "sheet": wearable_sheet(3)})
    assert r.status_code == 201, r.text
    # heart rate: the first 30 s over HTTP (JSON Lines), the rest over the socket, garbage on both
    early = [s for s in hr if s["timestamp"] < cb.stamp(30)]
    late = [s for s in hr if s["timestamp"] >= cb.stamp(30)]
    r = httpx.post(f"{http}/api/matches/{mid}/hr", content=b"\n".join(cb.lines(early[:3] + bad + early[3:])))
    body = r.json()
    assert r.status_code == 200 and body["accepted"] == len(early) and body["rejected"] == 3 and body["duplicates"] == 1
    assert [e["code"] for e in body["errors"]] == ["implausible_bpm", "hr_jump", "duplicate", "bad_timestamp"]
    r = httpx.post(f"{http}/api/matches/{mid}/frames", content=b"\n".join(cb.lines(frames)))
    assert r.json()["accepted"] == len(frames)
    errs = asyncio.run(send_hr(f"{server.ws}/ingest/{mid}/hr",
                                [orjson.dumps(late[i:i + 7]) for i in range(0, len(late), 7)] + [b"{not json"]))
    assert [e["code"] for e in errs] == ["bad_json", "unknown_player"]
    snap = None
    for _ in range(100):  # bounded wait: every frame applied, then stalled (the tail shown finalised, as offline)
        snap = httpx.get(f"{http}/api/matches/{mid}/snapshot").json()
        if snap["health"]["frames"] == len(frames) and snap["health"]["state"] == "stalled":
            break
        asyncio.run(asyncio.sleep(0.1))
    h = snap["health"]
    assert (h["hr_rejected"], h["hr_duplicates"]) == (5, 1)  # 3 + bad_json + unknown_player; 1 duplicate
    assert set(h["hr_coverage"]) == {"h1", "h2", "h3"}
    schemas = json_schemas()
    assert list(jsonschema.Draft202012Validator(strict(schemas["snapshot"])).iter_errors(snap)) == []
    folder = server.data / "matches" / mid
    assert sum(1 for _ in open(folder / "hr.jsonl", "rb")) == len(hr)  # every accepted sample recorded
    offline = analyze_folder(folder).snapshot()
    live = hr_figures(snap)
    assert snap["health"]["state"] == "stalled", snap["health"]
    assert live == hr_figures(offline)
    assert snap["teams"][cb.AWAY]["tracked"] is False and "outfield" not in snap["teams"][cb.AWAY]
    # kill -9 and restart: recovery rebuilds the same figures and counters
    server.kill9()
    server.start()
    again = httpx.get(f"{http}/api/matches/{mid}/snapshot").json()
    # the restart finalises nothing new: compare what was final before (analyze's figures)
    assert hr_figures(again)["h1"]["hr_zones"] == live["h1"]["hr_zones"]
    assert again["players"]["h2"]["trimp_edwards"] == live["h2"]["trimp_edwards"]


def test_live_heart_rate_endpoints_refuse_clearly(server):
    http = server.http
    r = httpx.post(f"{http}/api/matches/nope/hr", content=b"{}")
    assert r.status_code == 404 and r.json()["error"]["code"] == "unknown_match"
    mid = "m_hr"
    r = httpx.put(f"{http}/api/matches/{mid}", json={"meta": cb.meta(mid), "sheet": cb.sheet(2, 2)})
    assert r.status_code == 201
    r = httpx.post(f"{http}/api/matches/{mid}/hr", content=orjson.dumps([{"player_id": "a1", "timestamp": cb.stamp(0),
                                                                           "bpm": True}, {"player_id": "h1"}]))
    body = r.json()
    assert r.status_code == 200 and body["accepted"] == 0
    assert [e["code"] for e in body["errors"]] == ["bad_type", "missing_field"]
    # a match without heart rate shows none of its fields; counters appear once samples were refused
    snap = httpx.get(f"{http}/api/matches/{mid}/snapshot").json()
    assert "hr_bpm" not in snap["players"]["h1"] and snap["health"]["hr_rejected"] == 2


def test_samples_let_in_by_the_jump_reset_count_again_when_read_back_from_the_recording():
    # docs/wearables.md: after 3 hr_jump rejections in a row the next sample is accepted; a recording
    # holds only accepted samples, so reading it back must not apply the jump rule again
    roster = parse_setup(wearable_meta(), wearable_sheet(1))
    params = new_match(wearable_meta(), wearable_sheet(1), load_settings())[0].params.heart
    bpm = [100, 101, 225, 225, 225, 225, 226, 227]  # 4 Hz: the 225s jump > 40 bpm/s from 101
    lines = cb.lines([{"player_id": "h1", "timestamp": cb.stamp(k / 4), "bpm": b} for k, b in enumerate(bpm)])
    live = HrDecoder(roster, params).decode_lines(lines)
    assert [e.code for e in live.errors] == ["hr_jump"] * 3 and len(live) == 5
    kept = [lines[i] for i in live.accepted]
    again = HrDecoder(roster, params, recorded=True).decode_lines(kept)
    assert len(again) == 5 and again.errors == []
    assert len(HrDecoder(roster, params).decode_lines(kept)) == 2  # what a fresh gate keeps of them
