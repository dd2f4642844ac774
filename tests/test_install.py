"""The package as a user installs it: a wheel, a fresh virtual environment, ``limitlap demo``.

The bundled vehicles and demo sessions must travel inside the wheel (pyproject.toml,
``[tool.setuptools.package-dir]``), so the demo runs from any working directory without
the clone beside it.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import sysconfig
import venv
from importlib import metadata
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
#: What a wheel is built from: the package, its bundled folders and the project files.
SOURCES = ("limitlap", "vehicles", "demo_tracks", "pyproject.toml", "README.md")


def _backend_installed() -> bool:
    """True when the build requirements of pyproject.toml are in this environment."""
    try:
        major = int(metadata.version("setuptools").split(".")[0])
        metadata.version("wheel")
    except (metadata.PackageNotFoundError, ValueError):
        return False
    return major >= 77  # pyproject.toml, [build-system] requires


def _build_wheel(src: Path, dist: Path) -> Path:
    """Wheel of ``src`` in ``dist``: with this environment's backend when it has one."""
    cmd = [sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(dist), str(src)]
    if _backend_installed():
        cmd[5:5] = ["--no-build-isolation", "--check-build-dependencies"]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    if done.returncode != 0 and not _backend_installed():
        if "No matching distribution" in done.stderr or "Could not find a version" in done.stderr:
            pytest.skip(
                "the build backend (setuptools>=77, wheel) is neither installed nor fetchable"
            )
    assert done.returncode == 0, done.stderr
    (wheel,) = dist.glob("limitlap-*.whl")
    return wheel


def _fresh_environment(where: Path) -> Path:
    """A new virtual environment that sees this one's dependencies; its python.

    ``--system-site-packages`` reaches the base interpreter's packages only, so this
    environment's site folders are appended to the new one's path by a ``.pth`` line
    (plain ``sys.path.append``: their own ``.pth`` files, among them an editable
    install of limitlap, are not run, so the wheel's copy is the one imported).
    """
    try:
        venv.EnvBuilder(system_site_packages=True, with_pip=False).create(where)
    except Exception as err:  # no venv module support on this Python
        pytest.skip(f"cannot create a virtual environment: {err}")
    python = where / ("Scripts" if os.name == "nt" else "bin") / "python"
    if not python.exists():
        pytest.skip("the virtual environment has no python")
    site = subprocess.run(
        [str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    ours = {sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]}
    lines = "".join(f"import sys; sys.path.append({p!r})\n" for p in sorted(ours))
    Path(site, "_limitlap_test_deps.pth").write_text(lines)
    return python


@pytest.mark.slow
def test_wheel_installs_and_runs_the_demo_outside_the_clone(tmp_path):
    src = tmp_path / "src"
    src.mkdir()
    for name in SOURCES:
        item = REPO / name
        if item.is_dir():
            shutil.copytree(item, src / name, ignore=shutil.ignore_patterns("__pycache__"))
        else:
            shutil.copy2(item, src / name)
    wheel = _build_wheel(src, tmp_path / "dist")
    python = _fresh_environment(tmp_path / "env")
    pip = [sys.executable, "-m", "pip", "--python", str(python)]
    done = subprocess.run(
        [*pip, "install", "-q", "--no-deps", "--no-index", str(wheel)],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    shutil.rmtree(src)  # nothing of the clone is left to fall back on

    work = tmp_path / "elsewhere"  # a working directory outside the repository
    work.mkdir()
    script = python.parent / ("limitlap.exe" if os.name == "nt" else "limitlap")
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
    env["NUMBA_CACHE_DIR"] = str(tmp_path / "numba-cache")
    run = subprocess.run(
        [str(script), "demo", "--out", "demo-out", "--quiet"],
        cwd=work,
        capture_output=True,
        text=True,
        timeout=600,
        env=env,
    )
    assert run.returncode == 0, run.stderr
    out = work / "demo-out"
    assert (out / "report.html").stat().st_size > 0
    # the vendored plotly.js travels in the wheel (package data) and is inlined in the page
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "plotly.js (basic - minified) v4.1.1" in page
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert summary["schema"] == "limitlap.summary/1"
    # The session it analysed is the wheel's own copy, not the clone's.
    where = subprocess.run(
        [str(python), "-c", "import limitlap.resources as r; print(r.bundled_path('vehicles'))"],
        cwd=work,
        capture_output=True,
        text=True,
        env=env,
        check=True,
    ).stdout.strip()
    assert Path(where).is_relative_to(tmp_path / "env"), where
    assert not Path(where).is_relative_to(REPO)
