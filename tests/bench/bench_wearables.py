"""Wearable feeds against the plain x/y run (docs/wearables.md): GNSS fixes and heart rate, same match.

One tracked team of 11 (fictional; the other team empty, no ball), 25 Hz, the
smooth synthetic movement of ``bench_engine.synth_match``; 10 minutes in quick
mode, 95 in full. Every run decodes JSON lines and steps the engine in 1 s
blocks, as ``pacewire analyze`` does, and ends with one snapshot:

* baseline: frames with ``x``/``y``;
* ``wearables_gnss_vs_xy``: the same frames carrying ``lat``/``long`` only, on a
  fictional ground (lat 47.5, long -30.0); each frame's fixes go through
  ``PitchProjection.to_pitch`` (pymap3d) in the decoder;
* ``wearables_hr_vs_xy``: x/y frames plus 1 Hz heart-rate samples of every
  player, decoded and settled as tracking reaches them.

Each timing is the best of 3. ``ratio`` = run time / baseline time.

    python -m tests.bench.bench_wearables [--quick]
"""
from __future__ import annotations

import os
import sys

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one-core figures (before numpy loads)

import numpy as np  # noqa: E402
import orjson  # noqa: E402

from pacewire.analyze import new_match  # noqa: E402
from pacewire.config import load_settings  # noqa: E402
from pacewire.engine.snapshot import build_snapshot  # noqa: E402
from pacewire.wire.gnss import PitchProjection, rectangle  # noqa: E402
from pacewire.wire.heart import HrDecoder  # noqa: E402
from tests.bench.bench_engine import best_of, synth_match  # noqa: E402
from tests.support import cdf_build as cb  # noqa: E402

FPS = 25
N_TEAM = 11
GROUND = (47.5, -30.0, 105.0, 68.0, 23.0)  # fictional: open sea


def build(minutes: float) -> tuple[dict, dict, list[list[bytes]], list[list[bytes]], list[bytes]]:
    """(meta, sheet, x/y line blocks, lat/long line blocks, heart-rate lines) for one team."""
    m = synth_match(minutes)
    xy = np.concatenate(m.halves)[:, :N_TEAM]  # the home starters (first half only keeps the clock simple)
    meta = cb.meta("m_wear", FPS)
    meta["venue"] = {"id": "v_fict", "gnss_pitch": rectangle(*GROUND).model_dump(exclude_none=True)}
    sheet = cb.sheet(N_TEAM, 0, gk=("h1",))
    for k, p in enumerate(sheet["teams"]["home"]["players"]):
        p.update(hr_max_bpm=185.0 + k, hr_rest_bpm=48.0, sex="male" if k % 2 else "female")
    proj = PitchProjection.from_calibration(rectangle(*GROUND))
    lat, lon = proj.to_gnss(xy[..., 0], xy[..., 1])
    ids = [f"h{i + 1}" for i in range(N_TEAM)]
    plain, gnss = [], []
    for k in range(xy.shape[0]):
        head = {"frame_id": k, "timestamp": cb.stamp(k / FPS), "period": "first_half", "match": {"id": "m_wear"}}
        away = {"id": cb.AWAY, "players": []}
        plain.append(orjson.dumps({**head, "teams": {"home": {"id": cb.HOME, "players": [
            {"id": pid, "x": round(float(xy[k, j, 0]), 3), "y": round(float(xy[k, j, 1]), 3)}
            for j, pid in enumerate(ids)]},
            "away": away}}))
        gnss.append(orjson.dumps({**head, "teams": {"home": {"id": cb.HOME, "players": [
            {"id": pid, "lat": round(float(lat[k, j]), 8), "long": round(float(lon[k, j]), 8)}
            for j, pid in enumerate(ids)]},
            "away": away}}))
    speed = np.linalg.norm(np.diff(xy, axis=0), axis=-1) * FPS
    hr = []
    for s in range(xy.shape[0] // FPS):
        v = speed[s * FPS: (s + 1) * FPS].mean(axis=0)
        for j, pid in enumerate(ids):
            bpm = round(float(110 + 12 * v[j]))
            hr.append(orjson.dumps({"player_id": pid, "timestamp": cb.stamp(s + 0.3), "bpm": bpm}))
    blocks = lambda lines: [lines[i:i + FPS] for i in range(0, len(lines), FPS)]  # noqa: E731
    return meta, sheet, blocks(plain), blocks(gnss), hr


def run_match(meta: dict, sheet: dict, blocks: list[list[bytes]], hr: list[bytes] | None) -> dict:
    state, dec = new_match(meta, sheet, load_settings())
    hdec = HrDecoder(state.roster, state.params.heart) if hr else None
    per_s = N_TEAM
    for k, lines in enumerate(blocks):
        if hdec is not None:  # the heart-rate second that goes with this block, as a live feed sends it
            state.ingest_heart(hdec.decode_lines(hr[k * per_s:(k + 1) * per_s]))  # type: ignore[index]
        state.ingest(dec.decode_lines(lines))
    state.finish()
    return build_snapshot(state)


def run(quick: bool) -> dict[str, dict]:
    minutes = 10.0 if quick else 95.0
    meta, sheet, plain, gnss, hr = build(minutes)
    t_xy, snap_xy = best_of(lambda: run_match(meta, sheet, plain, None))
    t_gnss, snap_gnss = best_of(lambda: run_match(meta, sheet, gnss, None))
    t_hr, snap_hr = best_of(lambda: run_match(meta, sheet, plain, hr))
    # the three runs describe one match: GNSS distance within 0.1% of x/y (both from the same paths)
    d_xy = sum(p["distance_m"] for p in snap_xy["players"].values())
    d_gnss = sum(p["distance_m"] for p in snap_gnss["players"].values())
    assert abs(d_gnss - d_xy) <= 1e-3 * d_xy, (d_gnss, d_xy)
    assert all(p.get("trimp_edwards") for p in snap_hr["players"].values() if p["minutes"])
    frames = sum(len(b) for b in plain)
    return {
        "wearables_us_per_frame_xy": {"value": round(t_xy / frames * 1e6, 1), "unit": "µs", "baseline": None,
                                      "ratio": None},
        "wearables_gnss_vs_xy": {"value": round(t_gnss, 3), "unit": "s", "baseline": round(t_xy, 3),
                                 "ratio": round(t_gnss / t_xy, 2)},
        "wearables_hr_vs_xy": {"value": round(t_hr, 3), "unit": "s", "baseline": round(t_xy, 3),
                               "ratio": round(t_hr / t_xy, 2)},
    }


if __name__ == "__main__":
    for k, v in run("--quick" in sys.argv).items():
        print(f"{k:28} {v}")
