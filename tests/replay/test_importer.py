"""``pacewire import`` through kloppy: a provider's own format into a CDF folder."""
from __future__ import annotations

import importlib.resources
import subprocess
import sys
import warnings

import pytest

from pacewire.analyze import analyze_folder


def test_import_of_kloppy_epts_sample_is_valid_cdf(tmp_path):
    """kloppy 3.19.1's wheel ships a short 25 fps EPTS sample (99 frames, real data)."""
    pytest.importorskip("kloppy")
    import cdf

    files = importlib.resources.files("kloppy") / "tests" / "files"
    out = subprocess.run([sys.executable, "-m", "pacewire", "import", str(files / "epts_metrica_tracking.txt"),
                          "--format", "epts", "--meta", str(files / "epts_metrica_metadata.xml"),
                          "--out", str(tmp_path / "imp")], capture_output=True, timeout=120)
    assert out.returncode == 0, out.stderr
    folder = tmp_path / "imp"
    lines = (folder / "tracking.jsonl").read_bytes().splitlines()
    assert len(lines) > 50
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cdf.TrackingSchemaValidator().validate_schema(sample=str(folder / "tracking.jsonl"), mode="strict", limit=None)
    snap = analyze_folder(folder).snapshot()
    assert snap["health"]["rejected"] == 0
    # every player the sample tracks for at least 2 s is credited distance
    import orjson
    counts: dict[str, int] = {}
    for line in lines:
        for side in ("home", "away"):
            for p in orjson.loads(line)["teams"][side]["players"]:
                counts[p["id"]] = counts.get(p["id"], 0) + 1
    tracked = {pid for pid, n in counts.items() if n >= 2 * 25}
    assert tracked and all(snap["players"][pid]["distance_m"] > 0 for pid in tracked)


def test_import_without_a_needed_meta_file_says_so(tmp_path):
    files = importlib.resources.files("kloppy") / "tests" / "files"
    out = subprocess.run([sys.executable, "-m", "pacewire", "import", str(files / "epts_metrica_tracking.txt"),
                          "--format", "epts", "--out", str(tmp_path / "imp")], capture_output=True, timeout=120)
    assert out.returncode == 2 and b"needs --meta" in out.stderr
