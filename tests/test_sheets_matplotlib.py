"""The target sheets and the PNG pictures use matplotlib's public API only, and draw on the
oldest matplotlib pyproject.toml declares.

matplotlib documents everything whose name starts with an underscore as private, and
marks nothing else private (matplotlib's API changes policy): the first test reads every
limitlap module's matplotlib imports and attribute uses; the second installs the declared
minimum in a fresh virtual environment and draws the sheets and a picture with it.
"""

from __future__ import annotations

import ast
import os
import re
import subprocess
import sys
import venv
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


def _matplotlib_names(tree: ast.AST) -> list[str]:
    """Every dotted matplotlib name a module imports or reads (``matplotlib.x.y``)."""
    names, aliases = [], {}
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "matplotlib":
                    names.append(a.name)
                    aliases[a.asname or a.name.split(".")[0]] = a.name if a.asname else "matplotlib"
        elif isinstance(node, ast.ImportFrom) and (node.module or "").split(".")[0] == "matplotlib":
            for a in node.names:
                names.append(f"{node.module}.{a.name}")
    for node in ast.walk(tree):
        if isinstance(node, ast.Attribute):
            chain, base = [node.attr], node.value
            while isinstance(base, ast.Attribute):
                chain.append(base.attr)
                base = base.value
            if isinstance(base, ast.Name) and base.id in aliases:
                names.append(".".join([aliases[base.id], *reversed(chain)]))
    return names


def test_no_private_matplotlib_api_is_used():
    used = {}
    for path in sorted((REPO / "limitlap").glob("*.py")):
        for name in _matplotlib_names(ast.parse(path.read_text(encoding="utf-8"))):
            used.setdefault(name, path.name)
    assert any(n.startswith("matplotlib.figure") for n in used)  # the scan sees the imports
    private = {n: f for n, f in used.items() if any(p.startswith("_") for p in n.split("."))}
    assert private == {}
    # the home-made drawing layer reached into the font engine; nothing does now
    assert not any("ft2font" in n or "backend_bases" in n for n in used)


def _floor(package: str) -> str:
    text = (REPO / "pyproject.toml").read_text(encoding="utf-8")
    return re.search(rf'"{package}>=([0-9.]+)"', text).group(1)


@pytest.mark.slow
def test_sheets_and_pictures_draw_on_the_oldest_declared_matplotlib(tmp_path):
    mpl, np_floor = _floor("matplotlib"), _floor("numpy")
    env_dir = tmp_path / "env"
    try:
        venv.EnvBuilder(with_pip=False).create(env_dir)
    except Exception as err:  # no venv support on this Python
        pytest.skip(f"cannot create a virtual environment: {err}")
    python = env_dir / ("Scripts" if os.name == "nt" else "bin") / "python"
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "--python",
            str(python),
            "install",
            "-q",
            f"matplotlib=={mpl}",
            f"numpy=={np_floor}.*",
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    if done.returncode != 0:
        pytest.skip(f"matplotlib {mpl} could not be installed: {done.stderr.strip()[-300:]}")
    script = """
import matplotlib
from limitlap import figures, pictures, sheets
from limitlap.formatting import units_named
cond = {"label": "wet", "grip_scale": 0.7, "lap_time_s": 95.2, "length_m": 3000.0,
  "corners": [{"name": "T1", "label": "Hook", "apex_m": 400.0, "brake_points_m": [300.0],
  "before_apex_m": 100.0, "entry_speed_m_s": 55.6, "min_speed_m_s": 22.2,
  "exit_speed_m_s": 41.7, "segment_time_s": 9.5}]}
pdf = sheets.target_sheet(cond, "Invented Ring", "Take care.", fmt="pdf")
png = sheets.target_sheet(cond, "Invented Ring", "Take care.", fmt="png",
                          units=units_named("imperial"))
corners = [{"name": "T1", "time_left_s": 0.3, "actual_s": 10.3, "ideal_s": 10.0},
           {"name": "T2", "time_left_s": -0.02, "actual_s": 8.0, "ideal_s": 8.02}]
spec = figures.time_left_figure(corners)
pic = pictures.picture(spec, figures.Columns())
print(matplotlib.__version__, pdf[:5].decode(), png[:4] == b"\\x89PNG", pic[:4] == b"\\x89PNG")
"""
    env = {**os.environ, "PYTHONPATH": str(REPO), "MPLBACKEND": "Agg"}
    run = subprocess.run(
        [str(python), "-c", script],
        capture_output=True,
        text=True,
        timeout=300,
        env=env,
        cwd=tmp_path,
    )
    assert run.returncode == 0, run.stderr[-3000:]
    version, *rest = run.stdout.split()
    # "3.9" in pyproject.toml is 3.9.0 to pip
    assert [int(x) for x in version.split(".")] == [int(x) for x in f"{mpl}.0.0".split(".")[:3]]
    assert rest == ["%PDF-", "True", "True"]
