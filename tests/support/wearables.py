"""What the wearable-feed tests share: a fictional ground with its GNSS calibration, one tracked
team with heart-rate profiles, its frames (x/y or lat/long, no ball) and heart-rate samples."""
from __future__ import annotations

import asyncio
from typing import Any

import numpy as np
import orjson
import websockets

from pacewire.wire.gnss import PitchProjection, rectangle
from tests.support import cdf_build as cb
from tests.support.trajectories import FPS

# A fictional ground: open sea west of nowhere, chosen so that it is no real venue.
GROUND = (47.5, -30.0, 105.0, 68.0, 23.0)  # centre lat, long, length m, width m, bearing of +x, degrees
PROFILES = {"h1": (190.0, 50.0, "male"), "h2": (200.0, 45.0, "female"), "h3": (185.0, None, None)}


def calibration() -> dict[str, Any]:
    return rectangle(*GROUND).model_dump(exclude_none=True)


def wearable_meta(match_id: str = "m_test", gnss: bool = True) -> dict[str, Any]:
    m = cb.meta(match_id)
    if gnss:
        m["venue"] = {"id": "v_fict", "gnss_pitch": calibration()}
    return m


def wearable_sheet(n_home: int) -> dict[str, Any]:
    """One tracked team (home); the away team has no players. h3 lacks hr_rest_bpm and sex."""
    sheet = cb.sheet(n_home, 0, gk=())
    for p in sheet["teams"]["home"]["players"]:
        hr_max, hr_rest, sex = PROFILES.get(p["id"], (None, None, None))
        p.update({k: v for k, v in (("hr_max_bpm", hr_max), ("hr_rest_bpm", hr_rest), ("sex", sex)) if v is not None})
    return sheet


def one_team_frames(xy: np.ndarray, gnss: bool, match_id: str = "m_test", period: str = "first_half",
                    t0: float = 0.0, frame0: int = 0) -> list[dict[str, Any]]:
    """CDF frames of the home team only, without a ball; with ``gnss`` every player carries
    lat/long only (no x/y)."""
    ids = cb.player_ids(xy.shape[1], 0)
    frames = cb.frames(xy, ids, xy.shape[1], match_id=match_id, period=period, t0=t0, frame0=frame0)
    proj = PitchProjection.from_calibration(rectangle(*GROUND)) if gnss else None
    for f, pos in zip(frames, xy, strict=True):
        del f["ball"]
        if proj is None:
            continue
        seen = [j for j in range(pos.shape[0]) if not np.isnan(pos[j, 0])]
        lat, lon = proj.to_gnss(pos[seen, 0], pos[seen, 1])
        f["teams"]["home"]["players"] = [{"id": ids[j], "lat": float(a), "long": float(b)}
                                         for j, a, b in zip(seen, np.atleast_1d(lat), np.atleast_1d(lon), strict=True)]
    return frames


def jog(seconds: int, n: int = 3) -> np.ndarray:
    """Positions (T, n, 2): n players jogging at 3 m/s round a 30 m circle, a radian apart."""
    t = np.arange(seconds * FPS) / FPS
    xy = np.zeros((len(t), n, 2))
    for j in range(n):
        xy[:, j, 0] = 30 * np.cos(t / 10 + j)
        xy[:, j, 1] = 30 * np.sin(t / 10 + j)
    return xy


def hr_samples(pid: str, bpm: np.ndarray, t0: float = 0.0, hz: float = 1.0) -> list[dict[str, Any]]:
    """Heart-rate samples of one player, ``hz`` a second from ``t0`` s after kick-off."""
    return [{"player_id": pid, "timestamp": cb.stamp(t0 + k / hz), "bpm": float(b)} for k, b in enumerate(bpm)]


def hr_figures(snap: dict[str, Any]) -> dict[str, Any]:
    """The load and heart-rate figures of every player of a snapshot, the ones the wearable tests compare."""
    keep = ("distance_m", "hsr_m", "sprints", "minutes", "hr_mean_bpm", "hr_zones", "trimp_edwards",
            "trimp_banister", "hr_peak_bpm", "hr_omitted", "periods")
    return {pid: {k: p.get(k) for k in keep} for pid, p in snap["players"].items()}


async def send_hr(url: str, messages: list[bytes]) -> list[dict[str, Any]]:
    """Send messages on one heart-rate provider socket; return the error messages that came back
    (a sample of an unknown player goes last: its refusal marks the end of the answers)."""
    errors = []
    async with websockets.connect(url) as ws:
        for m in messages:
            await ws.send(m.decode())
        await ws.send(orjson.dumps({"player_id": "nobody", "timestamp": cb.stamp(0), "bpm": 60}).decode())
        for _ in range(100):  # bounded: every refusal is answered before the marker's
            msg = orjson.loads(await asyncio.wait_for(ws.recv(), 10))
            errors.append(msg)
            if msg.get("code") == "unknown_player" and "nobody" in msg.get("message", ""):
                break
    return errors
