"""The wheel a user installs: built from the repository, installed into a fresh virtual environment,
run from another folder. Catches a runtime dependency missing from the package's requirements, a
data file left out (the defaults, the bench page), and module names other than ``pacewire``."""
from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import httpx
import pytest

from tests.support.live_server import free_port
from tests.support.paths import DEMO_CLIP, ROOT


def run(*cmd: str | Path, cwd: Path, timeout: float = 900) -> subprocess.CompletedProcess[str]:
    out = subprocess.run([str(c) for c in cmd], cwd=cwd, capture_output=True, text=True, timeout=timeout)
    assert out.returncode == 0, f"{cmd}: {out.stdout[-2000:]}\n{out.stderr[-3000:]}"
    return out


@pytest.fixture(scope="module")
def venv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A fresh venv holding the wheel built from this checkout (and the wheel's requirements only)."""
    tmp = tmp_path_factory.mktemp("wheel")
    run(sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "--wheel-dir", tmp / "dist", ROOT, cwd=tmp)
    wheels = list((tmp / "dist").glob("pacewire-*.whl"))
    assert len(wheels) == 1
    run(sys.executable, "-m", "venv", tmp / "venv", cwd=tmp)
    run(tmp / "venv" / "bin" / "python", "-m", "pip", "install", "--quiet", wheels[0], cwd=tmp)
    return tmp / "venv"


def site_packages(venv: Path) -> Path:
    return next((venv / "lib").glob("python3*/site-packages"))


def test_only_pacewire_is_installed_and_the_defaults_ship_with_it(venv: Path):
    site = site_packages(venv)
    assert (site / "pacewire").is_dir()
    assert not (site / "service").exists() and not (site / "replay").exists()
    shipped = site / "pacewire" / "default.toml"
    assert not shipped.is_symlink()
    assert shipped.read_bytes() == (ROOT / "config" / "default.toml").read_bytes()  # one source of the defaults
    assert (site / "pacewire" / "web" / "index.html").is_file()
    assert (site / "pacewire" / "py.typed").is_file()


def test_import_version_and_module_entry(venv: Path, tmp_path: Path):
    py = venv / "bin" / "python"
    out = run(py, "-c", "import pacewire, pacewire.client, pacewire.replay.player; "
                        "from pacewire.client import subscribe; print(pacewire.__version__)", cwd=tmp_path)
    version = out.stdout.strip()
    assert run(venv / "bin" / "pacewire", "--version", cwd=tmp_path).stdout.strip() == f"pacewire {version}"
    assert run(py, "-m", "pacewire", "--version", cwd=tmp_path).stdout.strip() == f"pacewire {version}"


def test_analyze_from_another_folder_gives_the_checkout_figures(venv: Path, tmp_path: Path):
    clip = DEMO_CLIP
    installed = json.loads(run(venv / "bin" / "pacewire", "analyze", clip, "--json", cwd=tmp_path).stdout)
    here = json.loads(run(sys.executable, "-m", "pacewire", "analyze", clip, "--json", cwd=tmp_path).stdout)
    assert installed["type"] == "snapshot" and len(installed["players"]) >= 22
    assert installed["players"] == here["players"]


def test_serve_answers_health_and_the_bench_page(venv: Path, tmp_path: Path):
    port = free_port()
    log = open(tmp_path / "serve.log", "wb")
    proc = subprocess.Popen([venv / "bin" / "pacewire", "serve", "--port", str(port), "--data", tmp_path / "data"],
                            cwd=tmp_path, stdout=log, stderr=subprocess.STDOUT)
    try:
        health = None
        for _ in range(300):  # up to 30 s
            if proc.poll() is not None:
                break
            try:
                health = httpx.get(f"http://127.0.0.1:{port}/healthz", timeout=1.0)
                break
            except httpx.HTTPError:
                time.sleep(0.1)
        assert health is not None and health.status_code == 200, (tmp_path / "serve.log").read_text()[-2000:]
        page = httpx.get(f"http://127.0.0.1:{port}/", timeout=5.0)
        assert page.status_code == 200 and "<html" in page.text.lower()
        assert httpx.get(f"http://127.0.0.1:{port}/api/matches", timeout=5.0).json() == {"matches": []}
    finally:
        proc.terminate()
        proc.wait(timeout=30)
        log.close()


def test_every_package_folder_is_listed_for_the_wheel():
    """setuptools maps pacewire onto service/ and replay/ from an explicit list: a new package
    folder must join it, or the wheel leaves it out (pacewire.api once was)."""
    import tomllib

    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {"pacewire" + ("." + ".".join(p.parent.relative_to(ROOT / "service").parts) if p.parent != ROOT / "service"
                           else "") for p in (ROOT / "service").rglob("__init__.py")}
    found |= {".".join(["pacewire", *p.parent.relative_to(ROOT).parts]) for p in (ROOT / "replay").rglob("__init__.py")}
    assert listed - found == {"pacewire.web"}  # the bench page's folder: data, no Python
    assert found <= listed
