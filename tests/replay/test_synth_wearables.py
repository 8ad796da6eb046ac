"""The wearables variant of the synthetic demo match (``pacewire synth --wearables``)
and the replay tool's heart-rate channel (docs/wearables.md).

Short matches keep the tests fast: 2-3 minutes for the files and the replay,
20 minutes at 10 fps for the heart-rate physiology (lag and drift need a few
minutes per half). Every check value names its source.
"""
from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import gzip
import io
import pathlib
import warnings

import cdf
import jsonschema
import numpy as np
import orjson
import pytest
from cdf.validators.custom import ValidationWarning

from pacewire.analyze import analyze_folder
from pacewire.replay import synth
from pacewire.replay.player import Progress, replay
from pacewire.wire.gnss import PitchProjection, parse_calibration
from tests.support.snapshots import player_figures, settled_snapshot

HR_LOW_BPM, HR_HIGH_BPM = 40, 215  # common practice: athletes' resting HR rarely below ~40, HRmax rarely above ~210
SPIKE_BPM = 255  # the injected implausible sample (replay/synth/wearables.py HR_SPIKE_BPM)
KICKOFF = dt.datetime(2026, 3, 14, 15, 0, tzinfo=dt.UTC)  # replay/synth/timeline.py KICKOFF


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------
def _json(path: pathlib.Path) -> dict:
    return orjson.loads(path.read_bytes())


def _frames(folder: pathlib.Path) -> list[dict]:
    gz = folder / "tracking.jsonl.gz"
    raw = gzip.decompress(gz.read_bytes()) if gz.exists() else (folder / "tracking.jsonl").read_bytes()
    return [orjson.loads(line) for line in raw.splitlines()]


def _hr(folder: pathlib.Path) -> list[dict]:
    return [orjson.loads(line) for line in (folder / "hr.jsonl").read_bytes().splitlines()]


def _s(stamp: str) -> float:
    """Seconds after kick-off of an RFC 3339 timestamp."""
    return (dt.datetime.fromisoformat(stamp.replace("Z", "+00:00")) - KICKOFF).total_seconds()


def _faults(folder: pathlib.Path, kind: str) -> list[dict]:
    return [f for f in _json(folder / "faults.json")["faults"] if f["kind"] == kind]


def _cdf_findings(validator, mode: str, **kwargs) -> list[str]:
    """Warnings (schema findings in soft mode, unknown-key advisories in any mode) of one validation."""
    with warnings.catch_warnings(record=True) as caught, contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("always")
        validator.validate_schema(mode=mode, **kwargs)
    return [str(w.message) for w in caught if issubclass(w.category, ValidationWarning)]


def _per_second(folder: pathlib.Path) -> tuple[dict[str, tuple[np.ndarray, np.ndarray]], list[tuple[int, int]]]:
    """Per player: (running speed m/s, heart rate bpm) per second after kick-off (NaN where
    missing), from the written files; plus each period's whole seconds [first, end).

    Speed: plain step lengths between consecutive frames of the player, averaged per second.
    """
    meta = _json(folder / "meta.json")
    fps = meta["meta"]["tracking"]["fps"]
    spans = [(int(np.ceil(_s(p["start_time"]))), int(_s(p["end_time"]))) for p in meta["match"]["periods"]]
    n = spans[-1][1] + 2
    tracks: dict[str, dict[int, tuple[float, float, float]]] = {}
    for f in _frames(folder):
        t = _s(f["timestamp"])
        for p in f["teams"]["home"]["players"]:
            tracks.setdefault(p["id"], {})[f["frame_id"]] = (t, p["x"], p["y"])
    out = {}
    for pid, rows in tracks.items():
        ids = np.array(sorted(rows))
        a = np.array([rows[i] for i in ids])
        step = np.diff(ids) == 1
        speed = np.hypot(np.diff(a[:, 1]), np.diff(a[:, 2])) * fps
        sec = a[1:, 0].astype(int)
        total = np.bincount(sec[step], weights=speed[step], minlength=n)
        count = np.bincount(sec[step], minlength=n)
        v = np.full(n, np.nan)
        v[count > 0] = total[count > 0] / count[count > 0]
        out[pid] = (v, np.full(n, np.nan))
    for h in _hr(folder):
        out[h["player_id"]][1][int(_s(h["timestamp"]))] = h["bpm"]
    return out, spans


def _whole_halves(data, spans):
    """(speed, HR) of every player-half with both signals in every second."""
    for v, hr in data.values():
        for a, b in spans:
            if not (np.isnan(v[a:b]).any() or np.isnan(hr[a:b]).any()):
                yield v[a:b], hr[a:b]


def hr_lag_s(data, spans, window_s: int = 61, max_lag_s: int = 120) -> int:
    """Lag (s) at which heart rate correlates best with the running speed, pooled over player-halves.

    Speed is first smoothed with a centred Hann window (zero phase: it moves no peak
    of a delayed copy, and unlike a flat window it has a single peak), since heart
    rate follows the minute-scale running intensity, not single strides.
    """
    kernel = np.hanning(window_s + 2)[1:-1]
    kernel /= kernel.sum()
    total = np.zeros(max_lag_s + 1)
    for v, hr in _whole_halves(data, spans):
        v = np.convolve(v - v.mean(), kernel, mode="same")
        hr = hr - hr.mean()
        total += [np.dot(v[:len(v) - lag], hr[lag:]) for lag in range(max_lag_s + 1)]
    return int(np.argmax(total))


def _ema(x: np.ndarray, tau_s: float) -> np.ndarray:
    out = np.empty_like(x)
    a = 1.0 - np.exp(-1.0 / tau_s)
    s = x[:30].mean()
    for i, value in enumerate(x):
        s += a * (value - s)
        out[i] = s
    return out


def hr_drift_bpm(data, spans, skip_s: int = 120) -> float:
    """The rise of heart rate over a half at the same running (bpm per half), by least squares.

    HR ~ intercept per player-half + lagged running (30 s and 50 s exponential means
    of speed, and their squares) + c * (share of the half elapsed); returns c. The
    first ``skip_s`` of each half (the climb from the warm-up level) are left out.
    """
    cols, ys, groups = [], [], []
    for g, (v, hr) in enumerate(_whole_halves(data, spans)):
        e30, e50 = _ema(v, 30.0), _ema(v, 50.0)
        u = np.arange(len(v)) / len(v)
        cols.append(np.column_stack([e30, e50, e30 ** 2, e50 ** 2, u])[skip_s:])
        ys.append(hr[skip_s:])
        groups.append(np.full(len(v) - skip_s, g))
    x, y, grp = np.vstack(cols), np.concatenate(ys), np.concatenate(groups)
    design = np.hstack([np.eye(grp.max() + 1)[grp], x])
    return float(np.linalg.lstsq(design, y, rcond=None)[0][-1])


# --------------------------------------------------------------------------
# fixtures (module scope: each folder is written once)
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def short(tmp_path_factory) -> pathlib.Path:
    """3 minutes at 25 fps with every fault, compressed: what `pacewire synth --wearables --minutes 3` writes."""
    return synth.write_match(tmp_path_factory.mktemp("short"), minutes=3, fps=25, seed=11, wearables=True)


@pytest.fixture(scope="module")
def clean(tmp_path_factory) -> pathlib.Path:
    """2 minutes at 10 fps, no faults, uncompressed (the whole-file validator rejects duplicates)."""
    return synth.write_match(tmp_path_factory.mktemp("clean"), minutes=2, fps=10, seed=4, faults=False,
                             compress=False, wearables=True)


def _physio(tmp_path_factory, name: str, **patch) -> tuple[dict, list]:
    """20 minutes at 10 fps without faults (a jump would spoil the speeds), per second;
    ``patch`` overrides model constants of replay/synth/ for a control."""
    with pytest.MonkeyPatch.context() as mp:
        for key, value in patch.items():
            mp.setattr(synth.wearables, key, value)
        folder = synth.write_match(tmp_path_factory.mktemp(name), minutes=20, fps=10, seed=5, faults=False,
                                   compress=False, wearables=True)
    return _per_second(folder)


@pytest.fixture(scope="module")
def physio(tmp_path_factory):
    return _physio(tmp_path_factory, "physio")


# --------------------------------------------------------------------------
# CDF validity
# --------------------------------------------------------------------------
def test_meta_is_valid_cdf_and_only_gnss_pitch_is_unknown(clean):
    # strict mode passes; the one advisory is the calibration key, which CDF v0.3.2 does not define
    advisories = _cdf_findings(cdf.MetaSchemaValidator(), "strict", sample=clean / "meta.json")
    assert advisories == ["meta.json/venue: unknown field 'gnss_pitch'"]
    meta = _json(clean / "meta.json")
    assert meta["teams"]["away"]["players"] == [] and meta["teams"]["away"]["id"] == "t_corvane"
    assert meta["teams"]["away"]["name"] == "Corvane Vale Rovers"
    # the calibration is the contract's corner form, and a 105 x 68 m rectangle at lat 47.5, long -30.0
    cal = parse_calibration(meta["venue"]["gnss_pitch"])
    assert set(meta["venue"]["gnss_pitch"]) == {"corners"}
    proj = PitchProjection.from_calibration(cal)
    assert proj.length_m == pytest.approx(105.0, abs=0.01) and proj.width_m == pytest.approx(68.0, abs=0.01)
    assert proj.centre == pytest.approx((47.5, -30.0), abs=1e-7)


def test_tracking_is_valid_cdf_except_for_the_missing_ball(clean, tmp_path):
    # CDF v0.3.2 makes `ball` a required property, and the validator refuses a ball with null
    # coordinates; docs/wearables.md says wearables frames carry no ball. So the whole file
    # (limit=None: cross-frame checks too) must show exactly one finding per line: the ball.
    lines = (clean / "tracking.jsonl").read_bytes().splitlines()
    findings = _cdf_findings(cdf.TrackingSchemaValidator(), "soft", sample=clean / "tracking.jsonl", limit=None)
    assert len(findings) == len(lines) > 1000
    assert all(f.split("\n")[0].endswith("Schema validation failed - 'ball' is a required property") for f in findings)
    # strict mode raises for that reason and no other
    one = tmp_path / "one.jsonl"
    one.write_bytes(lines[0] + b"\n")
    with pytest.raises(jsonschema.ValidationError, match="'ball' is a required property"), \
            contextlib.redirect_stdout(io.StringIO()):
        cdf.TrackingSchemaValidator().validate_schema(sample=one, mode="strict", limit=None)


# --------------------------------------------------------------------------
# one team, no ball, GNSS
# --------------------------------------------------------------------------
def test_one_team_only_no_ball_and_the_home_roster_with_heart_rate_profiles(short):
    sheet = _json(short / "match.json")
    home = sheet["teams"]["home"]["players"]
    assert sheet["teams"]["away"]["players"] == [] and sheet["teams"]["away"]["id"] == "t_corvane"
    assert len(home) == 16  # the normal demo's home squad: 11 starters and a bench of 5
    for p in home:
        assert 180 <= p["hr_max_bpm"] <= 205 and p["sex"] in ("male", "female")  # from memory: professional players
    rests = [p["hr_rest_bpm"] for p in home if "hr_rest_bpm" in p]
    assert len(rests) == 15 and all(40 <= r <= 60 for r in rests)  # one left out, on purpose (replay/synth/)
    assert len({p["hr_max_bpm"] for p in home}) >= 12  # varied
    home_ids = {p["id"] for p in home}
    home_subs = sheet["events"]["substitutions"]
    assert home_subs and {s["team_id"] for s in home_subs} == {"t_quillhaven"}
    seen: dict[str, list[float]] = {}
    for f in _frames(short):
        assert "ball" not in f
        assert f["teams"]["away"] == {"id": "t_corvane", "players": []}
        for p in f["teams"]["home"]["players"]:
            assert set(p) == {"id", "x", "y", "lat", "long"}
            seen.setdefault(p["id"], []).append(_s(f["timestamp"]))
    assert set(seen) <= home_ids
    for s in home_subs:  # the home team's substitutions, as in the normal demo
        assert min(seen[s["in_player_id"]]) == pytest.approx(_s(s["in_time"]))
        assert max(seen[s["out_player_id"]]) < _s(s["in_time"])


def test_lat_long_project_back_to_x_y_within_2_cm(short):
    # 7 decimals of a degree is ~1.1 cm of latitude (the synth writes ~1 cm fixes); the projection back
    # goes through pacewire.wire.gnss (pymap3d), independent of how the synth placed them
    proj = PitchProjection.from_calibration(_json(short / "meta.json")["venue"]["gnss_pitch"])
    rows = np.array([(p["x"], p["y"], p["lat"], p["long"])
                     for f in _frames(short) for p in f["teams"]["home"]["players"]])
    x, y = proj.to_pitch(rows[:, 2], rows[:, 3])
    err = np.hypot(x - rows[:, 0], y - rows[:, 1])
    assert err.max() <= 0.02
    assert np.all(np.round(rows[:, 2:], 7) == rows[:, 2:])
    # not a copy of x/y: the pitch is turned (bearing) and far from the origin of the degrees
    assert np.ptp(rows[:, 2]) > 0 and abs(np.corrcoef(rows[:, 0], rows[:, 2])[0, 1]) < 0.99


def test_one_unit_is_switched_on_late(short):
    (late,) = _faults(short, "unit_late")
    frames = _frames(short)
    ids_with = [f["frame_id"] for f in frames
                if any(p["id"] == late["player_id"] for p in f["teams"]["home"]["players"])]
    # 3 minutes in a full match, scaled like the scripted stoppages (x0.25 for a 3-minute clip)
    assert late["duration_s"] == pytest.approx(180 * 0.25)
    assert min(ids_with) == late["frame_ids"][-1] + 1 and not set(ids_with) & set(late["frame_ids"])
    hr = [_s(h["timestamp"]) for h in _hr(short) if h["player_id"] == late["player_id"]]
    assert min(hr) >= late["duration_s"] and min(hr) < late["duration_s"] + 1.0


# --------------------------------------------------------------------------
# heart rate
# --------------------------------------------------------------------------
def test_hr_samples_are_1_hz_time_ordered_and_only_while_the_unit_is_on(short):
    samples = _hr(short)
    assert [list(h) for h in samples[:1]] == [["player_id", "timestamp", "bpm"]]
    t = [_s(h["timestamp"]) for h in samples]
    assert t == sorted(t)
    assert all(isinstance(h["bpm"], int) for h in samples)
    frames = _frames(short)
    on: dict[str, list[float]] = {}
    for f in frames:
        for p in f["teams"]["home"]["players"]:
            on.setdefault(p["id"], []).append(_s(f["timestamp"]))
    periods = _json(short / "meta.json")["match"]["periods"]
    spans = [(_s(p["start_time"]), _s(p["end_time"])) for p in periods]
    drop = _faults(short, "hr_dropout")[0]
    # tracking faults hide players from the frames, not from the heart-rate channel
    hidden = [(f["player_id"], _s(f["time"]), _s(f["time"]) + f["duration_s"])
              for f in _json(short / "faults.json")["faults"] if f["kind"] in ("outage", "dropout")]
    by_player: dict[str, list[float]] = {}
    for h, ts in zip(samples, t, strict=True):
        by_player.setdefault(h["player_id"], []).append(ts)
        assert any(a <= ts < b for a, b in spans)  # the break is not streamed
    assert set(by_player) == set(on)
    for pid, ts in by_player.items():
        gaps = np.round(np.diff(ts), 3)
        regular = gaps == 1.0
        # 1 Hz, except across the break, and across the listed strap dropout
        assert (~regular).sum() <= 1 + (pid == drop["player_id"]), (pid, gaps[~regular])
        seen = np.array(on[pid])
        # each sample while the player is in the frames (within a second of one of his frames)
        for s in ts[::5]:
            if not any(who in (None, pid) and a - 1.0 <= s <= b + 1.0 for who, a, b in hidden):
                assert np.min(np.abs(seen - s)) <= 1.0, (pid, s)


def test_hr_dropout_and_spike_are_where_faults_json_says(short):
    samples = _hr(short)
    (drop,) = _faults(short, "hr_dropout")
    assert 60.0 <= drop["duration_s"] <= 90.0  # replay/synth/wearables.py HR_DROPOUT_S: a 60-90 s strap dropout
    ts = [_s(h["timestamp"]) for h in samples if h["player_id"] == drop["player_id"]]
    before, after = _s(drop["last_sample_before"]), _s(drop["first_sample_after"])
    assert before in ts and after in ts and not [s for s in ts if before < s < after]
    assert after - before == pytest.approx(drop["duration_s"] + 1.0)
    assert drop["samples_missing"] == round(after - before) - 1
    (spike,) = _faults(short, "hr_spike")
    hits = [h for h in samples if h["bpm"] == SPIKE_BPM]
    assert hits == [{"player_id": spike["player_id"], "timestamp": spike["time"], "bpm": SPIKE_BPM}]


def test_hr_stays_in_a_plausible_range(short, physio):
    spike = _faults(short, "hr_spike")[0]
    bpm = [h["bpm"] for h in _hr(short) if h["timestamp"] != spike["time"]]
    assert HR_LOW_BPM <= min(bpm) and max(bpm) <= HR_HIGH_BPM
    data, spans = physio
    hr = np.concatenate([h[~np.isnan(h)] for _, h in data.values()])
    assert HR_LOW_BPM <= hr.min() and hr.max() <= HR_HIGH_BPM
    sheet = {p["id"]: p for p in _json(short / "match.json")["teams"]["home"]["players"]}
    # outfield players average ~80-90 % of HRmax over a match (Stolen et al. 2005, Sports Med 35:501)
    pct = [np.nanmean(h) / sheet[pid]["hr_max_bpm"] for pid, (v, h) in data.items()
           if pid != "qht_01" and np.count_nonzero(~np.isnan(h)) > 600]
    assert 0.72 <= float(np.mean(pct)) <= 0.92, pct


def test_hr_peaks_after_the_running_does(physio, tmp_path_factory):
    # replay/synth/wearables.py HR_TAU_UP_S/HR_TAU_DOWN_S: time constants 25-60 s give a lag the
    # cross-correlation puts at 10-60 s
    lag = hr_lag_s(*physio)
    assert 10 <= lag <= 60, lag
    # control: the same match with an (almost) instant heart rate peaks at once, so the measure can fail
    instant = _physio(tmp_path_factory, "instant", HR_TAU_UP_S=(0.5, 0.5), HR_TAU_DOWN_S=(0.5, 0.5))
    assert hr_lag_s(*instant) <= 3


def test_hr_drifts_up_over_each_half(physio, tmp_path_factory):
    # cardiovascular drift, a few bpm per half at the same running (Coyle & Gonzalez-Alonso 2001)
    drift = hr_drift_bpm(*physio)
    assert 2.0 <= drift <= 8.0, drift
    # control: without the drift term the same fit finds (almost) none, so the measure can fail
    flat = _physio(tmp_path_factory, "flat", HR_DRIFT_BPM=(0.0, 0.0))
    assert abs(hr_drift_bpm(*flat)) < 1.5


# --------------------------------------------------------------------------
# determinism, CLI, the normal output
# --------------------------------------------------------------------------
def _bytes(folder: pathlib.Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_same_seed_same_bytes_and_the_cli_writes_them(tmp_path):
    a = _bytes(synth.write_match(tmp_path / "a", minutes=2, seed=5, wearables=True))
    assert synth.main(["--out", str(tmp_path / "b"), "--minutes", "2", "--seed", "5", "--wearables"]) == 0
    b = _bytes(tmp_path / "b")
    c = _bytes(synth.write_match(tmp_path / "c", minutes=2, seed=6, wearables=True))
    assert set(a) == {"meta.json", "match.json", "tracking.jsonl.gz", "hr.jsonl", "faults.json"}
    assert a == b
    assert a["hr.jsonl"] != c["hr.jsonl"] and a["faults.json"] != c["faults.json"]


def test_the_normal_match_is_the_same_match_and_leaves_no_hr_file(tmp_path, short):
    folder = tmp_path / "x"
    synth.write_match(folder, minutes=3, fps=25, seed=11, wearables=True)
    synth.write_match(folder, minutes=3, fps=25, seed=11)  # over it: a stale hr.jsonl would make it a HR recording
    assert not (folder / "hr.jsonl").exists()
    normal = {f["frame_id"]: f for f in _frames(folder)}
    for f in _frames(short)[::97]:  # same positions for the home team in the wearables variant
        got = {p["id"]: (p["x"], p["y"]) for p in f["teams"]["home"]["players"]}
        want = {p["id"]: (p["x"], p["y"]) for p in normal[f["frame_id"]]["teams"]["home"]["players"]}
        assert got.items() <= want.items()


# --------------------------------------------------------------------------
# replay into a real server
# --------------------------------------------------------------------------
HEALTH_COUNTS = ("frames", "duplicates", "late", "rejected", "jumps", "hr_rejected", "hr_duplicates", "hr_late")


def _leaves(d, path=""):
    if isinstance(d, dict):
        for k, v in d.items():
            yield from _leaves(v, f"{path}.{k}")
    else:
        yield path, d


def _differences(got: dict, want: dict, limit: int = 8) -> list:
    g, w = dict(_leaves(got)), dict(_leaves(want))
    return [(k, g.get(k), w.get(k)) for k in sorted(set(g) | set(w)) if g.get(k) != w.get(k)][:limit]


def _assert_same(got: dict, want: dict, windows: bool = True) -> None:
    def strip(figs: dict) -> dict:
        return figs if windows else {pid: {k: v for k, v in p.items() if k != "windows"} for pid, p in figs.items()}

    g, w = strip(player_figures(got)), strip(player_figures(want))
    assert g == w, _differences(g, w)
    for team, body in want["teams"].items():
        assert got["teams"][team]["tracked"] == body["tracked"]
        outfield = {k: v for k, v in (body.get("outfield") or {}).items() if windows or k != "windows"}
        assert {k: v for k, v in (got["teams"][team].get("outfield") or {}).items() if k in outfield} == outfield
    assert {k: got["health"][k] for k in HEALTH_COUNTS} == {k: want["health"][k] for k in HEALTH_COUNTS}


@pytest.fixture(scope="module")
def whole(tmp_path_factory) -> pathlib.Path:
    """190 s of play, every fault: both halves end on a whole second (94 s and 96 s), see
    test_windows_when_a_period_ends_between_whole_seconds for why that matters."""
    return synth.write_match(tmp_path_factory.mktemp("whole"), minutes=190 / 60, fps=25, seed=11, wearables=True)


def test_replay_at_max_speed_gives_the_figures_of_analyze(server, whole):
    prog = Progress(io.StringIO())
    sent, last = asyncio.run(replay(whole, f"{server.ws}/ingest/m_wear", None, progress=prog))
    assert last.period == "second_half" and prog.hr_sent == len(_hr(whole))
    want = analyze_folder(whole).snapshot()
    p = want["players"]["qht_05"]  # HR figures are there, with the omitted one explained
    assert p["hr_mean_bpm"] > 0 and "trimp_banister" in p["hr_omitted"]
    assert want["health"]["hr_rejected"] == 1  # the spike (docs/wearables.md: implausible_bpm > 230)
    _assert_same(settled_snapshot(server, "m_wear"), want)


def test_seek_posts_the_earlier_heart_rate_and_gives_the_same_figures(server, whole):
    prog = Progress(io.StringIO())
    sent, last = asyncio.run(replay(whole, f"{server.ws}/ingest/m_seek", 50.0, start_s=60.0, progress=prog))
    assert last.period == "second_half" and prog.hr_sent == len(_hr(whole))
    want = analyze_folder(whole).snapshot()
    assert want["players"]["qht_05"]["hr_coverage"] > 0.9
    _assert_same(settled_snapshot(server, "m_seek"), want)


def test_windows_when_a_period_ends_between_whole_seconds(server, short):
    asyncio.run(replay(short, f"{server.ws}/ingest/m_mid", 50.0, start_s=120.0))
    got, want = settled_snapshot(server, "m_mid"), analyze_folder(short).snapshot()
    _assert_same(got, want, windows=False)  # everything else agrees
    _assert_same(got, want)
