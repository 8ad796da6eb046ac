"""Where things are: the repository, the tests' data files, the folder screenshots go to."""
from __future__ import annotations

from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]  # the repository
TEST_DATA = ROOT / "tests" / "data"
ARTIFACTS = ROOT / "test-artifacts"  # browser screenshots (git-ignored)
DEMO_CLIP = ROOT / "demo_feeds" / "clip"
