"""Short fictional recordings (CDF folders) for the replay tests: four players moving smoothly."""
from __future__ import annotations

from pathlib import Path

from tests.support import cdf_build as cb
from tests.support.trajectories import FPS, sway

IDS = cb.player_ids(2, 2)
BREAK_S = 900.0  # frame time between the halves


def clip(tmp_path: Path, seconds: float = 60, two_halves: bool = False, name: str = "clip",
         ends: bool = False) -> Path:
    """``seconds`` of play (in two halves if asked); ``ends``: the meta gives each period's last frame
    (``frame_id_end``), as a recorded match's meta does."""
    xy = sway(seconds, 4, (18.0, 12.0), (0.23, 0.31), y_turn=2)
    T = len(xy)
    h = T // 2 if two_halves else T
    objs = cb.frames(xy[:h], IDS, 2)
    if two_halves:
        objs += cb.frames(xy[h:], IDS, 2, period="second_half", t0=h / FPS + BREAK_S, frame0=h)
    meta = cb.meta()
    if ends:
        for per in meta["match"]["periods"]:
            ids = [o["frame_id"] for o in objs if o["period"] == per["period"]]
            if ids:
                per["frame_id_start"], per["frame_id_end"] = ids[0], ids[-1]
    return cb.write_folder(tmp_path / name, meta, cb.sheet(2, 2), objs, gz=True)
