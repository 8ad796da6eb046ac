"""`pacewire analyze` end to end, as a user runs it."""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import orjson
import pytest

from pacewire.analyze import analyze_folder
from tests.support import cdf_build as cb

FPS = 25


def _folder(tmp_path, gz=False, bad_lines: dict[int, bytes] | None = None):
    T = 30 * FPS
    t = np.arange(T) / FPS
    xy = np.zeros((T, 2, 2))
    xy[:, 0, 0], xy[:, 0, 1] = 20 * np.cos(t / 5), 20 * np.sin(t / 5)  # 4 m/s on a circle
    xy[:, 1, 0] = -40 + 0.5 * t
    ids = cb.player_ids(1, 1)
    frames = cb.frames(xy, ids, 1)
    folder = cb.write_folder(tmp_path / "rec", cb.meta(), cb.sheet(1, 1, gk=("a1",)), frames, gz=gz)
    if bad_lines:
        path = folder / "tracking.jsonl"
        lines = path.read_bytes().splitlines(keepends=True)
        for no, text in sorted(bad_lines.items()):
            lines.insert(no - 1, text + b"\n")
        path.write_bytes(b"".join(lines))
    return folder


def pacewire(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "pacewire", *args], capture_output=True, timeout=120)


@pytest.mark.parametrize("gz", [False, True])
def test_json_prints_the_snapshot_message(tmp_path, gz):
    folder = _folder(tmp_path, gz=gz)
    out = pacewire("analyze", str(folder), "--json")
    assert out.returncode == 0, out.stderr
    msg = orjson.loads(out.stdout)
    assert msg["type"] == "snapshot" and msg["match_id"] == "m_test"
    assert set(msg) >= {"seq", "match_time_s", "period", "players", "teams", "health"}
    # same body as the library call
    assert msg["players"] == analyze_folder(folder).snapshot()["players"]
    # 4 m/s for 30 s (geometry: r = 20 m, angular speed 0.2 rad/s)
    assert msg["players"]["h1"]["distance_m"] == pytest.approx(4.0 * (30 - 1 / FPS), rel=0.01)


def test_table_is_readable_and_carries_the_caution(tmp_path):
    out = pacewire("analyze", str(_folder(tmp_path)))
    assert out.returncode == 0, out.stderr
    text = out.stdout.decode()
    assert "dist m" in text and "Test H1" in text
    assert "estimates from positional data" in text


def test_bad_lines_skipped_reported_and_counted(tmp_path):
    folder = _folder(tmp_path, bad_lines={5: b"{broken", 9: b'{"frame_id": "x"}'})
    out = pacewire("analyze", str(folder), "--json")
    assert out.returncode == 0
    err = out.stderr.decode()
    assert "line 5: bad_json" in err and "line 9: bad_type" in err
    msg = orjson.loads(out.stdout)
    assert msg["health"]["rejected"] == 2
    assert msg["health"]["frames"] == 30 * FPS


def test_strict_stops_on_first_bad_line(tmp_path):
    folder = _folder(tmp_path, bad_lines={5: b"{broken"})
    out = pacewire("analyze", str(folder), "--strict")
    assert out.returncode == 1
    assert b"line 5" in out.stderr


def test_missing_folder_and_bad_config_fail_clearly(tmp_path):
    out = pacewire("analyze", str(tmp_path / "nowhere"))
    assert out.returncode == 2 and b"is not a folder" in out.stderr
    folder = _folder(tmp_path)
    (folder / "meta.json").write_text("{}")
    out = pacewire("analyze", str(folder))
    assert out.returncode == 2 and b"meta.match" in out.stderr
    cfg = tmp_path / "c.toml"
    cfg.write_text("[speed]\nhsr_ms = 99\n")
    out = pacewire("analyze", str(folder), "--config", str(cfg))
    assert out.returncode == 2 and b"speed.hsr_ms" in out.stderr
