"""The layers of docs/architecture.md, checked on the source: who may import whom, and no cycles.

The source is read with ``ast`` (nothing is imported), so a function-level or
``TYPE_CHECKING`` import counts like any other: an import is a dependency.
"""
from __future__ import annotations

import ast
from collections import defaultdict
from pathlib import Path

from tests.support.paths import ROOT

FOLDERS = {"pacewire": ROOT / "service", "pacewire.replay": ROOT / "replay"}

# Each unit may import the units listed for it, and itself. A unit is a subpackage or a top-level module.
ALLOWED: dict[str, set[str]] = {
    "errors": set(),
    "tasks": set(),
    "engine": set(),
    "wire": {"errors", "engine"},
    "config": {"errors", "wire"},
    "params": {"config", "engine"},
    "events": {"errors", "engine"},
    "analyze": {"errors", "engine", "wire", "config", "params", "events"},
    "reports": {"errors", "engine", "wire", "config", "params", "events", "analyze"},
    "store": {"errors", "engine", "wire", "config", "params", "events", "analyze", "reports"},
    "api": {"errors", "tasks", "engine", "wire", "config", "events", "reports"},
    "live": {"errors", "tasks", "engine", "wire", "config", "params", "events", "analyze", "reports", "store", "api"},
    "scale": {"errors", "tasks", "engine", "wire", "config", "params", "events", "analyze", "reports", "store", "api",
              "live"},
    "client": {"errors", "wire"},
    "web": set(),
}
EVERYTHING = set(ALLOWED) | {"replay"}
ALLOWED["replay"] = EVERYTHING - {"replay"}  # replay builds on the service ...
ALLOWED["cli"] = EVERYTHING | {"__init__"}  # ... and the command line on everything (and the version)
ALLOWED["__main__"] = {"cli"}
ALLOWED["__init__"] = set()


def modules() -> dict[str, Path]:
    out = {}
    for prefix, folder in FOLDERS.items():
        for path in folder.rglob("*.py"):
            parts = [*prefix.split("."), *path.relative_to(folder).with_suffix("").parts]
            if parts[-1] == "__init__":
                parts.pop()
            out[".".join(parts)] = path
    return out


def imports(mods: dict[str, Path]) -> dict[str, set[str]]:
    """Module -> the pacewire modules it imports (anywhere in its text)."""
    edges: dict[str, set[str]] = defaultdict(set)
    for name, path in mods.items():
        package = name if path.name == "__init__.py" else name.rpartition(".")[0]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            targets: list[str] = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    up = package.split(".")[:len(package.split(".")) - node.level + 1]
                    base = ".".join([*up, *([node.module] if node.module else [])])
                targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in mods else base for a in node.names]
            for t in targets:
                while t and t not in mods:
                    t = t.rpartition(".")[0]
                if t and t != name:
                    edges[name].add(t)
    return edges


def unit(module: str) -> str:
    """``pacewire.live.runner`` -> ``live``; ``pacewire.replay.synth.plan`` -> ``replay``;
    ``pacewire`` -> ``__init__``."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def cycles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components of more than one node (Tarjan)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(edges.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return out


def package_edges(edges: dict[str, set[str]], depth: int) -> dict[str, set[str]]:
    """The graph between packages: a module counts for the package ``depth`` levels deep that holds
    it (a top-level module is its own node)."""
    def node(m: str) -> str:
        return ".".join(m.split(".")[:depth])

    out: dict[str, set[str]] = defaultdict(set)
    for a, targets in edges.items():
        for b in targets:
            if node(a) != node(b):
                out[node(a)].add(node(b))
    return out


def test_the_source_is_found():
    mods = modules()
    known = {"pacewire.engine.match", "pacewire.live.runner", "pacewire.replay.player", "pacewire.api.ingest"}
    assert known <= set(mods)
    edges = imports(mods)
    assert "pacewire.engine.types" in edges["pacewire.wire.cdf"]  # the reader sees real imports


def test_no_module_imports_service_or_replay_by_folder_name():
    bad = []
    for name, path in modules().items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and not node.level and node.module:
                top = node.module.split(".")[0]
            elif isinstance(node, ast.Import):
                top = node.names[0].name.split(".")[0]
            else:
                continue
            if top in ("service", "replay"):
                bad.append(f"{name}: {top}")
    assert not bad


def test_no_import_cycle_between_modules():
    assert cycles(imports(modules())) == []


def test_no_import_cycle_between_packages():
    edges = imports(modules())
    for depth in (2, 3):
        assert cycles(package_edges(edges, depth)) == [], depth


def test_the_engine_imports_nothing_outside_it():
    edges = imports(modules())
    outside = {(a, b) for a, targets in edges.items() if a.startswith("pacewire.engine")
               for b in targets if not b.startswith("pacewire.engine")}
    assert outside == set()


def test_each_unit_imports_only_the_layers_below_it():
    edges = imports(modules())
    refused = sorted(f"{a} -> {b}" for a, targets in edges.items() for b in targets
                     if unit(b) != unit(a) and unit(b) not in ALLOWED.get(unit(a), set()))
    assert refused == []


def test_the_layer_table_knows_every_unit():
    assert {unit(m) for m in modules()} <= set(ALLOWED)
