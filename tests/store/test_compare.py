"""pacewire history compare: a synthetic live match against its post-processed twin reports the
deficit the feed faults put in, computed here independently from the twin's raw positions."""
from __future__ import annotations

import gzip
import statistics
from collections import defaultdict

import numpy as np
import orjson
import pytest

from pacewire.cli import main as cli
from pacewire.replay.synth import write_match, write_twin
from pacewire.store import history

MINUTES, SEED = 10, 3
BRIDGE_S = 1.0  # kinematics.bridge_gap_s in config/default.toml: shorter gaps are interpolated


def raw_paths(folder):
    """player -> period -> (frame ids, positions (n, 2)) from the twin's tracking file, as written."""
    out: dict[str, dict[str, list]] = defaultdict(lambda: defaultdict(list))
    with gzip.open(folder / "tracking.jsonl.gz") as fh:
        for line in fh:
            f = orjson.loads(line)
            for side in ("home", "away"):
                for p in f["teams"][side]["players"]:
                    out[p["id"]][f["period"]].append((f["frame_id"], p["x"], p["y"]))
    return {pid: {per: (np.array([r[0] for r in rows]), np.array([r[1:] for r in rows]))
                  for per, rows in pers.items()} for pid, pers in out.items()}


def removed_share(paths, hidden: dict[str, set[int]], fps: int) -> dict[str, float]:
    """Per player: the share of his raw path the live feed's hidden frames took away. A hidden run up to
    BRIDGE_S long still credits the straight line across it (the engine interpolates it); a longer one
    credits nothing."""
    out = {}
    for pid, pers in paths.items():
        total = lost = 0.0
        for ids, xy in pers.values():
            steps = np.hypot(*np.diff(xy, axis=0).T)
            total += steps.sum()
            gone = np.isin(ids, sorted(hidden.get(pid, set())))
            k = 0
            while k < len(ids):
                if not gone[k] or k == 0:
                    k += 1
                    continue
                j = k
                while j < len(ids) and gone[j]:
                    j += 1
                if j >= len(ids):
                    break
                path = steps[k - 1:j].sum()  # from the last seen sample to the next one
                chord = float(np.hypot(*(xy[j] - xy[k - 1])))
                lost += path - chord if (j - k) / fps <= BRIDGE_S else path
                k = j
        out[pid] = lost / total if total else 0.0
    return out


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    base = tmp_path_factory.mktemp("compare")
    live = write_match(base / "live", minutes=MINUTES, fps=25, seed=SEED)
    post = write_twin(base / "post", minutes=MINUTES, fps=25, seed=SEED)
    return base, live, post


def test_compare_reports_the_deficit_the_faults_put_in(pair, capsys):
    base, live, post = pair
    data = base / "data"
    assert cli(["history", "compare", str(live), str(post), "--data", str(data), "--min-minutes", "5",
                "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "distance_m" in out and "zones." in out
    rows = {d.figure: d for d in history.stored_deficits(data / "history.sqlite", "pw_synth_match")}
    faults = orjson.loads((live / "faults.json").read_bytes())["faults"]
    sheet = orjson.loads((post / "match.json").read_bytes())
    keepers = {p["id"] for side in ("home", "away") for p in sheet["teams"][side]["players"]
               if p["position_group"] == "GK"}
    paths = raw_paths(post)
    hidden: dict[str, set[int]] = defaultdict(set)
    for f in faults:
        if f["kind"] == "outage":  # every player's frames gone
            for pid in paths:
                hidden[pid].update(f["frame_ids"])
        elif f["kind"] == "dropout":
            hidden[f["player_id"]].update(f["frame_ids"])
    share = removed_share(paths, hidden, 25)
    starters = [pid for pid in paths if pid not in keepers and len(sum((list(i) for i, _ in paths[pid].values()), []))
                >= 5 * 60 * 25]
    expected = 100 * statistics.median(share[pid] for pid in starters)
    assert expected > 1.0  # the faults did take something away (the 20 s outage of a 10-minute match)
    # within a percentage point of what the hidden frames removed (the brief's tolerance; the engine's
    # smoothing and artefact rules see the same path a little differently from raw positions)
    print(f"distance deficit: compare {rows['distance_m'].median_pct:.2f} %, by hand {expected:.2f} %")
    assert rows["distance_m"].median_pct == pytest.approx(expected, abs=1.0)
    assert rows["distance_m"].players == len(starters)
    # the speed bands' deficits carry the same loss between them: never live above post by more than noise
    assert all(d.median_pct > -0.5 for d in rows.values())


def test_compare_refuses_two_different_matches(pair, tmp_path, capsys):
    _, live, _ = pair
    other = write_twin(tmp_path / "other", minutes=2, fps=25, seed=SEED)
    meta = orjson.loads((other / "meta.json").read_bytes())
    meta["match"]["id"] = "another_match"
    (other / "meta.json").write_bytes(orjson.dumps(meta))
    code = cli(["history", "compare", str(live), str(other), "--data", str(tmp_path / "d"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "not the same match" in err
