"""`make bench`: run every tests/bench/bench_*.py, merge, write bench-results.json, print a table.

Each module exposes ``run(quick: bool) -> dict[str, dict]`` whose entries are
``{"value": number, "unit": str, "baseline": number | None, "ratio": number | None}``.

    python -m tests.bench.run [--quick] [--only NAME ...]    (from the repository)

The benchmarks import the tests' helpers as ``tests.support``, so they run as modules of the
``tests`` package; ``python tests/bench/run.py`` hands over to that command.
"""
from __future__ import annotations

import argparse
import importlib
import json
import os
import platform
import subprocess
import sys
import time
import traceback
from datetime import UTC, datetime
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one-core figures, before any benchmark loads numpy

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
RESULTS = ROOT / "bench-results.json"
KEYS = ("value", "unit", "baseline", "ratio")


def discover(only: list[str] | None = None) -> list[Path]:
    mods = sorted(HERE.glob("bench_*.py"))
    if only:
        mods = [m for m in mods if m.stem in only or m.stem.removeprefix("bench_") in only]
    return mods


def load(path: Path):
    return importlib.import_module(f"tests.bench.{path.stem}")


def check_entries(name: str, entries: object) -> dict[str, dict]:
    """The module's result, checked against the entry shape; raises ValueError naming the fault."""
    if not isinstance(entries, dict):
        raise ValueError(f"{name}.run() returned {type(entries).__name__}, not a dict")
    for key, e in entries.items():
        if not isinstance(e, dict) or set(e) != set(KEYS):
            raise ValueError(f"{name}: entry {key!r} must have exactly the keys {KEYS}")
        if not isinstance(e["value"], (int, float)) or not isinstance(e["unit"], str):
            raise ValueError(f"{name}: entry {key!r} needs a numeric value and a string unit")
    return entries


def _fmt(v: object) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.4g}" if abs(v) < 1e5 else f"{v:.3e}"
    return str(v)


def table(results: dict[str, dict]) -> str:
    rows = [("benchmark", "value", "unit", "baseline", "ratio")]
    rows += [(k, _fmt(e["value"]), e["unit"], _fmt(e["baseline"]), _fmt(e["ratio"])) for k, e in results.items()]
    widths = [max(len(r[i]) for r in rows) for i in range(5)]
    lines = []
    for n, r in enumerate(rows):
        cells = enumerate(zip(r, widths, strict=True))
        lines.append("  ".join(c.ljust(w) if i in (0, 2) else c.rjust(w) for i, (c, w) in cells))
        if n == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="short runs (under two minutes in all on 2 idle cores)")
    ap.add_argument("--only", nargs="*", help="module names to run (bench_engine or engine)")
    args = ap.parse_args(argv)

    merged: dict[str, dict] = {}
    modules: dict[str, dict] = {}
    failed = []
    t_all = time.perf_counter()
    load0 = os.getloadavg()  # other work on a shared machine shows in every timing: record it
    for path in discover(args.only):
        name = path.stem
        t = time.perf_counter()
        try:
            entries = check_entries(name, load(path).run(args.quick))
        except Exception:  # one broken benchmark must not hide the others' numbers
            traceback.print_exc()
            failed.append(name)
            modules[name] = {"ok": False, "seconds": round(time.perf_counter() - t, 2)}
            continue
        modules[name] = {"ok": True, "seconds": round(time.perf_counter() - t, 2)}
        for key, e in entries.items():
            merged[key if key not in merged else f"{name}.{key}"] = e

    doc = {
        "created": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "quick": args.quick,
        "python": platform.python_version(),
        "machine": platform.machine(),
        "platform": platform.platform(),
        "loadavg_start": [round(x, 2) for x in load0],
        "loadavg_end": [round(x, 2) for x in os.getloadavg()],
        "modules": modules,
        "results": merged,
    }
    RESULTS.write_text(json.dumps(doc, indent=2) + "\n", encoding="utf-8")
    print()
    print(table(merged))
    print(f"\n{len(modules) - len(failed)}/{len(modules)} benchmark modules ran in "
          f"{time.perf_counter() - t_all:.1f} s{' (quick)' if args.quick else ''}; wrote {RESULTS.name}")
    print("seconds per module: " + ", ".join(f"{k.removeprefix('bench_')} {v['seconds']:g}" for k, v in modules.items())
          + f"; load average {' '.join(f'{x:.2f}' for x in load0)} at the start, "
          + " ".join(f"{x:.2f}" for x in doc["loadavg_end"]) + f" at the end ({os.cpu_count()} CPUs)")
    if failed:
        print("FAILED: " + ", ".join(failed))
    return 1 if failed or not modules else 0


if __name__ == "__main__":
    if not __package__:  # run as a file: hand over to the module (its package can import tests.support)
        sys.exit(subprocess.call([sys.executable, "-m", "tests.bench.run", *sys.argv[1:]], cwd=ROOT))
    sys.exit(main())
