"""Writing the recording folder: meta.json, match.json, faults.json,
tracking.jsonl[.gz] and event.jsonl (the CDF event stream; hr.jsonl instead in the
wearables variant), byte-identical for the same arguments."""

from __future__ import annotations

import gzip
import pathlib
import queue
import threading
from collections.abc import Iterable, Iterator
from typing import Any

import numpy as np
import orjson

from pacewire.replay.synth.clubs import AWAY, player_id
from pacewire.replay.synth.documents import (
    MATCH_ID,
    build_meta,
    build_sheet,
    build_wearables_meta,
    build_wearables_sheet,
)
from pacewire.replay.synth.event_faults import plan_event_feed
from pacewire.replay.synth.event_stream import event_objects
from pacewire.replay.synth.faults import FaultPlan, FaultRecord, plan_faults
from pacewire.replay.synth.lines import frame_lines, hr_lines
from pacewire.replay.synth.match import SynthMatch, simulate_match
from pacewire.replay.synth.wearables import gnss_calibration, plan_wearables


def write_match(out: pathlib.Path, minutes: float = 95, fps: int = 25, seed: int = 0, faults: bool = True,
                compress: bool = True, *, outage: bool = True, dropouts: bool = True, duplicates: bool = True,
                out_of_order: bool = True, jumps: bool = True, wearables: bool = False, slides: bool = False,
                camera_gaps: bool = False, gnss: bool = False, events: bool = True, event_gap: bool = True,
                event_lag: bool = True, corrections: bool = True) -> pathlib.Path:
    """Write the fictional demo match as a CDF folder and return the folder.

    out: folder (created). minutes: total playing time (95 = 45+2 and 45+4 min;
    both halves are scaled, the second half kicks off 15 min after the first
    ended). fps: frames per second (integer). seed: numpy Generator seed; the
    same arguments give byte-identical files. faults: master switch of the
    injected feed faults; each kind can also be switched off on its own
    (outage, dropouts, duplicates, out_of_order, jumps). The tracking artefacts
    (replay/synth/artefacts.py) are off unless asked for: slides (re-acquisition
    slides and broadcast jitter), camera_gaps (camera-view gaps with a slide at
    re-entry, and the jitter), gnss (GNSS jitter, wandering error, multipath);
    the master switch turns them off too. compress: write
    ``tracking.jsonl.gz`` (gzip level 6, no name or time in the header) instead
    of ``tracking.jsonl``.

    frame_id is the slot index (from 0 at kick-off, continuing through the
    second half); the 20 s feed outage removes its slots, so frame ids skip
    over it. faults.json lists every injected fault with its kind, period,
    time (timestamp of its first frame), duration_s, frame_ids and player_id.

    wearables: the one-team GNSS + heart-rate variant of the same match
    (docs/wearables.md; see write_wearables_files).

    events: write ``event.jsonl``, the match's CDF event stream (event_stream), with
    its own faults (event_faults), each switchable: event_gap, event_lag,
    corrections (the master switch ``faults`` turns them off too). Not in the
    wearables variant (a club's wearables come without an event feed).
    """
    out = pathlib.Path(out)
    out.mkdir(parents=True, exist_ok=True)
    m = simulate_match(minutes, fps, seed)
    rng = np.random.default_rng([seed, 1])
    on = bool(faults)
    fp = plan_faults(rng, m, minutes, outage=on and outage, dropouts=on and dropouts,
                     duplicates=on and duplicates, out_of_order=on and out_of_order, jumps=on and jumps,
                     slides=on and slides, camera_gaps=on and camera_gaps, gnss=on and gnss)
    for stale in ("tracking.jsonl", "tracking.jsonl.gz", "hr.jsonl", "hr.jsonl.gz", "event.jsonl"):
        (out / stale).unlink(missing_ok=True)
    profile = feed_profile(on and (slides or camera_gaps), on and gnss)
    if wearables:
        return write_wearables_files(out, m, fp, seed, minutes, compress, faults=on, profile=profile)
    records = fp.records
    if events:
        ev_rng = np.random.default_rng([seed, 3])
        feed = plan_event_feed(ev_rng, m, event_objects(m, ev_rng), minutes, gap=on and event_gap,
                               lag=on and event_lag, corrections=on and corrections)
        write_lines(out / "event.jsonl", (orjson.dumps(o) + b"\n" for o in feed.objects), False)
        records = sorted(records + feed.records, key=lambda r: r["time"])
    _write_json(out / "meta.json", with_profile(build_meta(m), profile))
    _write_json(out / "match.json", build_sheet(m))
    _write_json(out / "faults.json", _faults_doc(m, seed, minutes, records))
    write_lines(_tracking_path(out, compress), frame_lines(m, fp), compress)
    return out


def write_twin(out: pathlib.Path, minutes: float = 95, fps: int = 25, seed: int = 0,
               compress: bool = True) -> pathlib.Path:
    """The provider's post-processed twin of the match ``write_match`` writes with the same minutes,
    fps and seed: the same movement, with no dropout, outage or other feed fault and no tracking
    artefact (full coverage), and a meta that says it was collected after the match
    (``meta.tracking.collection_timing`` = ``post_match``): what ``pacewire history compare`` sets
    a live recording against."""
    folder = write_match(out, minutes, fps, seed, faults=False, compress=compress)
    meta = orjson.loads((folder / "meta.json").read_bytes())
    meta["meta"]["tracking"]["collection_timing"] = "post_match"
    _write_json(folder / "meta.json", meta)
    return folder


def feed_profile(broadcast: bool, gnss: bool) -> str | None:
    """The feed profile the artefacts switched on stand for (written as meta.tracking.feed_profile,
    a pacewire extension), None when none is: the recording then reads as the config says."""
    if gnss:
        return "wearable"
    return "broadcast" if broadcast else None


def with_profile(meta: dict[str, Any], profile: str | None) -> dict[str, Any]:
    """The meta with ``meta.tracking.feed_profile`` set when ``profile`` is given."""
    if profile is not None:
        meta["meta"]["tracking"]["feed_profile"] = profile
    return meta


def write_wearables_files(out: pathlib.Path, m: SynthMatch, fp: FaultPlan, seed: int, minutes: float,
                          compress: bool, faults: bool = True, profile: str | None = None) -> pathlib.Path:
    """Write the one-team GNSS + heart-rate variant of match ``m`` into ``out``.

    meta.json with ``venue.gnss_pitch``; match.json with heart-rate profiles and
    no away players; tracking frames of the home team only with lat/long and x/y,
    no ball; hr.jsonl with the 1 Hz samples {"player_id", "timestamp", "bpm"},
    time-ordered; faults.json with the home team's feed faults plus unit_late,
    hr_dropout and hr_spike (plan_wearables).
    """
    cal = gnss_calibration()
    from pacewire.wire.gnss import PitchProjection

    wear = plan_wearables(m, seed, faults=faults)
    # the away team is not tracked: its feed faults do not exist; the late unit hides its player
    fp.hidden = {f: {c for c in cols if c < 11} for f, cols in fp.hidden.items()}
    fp.jumps = {f: j for f, j in fp.jumps.items() if j[0] < 11}
    for f, c in zip(*np.nonzero(~wear.unit_on), strict=True):
        fp.hidden.setdefault(int(f), set()).add(int(c))
    away = {player_id(AWAY, j) for j, _, _, _ in AWAY.squad}
    records = [r for r in fp.records if r["player_id"] not in away] + wear.records
    records.sort(key=lambda r: (r["time"], r["kind"]))
    _write_json(out / "meta.json", with_profile(build_wearables_meta(m, cal), profile))
    _write_json(out / "match.json", build_wearables_sheet(m, wear.profiles))
    _write_json(out / "faults.json", _faults_doc(m, seed, minutes, records, variant="wearables"))
    gnss = PitchProjection.from_calibration(cal)
    write_lines(_tracking_path(out, compress), frame_lines(m, fp, gnss=gnss), compress)
    write_lines(out / "hr.jsonl", hr_lines(wear.samples), False)
    return out


def _write_json(path: pathlib.Path, doc: dict[str, Any]) -> None:
    """A JSON document indented by 2 spaces, with a final newline."""
    path.write_bytes(orjson.dumps(doc, option=orjson.OPT_INDENT_2) + b"\n")


def _faults_doc(m: SynthMatch, seed: int, minutes: float, records: list[FaultRecord],
                **variant: str) -> dict[str, Any]:
    """faults.json: the match, the arguments that made it, the variant if any, the faults."""
    return {"match_id": MATCH_ID, "seed": int(seed), "fps": int(m.timeline.fps), "minutes": float(minutes),
            **variant, "faults": records}


def _tracking_path(out: pathlib.Path, compress: bool) -> pathlib.Path:
    return out / ("tracking.jsonl.gz" if compress else "tracking.jsonl")


def _chunks(lines: Iterable[bytes], size: int = 4096) -> Iterator[bytes]:
    """The lines joined ``size`` at a time; the last chunk holds the rest (maybe none)."""
    buf: list[bytes] = []
    for line in lines:
        buf.append(line)
        if len(buf) >= size:
            yield b"".join(buf)
            buf.clear()
    yield b"".join(buf)


def write_lines(path: pathlib.Path, lines: Iterable[bytes], compress: bool) -> None:
    """Write lines in chunks; gzip (level 6, no name, mtime 0) runs in a thread.

    zlib releases the GIL, so compressing one chunk overlaps with building the
    next one. Chunking is fixed (4096 lines), so the bytes are reproducible.
    """
    with open(path, "wb") as raw:
        if not compress:
            for chunk in _chunks(lines):
                raw.write(chunk)
            return
        sink = gzip.GzipFile(filename="", mode="wb", fileobj=raw, compresslevel=6, mtime=0)
        chunks: queue.Queue[bytes | None] = queue.Queue(maxsize=4)
        errors: list[BaseException] = []

        def drain() -> None:
            try:
                while (chunk := chunks.get()) is not None:
                    sink.write(chunk)
            except BaseException as exc:  # surfaced in the caller below
                errors.append(exc)
                while chunks.get() is not None:
                    pass

        worker = threading.Thread(target=drain, name="synth-gzip", daemon=True)
        worker.start()
        try:
            for chunk in _chunks(lines):
                chunks.put(chunk)
        finally:
            chunks.put(None)
            worker.join()
        if errors:
            raise errors[0]
        sink.close()
