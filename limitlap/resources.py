"""Where the bundled files live: the one helper that finds vehicles/ and demo_tracks/.

In a clone (and an editable install) the bundled folders sit at the top of the
repository, beside the package folder; an installed wheel carries them inside the
package as ``limitlap/vehicles/`` and ``limitlap/demo_tracks/`` (pyproject.toml,
``[tool.setuptools.package-dir]``). Nothing is looked up relative to the working
directory.
"""

from __future__ import annotations

from pathlib import Path

from limitlap.errors import LimitlapError

PACKAGE = Path(__file__).resolve().parent
ROOT = PACKAGE.parent

#: The bundled folders, as an installed package holds them or else as the clone does.
BUNDLED = PACKAGE if (PACKAGE / "vehicles").is_dir() else ROOT


def bundled_path(*parts: str) -> Path:
    """Path of a bundled file, e.g. ``bundled_path("vehicles", "gt_coupe.toml")``.

    Parameters
    ----------
    *parts : str
        Folder (``vehicles`` or ``demo_tracks``) and file name. [-]

    Returns
    -------
    Path
        The file in the installed package or, from a clone, in the repository. [-]

    Raises
    ------
    LimitlapError
        When the file is not there (a broken install).
    """
    path = BUNDLED.joinpath(*parts)
    if not path.exists():
        raise LimitlapError(f"bundled file {path} is missing; reinstall limitlap")
    return path
