"""The JSON lines of the recording, built lazily in file order: the tracking frames
(faults applied; both teams and the ball, or the wearables variant's home team
with lat/long) and the heart-rate samples."""

from __future__ import annotations

from collections.abc import Iterator
from typing import TYPE_CHECKING

import numpy as np
import orjson

from pacewire.replay.synth.artefacts import clip_to_validator
from pacewire.replay.synth.clubs import CLUBS, player_id
from pacewire.replay.synth.documents import MATCH_ID
from pacewire.replay.synth.faults import FaultPlan
from pacewire.replay.synth.match import SynthMatch
from pacewire.replay.synth.timeline import KICKOFF
from pacewire.replay.synth.wearables import LATLON_DECIMALS

if TYPE_CHECKING:
    from pacewire.wire.gnss import PitchProjection


def frame_lines(m: SynthMatch, fp: FaultPlan, block: int = 4096,
                gnss: PitchProjection | None = None) -> Iterator[bytes]:
    """Yield the JSON lines (bytes, with ``\\n``) in file order, faults applied.

    Positions are rounded to the centimetre; arrays become Python lists one
    block of frames at a time, which keeps memory flat for a full match.
    gnss: a ``PitchProjection`` for the wearables variant: home players only,
    each with ``lat``/``long`` (LATLON_DECIMALS) projected from the written x/y,
    the away team empty and no ball (wearables see none).
    """
    tl = m.timeline
    ts = tl.timestamps()
    pos = m.positions if fp.shift is None else clip_to_validator(m.positions + fp.shift)
    xs = np.round(pos.real, 2)
    ys = np.round(pos.imag, 2)
    for f, (col, p) in fp.jumps.items():
        xs[f, col] = round(p.real, 2)
        ys[f, col] = round(p.imag, 2)
    ids = [[player_id(club, club.squad[i][0]) for i in range(len(club.squad))] for club in CLUBS]
    bx_all = np.round(m.ball_xy.real, 2)
    by_all = np.round(m.ball_xy.imag, 2)
    bz_all = np.round(m.ball_z, 2)
    team_ids = [c.team_id for c in CLUBS]
    match = {"id": MATCH_ID}
    no_hidden: set[int] = set()
    held = None
    for b0 in range(0, tl.n_slots, block):
        b1 = min(b0 + block, tl.n_slots)
        bxs, bys, squad = xs[b0:b1].tolist(), ys[b0:b1].tolist(), m.squad_index[b0:b1].tolist()
        if gnss is not None:
            lat, lon = gnss.to_gnss(xs[b0:b1, :11], ys[b0:b1, :11])
            blat, blon = np.round(lat, LATLON_DECIMALS).tolist(), np.round(lon, LATLON_DECIMALS).tolist()
        bx, by, bz = bx_all[b0:b1].tolist(), by_all[b0:b1].tolist(), bz_all[b0:b1].tolist()
        live, poss = m.ball_in_play[b0:b1].tolist(), m.ball_poss[b0:b1].tolist()
        for i, f in enumerate(range(b0, b1)):
            if f in fp.outage:
                continue
            hidden = fp.hidden.get(f, no_hidden)
            row_x, row_y, row_s = bxs[i], bys[i], squad[i]
            period = tl.period(f)
            if gnss is not None:
                row_lat, row_lon = blat[i], blon[i]
                home = [{"id": ids[0][row_s[c]], "x": row_x[c], "y": row_y[c], "lat": row_lat[c], "long": row_lon[c]}
                        for c in range(11) if c not in hidden]
                frame = {"frame_id": f, "timestamp": ts[f], "period": period, "match": match,
                         "teams": {"home": {"id": team_ids[0], "players": home},
                                   "away": {"id": team_ids[1], "players": []}}}
            else:
                teams = {}
                for team, side in ((0, "home"), (1, "away")):
                    cols = range(11 * team, 11 * team + 11)
                    teams[side] = {"id": team_ids[team], "players": [
                        {"id": ids[team][row_s[c]], "x": row_x[c], "y": row_y[c]} for c in cols if c not in hidden]}
                frame = {
                    "frame_id": f, "timestamp": ts[f], "period": period, "match": match, "teams": teams,
                    "ball": {"x": bx[i], "y": by[i], "z": bz[i], "status": live[i], "poss_team_id": team_ids[poss[i]]},
                }
            line = orjson.dumps(frame) + b"\n"
            if f in fp.swaps:
                held = line
                continue
            yield line
            if held is not None:
                yield held
                held = None
            if f in fp.duplicates:
                yield line


def hr_lines(samples: list[tuple[int, str, int]]) -> Iterator[bytes]:
    """JSON lines (bytes, with ``\\n``) of heart-rate samples (ms after kick-off, player id, bpm)."""
    ms = np.array([t for t, _, _ in samples], dtype=np.int64).astype("timedelta64[ms]")
    stamps = np.datetime_as_string(KICKOFF + ms, unit="ms").tolist()
    for (_, pid, bpm), stamp in zip(samples, stamps, strict=True):
        yield orjson.dumps({"player_id": pid, "timestamp": stamp + "Z", "bpm": bpm}) + b"\n"
