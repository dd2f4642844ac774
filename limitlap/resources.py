"""Where the bundled files live: the one helper that finds vehicles/ and demo_tracks/.

The package is installed editable from its clone (README), so the bundled folders sit
beside the package folder; nothing is looked up relative to the working directory.
"""

from __future__ import annotations

from pathlib import Path

from limitlap.errors import LimitlapError

ROOT = Path(__file__).resolve().parent.parent


def bundled_path(*parts: str) -> Path:
    """Path of a bundled file, e.g. ``bundled_path("vehicles", "gt_coupe.toml")``."""
    path = ROOT.joinpath(*parts)
    if not path.exists():
        raise LimitlapError(f"bundled file {path} is missing; reinstall limitlap from its clone")
    return path
