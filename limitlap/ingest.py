"""Reading user files: vehicle TOML, line CSV, session logs -> SI arrays and dataclasses.

Every problem with a file becomes an :class:`~limitlap.errors.InputError` that names
the file and what is wrong (key, row, column, value). Files are only ever opened for
reading.
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np

from limitlap.errors import InputError, LimitlapError
from limitlap.line import Line, line_from_curvature, line_from_xy, self_intersects
from limitlap.units import KW_TO_W, RHO_ISA_KG_M3
from limitlap.vehicle import Vehicle

# --------------------------------------------------------------------------- vehicles

_VEHICLE_KEYS = {  # TOML key -> (Vehicle field, factor to SI, may be zero)
    "mass_kg": ("mass_kg", 1.0, False),
    "power_kw": ("power_w", KW_TO_W, False),
    "drag_area_m2": ("drag_area_m2", 1.0, True),
    "downforce_area_m2": ("downforce_area_m2", 1.0, True),
    "rolling_coeff": ("rolling_coeff", 1.0, True),
    "air_density_kg_m3": ("air_density_kg_m3", 1.0, False),
}
_GRIP_KEYS = {
    "lateral": "mu_lat",
    "braking": "mu_brk",
    "traction": "mu_trac",
    "exponent": "exponent",
}


def _number(path, key, value, *, may_be_zero):
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InputError(path, f"key '{key}' must be a number, got {value!r}")
    value = float(value)
    if not math.isfinite(value):
        raise InputError(path, f"key '{key}' must be finite, got {value}")
    if value < 0 or (value == 0 and not may_be_zero):
        word = "negative" if value < 0 else "zero"
        raise InputError(path, f"key '{key}' must be positive, got {word} value {value:g}")
    return value


def read_vehicle(path, *, require_complete: bool = True) -> Vehicle:
    """Read a vehicle file (INTERFACE §3).

    Parameters
    ----------
    path : str or Path
        TOML file.
    require_complete : bool
        When True every key of §3 except ``air_density_kg_m3`` and ``[grip]`` must be
        present; when False only ``mass_kg`` is required (the rest is fitted from a log).

    Returns
    -------
    Vehicle
        In SI (power in W).
    """
    path = Path(path)
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise InputError(path, "file not found") from None
    except IsADirectoryError:
        raise InputError(path, "is a folder, not a vehicle file") from None
    except OSError as err:
        raise InputError(path, f"cannot be read: {err.strerror}") from err
    except tomllib.TOMLDecodeError as err:
        raise InputError(path, f"not valid TOML: {err}") from err
    except UnicodeDecodeError as err:
        raise InputError(path, "not valid TOML: not UTF-8 text") from err
    fields: dict = {}
    name = data.get("name", path.stem)
    if not isinstance(name, str):
        raise InputError(path, f"key 'name' must be text, got {name!r}")
    fields["name"] = name
    for key, (field_name, factor, may_be_zero) in _VEHICLE_KEYS.items():
        if key in data:
            fields[field_name] = _number(path, key, data[key], may_be_zero=may_be_zero) * factor
        elif key == "air_density_kg_m3":
            fields[field_name] = RHO_ISA_KG_M3
        elif require_complete or key == "mass_kg":
            raise InputError(path, f"missing key '{key}'")
    grip = data.get("grip")
    if grip is not None:
        if not isinstance(grip, dict):
            raise InputError(path, "'grip' must be a table of lateral, braking, traction, exponent")
        for key, field_name in _GRIP_KEYS.items():
            if key not in grip:
                raise InputError(path, f"missing key 'grip.{key}'")
            fields[field_name] = _number(path, f"grip.{key}", grip[key], may_be_zero=False)
        if fields["exponent"] < 1.0:
            raise InputError(path, f"key 'grip.exponent' must be at least 1, got {fields['exponent']:g}")
    elif require_complete:
        raise InputError(path, "missing table [grip] (lateral, braking, traction, exponent)")
    return Vehicle(**fields)


# --------------------------------------------------------------------------- line files


def _read_numeric_csv(path):
    """Header names and a float array from a small numeric CSV (line files)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(path, "file not found") from None
    except IsADirectoryError:
        raise InputError(path, "is a folder, not a file") from None
    except OSError as err:
        raise InputError(path, f"cannot be read: {err.strerror}") from err
    except UnicodeDecodeError:
        raise InputError(path, "not UTF-8 text") from None
    lines = [ln for ln in text.splitlines() if ln.strip()]
    if not lines:
        raise InputError(path, "file is empty")
    header = [h.strip() for h in lines[0].split(",")]
    rows = []
    for r, ln in enumerate(lines[1:], start=2):
        cells = [c.strip() for c in ln.split(",")]
        if len(cells) != len(header):
            raise InputError(path, f"expected {len(header)} cells, found {len(cells)}", row=r)
        row = []
        for c, cell in enumerate(cells):
            try:
                value = float(cell)
            except ValueError:
                raise InputError(path, f"'{cell}' is not a number", row=r, column=header[c]) from None
            if not math.isfinite(value):
                raise InputError(path, f"'{cell}' is not a finite number", row=r, column=header[c])
            row.append(value)
        rows.append(row)
    return header, np.array(rows, dtype=np.float64).reshape(len(rows), len(header))


def _column_name(header_cell: str) -> tuple[str, str]:
    name, _, unit = header_cell.partition("[")
    return name.strip().lower(), unit.rstrip("]").strip()


def read_line(path, *, spacing_m: float = 1.0) -> Line:
    """Read a line file (INTERFACE §2): ``x [m], y [m] (, z [m])`` or
    ``distance [m], curvature [1/m] (, gradient [-])``.

    Returns
    -------
    Line
        Closed; x/y lines resampled to ``spacing_m`` with a periodic smoothing spline.
    """
    header, data = _read_numeric_csv(path)
    cols = {}
    for i, cell in enumerate(header):
        name, unit = _column_name(cell)
        expected = {"x": "m", "y": "m", "z": "m", "distance": "m", "curvature": "1/m", "gradient": "-"}
        if name in expected and unit not in ("", expected[name]):
            raise InputError(path, f"unit '{unit}' not accepted, expected '{expected[name]}'", column=cell)
        cols[name] = data[:, i]
    try:
        if "x" in cols and "y" in cols:
            n = data.shape[0]
            if n < 4:
                raise InputError(path, f"a closed line needs at least 4 points, found {n}")
            if self_intersects(cols["x"], cols["y"]):
                raise InputError(path, "the line crosses itself; points must follow the driven loop in order")
            return line_from_xy(cols["x"], cols["y"], cols.get("z"), spacing_m=spacing_m)
        if "distance" in cols and "curvature" in cols:
            return line_from_curvature(cols["distance"], cols["curvature"], cols.get("gradient"))
    except InputError:
        raise
    except LimitlapError as err:
        raise InputError(path, str(err)) from err
    raise InputError(path, "needs columns 'x [m], y [m]' or 'distance [m], curvature [1/m]'")


# --------------------------------------------------------------------------- session logs

from dataclasses import dataclass, field  # noqa: E402


@dataclass(frozen=True, eq=False)
class Log:
    """A session log in SI on one time base (the log's own rows).

    Attributes
    ----------
    path : str
        The file it came from.
    time_s : numpy.ndarray
        Time of each row, strictly increasing. [s]
    channels : dict[str, numpy.ndarray]
        INTERFACE §1 channel name -> values per row in SI (``speed`` m/s, ``accel_*``
        m/s², ``yaw_rate`` rad/s, ``throttle`` 0-1, ``brake`` Pa, ``steer`` rad,
        ``altitude`` m). NaN where the row left the cell blank (lower-rate channels).
        Position is always planar: ``x`` east and ``y`` north in metres; a WGS84 log is
        converted to a local east-north-up frame at ``origin``.
    origin : tuple of float or None
        (latitude deg, longitude deg, height m) of the ENU origin, None for x/y logs.
    warnings : list of str
        Problems found that did not stop the read (one line each, naming the file).
    """

    path: str
    time_s: np.ndarray
    channels: dict[str, np.ndarray]
    origin: tuple[float, float, float] | None = None
    warnings: list[str] = field(default_factory=list)

    def has(self, name: str) -> bool:
        """True when the channel exists and has at least one value."""
        ch = self.channels.get(name)
        return ch is not None and bool(np.isfinite(ch).any())
