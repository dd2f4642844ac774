"""Shared inputs of the robustness tests: small generated sessions, hand-written
files, and an in-process runner of the real command line (``limitlap.cli.main``)."""

from __future__ import annotations

import functools
import hashlib
import sys
from pathlib import Path

from limitlap import circuits, synth

#: The example car of docs/formats.md (Vehicle files), as a vehicle file.
VEHICLE_TOML = """\
name = "example"
mass_kg = 1300.0
power_kw = 370.0
drag_area_m2 = 0.75
downforce_area_m2 = 1.10
rolling_coeff = 0.012

[grip]
lateral = 1.45
braking = 1.55
traction = 1.30
exponent = 2.0
"""


def square_line_csv(side_m: float = 200.0, n_side: int = 20) -> str:
    """A valid x/y line file: a rounded square loop, counter-clockwise, no repeat point."""
    import numpy as np

    t = np.linspace(0.0, 2.0 * np.pi, 4 * n_side, endpoint=False)
    # superellipse |x|^4 + |y|^4 = r^4: a square with round corners, smooth everywhere
    c, s = np.cos(t), np.sin(t)
    x = 0.5 * side_m * np.sign(c) * np.abs(c) ** 0.5
    y = 0.5 * side_m * np.sign(s) * np.abs(s) ** 0.5
    return "x [m],y [m]\n" + "".join(f"{a:.4f},{b:.4f}\n" for a, b in zip(x, y, strict=True))


@functools.cache
def circle_session(n_laps: int = 2, gps_dropouts: tuple = (), seed: int = 3) -> synth.Session:
    """A short generated session on a 100 m circle (laps in well under a second)."""
    circuit = circuits.circle_circuit(100.0)
    return synth.generate_session(
        circuit, n_laps=n_laps, mistakes=(), seed=seed, gps_dropouts=gps_dropouts
    )


@functools.cache
def demo_session(n_laps: int = 2, gps_dropouts: tuple = (), seed: int = 3) -> synth.Session:
    """A short generated session on the invented demo circuit (rich enough to fit)."""
    return synth.generate_session(n_laps=n_laps, seed=seed, gps_dropouts=gps_dropouts)


@functools.cache
def circle_csv(n_laps: int = 2, gps_dropouts: tuple = ()) -> str:
    return synth.session_csv_text(circle_session(n_laps, gps_dropouts))


@functools.cache
def demo_csv(n_laps: int = 2, gps_dropouts: tuple = ()) -> str:
    return synth.session_csv_text(demo_session(n_laps, gps_dropouts))


def circle_gate() -> str:
    lat, lon = circuits.circle_circuit(100.0).gate_latlon
    return f"{lat:.7f},{lon:.7f}"


def demo_gate() -> str:
    lat, lon = circuits.demo_circuit().gate_latlon
    return f"{lat:.7f},{lon:.7f}"


def run_cli(args, capsys, monkeypatch) -> tuple[int, str, str]:
    """Run ``limitlap ARGS`` in this process through ``limitlap.cli.main`` (the console
    entry point with its error handling); returns (exit code, stdout, stderr).

    Anything but the entry point's own ``SystemExit`` (a traceback) propagates and fails
    the calling test.
    """
    from limitlap.cli import main

    capsys.readouterr()
    monkeypatch.setattr(sys, "argv", ["limitlap", *[str(a) for a in args]])
    try:
        main()
        code = 0
    except SystemExit as stop:
        code = stop.code if isinstance(stop.code, int) else 1
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def digest(path) -> str:
    """SHA-256 of a file's bytes."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def digests(folder) -> dict[str, str]:
    """SHA-256 of every file in a folder, by name (hidden temp files included)."""
    return {p.name: digest(p) for p in sorted(Path(folder).iterdir()) if p.is_file()}
