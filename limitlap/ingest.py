"""Reading the small user files: vehicle TOML, line CSV, channel map, track file -> SI.

Session logs are read by :mod:`limitlap.logfile`; their positions are turned into a
local frame by :mod:`limitlap.gnss`. Formats: docs/formats.md.

Every problem with a file becomes an :class:`~limitlap.errors.InputError` that names
the file and what is wrong (key, row, column, value). Files are only ever opened for
reading.
"""

from __future__ import annotations

import contextlib
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from limitlap.errors import InputError, LimitlapError
from limitlap.line import Line, line_from_curvature, line_from_xy
from limitlap.units import CHANNEL_UNITS, KW_TO_W, RHO_ISA_KG_M3
from limitlap.vehicle import AIR_DENSITY_RANGE_KG_M3, EXPONENT_MAX, GRIP_COEFF_MAX, Vehicle

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
    """Read a vehicle file (docs/formats.md, Vehicle files).

    Parameters
    ----------
    path : str or Path
        TOML file.
    require_complete : bool
        When True every key of a vehicle file (docs/formats.md) except ``air_density_kg_m3`` and ``[grip]`` must be
        present; when False only ``mass_kg`` is required (the rest is fitted from a log).

    Returns
    -------
    Vehicle
        In SI (power in W).
    """
    path = Path(path)
    data = _open_toml(path, "vehicle file")
    _refuse_other_kind(path, data, "vehicle file")
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
            raise InputError(
                path, f"key 'grip.exponent' must be at least 1, got {fields['exponent']:g}"
            )
    elif require_complete:
        raise InputError(path, "missing table [grip] (lateral, braking, traction, exponent)")
    _check_meaning(path, fields)
    return Vehicle(**fields)


def _check_meaning(path, fields) -> None:
    """InputError for a vehicle value that no car can have (a typo, a unit slip)."""
    for key, field_name in _GRIP_KEYS.items():
        limit = EXPONENT_MAX if key == "exponent" else GRIP_COEFF_MAX
        value = fields.get(field_name)
        if value is not None and value > limit:
            what = "combined-slip exponent" if key == "exponent" else "friction coefficient"
            raise InputError(
                path, f"key 'grip.{key}' = {value:g} is beyond any tyre ({what} at most {limit:g})"
            )
    crr = fields.get("rolling_coeff")
    if crr is not None and crr >= 1.0:
        raise InputError(
            path,
            f"key 'rolling_coeff' = {crr:g}: rolling resistance would be {crr:g} times the "
            "car's weight (tyres: about 0.01)",
        )
    lo, hi = AIR_DENSITY_RANGE_KG_M3
    rho = fields["air_density_kg_m3"]
    if not lo <= rho <= hi:
        raise InputError(
            path,
            f"key 'air_density_kg_m3' = {rho:g} is not air at any circuit "
            f"(accepted {lo:g}-{hi:g} kg/m³; sea level 1.225)",
        )


# --------------------------------------------------------------------------- line files


@contextlib.contextmanager
def reading(path: Path, what: str = "file"):
    """Turn the operating system's refusals to read ``path`` into one-line input errors.

    ``what`` names the kind of file a folder was given for ("log file", "vehicle file").
    """
    try:
        yield
    except FileNotFoundError:
        raise InputError(path, "file not found") from None
    except IsADirectoryError:
        raise InputError(path, f"is a folder, not a {what}") from None
    except OSError as err:
        raise InputError(path, f"cannot be read: {err.strerror}") from err


def _read_numeric_csv(path):
    """Header names and a float array from a small numeric CSV (line files)."""
    path = Path(path)
    try:
        with reading(path):
            text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(path, "not UTF-8 text") from None
    lines = [ln for ln in text.splitlines() if ln.strip()]
    if not lines:
        raise InputError(path, "file is empty")
    header = [h.strip() for h in lines[0].split(",")]
    first = 2
    if len(lines) > 1 and _units_row(lines[1], header):  # bare names, their units under them
        units = [u.strip() for u in lines[1].split(",")]
        header = [f"{h} [{u}]" if u else h for h, u in zip(header, units, strict=True)]
        first = 3
    rows = []
    for r, ln in enumerate(lines[first - 1 :], start=first):
        cells = [c.strip() for c in ln.split(",")]
        if len(cells) != len(header):
            raise InputError(path, f"expected {len(header)} cells, found {len(cells)}", row=r)
        row = []
        for c, cell in enumerate(cells):
            try:
                value = float(cell)
            except ValueError:
                raise InputError(
                    path, f"'{cell}' is not a number", row=r, column=header[c]
                ) from None
            if not math.isfinite(value):
                raise InputError(path, f"'{cell}' is not a finite number", row=r, column=header[c])
            row.append(value)
        rows.append(row)
    return header, np.array(rows, dtype=np.float64).reshape(len(rows), len(header))


def _units_row(line: str, header: list[str]) -> bool:
    """True when ``line``, under a header of bare names, holds their units (no cell a number)."""
    cells = [c.strip() for c in line.split(",")]
    if len(cells) != len(header) or any("[" in h for h in header):
        return False
    for cell in cells:
        try:
            float(cell)
            return False
        except ValueError:
            continue
    return any(cells)


def _column_name(header_cell: str) -> tuple[str, str]:
    name, _, unit = header_cell.partition("[")
    return name.strip().lower(), unit.rstrip("]").strip()


def read_line(path, *, spacing_m: float = 1.0) -> Line:
    """Read a line file (docs/formats.md, Line files): ``x [m], y [m] (, z [m]) (, level [-])`` or ``distance [m], curvature [1/m] (, gradient [-])``.

    Returns
    -------
    Line
        Closed; x/y lines resampled to ``spacing_m`` (:func:`limitlap.line.line_from_xy`),
        their ``meta["warnings"]`` naming the file.
    """
    header, data = _read_numeric_csv(path)
    cols = {}
    for i, cell in enumerate(header):
        name, unit = _column_name(cell)
        expected = {
            "x": "m",
            "y": "m",
            "z": "m",
            "level": "-",
            "distance": "m",
            "curvature": "1/m",
            "gradient": "-",
        }
        if name in expected and unit not in ("", expected[name]):
            raise InputError(
                path, f"unit '{unit}' not accepted, expected '{expected[name]}'", column=cell
            )
        cols[name] = data[:, i]
    try:
        if "x" in cols and "y" in cols:
            n = data.shape[0]
            if n < 4:
                raise InputError(path, f"a closed line needs at least 4 points, found {n}")
            line = line_from_xy(
                cols["x"], cols["y"], cols.get("z"), spacing_m=spacing_m, level=cols.get("level")
            )
            line.meta["warnings"] = [f"{path}: {w}" for w in line.meta["warnings"]]
            return line
        if "distance" in cols and "curvature" in cols:
            return line_from_curvature(cols["distance"], cols["curvature"], cols.get("gradient"))
    except InputError:
        raise
    except LimitlapError as err:
        raise InputError(path, str(err)) from err
    raise InputError(path, "needs columns 'x [m], y [m]' or 'distance [m], curvature [1/m]'")


# --------------------------------------------------------------------------- channel maps

#: Spellings of units seen in logger exports -> the spelling used in ``CHANNEL_UNITS``
#: (compared after lower-casing and removing spaces).
_UNIT_ALIASES = {
    "sec": "s",
    "secs": "s",
    "msec": "ms",
    "°": "deg",
    "degree": "deg",
    "degrees": "deg",
    "metre": "m",
    "meter": "m",
    "kph": "km/h",
    "kmh": "km/h",
    "km/hr": "km/h",
    "mps": "m/s",
    "m/s2": "m/s^2",
    "m/s²": "m/s^2",
    "m/s/s": "m/s^2",
    "ms^-2": "m/s^2",
    "ms-2": "m/s^2",
    "°/s": "deg/s",
    "deg/sec": "deg/s",
    "dps": "deg/s",
    "rad/sec": "rad/s",
    "pct": "%",
    "percent": "%",
}


@dataclass(frozen=True)
class ChannelSpec:
    """Where one channel of docs/formats.md, Log files is found in a log with other column names.

    Attributes
    ----------
    column : str
        Header cell (or its name part before ``[unit]``) of the column in the log.
    unit : str or None
        Unit of the column, overriding the header's bracket; None: from the header.
    invert : bool
        True flips the sign (a logger with another sign convention than ISO 8855).
    """

    column: str
    unit: str | None = None
    invert: bool = False


#: What a channel map's ``[layout]`` table may state, and the values each key takes
#: (docs/formats.md, Channel map, Stating a layout).
TIME_FORMATS = ("number", "iso8601", "clock")
DELIMITERS = {",": ",", ";": ";", "tab": "\t", "\t": "\t"}


@dataclass(frozen=True)
class StatedLayout:
    """A log's layout as a channel map states it; None leaves that part to detection.

    Attributes
    ----------
    header_row : int or None
        The row (the file's first line = 1) that names the columns; the lines above it
        are metadata lines. [-]
    units_row : bool or None
        True: the row under the header gives the units; False: there is none. [-]
    delimiter : str or None
        ``","``, ``";"`` or a tab. [-]
    decimal : str or None
        The decimal mark, ``"."`` or ``","``. [-]
    time_format : str or None
        ``"number"`` (seconds or milliseconds by the unit), ``"iso8601"`` (date-times)
        or ``"clock"`` (hh:mm:ss.sss). [-]
    """

    header_row: int | None = None
    units_row: bool | None = None
    delimiter: str | None = None
    decimal: str | None = None
    time_format: str | None = None


@dataclass(frozen=True)
class ChannelMap:
    """A channel-map file: docs/formats.md, Log files channel name -> :class:`ChannelSpec`.

    ``layout``: what its ``[layout]`` table states (:class:`StatedLayout`), or None.
    """

    path: str
    channels: dict[str, ChannelSpec]
    layout: StatedLayout | None = None


def unit_key(channel: str, unit: str) -> str | None:
    """The ``CHANNEL_UNITS[channel]`` key a written unit means, None when not accepted."""
    accepted = CHANNEL_UNITS[channel]
    text = unit.strip().lower().replace(" ", "")
    text = _UNIT_ALIASES.get(text, text)
    if text == "-":  # dimensionless written as [-]
        text = "" if "" in accepted else "0-1"
    if text == "" and "" not in accepted:
        return next(iter(accepted))
    for key in accepted:
        if key.lower() == text:
            return key
    return None


def accepted_units(channel: str) -> str:
    """The units a channel's header may give, as a list for a message."""
    return ", ".join(k or "(none)" for k in CHANNEL_UNITS[channel])


#: What each kind of limitlap TOML file holds at its top level, as a message names it:
#: (kind, {top-level key: how a message shows it}). docs/formats.md, Vehicle files,
#: Track file, Channel map.
_TOML_KINDS = (
    (
        "vehicle file",
        {"mass_kg": "mass_kg", "power_kw": "power_kw", "grip": "[grip]"},
    ),
    (
        "track file",
        {"gate": "[gate]", "corners": "[[corners]]", "line": "line", "origin": "[origin]"},
    ),
    ("channel-map file", {"channels": "[channels.NAME]", "layout": "[layout]"}),
)


def toml_kind(data: dict) -> tuple[str, str] | None:
    """Which kind of limitlap TOML file ``data`` is, by the keys it holds.

    Parameters
    ----------
    data : dict
        A TOML file's top-level table. [-]

    Returns
    -------
    (str, str) or None
        The kind (``"vehicle file"``, ``"track file"``, ``"channel-map file"``) and the
        keys that show it (``"[gate]/[[corners]]"``); None when it holds none of them. [-]
    """
    for kind, marks in _TOML_KINDS:
        shown = [text for key, text in marks.items() if key in data]
        if shown:
            return kind, "/".join(shown)
    return None


def _refuse_other_kind(path: Path, data: dict, what: str) -> None:
    """InputError when ``data`` holds another kind's keys and none of ``what``'s own."""
    own = dict(_TOML_KINDS)[what]
    if any(key in data for key in own):
        return
    found = toml_kind(data)
    if found is not None:
        raise InputError(path, f"this is a {found[0]} (it has {found[1]}), not a {what}")


def _open_toml(path: Path, what: str) -> dict:
    try:
        with reading(path, what), path.open("rb") as fh:
            return tomllib.load(fh)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        looks = _table_kind(path)
        if looks is not None:
            raise InputError(path, f"this is {looks}, not a {what}") from err
        if isinstance(err, UnicodeDecodeError):
            raise InputError(path, "not valid TOML: not UTF-8 text") from err
        raise InputError(path, f"not valid TOML: {err}") from err


def _table_kind(path: Path) -> str | None:
    """What a file that is not TOML holds, by its first lines: gzip data, a log, a line file, a CSV table; None when none of them."""
    try:
        with path.open("rb") as fh:
            head = fh.read(1 << 16)
    except OSError:
        return None
    if head[:2] == b"\x1f\x8b":
        return "gzip-compressed data (a compressed log?)"
    bom16 = head[:2] in (b"\xff\xfe", b"\xfe\xff")
    if b"\x00" in head and not bom16:
        return None
    text = head.decode("utf-16" if bom16 else "utf-8-sig", errors="replace")
    for line in text.splitlines()[:40]:  # a few metadata lines may come before the header
        cells = [c.strip().strip('"') for c in re.split(r"[,;\t]", line)]
        if len(cells) < 2:
            continue
        names = {c.split("[")[0].strip().lower() for c in cells}
        shown = ", ".join(cells[:3]) + (", ..." if len(cells) > 3 else "")
        if "time" in names:
            return f"a log (a table with columns {shown})"
        if {"x", "y"} <= names or {"distance", "curvature"} <= names:
            return f"a line file (a table with columns {shown})"
    if text.count(",") + text.count(";") + text.count("\t") >= 2 and "=" not in text:
        return "a table of values"
    return None


def read_channel_map(path) -> ChannelMap:
    """Read a channel-map file (docs/formats.md, Log files) that names a log's columns.

    The file holds one table per channel::

        [channels.speed]
        column = "GPS Speed"      # header cell, with or without its "[unit]"
        unit = "m/s"              # optional: overrides the header's bracket
        [channels.accel_lat]
        invert = true             # optional: flip the sign; column defaults to the name

    and, for a log whose layout detection cannot tell, a ``[layout]`` table
    (:class:`StatedLayout`)::

        [layout]
        header_row = 5            # the lines above are metadata lines
        units_row = true
        delimiter = ";"           # ",", ";" or "tab"
        decimal = ","
        time_format = "iso8601"   # "number", "iso8601" or "clock"

    Parameters
    ----------
    path : str or Path
        TOML file.

    Returns
    -------
    ChannelMap
        Checked entries: known channel names, accepted units, one column per channel;
        the stated layout.
    """
    path = Path(path)
    data = _open_toml(path, "channel-map file")
    _refuse_other_kind(path, data, "channel-map file")
    extra = sorted(set(data) - {"channels", "layout"})
    if extra:
        raise InputError(
            path,
            f"unknown key '{extra[0]}'; a channel map holds [channels.NAME] tables and [layout]",
        )
    tables = data.get("channels", {})
    if not isinstance(tables, dict) or not (tables or "layout" in data):
        raise InputError(path, "no [channels.NAME] tables and no [layout]")
    specs: dict[str, ChannelSpec] = {}
    used: dict[str, str] = {}
    for name, entry in tables.items():
        specs[name] = _channel_spec(path, name, entry)
        folded = specs[name].column.lower()
        if folded in used:
            raise InputError(
                path, f"column '{specs[name].column}' is mapped twice ({used[folded]} and {name})"
            )
        used[folded] = name
    layout = _stated_layout(path, data["layout"]) if "layout" in data else None
    return ChannelMap(path=str(path), channels=specs, layout=layout)


def _channel_spec(path: Path, name: str, entry) -> ChannelSpec:
    """One ``[channels.NAME]`` table of a channel map, checked."""
    key = f"channels.{name}"
    if name not in CHANNEL_UNITS:
        known = ", ".join(CHANNEL_UNITS)
        raise InputError(path, f"unknown channel '{name}' in [{key}]; known: {known}")
    if not isinstance(entry, dict):
        raise InputError(path, f"[{key}] must be a table (column, unit, invert)")
    unknown = sorted(set(entry) - {"column", "unit", "invert"})
    if unknown:
        raise InputError(path, f"unknown key '{key}.{unknown[0]}' (expected column, unit, invert)")
    column = entry.get("column", name)
    if not isinstance(column, str) or not column.strip():
        raise InputError(path, f"key '{key}.column' must be a non-empty text, got {column!r}")
    unit = entry.get("unit")
    if unit is not None:
        if not isinstance(unit, str):
            raise InputError(path, f"key '{key}.unit' must be text, got {unit!r}")
        resolved = unit_key(name, unit)
        if resolved is None:
            raise InputError(
                path,
                f"key '{key}.unit': unknown unit '{unit}' (accepted: {accepted_units(name)})",
            )
        unit = resolved
    invert = entry.get("invert", False)
    if not isinstance(invert, bool):
        raise InputError(path, f"key '{key}.invert' must be true or false, got {invert!r}")
    return ChannelSpec(column=column.strip(), unit=unit, invert=invert)


def _stated_layout(path: Path, table) -> StatedLayout:
    """The ``[layout]`` table of a channel map, checked (docs/formats.md, Channel map)."""
    if not isinstance(table, dict):
        raise InputError(path, "[layout] must be a table (header_row, units_row, delimiter, ...)")
    keys = ("header_row", "units_row", "delimiter", "decimal", "time_format")
    unknown = sorted(set(table) - set(keys))
    if unknown:
        raise InputError(path, f"unknown key 'layout.{unknown[0]}' (expected {', '.join(keys)})")
    row = table.get("header_row")
    if row is not None and (isinstance(row, bool) or not isinstance(row, int) or row < 1):
        raise InputError(path, f"key 'layout.header_row' must be a row number from 1, got {row!r}")
    units = table.get("units_row")
    if units is not None and not isinstance(units, bool):
        raise InputError(path, f"key 'layout.units_row' must be true or false, got {units!r}")
    choices = {
        "delimiter": tuple(DELIMITERS),
        "decimal": (".", ","),
        "time_format": TIME_FORMATS,
    }
    for key, allowed in choices.items():
        if key in table and table[key] not in allowed:
            shown = ", ".join(f"'{a}'" for a in allowed)
            raise InputError(path, f"key 'layout.{key}' must be one of {shown}, got {table[key]!r}")
    sep = table.get("delimiter")
    return StatedLayout(
        header_row=row,
        units_row=units,
        delimiter=None if sep is None else DELIMITERS[sep],
        decimal=table.get("decimal"),
        time_format=table.get("time_format"),
    )


# --------------------------------------------------------------------------- track files


@dataclass(frozen=True)
class Track:
    """A circuit description (TOML): name, start/finish gate, corner names, line file.

    ``corner_names`` are in driving order from the gate; ``line_path`` is resolved
    relative to the track file (None when it names none).
    """

    path: str
    name: str
    gate_latlon: tuple[float, float] | None
    corner_names: tuple[str, ...]
    corner_labels: tuple[str, ...]
    corner_apexes_m: tuple[float, ...]
    line_path: str | None
    edges: TrackEdges | None = None


#: Default distance the car's centre keeps from a track edge (half a car's width of
#: about 1.9 m, and a little): docs/formats.md, Track edges. Common practice, no published
#: source. [m]
EDGE_MARGIN_M = 1.0

#: The two forms of an edges file (docs/formats.md, Track edges): the columns of each,
#: WGS84 or plane, in the order they are kept.
_EDGE_FORMS = {
    ("widths", True): ("latitude", "longitude", "left", "right"),
    ("widths", False): ("x", "y", "left", "right"),
    ("edges", True): ("left_latitude", "left_longitude", "right_latitude", "right_longitude"),
    ("edges", False): ("left_x", "left_y", "right_x", "right_y"),
}
_EDGE_UNITS = {"latitude": "deg", "longitude": "deg", "x": "m", "y": "m", "left": "m", "right": "m"}


@dataclass(frozen=True, eq=False)
class TrackEdges:
    """A track's edges as its file gives them (docs/formats.md, Track edges).

    ``form`` is ``"widths"`` (points of a line along the track with the width to its left
    and to its right, square to it) or ``"edges"`` (rows of paired points, one on each
    edge); ``geodetic`` says whether points are WGS84 degrees (latitude, longitude) or
    plane metres (x east, y north). ``columns`` holds the four columns of
    :data:`_EDGE_FORMS` in that order. ``margin_m``: how far the car's centre keeps from
    an edge. [m]
    """

    path: str
    form: str
    geodetic: bool
    columns: tuple[np.ndarray, ...]
    margin_m: float


def read_edges(path, margin_m: float) -> TrackEdges:
    """Read a track's edges file (docs/formats.md, Track edges); a missing column, a unit other than the one accepted, a negative width or fewer than 4 rows is refused, naming the file."""
    header, data = _read_numeric_csv(path)
    names = {}
    for i, cell in enumerate(header):
        name, unit = _column_name(cell)
        want = _EDGE_UNITS.get(
            name.rpartition("_")[2] if name.startswith(("left_", "right_")) else name
        )
        if want is not None and unit not in ("", want):
            raise InputError(path, f"unit '{unit}' not accepted, expected '{want}'", column=cell)
        names[name] = data[:, i]
    found = [key for key, cols in _EDGE_FORMS.items() if all(c in names for c in cols)]
    if not found:
        raise InputError(
            path,
            "needs columns 'latitude [deg], longitude [deg], left [m], right [m]' (or x/y), "
            "or 'left_latitude, left_longitude, right_latitude, right_longitude' (or left_x ...)",
        )
    (form, geodetic), cols = found[0], _EDGE_FORMS[found[0]]
    if data.shape[0] < 4:
        raise InputError(path, f"edges need at least 4 rows, found {data.shape[0]}")
    if form == "widths":
        for side in ("left", "right"):
            bad = np.flatnonzero(names[side] < 0)
            if bad.size:
                raise InputError(path, "a width is negative", row=int(bad[0]) + 2, column=side)
    return TrackEdges(str(path), form, geodetic, tuple(names[c] for c in cols), float(margin_m))


def _track_edges(path: Path, data: dict) -> TrackEdges | None:
    """The ``[edges]`` table of a track file read, or None."""
    table = data.get("edges")
    if table is None:
        return None
    if not isinstance(table, dict) or not isinstance(table.get("file"), str):
        raise InputError(path, "[edges] needs 'file', the edges file beside the track file")
    margin = table.get("margin_m", EDGE_MARGIN_M)
    if isinstance(margin, bool) or not isinstance(margin, int | float) or not 0 <= margin < 10:
        raise InputError(path, f"[edges] margin_m must be a number from 0 to 10 m, got {margin!r}")
    edges = path.parent / table["file"]
    if not edges.is_file():
        raise InputError(path, f"[edges] file '{table['file']}' not found beside the track file")
    return read_edges(edges, float(margin))


def read_track(path) -> Track:
    """Read a track file: ``name``, ``[gate] latitude/longitude``, ``[[corners]] name, label, apex_m``, ``line`` (a line file beside it).

    Each ``apex_m`` must be a distance along the lap: not negative, and below the file's
    own ``length_m`` when it gives one (against the driven lap's length:
    :func:`limitlap.corners.find_corners`). A vehicle or channel-map file is refused as
    such.
    """
    path = Path(path)
    data = _open_toml(path, "track file")
    _refuse_other_kind(path, data, "track file")
    gate = data.get("gate")
    gate_latlon = None
    if gate is not None:
        try:
            lat, lon = float(gate["latitude"]), float(gate["longitude"])
        except (KeyError, TypeError, ValueError):
            raise InputError(path, "[gate] needs numeric 'latitude' and 'longitude'") from None
        if not (-90 <= lat <= 90 and -180 <= lon <= 180):
            raise InputError(path, f"[gate] latitude/longitude out of range: {lat}, {lon}")
        gate_latlon = (lat, lon)
    length = data.get("length_m")
    if length is not None:
        length = _number(path, "length_m", length, may_be_zero=False)
    corners = data.get("corners", [])
    if not isinstance(corners, list) or not all(isinstance(c, dict) for c in corners):
        raise InputError(path, "'corners' must be an array of tables [[corners]]")
    names, labels, apexes = [], [], []
    for i, c in enumerate(corners, start=1):
        names.append(str(c.get("name", f"T{i}")))
        labels.append(str(c.get("label", "")))
        apexes.append(_apex(path, names[-1], c.get("apex_m", float("nan")), length))
    line = data.get("line")
    line_path = str(path.parent / line) if isinstance(line, str) else None
    return Track(
        str(path),
        str(data.get("name", path.stem)),
        gate_latlon,
        tuple(names),
        tuple(labels),
        tuple(apexes),
        line_path,
        _track_edges(path, data),
    )


def _apex(path, name, apex, length_m) -> float:
    """A corner's ``apex_m`` checked as a distance from the gate along the lap. [m]."""
    if isinstance(apex, bool) or not isinstance(apex, int | float):
        raise InputError(path, f"corner {name}: 'apex_m' must be a number")
    apex = float(apex)
    if math.isinf(apex):
        raise InputError(path, f"corner {name}: 'apex_m' must be finite, got {apex}")
    if apex < 0:
        raise InputError(
            path, f"corner {name}: 'apex_m' {apex:g} m is negative (distances run from the gate)"
        )
    if length_m is not None and apex >= length_m:
        raise InputError(
            path, f"corner {name}: 'apex_m' {apex:g} m is beyond the lap (length_m {length_m:g} m)"
        )
    return apex
