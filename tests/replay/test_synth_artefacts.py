"""The synthetic match's tracking-artefact models (replay/synth/artefacts.py): off by default,
switched on one by one, each artefact where faults.json says, of the size it says, on valid CDF.

Every check value names its source: the model constants (our own fault models; see the module)
or the CDF validator.
"""
from __future__ import annotations

import contextlib
import io
import pathlib
import warnings

import cdf
import numpy as np
import orjson
import pytest

from pacewire.replay import synth
from pacewire.replay.synth import artefacts as models

FPS = 10  # broadcast-derived and GNSS feeds run at about 10 Hz
MINUTES = 3
NO_FEED_FAULTS = {"outage": False, "dropouts": False, "duplicates": False, "out_of_order": False, "jumps": False}
NEW_KINDS = {"slide", "camera_gap", "reentry_slide", "jitter", "gnss_wander", "multipath"}


def _write(folder: pathlib.Path, **switches: bool) -> pathlib.Path:
    return synth.write_match(folder, minutes=MINUTES, fps=FPS, seed=21, compress=False, **NO_FEED_FAULTS,
                             **switches)


def _positions(folder: pathlib.Path) -> dict[tuple[int, str], complex]:
    """(frame id, player id) -> written position."""
    out = {}
    for line in (folder / "tracking.jsonl").read_bytes().splitlines():
        f = orjson.loads(line)
        for side in ("home", "away"):
            for p in f["teams"][side]["players"]:
                out[(f["frame_id"], p["id"])] = complex(p["x"], p["y"])
    return out


def _faults(folder: pathlib.Path) -> list[dict]:
    return orjson.loads((folder / "faults.json").read_bytes())["faults"]


def _meta_profile(folder: pathlib.Path) -> str | None:
    return orjson.loads((folder / "meta.json").read_bytes())["meta"]["tracking"].get("feed_profile")


@pytest.fixture(scope="module")
def written(tmp_path_factory) -> dict[str, pathlib.Path]:
    root = tmp_path_factory.mktemp("artefacts")
    return {"clean": _write(root / "clean", faults=False), "slides": _write(root / "slides", slides=True),
            "camera_gaps": _write(root / "camera_gaps", camera_gaps=True), "gnss": _write(root / "gnss", gnss=True)}


@pytest.fixture(scope="module")
def clean_positions(written) -> dict[tuple[int, str], complex]:
    return _positions(written["clean"])


def test_off_by_default(tmp_path):
    # the defaults write the feed faults of before and none of the artefacts, and name no feed profile
    folder = synth.write_match(tmp_path / "d", minutes=2, fps=FPS, seed=21, compress=False)
    kinds = {f["kind"] for f in _faults(folder)}
    assert kinds and not kinds & NEW_KINDS
    assert _meta_profile(folder) is None


def test_cli_switches_each_model(tmp_path):
    flags = {"--slides": {"slide", "jitter"}, "--camera-gaps": {"camera_gap", "reentry_slide", "jitter"},
             "--gnss-errors": {"multipath", "gnss_wander", "jitter"}}
    for flag, kinds in flags.items():
        out = tmp_path / flag.strip("-")
        assert synth.main(["--out", str(out), "--minutes", "2", "--fps", str(FPS), "--no-faults"]) == 0
        assert not {f["kind"] for f in _faults(out)} & NEW_KINDS
        # the other faults off (the event stream's too: they share the fault log); in two minutes they
        # would leave no room for a 6 s camera gap
        assert synth.main(["--out", str(out), "--minutes", "2", "--fps", str(FPS), flag, "--no-outage",
                           "--no-dropouts", "--no-duplicates", "--no-out-of-order", "--no-jumps",
                           "--no-event-gap", "--no-event-lag", "--no-corrections"]) == 0
        assert {f["kind"] for f in _faults(out)} == kinds


def test_each_model_names_its_feed_profile(written):
    # config/default.toml: broadcast-derived tracking and GNSS/LPS units have their own profiles
    assert _meta_profile(written["slides"]) == _meta_profile(written["camera_gaps"]) == "broadcast"
    assert _meta_profile(written["gnss"]) == "wearable"
    assert _meta_profile(written["clean"]) is None


def test_slides_are_where_and_how_large_faults_json_says(written, clean_positions):
    faulted = _positions(written["slides"])
    slides = [f for f in _faults(written["slides"]) if f["kind"] == "slide"]
    players = {p for _, p in clean_positions}
    per_player_min = len(slides) / len(players) / MINUTES
    lo, hi = models.SLIDE_EVERY_S
    assert 60 / hi * 0.6 <= per_player_min <= 60 / lo  # one every 12-28 s per player (the model), some skipped
    for s in slides:
        assert models.SLIDE_OFFSET_M[0] <= s["offset_m"] <= models.SLIDE_OFFSET_M[1]
        assert models.SLIDE_GLIDE_S[0] <= s["duration_s"] <= models.SLIDE_GLIDE_S[1] + 1.0 / FPS
        off = [abs(faulted[(f, s["player_id"])] - clean_positions[(f, s["player_id"])]) for f in s["frame_ids"]]
        # the first frame is off by the offset (plus the 0.15 m jitter, 4 sd, and clipping at the pitch bounds)
        assert off[0] == pytest.approx(s["offset_m"], abs=4 * models.BROADCAST_JITTER_M * 1.5) or off[0] < s["offset_m"]
        assert off[0] > 1.5
        after = s["frame_ids"][-1] + 1
        assert abs(faulted[(after, s["player_id"])] - clean_positions[(after, s["player_id"])]) < 1.0  # back on him


def test_jitter_has_the_size_faults_json_says(written, clean_positions):
    faulted = _positions(written["slides"])
    listed = {(f, s["player_id"]) for s in _faults(written["slides"]) if s["frame_ids"] for f in s["frame_ids"]}
    d = np.array([faulted[k] - clean_positions[k] for k in clean_positions if k not in listed and k in faulted])
    jitter = next(f for f in _faults(written["slides"]) if f["kind"] == "jitter")
    assert jitter["sd_m"] == models.BROADCAST_JITTER_M and jitter["frame_ids"] == []
    # sd per axis as listed, within 5 % (thousands of samples); positions are written to the centimetre
    assert np.std(d.real) == pytest.approx(jitter["sd_m"], rel=0.05)
    assert np.std(d.imag) == pytest.approx(jitter["sd_m"], rel=0.05)


def test_camera_gaps_hide_the_listed_frames_then_a_slide(written, clean_positions):
    faulted = _positions(written["camera_gaps"])
    faults = _faults(written["camera_gaps"])
    gaps = [f for f in faults if f["kind"] == "camera_gap"]
    reentries = {(f["frame_ids"][0], f["player_id"]): f for f in faults if f["kind"] == "reentry_slide"}
    assert gaps and len(gaps) == len(reentries)
    for g in gaps:
        assert models.CAMERA_GAP_S[0] <= g["duration_s"] <= models.CAMERA_GAP_S[1] + 1.0 / FPS
        assert not any((f, g["player_id"]) in faulted for f in g["frame_ids"])
        assert (g["frame_ids"][0] - 1, g["player_id"]) in faulted
        back = g["frame_ids"][-1] + 1
        r = reentries[(back, g["player_id"])]  # the player comes back off by the slide's offset
        assert abs(faulted[(back, g["player_id"])] - clean_positions[(back, g["player_id"])]) > 1.5
        assert models.SLIDE_OFFSET_M[0] <= r["offset_m"] <= models.SLIDE_OFFSET_M[1]


def test_gnss_errors_have_the_listed_sizes(written, clean_positions):
    faulted = _positions(written["gnss"])
    faults = _faults(written["gnss"])
    multipath = [f for f in faults if f["kind"] == "multipath"]
    assert multipath
    for mp in multipath:
        assert models.MULTIPATH_OFFSET_M[0] <= mp["offset_m"] <= models.MULTIPATH_OFFSET_M[1]
        worst = max(abs(faulted[(f, mp["player_id"])] - clean_positions[(f, mp["player_id"])]) for f in mp["frame_ids"])
        # held at the offset, give or take the wandering error (3 sd of about 0.7 m) and the jitter
        assert abs(worst - mp["offset_m"]) < 3.0
    listed = {(f, m["player_id"]) for m in multipath for f in m["frame_ids"]}
    d = np.array([faulted[k] - clean_positions[k] for k in clean_positions if k not in listed and k in faulted])
    rmse = float(np.sqrt(np.mean(np.abs(d) ** 2)))
    # jitter 0.1 m and wander 0.5 m per axis: about 0.72 m RMS, near the 0.96 m of GPS (Linke et al. 2018)
    expected = float(np.hypot(models.GNSS_JITTER_M, models.GNSS_WANDER_M) * np.sqrt(2))
    assert rmse == pytest.approx(expected, rel=0.25)


def test_faulted_lines_are_valid_cdf(written):
    validator = cdf.TrackingSchemaValidator()
    for name in ("slides", "camera_gaps", "gnss"):
        lines = (written[name] / "tracking.jsonl").read_bytes().splitlines()
        for line in lines[::50]:
            with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()):
                warnings.simplefilter("ignore")
                validator.validate_schema(sample=orjson.loads(line), mode="strict")


def test_same_seed_same_bytes(tmp_path):
    a = _write(tmp_path / "a", slides=True, camera_gaps=True, gnss=True)
    b = _write(tmp_path / "b", slides=True, camera_gaps=True, gnss=True)
    for name in ("tracking.jsonl", "faults.json", "meta.json"):
        assert (a / name).read_bytes() == (b / name).read_bytes()
