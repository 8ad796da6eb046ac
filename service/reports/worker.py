"""A report drawn in a process of its own, so the live service never loads matplotlib.

The live service hands the report's input to ``python -m pacewire.reports.worker
ROOT LOW_COVERAGE`` on stdin in the checkpoint format (:mod:`pacewire.engine.stateio`:
npz + JSON, report and engine classes only, no pickle); the worker writes the report
under ROOT exactly as :func:`pacewire.reports.builder.build_report` does in-process and
prints its index entry as JSON. The process then ends, and whatever drawing took (about
45 MB of matplotlib) goes with it.
"""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from typing import Any

import orjson

from pacewire.engine.stateio import from_npz, to_npz
from pacewire.reports.builder import ReportInput, build_report

CLASSES = ("pacewire.reports.", "pacewire.engine.")  # what the worker may build from its input
TIMEOUT_S = 600.0  # a report that takes longer has hung (common practice: a generous ceiling)


class ReportWorkerError(RuntimeError):
    """The report process failed; its last lines of stderr say why."""


def build_report_in_process(inp: ReportInput, root: Path, low_coverage: float = 0.9,
                            extra: dict[str, Any] | None = None) -> dict[str, Any]:
    """:func:`build_report` in a fresh process (blocking: run it off the event loop)."""
    data = to_npz({"inp": inp, "extra": extra}, CLASSES)
    proc = subprocess.run([sys.executable, "-m", "pacewire.reports.worker", str(root), repr(low_coverage)],
                          input=data, capture_output=True, timeout=TIMEOUT_S, check=False)
    if proc.returncode != 0:
        tail = proc.stderr.decode(errors="replace").strip().splitlines()[-5:]
        raise ReportWorkerError(f"report process exited with {proc.returncode}: {' | '.join(tail)}")
    entry: dict[str, Any] = orjson.loads(proc.stdout)
    return entry


def main() -> int:
    root, low_coverage = Path(sys.argv[1]), float(sys.argv[2])
    body = from_npz(sys.stdin.buffer.read(), CLASSES)
    entry = build_report(body["inp"], root, low_coverage, body["extra"])
    sys.stdout.buffer.write(orjson.dumps(entry))
    return 0


if __name__ == "__main__":
    sys.exit(main())
