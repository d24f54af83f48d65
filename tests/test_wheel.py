"""A built wheel carries its data and runs the demo outside the repository.

The limit sets and the example arrangements are package data
(``corridor/data/``); an install from the wheel, run from another working
directory, must find them without the source tree (common practice for a
Python package: a non-editable install is what users get).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]

pytestmark = pytest.mark.slow


def _env_without_repo() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONPATH", None)  # the worktree must not shadow the installed package
    return env


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    src = tmp_path_factory.mktemp("src") / "corridor"
    # build from a clean copy: no stray build/ or egg-info in the worktree
    shutil.copytree(REPO, src, ignore=shutil.ignore_patterns(
        ".git", "out", "build", "*.egg-info", "__pycache__", ".pytest_cache", "tests",
        "benchmarks", ".mypy_cache", ".ruff_cache"))
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", str(src), "--no-deps",
                           "-w", str(out), "-q"], capture_output=True, text=True,
                          env=_env_without_repo(), timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]
    wheels = list(out.glob("corridor-*.whl"))
    assert len(wheels) == 1, wheels
    return wheels[0]


def test_wheel_holds_the_limit_sets_and_arrangements(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    for shipped in sorted((REPO / "corridor" / "data").rglob("*.toml")):
        rel = shipped.relative_to(REPO).as_posix()
        assert rel in names, f"{rel} missing from {wheel.name}"
    assert "corridor/data/limits/iec_en.toml" in names
    assert "corridor/data/limits/ieee_na.toml" in names
    assert "corridor/data/arrangements.toml" in names


def test_installed_wheel_runs_the_demo_elsewhere(wheel, tmp_path):
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--system-site-packages", str(venv)],
                   check=True, timeout=300)
    py = venv / "bin" / "python"
    proc = subprocess.run([str(py), "-m", "pip", "install", "--no-deps", "-q", str(wheel)],
                          capture_output=True, text=True, env=_env_without_repo(), timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]

    # the demo in a folder of its own: config/demo.toml beside sample_layers/, as in
    # the repository, so its relative paths hold; no arrangements file beside it
    site = tmp_path / "site"
    (site / "config").mkdir(parents=True)
    shutil.copytree(REPO / "sample_layers", site / "sample_layers",
                    ignore=shutil.ignore_patterns("*.py"))
    shutil.copy(REPO / "config" / "demo.toml", site / "config" / "demo.toml")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()

    env = _env_without_repo()
    where = subprocess.run([str(py), "-c", "import corridor, sys; print(corridor.__file__)"],
                           capture_output=True, text=True, cwd=elsewhere, env=env, timeout=120)
    assert str(venv) in where.stdout, f"imported {where.stdout.strip()}, not the wheel's copy"

    proc = subprocess.run([str(venv / "bin" / "corridor"), "run",
                           str(site / "config" / "demo.toml")],
                          capture_output=True, text=True, cwd=elsewhere, env=env, timeout=900)
    assert proc.returncode in (0, 5), proc.stderr[-3000:]
    out = site / "out" / "demo"
    for name in ("screening.gpkg", "run.json", "report.html", "exposures.csv"):
        assert (out / name).is_file(), f"{name} missing; stderr: {proc.stderr[-2000:]}"
