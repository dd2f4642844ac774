"""Everything limitlap writes: summary.json, profiles, envelope.toml, figures, report.html,
target sheets. The only module that writes files.

Every file is written whole to a temporary name in its own folder, flushed to disk and
moved into place with :func:`os.replace` (atomic on POSIX and Windows), so a run that
fails half way leaves the earlier results intact. The same inputs give byte-identical
``summary.json``, CSV and TOML: keys in a fixed order, floats rounded to fixed decimals,
no timestamps.

SI values come in; km/h and g appear only in what is written, with the factors of
:mod:`limitlap.units`. matplotlib is only imported when a figure is drawn
(:mod:`limitlap.figures`).
"""

from __future__ import annotations

import base64
import contextlib
import dataclasses
import html
import json
import math
import os
import re
import tempfile
from collections.abc import Callable, Mapping
from pathlib import Path

import numpy as np

from limitlap.errors import InputError, LimitlapError
from limitlap.formatting import lap_time, number, time_left
from limitlap.units import KMH_TO_M_S, KW_TO_W

#: Schema string of summary.json (docs/outputs.md, summary.json).
SUMMARY_SCHEMA = "limitlap.summary/1"

#: The safety caution every report and target sheet carries.
SAFETY_CAUTION = (
    "These targets are theoretical estimates from a point-mass model of your own laps, "
    "not instructions. Approach them progressively, a step at a time. Wet grip changes "
    "from corner to corner and from lap to lap. The circuit's regulations, its officials "
    "and qualified instructors come first."
)

#: Progress callback: ``progress(done, total, step)`` after each step of a write.
Progress = Callable[[int, int, str], None]

# --------------------------------------------------------------------------- atomic files


def write_atomic(path, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` atomically: temp file in the same folder, fsync, replace.

    Parameters
    ----------
    path : str or Path
        Destination file; its folder must exist.
    data : bytes or str
        Content; text is written as UTF-8 with ``\\n`` line ends.

    Returns
    -------
    Path
        The destination.

    Raises
    ------
    InputError
        Naming the folder when it is missing or cannot be written; any file already at
        ``path`` is left as it was.
    """
    path = Path(path)
    folder = path.parent
    payload = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    if not folder.is_dir():
        problem = "is not a folder" if folder.exists() else "output folder does not exist"
        raise InputError(folder, problem)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as err:
        raise InputError(folder, f"output folder cannot be written: {err.strerror or err}") from err
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; give the usual file mode
        os.replace(tmp, path)
    except OSError as err:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise InputError(folder, f"cannot write {path.name}: {err.strerror or err}") from err
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    with contextlib.suppress(OSError, AttributeError):  # make the rename durable (POSIX)
        dir_fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(dir_fd)
        finally:
            os.close(dir_fd)
    return path


def _prepare_folder(out_dir) -> Path:
    """Create the output folder (one level) or raise an InputError naming it."""
    out = Path(out_dir)
    try:
        out.mkdir(exist_ok=True)
    except FileNotFoundError:
        raise InputError(
            out, "output folder cannot be made: its parent folder does not exist"
        ) from None
    except FileExistsError:
        raise InputError(out, "is a file, not an output folder") from None
    except OSError as err:
        raise InputError(out, f"output folder cannot be made: {err.strerror or err}") from err
    if not out.is_dir():
        raise InputError(out, "is not a folder")
    return out


# --------------------------------------------------------------------------- summary.json

# Decimals per key suffix (longest first): 10 µs, 1 mm, 0.001 m/s, 0.01 km/h.
_DECIMALS = (
    ("_m_s2", 4),
    ("_m_s", 4),
    ("_kmh", 2),
    ("_1_m", 7),
    # Times stay at full precision: the corners' time left must add up to the lap's
    # (docs/outputs.md, summary.json), which rounding each value separately would break.
    ("_s", None),
    ("_m", 3),
)
_DEFAULT_DECIMALS = 5


def _decimals(key: str) -> int | None:
    for suffix, n in _DECIMALS:
        if key.endswith(suffix):
            return n
    return _DEFAULT_DECIMALS


def _plain(value, key: str = ""):
    """JSON-ready copy: numpy -> Python, floats rounded by key, NaN/inf -> None."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v, str(k)) for k, v in value.items()}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _plain(getattr(value, f.name), f.name) for f in dataclasses.fields(value)}
    if isinstance(value, np.ndarray):
        return [_plain(v, key) for v in value.tolist()]
    if isinstance(value, list | tuple):
        return [_plain(v, key) for v in value]
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        x = float(value)
        if not math.isfinite(x):
            return None
        n = _decimals(key)
        if n is not None:
            x = round(x, n)
        return 0.0 if x == 0.0 else x  # no "-0.0"
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    raise LimitlapError(f"summary value of '{key}' has an unsupported type {type(value).__name__}")


def summary_json_text(summary: Mapping) -> str:
    """summary.json text: keys in the given order, floats rounded by their unit suffix.

    Parameters
    ----------
    summary : Mapping
        docs/outputs.md, summary.json content, SI and km/h as the keys say.

    Returns
    -------
    str
        Indented JSON ending in a newline; identical for identical input.

    Examples
    --------
    >>> print(summary_json_text({"lap_time_s": 92.4123456, "apex_m": -0.0001}), end="")
    {
      "lap_time_s": 92.4123456,
      "apex_m": 0.0
    }
    """
    return json.dumps(_plain(summary), indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_summary_json(path, summary: Mapping) -> Path:
    """Write ``summary`` as summary.json (see :func:`summary_json_text`) atomically."""
    return write_atomic(path, summary_json_text(summary))


# --------------------------------------------------------------------------- envelope.toml


def _toml_float(x: float) -> str:
    """Shortest text that reads back as the same float (``repr`` round-trips exactly)."""
    x = float(x)
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    return repr(x)


def _flat_items(obj, prefix=""):
    """(name, value) pairs of a mapping, dataclass or namespace, nested names joined by '.'."""
    if obj is None:
        return []
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        obj = {f.name: getattr(obj, f.name) for f in dataclasses.fields(obj)}
    elif not isinstance(obj, Mapping) and hasattr(obj, "__dict__"):
        obj = dict(vars(obj))
    if not isinstance(obj, Mapping):
        return [(prefix or "value", obj)]
    out = []
    for k, v in obj.items():
        name = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, Mapping) or (dataclasses.is_dataclass(v) and not isinstance(v, type)):
            out.extend(_flat_items(v, name))
        else:
            out.append((name, v))
    return out


def _comment_value(v) -> str:
    if isinstance(v, float | np.floating):
        return f"{float(v):.4g}"
    if isinstance(v, np.ndarray):
        return (
            "["
            + ", ".join(_comment_value(x) for x in v.ravel()[:8])
            + (", ..." if v.size > 8 else "")
            + "]"
        )
    if isinstance(v, list | tuple):
        return (
            "["
            + ", ".join(_comment_value(x) for x in list(v)[:8])
            + (", ..." if len(v) > 8 else "")
            + "]"
        )
    return " ".join(str(v).split())


def envelope_toml_text(vehicle, fit_info=None) -> str:
    """The vehicle in the docs/formats.md, Vehicle files TOML form, fit quality as comments.

    Parameters
    ----------
    vehicle : Vehicle
        Complete vehicle (the fitted envelope at grip scale 1).
    fit_info : Mapping or dataclass, optional
        Fit quality and uncertainty figures, written as ``#`` comments (nested names
        joined with '.').

    Returns
    -------
    str
        TOML text that :func:`limitlap.ingest.read_vehicle` reads back to the same
        numbers (floats are written with ``repr``, which round-trips exactly).

    Examples
    --------
    >>> from limitlap.vehicle import Vehicle
    >>> car = Vehicle("demo", 1000.0, 150e3, 0.7, 0.0, 0.013, mu_lat=1.1, mu_brk=1.2,
    ...               mu_trac=1.0, exponent=2.0)
    >>> print(envelope_toml_text(car).splitlines()[2])
    name = "demo"
    """
    vehicle.require_complete()
    if not math.isfinite(vehicle.power_w):
        raise LimitlapError(
            f"vehicle '{vehicle.name}' has no finite power; envelope.toml needs power_kw"
        )
    lines = [
        "# Grip envelope in the limitlap vehicle form; reuse it with --vehicle.",
        "# Units as the keys say; friction coefficients are dimensionless.",
        f"name = {json.dumps(vehicle.name, ensure_ascii=False)}",
        f"mass_kg = {_toml_float(vehicle.mass_kg)}",
        f"power_kw = {_toml_float(vehicle.power_w / KW_TO_W)}",
        f"drag_area_m2 = {_toml_float(vehicle.drag_area_m2)}",
        f"downforce_area_m2 = {_toml_float(vehicle.downforce_area_m2)}",
        f"rolling_coeff = {_toml_float(vehicle.rolling_coeff)}",
        f"air_density_kg_m3 = {_toml_float(vehicle.air_density_kg_m3)}",
        "",
        "[grip]",
        f"lateral = {_toml_float(vehicle.mu_lat)}",
        f"braking = {_toml_float(vehicle.mu_brk)}",
        f"traction = {_toml_float(vehicle.mu_trac)}",
        f"exponent = {_toml_float(vehicle.exponent)}",
    ]
    items = _flat_items(fit_info)
    if items:
        lines += ["", "# Fit of this envelope to the session's samples:"]
        lines += [f"#   {name} = {_comment_value(v)}" for name, v in items]
        names = {name for name, _ in items}
        if "quality.share_outside_tyre_limit" in names:
            lines += [
                "# share_outside_tyre_limit: samples beyond the friction limits (up to half of those",
                "#   driven on the limit: the sensor noise scatters them both ways, and it is taken",
                "#   out of the envelope, noise_offset_m_s2); share_above_power_line: full-throttle",
                "#   samples above the power line (about half: it is a central fit of them).",
            ]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- CSV


def _csv_cell(text: str) -> str:
    return f'"{text.replace(chr(34), chr(34) * 2)}"' if any(c in text for c in ',"\n') else text


def profile_csv_text(columns: Mapping, units: Mapping) -> str:
    """CSV of equal-length numeric columns, headers ``name [unit]`` (docs/formats.md, Log files style).

    Parameters
    ----------
    columns : Mapping
        Column name -> 1-D array, in output order; already in the units given.
    units : Mapping
        Column name -> unit text (``""`` or missing for none).

    Returns
    -------
    str
        Header row and one row per sample, blank cells for NaN. Each column is rounded to
        the decimal places that keep 8 significant digits of its largest value (the same
        absolute resolution all down the column) and written as the shortest decimal of
        that number, by polars' CSV writer (a few milliseconds where Python's own
        formatting of a lap's 50,000 cells took 13).

    Examples
    --------
    >>> print(profile_csv_text({"distance": [0.0, 1.5], "speed": [100.0, float("nan")]},
    ...                        {"distance": "m", "speed": "km/h"}), end="")
    distance [m],speed [km/h]
    0.0,100.0
    1.5,
    """
    import polars as pl  # deferred, as in the reader

    names = list(columns)
    if not names:
        raise LimitlapError("a profile CSV needs at least one column")
    arrays = [np.asarray(columns[n], dtype=np.float64).ravel() for n in names]
    n_rows = arrays[0].shape[0]
    for name, a in zip(names, arrays, strict=True):
        if a.shape[0] != n_rows:
            raise LimitlapError(f"profile column '{name}' has {a.shape[0]} rows, expected {n_rows}")
    header = ",".join(_csv_cell(f"{n} [{units[n]}]" if units.get(n) else str(n)) for n in names)
    if n_rows == 0:
        return f"{header}\n"
    frame = {}
    for j, a in enumerate(arrays):
        finite = np.isfinite(a)
        top = float(np.max(np.abs(a[finite]))) if finite.any() else 0.0
        places = 8 - (math.floor(math.log10(top)) + 1) if top > 0.0 else 0
        # NaN for every non-finite cell (written blank); + 0.0 turns -0.0 into +0.0
        # (IEEE 754 round-to-nearest), so no cell reads "-0.0"
        frame[f"c{j}"] = np.round(np.where(finite, a, np.nan), min(max(places, 0), 15)) + 0.0
    body = pl.DataFrame(frame).fill_nan(None).write_csv(include_header=False, null_value="")
    return f"{header}\n{body}"


def solve_profile_csv_text(profile, line=None) -> str:
    """``limitlap solve --out``: a solved profile as CSV with unit brackets.

    Columns distance [m], speed [km/h], accel_lon [m/s^2], accel_lat [m/s^2], time [s],
    speed_limit [km/h], and curvature [1/m] when the line is given.
    """
    columns = {
        "distance": profile.distance_m,
        "speed": np.asarray(profile.speed_m_s) / KMH_TO_M_S,
        "accel_lon": profile.accel_lon_m_s2,
        "accel_lat": profile.accel_lat_m_s2,
        "time": profile.time_s,
        "speed_limit": np.asarray(profile.speed_limit_m_s) / KMH_TO_M_S,
    }
    units = {"distance": "m", "speed": "km/h", "accel_lon": "m/s^2", "accel_lat": "m/s^2",
             "time": "s", "speed_limit": "km/h"}
    if line is not None:
        columns["curvature"] = line.curvature_1_m
        units["curvature"] = "1/m"
    return profile_csv_text(columns, units)


# --------------------------------------------------------------------------- reading the analysis


def _get(obj, *names, default=None):
    """First present, non-None attribute or key among ``names``."""
    for name in names:
        if obj is None:
            return default
        value = obj.get(name) if isinstance(obj, Mapping) else getattr(obj, name, None)
        if value is not None:
            return value
    return default


def _as_record(obj) -> dict:
    if isinstance(obj, Mapping):
        return dict(obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: getattr(obj, f.name) for f in dataclasses.fields(obj)}
    return dict(vars(obj))


def _f(value) -> float:
    return float("nan") if value is None else float(value)


def _kmh_field(rec, base):
    """``base_kmh`` from a record holding either it or ``base_m_s``. [km/h]"""
    value = _get(rec, f"{base}_kmh")
    if value is not None:
        return float(value)
    value = _get(rec, f"{base}_m_s")
    return float(value) / KMH_TO_M_S if value is not None else float("nan")


_TEXT_KEYS = (
    "plain",
    "advice",
    "sentence",
    "plain_text",
    "text",
    "message",
    "description",
    "summary",
)


def _plain_line(rec) -> str:
    """The corner's plain-language line; composed from its numbers when none is given."""
    text = _get(rec, *_TEXT_KEYS)
    if isinstance(text, str) and text.strip():
        return text.strip()
    parts = []
    b_act, b_ide = _f(rec["brake_start_actual_m"]), _f(rec["brake_start_ideal_m"])
    if math.isfinite(b_act) and math.isfinite(b_ide) and abs(b_ide - b_act) >= 1.0:
        later = "later" if b_ide > b_act else "earlier"
        parts.append(f"the ideal brakes {abs(b_ide - b_act):.0f} m {later}")
    dv = rec["min_speed_ideal_kmh"] - rec["min_speed_actual_kmh"]
    if math.isfinite(dv) and abs(dv) >= 0.5:
        parts.append(f"carries {abs(dv):.0f} km/h {'more' if dv > 0 else 'less'} at the minimum")
    tail = (
        ", ".join(parts[:-1]) + (" and " if len(parts) > 1 else "") + parts[-1]
        if parts
        else "the same line at the limit"
    )
    return f"{rec['name']}: {time_left(rec['time_left_s'])} s — {tail}"


def corner_rows(comparison) -> list[dict]:
    """Per-corner records of a comparison as plain dicts with the docs/outputs.md, summary.json fields.

    Accepts records (dataclass, mapping or namespace) with the summary.json corner names (docs/outputs.md); speeds may come
    as ``..._kmh`` or ``..._m_s``. Extra fields are kept; ``plain`` holds the
    plain-language line.

    Parameters
    ----------
    comparison : object
        A lap comparison with a ``corners`` list (or the list itself).

    Returns
    -------
    list of dict
        In driving order.
    """
    records = (
        comparison
        if isinstance(comparison, list | tuple)
        else _get(comparison, "corners", default=[])
    )
    rows = []
    for obj in records:
        rec = _as_record(obj)
        row = {
            "name": str(rec["name"]),
            "start_m": _f(rec.get("start_m")),
            "apex_m": _f(rec.get("apex_m")),
            "end_m": _f(rec.get("end_m")),
            "actual_s": _f(rec.get("actual_s")),
            "ideal_s": _f(rec.get("ideal_s")),
            "time_left_s": _f(rec.get("time_left_s")),
            "min_speed_actual_kmh": _kmh_field(rec, "min_speed_actual"),
            "min_speed_ideal_kmh": _kmh_field(rec, "min_speed_ideal"),
            "brake_start_actual_m": _f(rec.get("brake_start_actual_m")),
            "brake_start_ideal_m": _f(rec.get("brake_start_ideal_m")),
            "grip_used": _f(rec.get("grip_used")),
        }
        row["plain"] = _plain_line({**rec, **row})
        if callable(getattr(obj, "summary_dict", None)):
            row["_summary"] = obj.summary_dict()  # the comparison's own summary.json record
        for k, v in rec.items():
            if (
                k not in row
                and isinstance(v, int | float | str | np.floating | np.integer)
                and not isinstance(v, bool)
            ):
                row[k] = v
        rows.append(row)
    return rows


@dataclasses.dataclass(frozen=True, eq=False)
class _View:
    """What the report needs from a pipeline Analysis, in SI arrays and plain records."""

    source: str
    lap_number: int
    lap_time_s: float
    lap_distance_m: float
    ideal_time_s: float
    grip_scale: float
    grip_estimate: float
    time_left_s: float
    distance_m: np.ndarray
    length_m: float
    x_m: np.ndarray | None
    y_m: np.ndarray | None
    curvature_1_m: np.ndarray
    time_real_s: np.ndarray
    time_ideal_s: np.ndarray
    time_delta_s: np.ndarray
    speed_real_m_s: np.ndarray
    speed_ideal_m_s: np.ndarray
    ax_real_m_s2: np.ndarray
    ay_real_m_s2: np.ndarray
    ax_ideal_m_s2: np.ndarray
    ay_ideal_m_s2: np.ndarray
    throttle: np.ndarray
    brake_pa: np.ndarray
    corners: list
    vehicle: object
    fit: object
    best_time_s: float
    warnings: list
    n_laps: int
    yaw_rate_rad_s: np.ndarray | None = None
    agreement: dict | None = None
    fit_laps: list = dataclasses.field(default_factory=list)


def _array(obj, name, n):
    value = _get(obj, name)
    if value is None:
        return np.full(n, np.nan)
    a = np.asarray(value, dtype=np.float64)
    return a if a.shape == (n,) else np.full(n, np.nan)


def _best_of_laps(best, corners):
    """Total of the own-best composite; adds ``best_s`` and ``best_lap`` to the corners.

    Takes :class:`limitlap.best_laps.BestOfLaps` (``names``, ``best_s``, ``best_lap``,
    ``composite_lap_time_s``) or a record with a ``segments`` list of
    ``{name, best_s, lap}``.
    """
    if best is None:
        return float("nan")
    by_name = {}
    names = _get(best, "names")
    if names is not None:
        best_s = np.asarray(_get(best, "best_s", default=[]), dtype=np.float64)
        laps = list(_get(best, "best_lap", default=[None] * len(names)))
        for j, name in enumerate(names):
            by_name[str(name)] = {"best_s": best_s[j], "lap": laps[j]}
    else:
        for seg in _get(best, "segments", "corners", default=[]):
            rec = _as_record(seg)
            by_name[str(rec.get("name"))] = rec
    for c in corners:
        rec = by_name.get(c["name"])
        if rec is not None:
            c["best_s"] = _f(_get(rec, "best_s", "time_s"))
            lap = _get(rec, "lap", "best_lap")
            if lap is not None:
                c["best_lap"] = int(lap)
    total = _get(best, "composite_lap_time_s", "composite_time_s", "time_s")
    if total is None and corners and all("best_s" in c for c in corners):
        total = float(sum(c["best_s"] for c in corners))
    return _f(total)


def _view(analysis) -> _View:
    """Collect what the report needs from a pipeline Analysis (see module docstring)."""
    driven = analysis.driven
    ideal = analysis.ideal
    line = driven.line
    s = np.asarray(line.distance_m, dtype=np.float64)
    n = s.shape[0]
    t_real = _array(driven, "time_s", n)
    t_real = t_real - t_real[0]
    t_ideal = np.asarray(ideal.time_s, dtype=np.float64)
    t_ideal = t_ideal - t_ideal[0]
    comparison = analysis.comparison
    delta = _get(comparison, "time_delta_s")
    delta = np.asarray(delta, dtype=np.float64) if delta is not None else t_real - t_ideal
    corners = corner_rows(comparison)
    labels = _get(analysis, "corner_labels", default={}) or {}
    for c in corners:  # the track file's names for its corners ("Sentry"), where given
        if labels.get(c["name"]):
            c["label"] = str(labels[c["name"]])
    lap = analysis.lap
    lap_time = _f(_get(lap, "time_s"))
    ideal_time = float(ideal.lap_time_s)
    time_left = _get(comparison, "time_left_s")
    if time_left is None:
        time_left = sum(c["time_left_s"] for c in corners) if corners else lap_time - ideal_time
    warnings = [str(w) for w in (_get(analysis, "warnings", default=[]) or [])]
    for extra in (_get(driven, "warnings", default=[]), _get(analysis.fit, "warnings", default=[])):
        # the pipeline may already carry them with the log's name in front
        warnings += [
            str(w) for w in (extra or []) if not any(x.endswith(str(w)) for x in warnings)
        ]
    laps = _get(analysis, "laps", default=[]) or []
    return _View(
        source=str(_get(analysis, "log_path", default="")),
        lap_number=int(_get(lap, "number", default=0)),
        lap_time_s=lap_time,
        lap_distance_m=_f(_get(lap, "distance_m", default=line.length_m)),
        ideal_time_s=ideal_time,
        grip_scale=float(_get(analysis, "grip_scale", default=ideal.grip_scale)),
        grip_estimate=_f(_get(analysis, "grip_estimate")),
        time_left_s=float(time_left),
        distance_m=s,
        length_m=float(line.length_m),
        x_m=None if line.x_m is None else np.asarray(line.x_m, dtype=np.float64),
        y_m=None if line.y_m is None else np.asarray(line.y_m, dtype=np.float64),
        curvature_1_m=np.asarray(line.curvature_1_m, dtype=np.float64),
        time_real_s=t_real,
        time_ideal_s=t_ideal,
        time_delta_s=delta,
        speed_real_m_s=_array(driven, "speed_m_s", n),
        speed_ideal_m_s=np.asarray(ideal.speed_m_s, dtype=np.float64),
        ax_real_m_s2=_array(driven, "accel_lon_m_s2", n),
        ay_real_m_s2=_array(driven, "accel_lat_m_s2", n),
        ax_ideal_m_s2=np.asarray(ideal.accel_lon_m_s2, dtype=np.float64),
        ay_ideal_m_s2=np.asarray(ideal.accel_lat_m_s2, dtype=np.float64),
        throttle=_array(driven, "throttle", n),
        brake_pa=_array(driven, "brake_pa", n),
        corners=corners,
        vehicle=analysis.vehicle,
        fit=_get(analysis, "fit"),
        best_time_s=_best_of_laps(_get(analysis, "best_of_laps"), corners),
        warnings=warnings,
        n_laps=sum(1 for lp in laps if _get(lp, "complete", default=False)),
        yaw_rate_rad_s=_array(driven, "yaw_rate_rad_s", n),
        agreement=_get(driven, "agreement"),
        fit_laps=[int(n) for n in (_get(analysis, "fit_laps", default=[]) or [])],
    )


# --------------------------------------------------------------------------- summary, profiles


def build_summary(analysis) -> dict:
    """The docs/outputs.md, summary.json summary of an Analysis, plus corner extras and the warnings.

    Parameters
    ----------
    analysis : pipeline.Analysis

    Returns
    -------
    dict
        Keys in the order of docs/outputs.md, summary.json; values SI or km/h as the keys say (not yet rounded).
    """
    v = _view(analysis)
    corners = []
    for c in v.corners:
        if "_summary" in c:
            rec = dict(c["_summary"])
            rec.setdefault("plain", c["plain"])
            for key in ("best_s", "best_lap", "label"):
                if key in c:
                    rec[key] = c[key]
            corners.append(rec)
            continue
        rec = {
            k: c[k]
            for k in (
                "name",
                "start_m",
                "apex_m",
                "end_m",
                "actual_s",
                "ideal_s",
                "time_left_s",
                "min_speed_actual_kmh",
                "min_speed_ideal_kmh",
                "brake_start_actual_m",
                "brake_start_ideal_m",
                "grip_used",
            )
        }
        rec["plain"] = c["plain"]
        for key in ("best_s", "best_lap", "label"):
            if key in c:
                rec[key] = c[key]
        corners.append(rec)
    best = _get(analysis, "best_of_laps")
    best_rec = {"time_s": v.best_time_s, "complete_laps": v.n_laps}
    if callable(getattr(best, "summary_dict", None)):
        best_rec.update(best.summary_dict())
    return {
        "schema": SUMMARY_SCHEMA,
        "lap": {"number": v.lap_number, "time_s": v.lap_time_s, "distance_m": v.lap_distance_m},
        "ideal": {"time_s": v.ideal_time_s, "grip_scale": v.grip_scale},
        "time_left_s": v.time_left_s,
        "grip_estimate": v.grip_estimate,
        "corners": corners,
        "best_of_laps": best_rec,
        "envelope": {
            "fitted": v.fit is not None,
            "laps": list(v.fit_laps),
        },
        "warnings": list(v.warnings),
    }


def _profile_columns(v: _View):
    columns = {
        "distance": v.distance_m,
        "time_actual": v.time_real_s,
        "time_ideal": v.time_ideal_s,
        "time_delta": v.time_delta_s,
        "speed_actual": v.speed_real_m_s / KMH_TO_M_S,
        "speed_ideal": v.speed_ideal_m_s / KMH_TO_M_S,
        "accel_lon_actual": v.ax_real_m_s2,
        "accel_lat_actual": v.ay_real_m_s2,
        "accel_lon_ideal": v.ax_ideal_m_s2,
        "accel_lat_ideal": v.ay_ideal_m_s2,
        "curvature": v.curvature_1_m,
    }
    units = {
        "distance": "m",
        "time_actual": "s",
        "time_ideal": "s",
        "time_delta": "s",
        "speed_actual": "km/h",
        "speed_ideal": "km/h",
        "accel_lon_actual": "m/s^2",
        "accel_lat_actual": "m/s^2",
        "accel_lon_ideal": "m/s^2",
        "accel_lat_ideal": "m/s^2",
        "curvature": "1/m",
    }
    if v.x_m is not None and v.y_m is not None:
        columns["x"], columns["y"] = v.x_m, v.y_m
        units["x"] = units["y"] = "m"
    return columns, units


# --------------------------------------------------------------------------- figures


def _usage_traces(speed, ax, ay, vehicle, grip_scale):
    """Brake and drive shares 0-1 of the tyre limits that an acceleration trace needs."""
    from limitlap import limits

    veh = vehicle.scaled(grip_scale) if grip_scale != 1.0 else vehicle
    m = veh.mass_kg
    fx = m * ax + limits.resistance_n(speed, veh)
    normal = limits.normal_load_n(speed, veh)
    with np.errstate(invalid="ignore", divide="ignore"):
        brake = np.where(fx < 0, -fx / (veh.mu_brk * normal), 0.0)
        drive = np.where(fx > 0, fx / limits.drive_force_max_n(speed, veh), 0.0)
    bad = ~np.isfinite(fx)
    brake[bad] = np.nan
    drive[bad] = np.nan
    return np.clip(brake, 0.0, 1.0), np.clip(drive, 0.0, 1.0)


def _detail_traces(v: _View):
    ideal_brake, ideal_drive = _usage_traces(
        v.speed_ideal_m_s, v.ax_ideal_m_s2, v.ay_ideal_m_s2, v.vehicle, v.grip_scale
    )
    ideal = {
        "speed_m_s": v.speed_ideal_m_s,
        "brake": ideal_brake,
        "throttle": ideal_drive,
        "brake_label": "ideal: share of braking grip",
        "throttle_label": "ideal: share of drive limit",
    }
    real_brake, real_drive = _usage_traces(
        v.speed_real_m_s, v.ax_real_m_s2, v.ay_real_m_s2, v.vehicle, v.grip_scale
    )
    real = {
        "speed_m_s": v.speed_real_m_s,
        "brake": real_brake,
        "throttle": real_drive,
        "brake_label": "you: from deceleration",
        "throttle_label": "you: from acceleration",
    }
    if np.isfinite(v.throttle).any():
        real["throttle"] = np.clip(v.throttle, 0.0, 1.0)
        real["throttle_label"] = "you: pedal"
    if np.isfinite(v.brake_pa).any() and np.nanmax(v.brake_pa) > 0:
        real["brake"] = np.clip(v.brake_pa / np.nanmax(v.brake_pa), 0.0, 1.0)
        real["brake_label"] = "you: pressure, share of lap peak"
    return real, ideal


def _fit_points(fit):
    """Boundary points of an envelope fit as dicts for the g-g figure, when it has them."""
    pts = _get(fit, "bands", "boundary_points")
    if pts is None:
        return None
    out = []
    for p in pts if isinstance(pts, list | tuple) else [pts]:
        try:
            rec = _as_record(p)
            out.append(
                {
                    k: np.atleast_1d(np.asarray(rec[k], dtype=np.float64))
                    for k in ("speed_m_s", "accel_lon_m_s2", "accel_lat_m_s2")
                }
            )
        except (KeyError, TypeError, ValueError):
            return None
    return out or None


def _figures(v: _View, step):
    """(file name, caption, PNG bytes) of every report figure, drawn in order."""
    from limitlap import figures as fg

    corners = v.corners
    out = []
    step("speed figure")
    out.append(
        (
            "speed.png",
            "Speed along the lap: your lap against the ideal on your own line.",
            fg.speed_figure(v.distance_m, v.speed_real_m_s, v.speed_ideal_m_s, corners),
        )
    )
    step("time delta figure")
    out.append(
        (
            "time_delta.png",
            "Time delta along the lap: where the ideal pulls away.",
            fg.delta_figure(v.distance_m, v.time_delta_s, corners),
        )
    )
    step("time left figure")
    out.append(
        ("time_left.png", "Time left per corner, largest first.", fg.time_left_figure(corners))
    )
    if v.x_m is not None and v.y_m is not None:
        step("map figure")
        rate = fg.time_loss_rate(v.distance_m, v.time_delta_s)
        out.append(
            (
                "map.png",
                "The line coloured by the local rate of time loss.",
                fg.map_figure(v.x_m, v.y_m, rate, corners, v.distance_m),
            )
        )
    step("g-g figure")
    out.append(
        (
            "gg.png",
            "g-g diagram by speed band: the shaded ring is grip this lap did not use.",
            fg.gg_figure(
                v.speed_real_m_s,
                v.ax_real_m_s2,
                v.ay_real_m_s2,
                v.vehicle,
                v.grip_scale,
                fit_points=_fit_points(v.fit),
            ),
        )
    )
    real, ideal = _detail_traces(v)
    ranked = sorted(corners, key=lambda c: -c["time_left_s"])[:3]
    for i, c in enumerate(ranked, start=1):
        step(f"detail figure {c['name']}")
        out.append(
            (
                f"corner_{i}.png",
                c["plain"],
                fg.detail_figure(c, v.distance_m, v.length_m, real, ideal, caption=c["plain"]),
            )
        )
    check = _curvature_check(v)
    if check is not None:
        step("data check figure")
        title, k_ay, k_yaw = check
        out.append(
            (
                "data_check.png",
                "Data check: the rebuilt line's curvature against lateral acceleration / v² "
                "and yaw rate / v. They measure the same thing and should lie on one "
                "another; where they part, the line and every result on it are less certain.",
                fg.curvature_check_figure(v.distance_m, v.curvature_1_m, k_ay, k_yaw, corners, title),
            )
        )
    if math.isfinite(v.best_time_s) and corners:
        step("best-of-laps figure")
        out.append(
            (
                "best_of_laps.png",
                "Your best segments from the session beside the limit.",
                fg.best_figure(
                    corners,
                    v.lap_time_s,
                    v.best_time_s,
                    v.ideal_time_s,
                    lap_label=f"lap {v.lap_number}",
                ),
            )
        )
    return out


def _curvature_check(v: _View):
    """(title, κ from a_y/v², κ from r/v) for the data-check figure, or None without
    inertial channels. Smoothed as the line's own cross-check (driven.py); NaN below
    10 m/s, where dividing by v² magnifies noise."""
    from scipy.ndimage import gaussian_filter1d

    from limitlap.driven import CURVATURE_SMOOTHING_M

    speed = v.speed_real_m_s
    fast = np.isfinite(speed) & (speed > 10.0)
    series = []
    for values, denom in ((v.ay_real_m_s2, speed**2), (v.yaw_rate_rad_s, speed)):
        if values is None or not np.isfinite(values).any():
            series.append(np.full(speed.shape, np.nan))
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            k = np.where(fast, values / denom, 0.0)
        step = float(np.median(np.diff(v.distance_m))) if v.distance_m.size > 1 else 1.0
        k = gaussian_filter1d(
            np.nan_to_num(k), CURVATURE_SMOOTHING_M / max(step, 1e-6), mode="wrap"
        )
        series.append(np.where(fast, k, np.nan))
    if not any(np.isfinite(k).any() for k in series):
        return None
    parts = []
    agreement = v.agreement or {}
    for name, label in (("accel_lat", "a_y/v²"), ("yaw_rate", "yaw rate/v")):
        fig = agreement.get(f"line_vs_{name}")
        if isinstance(fig, dict) and "correlation" in fig:
            parts.append(
                f"{label}: correlation {fig['correlation']:.3f}, RMS "
                f"{fig.get('relative_rms', float('nan')):.0%}"
            )
    title = "Data check: curvature three ways" + (" — " + "; ".join(parts) if parts else "")
    return title, series[0], series[1]


# --------------------------------------------------------------------------- report.html

_CSS = """
:root { --ink:#222; --muted:#5a5a5a; --real:#D55E00; --ideal:#0072B2; --line:#d0d0d0; }
* { box-sizing: border-box; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
  color: var(--ink); margin: 0 auto; max-width: 1240px; padding: 24px; line-height: 1.45; }
h1 { font-size: 1.6rem; margin: 0 0 4px; }
h2 { font-size: 1.2rem; margin: 28px 0 8px; border-bottom: 2px solid var(--line); padding-bottom: 4px; }
.sub { color: var(--muted); margin: 0 0 16px; }
.cards { display: flex; flex-wrap: wrap; gap: 12px; }
.card { border: 1px solid var(--line); border-radius: 6px; padding: 10px 16px; min-width: 170px; }
.card .k { color: var(--muted); font-size: .85rem; }
.card .v { font-size: 1.5rem; font-weight: 700; }
.card.left .v { color: var(--real); }
.card.ideal .v { color: var(--ideal); }
table { border-collapse: collapse; width: 100%; font-size: .92rem; }
th, td { border-bottom: 1px solid var(--line); padding: 5px 8px; text-align: right; vertical-align: top; }
th { background: #f4f4f4; }
td.t, th.t { text-align: left; }
tr.top td { font-weight: 600; }
figure { margin: 16px 0; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid #eee; }
figcaption { color: var(--muted); font-size: .9rem; }
.warn { border-left: 5px solid #E69F00; background: #fff7e6; padding: 8px 12px; margin: 6px 0; }
.ok { color: var(--muted); }
.caution { border: 2px solid #E69F00; background: #fff4e0; padding: 12px 16px; border-radius: 6px; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2 { page-break-after: avoid; break-after: avoid; }
  tr { page-break-inside: avoid; }
}
"""


def _lap_ranges(numbers) -> str:
    """``[1, 2, 3, 5]`` -> ``"1-3, 5"``.

    >>> _lap_ranges([1, 2, 3, 5, 7, 8])
    '1-3, 5, 7-8'
    """
    runs = []
    for n in sorted(numbers):
        if runs and n == runs[-1][1] + 1:
            runs[-1][1] = n
        else:
            runs.append([n, n])
    return ", ".join(f"{a}-{b}" if b > a else str(a) for a, b in runs)


def _envelope_source(v: _View) -> str:
    """Where the envelope came from, in a sentence for the report."""
    if v.fit is None:
        return (
            f"The envelope is the vehicle file's ('{v.vehicle.name}'), so the time left is "
            "what that envelope allows on your line."
        )
    from limitlap.laps import FLYING_LAP_RATIO

    laps = v.fit_laps
    which = (
        f" of lap{'s' if len(laps) > 1 else ''} {_lap_ranges(laps)}, the flying laps within "
        f"{FLYING_LAP_RATIO * 100:.0f} % of your fastest,"
        if laps
        else ""
    )
    return (
        "The envelope is a g-g-V envelope (lateral, braking and driving friction, a "
        "combined-slip exponent, power, drag and downforce) fitted to your own best samples"
        f"{which} with the width the sensor's noise adds to it measured and taken out; so "
        "the time left is time that grip you have already shown allows."
    )


def report_html(v: _View, figure_list) -> str:
    """report.html text: self-contained, figures inline as data URIs, no scripts."""
    e = html.escape
    out = [
        "<!DOCTYPE html>",
        '<html lang="en">',
        "<head>",
        '<meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>limitlap report: lap {v.lap_number}</title>",
        f"<style>{_CSS}</style>",
        "</head>",
        "<body>",
        f"<h1>Lap {v.lap_number}: {e(lap_time(v.lap_time_s))}, ideal {e(lap_time(v.ideal_time_s))}</h1>",
        f'<p class="sub">{e(Path(v.source).name or "session")} &middot; '
        f"{v.lap_distance_m:.0f} m lap &middot; {v.n_laps} complete laps in the session</p>",
        '<div class="cards">',
    ]
    cards = [
        ("", "lap time", lap_time(v.lap_time_s)),
        ("ideal", f"ideal at grip {v.grip_scale:.2f}", lap_time(v.ideal_time_s)),
        ("left", "time left", number(v.time_left_s, ".2f", " s")),
        ("", "grip estimate", number(v.grip_estimate, ".2f")),
        ("", "best of your laps", lap_time(v.best_time_s)),
    ]
    for cls, k, val in cards:
        out.append(
            f'<div class="card {cls}"><div class="k">{e(k)}</div><div class="v">{e(val)}</div></div>'
        )
    out.append("</div>")
    # Warnings near the top: a result the data cannot support must not be missed.
    out.append("<h2>Warnings</h2>")
    if v.warnings:
        out += [f'<p class="warn">{e(w)}</p>' for w in v.warnings]
    else:
        out.append('<p class="ok">None: the data passed every check this report makes.</p>')
    out.append("<h2>Where the time is, corner by corner</h2>")
    out.append("<table><thead><tr>")
    heads = [
        "rank",
        "corner",
        "time left [s]",
        "yours [s]",
        "ideal [s]",
        "min speed yours / ideal [km/h]",
        "brake yours / ideal [m]",
        "grip used",
        "grip found",
        "where the time is",
    ]
    out += [
        f'<th class="{"t" if h in ("corner", "where the time is") else ""}">{e(h)}</th>'
        for h in heads
    ]
    out.append("</tr></thead><tbody>")
    ranked = sorted(v.corners, key=lambda c: -c["time_left_s"])
    for i, c in enumerate(ranked, start=1):
        cls = ' class="top"' if i <= 3 else ""
        cells = [
            str(i),
            f"{c['name']} {c['label']}" if c.get("label") else c["name"],
            time_left(c["time_left_s"]),
            number(c["actual_s"], ".2f"),
            number(c["ideal_s"], ".2f"),
            f"{number(c['min_speed_actual_kmh'], '.0f')} / {number(c['min_speed_ideal_kmh'], '.0f')}",
            f"{number(c['brake_start_actual_m'], '.0f')} / {number(c['brake_start_ideal_m'], '.0f')}",
            number(100 * c["grip_used"], ".0f", " %"),
            number(_f(c.get("grip_estimate")), ".2f"),
            c["plain"],
        ]
        tds = [f'<td class="{"t" if j in (1, 9) else ""}">{e(x)}</td>' for j, x in enumerate(cells)]
        out.append(f"<tr{cls}>{''.join(tds)}</tr>")
    out.append("</tbody></table>")
    out.append(
        '<p class="sub">Time left: your segment time minus the ideal\'s on the same line. '
        "Grip used: the share of the available combined grip this lap used in the corner. "
        "Grip found: the grip scale the corner showed against the envelope (below 1 = "
        "less grip there than at its best, e.g. a damp patch; n/a where the corner is "
        "taken flat out, on the engine's limit, so it does not show the tyres'). Brake "
        "points in metres from the start/finish gate.</p>"
    )
    out.append("<h2>Figures</h2>")
    for name, caption, png in figure_list:
        data = base64.b64encode(png).decode("ascii")
        out.append(
            f'<figure><img src="data:image/png;base64,{data}" alt="{e(caption)}" data-file="{e(name)}">'
            f"<figcaption>{e(caption)}</figcaption></figure>"
        )
    out.append("<h2>How this was worked out</h2>")
    out.append(
        "<p>The ideal lap is a quasi-steady-state point-mass lap on the line you drove: at "
        "every metre the car may use as much grip as its envelope allows, braking and "
        "accelerating as hard as the grip left after cornering permits (forward and "
        "backward passes of the classic quasi-steady-state method; Lenzo &amp; Rossi 2020). "
        f"{e(_envelope_source(v))} "
        "Corners are cut from the line's curvature with boundaries in the middle of the "
        "straights, so their time left adds up to the lap's.</p>"
    )
    out.append(
        "<p>Assumptions: the car is a point mass (no load transfer, yaw or tyre "
        "temperature); quasi-steady state (each point in steady cornering, only speed "
        "changes); your own line (the ideal keeps your line and changes only the speed "
        f"along it); grip scale {v.grip_scale:.2f} on the friction coefficients.</p>"
    )
    out.append("<h2>Caution</h2>")
    out.append(f'<p class="caution">{e(SAFETY_CAUTION)}</p>')
    out += ["</body>", "</html>"]
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------- write_outputs


def _stepper(progress, total):
    state = {"done": 0}

    def step(name):
        state["done"] += 1
        if progress is not None:
            progress(min(state["done"], total), total, name)

    return step


def write_outputs(
    analysis, out_dir, *, figures: bool = True, progress: Progress | None = None
) -> dict:
    """Write everything ``analyse`` leaves in its output folder.

    Parameters
    ----------
    analysis : pipeline.Analysis
        The finished analysis.
    out_dir : str or Path
        Output folder; made when missing (its parent must exist).
    figures : bool
        Draw the PNG figures and put them in report.html.
    progress : callable, optional
        ``progress(done, total, step)`` after each step; None = silent.

    Returns
    -------
    dict
        File kind -> path written: ``summary``, ``profile``, ``envelope``, ``report`` and
        one entry per PNG (its file name).
    """
    out = _prepare_folder(out_dir)
    v = _view(analysis)
    n_fig = (
        (
            3
            + (v.x_m is not None)
            + 1
            + min(3, len(v.corners))
            + (math.isfinite(v.best_time_s) and bool(v.corners))
            + (_curvature_check(v) is not None)
        )
        if figures
        else 0
    )
    total = 4 + n_fig + 1
    step = _stepper(progress, total)
    written = {}
    written["summary"] = write_summary_json(out / "summary.json", build_summary(analysis))
    step("summary.json")
    columns, units = _profile_columns(v)
    written["profile"] = write_atomic(out / "profile.csv", profile_csv_text(columns, units))
    step("profile.csv")
    fit_info = None
    if v.fit is not None:
        fit_info = {"quality": _get(v.fit, "quality"), "uncertainty": _get(v.fit, "uncertainty")}
        fit_info = {k: val for k, val in fit_info.items() if val is not None} or None
    written["envelope"] = write_atomic(
        out / "envelope.toml", envelope_toml_text(v.vehicle, fit_info)
    )
    step("envelope.toml")
    figure_list = _figures(v, step) if figures else []
    for name, _caption, png in figure_list:
        written[name] = write_atomic(out / name, png)
    step("figures written")
    written["report"] = write_atomic(out / "report.html", report_html(v, figure_list))
    step("report.html")
    return written


# --------------------------------------------------------------------------- target sheets


def _condition(rec, length_m=None) -> dict:
    """A target-table record as a plain dict; ``before_apex_m`` wraps across the gate."""
    c = _as_record(rec)
    k = float(c["grip_scale"])
    label = _get(c, "condition", "label", "name")
    length = _f(_get(c, "length_m", "lap_length_m", default=length_m))
    corners = []
    for corner in c.get("corners", []):
        r = _as_record(corner)
        apex, brake = _f(r.get("apex_m")), _f(r.get("brake_start_m"))
        before = _f(_get(r, "brake_before_apex_m", default=apex - brake))
        if before < 0 and math.isfinite(length):  # braking starts before the gate
            before += length
        corners.append(
            {
                "name": str(r["name"]),
                "apex_m": _f(r.get("apex_m")),
                "brake_start_m": brake,
                "before_apex_m": before if before >= 0 else float("nan"),
                "entry_speed_kmh": _kmh_field(r, "entry_speed"),
                "min_speed_kmh": _kmh_field(r, "min_speed"),
                "exit_speed_kmh": _kmh_field(r, "exit_speed"),
                "segment_time_s": _f(r.get("segment_time_s")),
            }
        )
    return {
        "label": str(label) if label else f"grip {k:.2f}",
        "grip_scale": k,
        "lap_time_s": float(c["lap_time_s"]),
        "length_m": length,
        "corners": corners,
    }


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_") or "condition"


def targets_csv_text(conditions, *, length_m: float | None = None) -> str:
    """CSV of the target tables: one row per condition and corner.

    Parameters
    ----------
    conditions : list
        Records of :func:`limitlap.targets.target_table` (docs/outputs.md, Target sheets fields).

    Returns
    -------
    str
    """
    conds = [_condition(c, length_m) for c in conditions]
    header = (
        "condition,grip_scale [-],lap_time [s],corner,apex [m],brake_start [m],"
        "brake_before_apex [m],entry_speed [km/h],min_speed [km/h],exit_speed [km/h],"
        "segment_time [s]"
    )
    rows = [header]

    def num(x, nd):
        return "" if not math.isfinite(x) else f"{round(x, nd) + 0.0:.{nd}f}"

    for c in conds:
        for r in c["corners"]:
            rows.append(
                ",".join(
                    [
                        _csv_cell(c["label"]),
                        num(c["grip_scale"], 3),
                        num(c["lap_time_s"], 3),
                        _csv_cell(r["name"]),
                        num(r["apex_m"], 1),
                        num(r["brake_start_m"], 1),
                        num(r["before_apex_m"], 1),
                        num(r["entry_speed_kmh"], 1),
                        num(r["min_speed_kmh"], 1),
                        num(r["exit_speed_kmh"], 1),
                        num(r["segment_time_s"], 3),
                    ]
                )
            )
    return "\n".join(rows) + "\n"


def write_target_sheets(
    conditions,
    out_dir,
    circuit_name: str,
    *,
    length_m: float | None = None,
    progress: Progress | None = None,
) -> list[Path]:
    """Write a printable one-page sheet per condition (PDF and PNG) and targets.csv.

    Parameters
    ----------
    conditions : list
        Records of :func:`limitlap.targets.target_table` (docs/outputs.md, Target sheets fields; an optional
        ``condition``/``label`` names it, e.g. "wet").
    out_dir : str or Path
        Output folder; made when missing (its parent must exist).
    circuit_name : str
        Heading of each sheet.
    length_m : float, optional
        Lap length, so a brake point before the gate gives its distance before an apex
        after it (records may carry ``length_m`` themselves). [m]
    progress : callable, optional
        ``progress(done, total, step)``; None = silent.

    Returns
    -------
    list of Path
        Files written: per condition ``targets_<label>.pdf`` and ``.png``, then targets.csv.
    """
    from limitlap import figures as fg

    out = _prepare_folder(out_dir)
    conds = [_condition(c, length_m) for c in conditions]
    step = _stepper(progress, 2 * len(conds) + 1)
    written, seen = [], set()
    for c in conds:
        slug = _slug(c["label"])
        if slug in seen:
            slug = f"{slug}_{c['grip_scale']:.2f}".replace(".", "_")
        seen.add(slug)
        for fmt in ("pdf", "png"):
            data = fg.target_sheet(c, circuit_name, SAFETY_CAUTION, fmt=fmt)
            written.append(write_atomic(out / f"targets_{slug}.{fmt}", data))
            step(f"target sheet {c['label']} ({fmt})")
    written.append(
        write_atomic(out / "targets.csv", targets_csv_text(conditions, length_m=length_m))
    )
    step("targets.csv")
    return written
