"""A report drawn in its own process: the same files as drawn in-process, and the service's
interpreter never loads matplotlib for it."""
from __future__ import annotations

import subprocess
import sys

from pacewire.analyze import analyze_folder
from pacewire.engine.blocks import block_series
from pacewire.engine.snapshot import build_snapshot
from pacewire.replay.synth import write_match
from pacewire.reports.builder import FILES, ReportInput, build_report
from pacewire.reports.worker import build_report_in_process


def test_the_worker_writes_the_same_report_as_the_service_would(tmp_path):
    folder = write_match(tmp_path / "synth", minutes=2, fps=25, seed=11, faults=False)
    state = analyze_folder(folder).state
    snap = build_snapshot(state)
    alerts = [{"rule": "hsr_drop", "player_id": "p1", "period": "second_half", "match_time_s": 2750.0}]
    inp = ReportInput("full_time", snap, block_series(state, 1, "split"), "live", 1.7e9, alerts)
    here = build_report(inp, tmp_path / "here", 0.9, {"basis": [1, 60]})
    there = build_report_in_process(inp, tmp_path / "there", 0.9, {"basis": [1, 60]})
    assert {k: v for k, v in there.items() if k != "build_s"} == {k: v for k, v in here.items() if k != "build_s"}
    for name in FILES:
        assert (tmp_path / "there" / "full_time" / name).read_bytes() == \
            (tmp_path / "here" / "full_time" / name).read_bytes(), name


def test_the_service_modules_do_not_load_matplotlib():
    """Importing the live service (and drawing nothing in-process) leaves matplotlib out of memory."""
    code = ("import sys, pacewire.live.app, pacewire.live.followup, pacewire.reports.worker; "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
