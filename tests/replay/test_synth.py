"""Tests of the synthetic (fictional) demo match generator, replay/synth/.

Short clips (2-4 minutes) keep each test fast; the full-match load check is
marked slow. Every check value names its source.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import gzip
import io
import math
import pathlib
import warnings

import cdf
import jsonschema
import numpy as np
import orjson
import pytest
from cdf.validators.custom import ValidationWarning

from pacewire.replay import synth
from pacewire.replay.synth import athletes
from tests.support.paths import DEMO_CLIP

FPS = 25
HALF_LENGTH_M = 52.5  # pitch 105 x 68 m, origin at the centre spot (CDF coordinates, replay/synth/)
HALF_WIDTH_M = 34.0
MAX_SPEED_MS = 10.5  # common practice: elite footballers peak at ~9.5-10.5 m/s
MAX_ACCEL_MS2 = 6.0  # common practice: smoothed (~1 s) |a| of players stays within ~6 m/s^2
SPRINT_MS = 7.0  # Di Salvo et al. 2009 sprint band, >= 25.2 km/h
OUTAGE_S = 20.0  # demo_feeds/README.md: a 20-second feed outage


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------
def _lines(folder: pathlib.Path) -> list[bytes]:
    """Raw tracking lines (with their "\\n"), in file order."""
    gz = folder / "tracking.jsonl.gz"
    raw = gzip.decompress(gz.read_bytes()) if gz.exists() else (folder / "tracking.jsonl").read_bytes()
    assert raw.endswith(b"\n") and b"\r" not in raw
    return raw.splitlines(keepends=True)


def _frames(folder: pathlib.Path) -> list[dict]:
    return [orjson.loads(line) for line in _lines(folder)]


def _ts(s: str) -> dt.datetime:
    return dt.datetime.fromisoformat(s)


def _validate(validator, **kwargs) -> None:
    """Validate in strict mode and also fail on any advisory warning (unknown keys)."""
    with warnings.catch_warnings(record=True) as caught, contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("always")
        validator.validate_schema(mode="strict", **kwargs)
    advisories = [str(w.message) for w in caught if issubclass(w.category, ValidationWarning)]
    assert not advisories, advisories[:3]


def _tracks(frames: list[dict]) -> dict[tuple[str, str], np.ndarray]:
    """(player id, period) -> array of (frame_id, x, y) rows."""
    out: dict[tuple[str, str], list] = {}
    for f in frames:
        for side in ("home", "away"):
            for p in f["teams"][side]["players"]:
                out.setdefault((p["id"], f["period"]), []).append((f["frame_id"], p["x"], p["y"]))
    return {k: np.array(v, float) for k, v in out.items()}


def _sg_kernel(deriv: int, window: int = FPS, order: int = 3) -> np.ndarray:
    """Savitzky-Golay derivative kernel (window samples, cubic), per second^deriv.

    Common practice (Winter, Biomechanics and Motor Control of Human Movement):
    a centred ~1 s local cubic fit; speed and acceleration come from the same fit.
    """
    half = window // 2
    t = np.arange(-half, half + 1) / FPS
    return np.linalg.pinv(np.vander(t, order + 1, increasing=True))[deriv] * math.factorial(deriv)


def _derivative(xy: np.ndarray, deriv: int) -> np.ndarray:
    """Smoothed derivative of an (n, 2) track ('valid' part: n - FPS rows)."""
    k = _sg_kernel(deriv)[::-1]
    return np.column_stack([np.convolve(xy[:, i], k, mode="valid") for i in range(xy.shape[1])])


# --------------------------------------------------------------------------
# fixtures (module scope: each clip is generated once)
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def clean(tmp_path_factory) -> pathlib.Path:
    """3-minute clip without faults, uncompressed."""
    return synth.write_match(tmp_path_factory.mktemp("clean"), minutes=3, fps=FPS, seed=11, faults=False,
                             compress=False)


@pytest.fixture(scope="module")
def faulty(tmp_path_factory) -> pathlib.Path:
    """3-minute clip with every fault, compressed."""
    return synth.write_match(tmp_path_factory.mktemp("faulty"), minutes=3, fps=FPS, seed=11, faults=True)


@pytest.fixture(scope="module")
def faults_doc(faulty) -> dict:
    return orjson.loads((faulty / "faults.json").read_bytes())


# --------------------------------------------------------------------------
# CDF validity
# --------------------------------------------------------------------------
def test_meta_is_valid_cdf(clean):
    _validate(cdf.MetaSchemaValidator(), sample=clean / "meta.json")
    meta = orjson.loads((clean / "meta.json").read_bytes())
    assert isinstance(meta["meta"]["tracking"]["fps"], int) and meta["meta"]["tracking"]["fps"] == FPS
    assert meta["venue"]["pitch_length"] == 105.0 and meta["venue"]["pitch_width"] == 68.0
    assert [p["period"] for p in meta["match"]["periods"]] == ["first_half", "second_half"]


def test_match_sheet_is_valid_cdf(clean):
    _validate(cdf.MatchSchemaValidator(), sample=clean / "match.json")
    sheet = orjson.loads((clean / "match.json").read_bytes())
    for side in ("home", "away"):
        players = sheet["teams"][side]["players"]
        starters = [p for p in players if p["is_starter"]]
        assert len(starters) == 11 and len(players) == 16  # 11 starters and a bench of 5
        assert [p["position_group"] for p in starters].count("GK") == 1
        assert {p["position_group"] for p in players} <= {"GK", "DF", "MF", "FW"}


def test_clean_tracking_file_is_valid_cdf_line_by_line_and_across_frames(tmp_path):
    # whole file with limit=None: schema of every line plus the cross-frame checks
    # (frame_id from 0 and increasing, timestamps never going back); 10 fps keeps it quick
    folder = synth.write_match(tmp_path, minutes=2, fps=10, seed=4, faults=False, compress=False)
    _validate(cdf.TrackingSchemaValidator(), sample=folder / "tracking.jsonl", limit=None)


def test_faulty_tracking_lines_are_each_valid_cdf(faulty, faults_doc):
    frames = _frames(faulty)
    ids = {fid for f in faults_doc["faults"] if f["kind"] != "outage" for fid in f["frame_ids"]}
    picked = [f for i, f in enumerate(frames) if f["frame_id"] in ids or i % 40 == 0]
    validator = cdf.TrackingSchemaValidator()
    for frame in picked:
        _validate(validator, sample=frame)
    assert len(picked) > 100


def test_faulty_sequence_is_rejected_by_the_whole_file_validator(faulty, faults_doc, tmp_path):
    # a duplicate frame must break the validator's cross-frame rule: proves the fault is real
    lines = _lines(faulty)
    dup = next(f for f in faults_doc["faults"] if f["kind"] == "duplicate")["frame_ids"][0]
    at = [i for i, line in enumerate(lines) if orjson.loads(line)["frame_id"] == dup]
    assert len(at) == 2 and at[1] == at[0] + 1
    path = tmp_path / "tracking.jsonl"
    path.write_bytes(lines[0] + lines[at[0]] + lines[at[1]])
    with pytest.raises(jsonschema.ValidationError), contextlib.redirect_stdout(io.StringIO()):
        cdf.TrackingSchemaValidator().validate_schema(sample=path, mode="strict", limit=None)


# --------------------------------------------------------------------------
# determinism and CLI
# --------------------------------------------------------------------------
def _bytes(folder: pathlib.Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_same_seed_gives_identical_bytes_and_another_seed_differs(tmp_path):
    a = _bytes(synth.write_match(tmp_path / "a", minutes=2, seed=5))
    b = _bytes(synth.write_match(tmp_path / "b", minutes=2, seed=5))
    c = _bytes(synth.write_match(tmp_path / "c", minutes=2, seed=6))
    assert set(a) == {"meta.json", "match.json", "tracking.jsonl.gz", "faults.json", "event.jsonl"}
    assert a == b
    assert a["tracking.jsonl.gz"] != c["tracking.jsonl.gz"]
    assert a["faults.json"] != c["faults.json"]


def test_cli_flags_switch_faults_and_compression(tmp_path):
    assert synth.main(["--out", str(tmp_path / "x"), "--minutes", "2", "--no-outage", "--no-compress"]) == 0
    kinds = {f["kind"] for f in orjson.loads((tmp_path / "x" / "faults.json").read_bytes())["faults"]}
    assert (tmp_path / "x" / "tracking.jsonl").exists() and not (tmp_path / "x" / "tracking.jsonl.gz").exists()
    assert "outage" not in kinds and {"dropout", "jump", "duplicate", "out_of_order"} <= kinds
    assert synth.main(["--out", str(tmp_path / "y"), "--minutes", "2", "--no-faults", "--seed", "3"]) == 0
    assert orjson.loads((tmp_path / "y" / "faults.json").read_bytes())["faults"] == []
    assert (tmp_path / "y" / "tracking.jsonl.gz").exists()


def test_committed_demo_clip_is_what_the_documented_command_writes(tmp_path):
    # demo_feeds/README.md: `python -m pacewire.replay.synth --out demo_feeds/clip --minutes 4 --seed 7`
    clip = DEMO_CLIP
    fresh = synth.write_match(tmp_path / "clip", minutes=4, seed=7)
    assert _bytes(fresh) == _bytes(clip)
    assert len((clip / "tracking.jsonl.gz").read_bytes()) < 3_000_000  # a clip small enough to commit: under 3 MB


# --------------------------------------------------------------------------
# timeline, rosters, substitutions
# --------------------------------------------------------------------------
def test_two_periods_with_a_15_minute_break(clean):
    frames = _frames(clean)
    periods = [f["period"] for f in frames]
    first = periods.index("second_half")
    assert set(periods[:first]) == {"first_half"} and set(periods[first:]) == {"second_half"}
    assert [f["frame_id"] for f in frames] == list(range(len(frames)))
    assert frames[0]["timestamp"] == "2026-03-14T15:00:00.000Z"
    step = dt.timedelta(seconds=1 / FPS)
    gap = _ts(frames[first]["timestamp"]) - _ts(frames[first - 1]["timestamp"])
    assert gap == dt.timedelta(minutes=15) + step  # demo_feeds/README.md: second half 15 min after the first ended
    meta = orjson.loads((clean / "meta.json").read_bytes())
    p1, p2 = meta["match"]["periods"]
    assert (p1["frame_id_start"], p1["frame_id_end"], p2["frame_id_start"]) == (0, first - 1, first)
    assert _ts(p2["start_time"]) == _ts(frames[first]["timestamp"])


def test_substitutions_in_sheet_match_the_frames(clean):
    sheet = orjson.loads((clean / "match.json").read_bytes())
    subs = sheet["events"]["substitutions"]
    for team in (sheet["teams"]["home"]["id"], sheet["teams"]["away"]["id"]):
        assert sum(s["team_id"] == team for s in subs) >= 2
    roster = {p["id"]: p for side in ("home", "away") for p in sheet["teams"][side]["players"]}
    seen: dict[str, list[str]] = {}
    for f in _frames(clean):
        for side in ("home", "away"):
            for p in f["teams"][side]["players"]:
                seen.setdefault(p["id"], []).append(f["timestamp"])
    for s in subs:
        t = _ts(s["in_time"])
        assert s["in_time"] == s["out_time"]
        assert roster[s["in_player_id"]]["is_starter"] is False and roster[s["in_player_id"]]["has_played"]
        assert roster[s["out_player_id"]]["is_starter"] is True
        assert _ts(min(seen[s["in_player_id"]])) == t  # appears exactly at the substitution
        assert _ts(max(seen[s["out_player_id"]])) < t  # gone from then on
    unused = [pid for pid, p in roster.items() if not p["has_played"]]
    assert unused and not any(pid in seen for pid in unused)
    for f in _frames(clean)[::50]:
        assert [len(f["teams"][s]["players"]) for s in ("home", "away")] == [11, 11]


# --------------------------------------------------------------------------
# movement
# --------------------------------------------------------------------------
def test_positions_stay_inside_the_pitch(clean, faulty):
    for folder in (clean, faulty):
        for f in _frames(folder):
            xs = [p["x"] for s in ("home", "away") for p in f["teams"][s]["players"]] + [f["ball"]["x"]]
            ys = [p["y"] for s in ("home", "away") for p in f["teams"][s]["players"]] + [f["ball"]["y"]]
            assert max(map(abs, xs)) <= HALF_LENGTH_M and max(map(abs, ys)) <= HALF_WIDTH_M


def test_speed_and_acceleration_are_humanly_possible(clean):
    # plain numpy: smoothed (1 s cubic) finite differences of the written (cm) positions
    vmax = amax = 0.0
    for (_, _), rows in _tracks(_frames(clean)).items():
        if len(rows) < 3 * FPS:
            continue
        assert (np.diff(rows[:, 0]) == 1).all()  # no gaps in a clean clip
        vmax = max(vmax, float(np.hypot(*_derivative(rows[:, 1:], 1).T).max()))
        amax = max(amax, float(np.hypot(*_derivative(rows[:, 1:], 2).T).max()))
    assert vmax <= MAX_SPEED_MS
    assert amax <= MAX_ACCEL_MS2
    assert vmax >= SPRINT_MS  # someone sprints even in a 3-minute clip (Di Salvo et al. 2009 band)


@pytest.fixture(scope="module")
def ten_minutes() -> synth.SynthMatch:
    """10 minutes of simulated play (arrays only, no files)."""
    return synth.simulate_match(minutes=10, fps=FPS, seed=2)


def test_team_shape_follows_the_ball(ten_minutes):
    m = ten_minutes
    for start, n in m.timeline.halves:
        ball = m.ball_xy[start:start + n].real
        for team in (0, 1):
            centroid = m.positions[start:start + n, 11 * team + 1:11 * team + 11].real.mean(axis=1)
            r = np.corrcoef(ball, centroid)[0, 1]
            assert r > 0.6, (team, r)  # common practice: team centroids track the ball


def test_players_near_the_ball_move_more(ten_minutes):
    m = ten_minutes
    near, far = [], []
    for start, n in m.timeline.halves:
        p = m.positions[start:start + n]
        speed = np.abs(np.diff(p, axis=0)) * FPS
        d = np.abs(p[:-1] - m.ball_xy[start:start + n - 1, None])
        live = (np.array([r != "GK" for r in m.slot_roles])[None, :]
                & m.ball_in_play[start:start + n - 1, None])  # outfield, ball in play
        near.append(speed[(d < 15.0) & live])
        far.append(speed[(d > 30.0) & live])
    # common practice: the players involved around the ball run more
    assert np.concatenate(near).mean() > 1.15 * np.concatenate(far).mean()


def test_ball_has_status_and_possession(clean, ten_minutes):
    frames = _frames(clean)
    teams = {orjson.loads((clean / "meta.json").read_bytes())["teams"][s]["id"] for s in ("home", "away")}
    assert {f["ball"]["poss_team_id"] for f in frames} == teams
    assert {f["ball"]["status"] for f in frames} == {True, False}
    assert min(f["ball"]["z"] for f in frames) >= 0.0
    # ball in play for roughly 55-70% of the time (common practice)
    assert 0.5 < ten_minutes.ball_in_play.mean() < 0.85
    switches = np.count_nonzero(np.diff(ten_minutes.ball_poss.astype(int)))
    assert 10 <= switches <= 200  # possession changes hands, but not every frame


# --------------------------------------------------------------------------
# injected faults
# --------------------------------------------------------------------------
def test_faults_json_lists_every_kind(faults_doc):
    kinds = [f["kind"] for f in faults_doc["faults"]]
    for kind in ("outage", "dropout", "jump", "duplicate", "out_of_order"):
        assert kind in kinds
    assert kinds.count("outage") == 1


def test_outage_is_a_20_second_hole(faulty, faults_doc):
    frames = _frames(faulty)
    ids = [f["frame_id"] for f in frames]
    out = next(f for f in faults_doc["faults"] if f["kind"] == "outage")
    assert not set(out["frame_ids"]) & set(ids)
    assert len(out["frame_ids"]) == int(OUTAGE_S * FPS)
    i = ids.index(out["last_frame_before"])
    assert frames[i + 1]["frame_id"] == out["first_frame_after"]
    gap = _ts(frames[i + 1]["timestamp"]) - _ts(frames[i]["timestamp"])
    assert gap == dt.timedelta(seconds=OUTAGE_S + 1 / FPS)
    assert _ts(out["time"]) == _ts(frames[i]["timestamp"]) + dt.timedelta(seconds=1 / FPS)


def test_dropouts_hide_exactly_the_listed_frames(faulty, faults_doc):
    by_id: dict[int, dict] = {}
    for f in _frames(faulty):
        by_id.setdefault(f["frame_id"], f)

    def present(fid: int, pid: str) -> bool:
        return any(p["id"] == pid for s in ("home", "away") for p in by_id[fid]["teams"][s]["players"])

    drops = [f for f in faults_doc["faults"] if f["kind"] == "dropout"]
    assert drops
    for d in drops:
        assert 0.5 <= d["duration_s"] <= 3.0  # demo_feeds/README.md: 0.5-3 s dropouts
        assert not any(present(fid, d["player_id"]) for fid in d["frame_ids"])
        assert present(d["frame_ids"][0] - 1, d["player_id"]) and present(d["frame_ids"][-1] + 1, d["player_id"])


def test_duplicates_swaps_and_jumps_are_where_listed(faulty, faults_doc):
    lines = _lines(faulty)
    ids = [orjson.loads(line)["frame_id"] for line in lines]
    faults = faults_doc["faults"]
    dups = {f["frame_ids"][0] for f in faults if f["kind"] == "duplicate"}
    swaps = {f["frame_ids"][0] for f in faults if f["kind"] == "out_of_order"}
    seen_dups, seen_swaps = set(), set()
    for i in range(1, len(ids)):
        if ids[i] == ids[i - 1]:
            assert lines[i] == lines[i - 1]  # an exact repeated line
            seen_dups.add(ids[i])
        elif ids[i] < ids[i - 1]:
            assert ids[i - 1] == ids[i] + 1  # two adjacent frames swapped
            seen_swaps.add(ids[i])
    assert seen_dups == dups and seen_swaps == swaps

    frames = {}
    for line in lines:
        f = orjson.loads(line)
        frames.setdefault(f["frame_id"], f)

    def pos(fid: int, pid: str) -> complex:
        p = next(p for s in ("home", "away") for p in frames[fid]["teams"][s]["players"] if p["id"] == pid)
        return complex(p["x"], p["y"])

    jumps = [f for f in faults if f["kind"] == "jump"]
    assert jumps
    for j in jumps:
        fid, pid = j["frame_ids"][0], j["player_id"]
        expected = (pos(fid - 1, pid) + pos(fid + 1, pid)) / 2
        off = abs(pos(fid, pid) - expected)
        assert 15.0 - 0.5 <= off <= 30.0 + 0.5  # demo_feeds/README.md: 15-30 m single-frame jumps
        assert abs(off - j["displacement_m"]) < 0.5


# --------------------------------------------------------------------------
# full match physical load (slow)
# --------------------------------------------------------------------------
@pytest.fixture(scope="module")
def full_match() -> synth.SynthMatch:
    return synth.simulate_match(minutes=95, fps=FPS, seed=0)


def _kinematics(m: synth.SynthMatch) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Speed (m/s) and tangential acceleration (m/s^2) of every slot, plain numpy from the
    positions with the 1 s cubic fit, and the own top speed (m/s) of the slot's player, all
    (frames, 22) over both halves (each half's 'valid' part)."""
    top = athletes.capacities(m.squad_index, m.slot_roles).top_speed_ms
    speeds, accels, tops = [], [], []
    for start, n in m.timeline.halves:
        p = m.positions[start:start + n]
        v = [_derivative(np.column_stack([c.real, c.imag]), 1) for c in p.T]
        a = [_derivative(np.column_stack([c.real, c.imag]), 2) for c in p.T]
        sp = np.column_stack([np.hypot(*x.T) for x in v])
        tangential = np.column_stack([(x * y).sum(axis=1) for x, y in zip(v, a, strict=True)]) / np.maximum(sp, 0.05)
        speeds.append(sp)
        accels.append(tangential)
        tops.append(top[start + FPS // 2:start + n - FPS // 2])
    return np.concatenate(speeds), np.concatenate(accels), np.concatenate(tops)


@pytest.mark.slow
def test_full_match_players_have_their_own_top_speed_and_seldom_come_near_it(full_match):
    m = full_match
    speed, _, top = _kinematics(m)
    outfield = np.array([r != "GK" for r in m.slot_roles])
    own = athletes.capacities(np.tile(np.arange(11), (1, 2)), m.slot_roles).top_speed_ms[0]  # the 22 starters
    # common practice (from memory): outfielders' maximal speeds roughly 29-35 km/h, goalkeepers slower
    assert (28.5 <= own[outfield] * 3.6).all() and (own[outfield] * 3.6 <= 36.0).all(), own * 3.6
    assert own[~outfield].max() < own[outfield].min()
    assert np.ptp(own[outfield]) * 3.6 >= 3.0  # players differ
    share = speed / top
    # players seldom exceed 90 % of their own maximum in a match (common practice, from memory):
    # seconds above it per player, and a match peak a little below the maximum
    above_s = (share > 0.9).sum(axis=0) / FPS
    assert (above_s <= 15.0).all(), above_s
    assert (share.max(axis=0) <= 1.0).all()
    assert 0.85 <= float(np.median(share.max(axis=0)[outfield])) <= 0.97


@pytest.mark.slow
def test_full_match_acceleration_capacity_falls_with_speed(full_match):
    speed, accel, _ = _kinematics(full_match)
    # Sonderegger et al. 2016: the largest acceleration reached falls as the starting speed rises
    bands = [(2.0, 3.5), (3.5, 5.0), (5.0, 6.5), (6.5, 8.0)]
    peak = [float(np.percentile(accel[(speed >= lo) & (speed < hi)], 99.9)) for lo, hi in bands]
    assert all(a > b for a, b in zip(peak, peak[1:], strict=False)), peak
    assert peak[0] > 3.0 > peak[-1], peak  # hard accelerations come from low speeds only
    # Harper et al. 2019: hard decelerations (< -3 m/s^2) happen from high speed too
    assert float(np.percentile(accel[speed >= 5.5], 0.1)) < -3.0


@pytest.mark.slow
def test_full_match_intensity_drops_late_in_each_half(full_match):
    # Mohr et al. 2003: less running, and less high-intensity running, in the last
    # 15 min of a half than in the first 15 min
    m = full_match
    window = 15 * 60 * FPS
    outfield = [c for c in range(22) if m.slot_roles[c] != "GK"]
    for start, n in m.timeline.halves:
        p = m.positions[start:start + n, outfield]
        speed = np.column_stack([np.hypot(*_derivative(np.column_stack([c.real, c.imag]), 1).T) for c in p.T])
        fast = np.where(speed >= 5.5, speed, 0.0)  # Bradley et al. 2009 high-speed band
        assert speed[-window:].sum() < 0.97 * speed[:window].sum()
        assert fast[-window:].sum() < 0.95 * fast[:window].sum()


@pytest.mark.slow
def test_full_match_sheet_is_valid_and_consistent_with_its_goals(full_match):
    sheet = synth.build_sheet(full_match)
    _validate(cdf.MatchSchemaValidator(), sample=sheet)
    goals = sheet["events"]["goals"]
    final = sheet["match"]["result"]["final"]
    ids = [sheet["teams"][s]["id"] for s in ("home", "away")]
    assert [sum(g["team_id"] == t for g in goals) for t in ids] == [final["home"], final["away"]]
    ts = full_match.timeline.timestamps()
    for g in goals:  # the ball is at the goal line when a goal is recorded
        frame = ts.index(g["time"])
        assert abs(full_match.ball_xy[frame].real) > 50.0
    assert len(sheet["events"]["cards"]) == 2
