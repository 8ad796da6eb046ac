"""Settings and fixtures for every test; shared helpers are imported from tests.support."""
import os
from collections.abc import Iterator
from pathlib import Path

import pytest

# before numpy loads (see service/__init__.py): one BLAS thread
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

from tests.support.live_server import LiveServer  # noqa: E402

collect_ignore = ["bench"]  # benchmarks (make bench) are never collected as tests


@pytest.fixture
def server(tmp_path: Path) -> Iterator[LiveServer]:
    """A real ``pacewire serve`` with its data under the test's tmp_path, stopped after the test."""
    srv = LiveServer(tmp_path / "data").start()
    yield srv
    srv.stop()
