"""Every file a run writes: summary.json, profiles, envelope.toml, the report, sheets.

With :mod:`limitlap.report` (the page it writes), the only module that writes files.
Every file is written whole to a temporary name in its own folder, flushed to disk and
moved into place with :func:`os.replace` (atomic on POSIX and Windows). A run's files
go into a fresh folder beside the output folder and are swapped in together at the end
(:func:`output_set`), so the folder holds one run's set and a run that fails half way
leaves the earlier set whole. The same inputs give byte-identical
``summary.json``, CSV and TOML: keys in a fixed order, floats rounded to fixed decimals,
no timestamps. Formats: docs/outputs.md.

SI values come in; km/h and g appear only in what is written, with the factors of
:mod:`limitlap.units`. matplotlib is only imported when a figure is drawn
(:mod:`limitlap.figures`).
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from limitlap.atomic import output_set, write_atomic
from limitlap.errors import LimitlapError
from limitlap.formatting import METRIC, Units
from limitlap.units import KMH_TO_M_S, KW_TO_W

if TYPE_CHECKING:
    from limitlap.best_laps import BestOfLaps
    from limitlap.compare import LapComparison
    from limitlap.driven import CurvatureCheck

#: Progress callback: ``progress(done, total, step)`` after each step of a write.
Progress = Callable[[int, int, str], None]


#: Schema string of summary.json (docs/outputs.md, summary.json).
SUMMARY_SCHEMA = "limitlap.summary/1"


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
        if value.dtype.kind == "f" and _decimals(key) is None and np.isfinite(value).all():
            return (value + 0.0).tolist()  # unrounded keys: the floats as they are (no -0.0)
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
                "#   driven on the limit: the accelerations' noise scatters them both ways, and it is taken",
                "#   out of the envelope, noise_offset_m_s2); share_above_power_line: full-throttle",
                "#   samples above the power line (about half: it is a central fit of them).",
            ]
    return "\n".join(lines) + "\n"


def csv_cell(text: str) -> str:
    """A CSV cell, quoted when it holds a comma, a quote or a line end (RFC 4180)."""
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
    header = ",".join(csv_cell(f"{n} [{units[n]}]" if units.get(n) else str(n)) for n in names)
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
    units = {
        "distance": "m",
        "speed": "km/h",
        "accel_lon": "m/s^2",
        "accel_lat": "m/s^2",
        "time": "s",
        "speed_limit": "km/h",
    }
    if line is not None:
        columns["curvature"] = line.curvature_1_m
        units["curvature"] = "1/m"
    return profile_csv_text(columns, units)


def float_or_nan(value) -> float:
    """``value`` as a float; NaN for None. [unit of the value]."""
    return float("nan") if value is None else float(value)


def corner_rows(comparison: LapComparison) -> list[dict]:
    """Per-corner records of a comparison as plain dicts with the summary.json fields.

    The fields of docs/outputs.md (summary.json) in km/h where the key says so, the
    corner's other scalar fields after them, ``plain`` (its advice line) and
    ``_summary`` (the comparison's own summary.json record).

    Returns
    -------
    list of dict
        In driving order.
    """
    k = 1.0 / KMH_TO_M_S
    rows = []
    for c in comparison.corners:
        row = {
            "name": str(c.name),
            "start_m": float_or_nan(c.start_m),
            "apex_m": float_or_nan(c.apex_m),
            "end_m": float_or_nan(c.end_m),
            "actual_s": float_or_nan(c.actual_s),
            "ideal_s": float_or_nan(c.ideal_s),
            "time_left_s": float_or_nan(c.time_left_s),
            "min_speed_actual_kmh": float_or_nan(c.min_speed_actual_m_s) * k,
            "min_speed_ideal_kmh": float_or_nan(c.min_speed_ideal_m_s) * k,
            "brake_start_actual_m": float_or_nan(c.brake_start_actual_m),
            "brake_start_ideal_m": float_or_nan(c.brake_start_ideal_m),
            "grip_used": float_or_nan(c.grip_used),
            "brake_points_actual_m": [float(x) for x in c.brake_points_actual_m],
            "brake_points_ideal_m": [float(x) for x in c.brake_points_ideal_m],
            "plain": c.advice.strip(),
            "_summary": c.summary_dict(),
            "_differences": c.differences,
        }
        for f in dataclasses.fields(c):
            v = getattr(c, f.name)
            if (
                f.name not in row
                and isinstance(v, int | float | str | np.floating | np.integer)
                and not isinstance(v, bool)
            ):
                row[f.name] = v
        rows.append(row)
    return rows


@dataclasses.dataclass(frozen=True, eq=False)
class ReportView:
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
    curvature_check: CurvatureCheck | None = None
    gg_bands: list = dataclasses.field(default_factory=list)
    pedals_real: dict = dataclasses.field(default_factory=dict)
    pedals_ideal: dict = dataclasses.field(default_factory=dict)
    time_left_words: str = ""
    session: object = None
    bands: object = None
    other_laps: list = dataclasses.field(default_factory=list)
    session_info: dict = dataclasses.field(default_factory=dict)
    line: object = None


@dataclasses.dataclass(frozen=True, eq=False)
class OtherLap:
    """One of the session's other complete laps on the analysed lap's stations.

    Its elapsed time and speed are read at the same share of its own length as each
    station of the analysed lap (laps a few metres longer or shorter line up, as in the
    best-of-laps composite, docs/outputs.md).
    """

    number: int
    lap_time_s: float
    speed_m_s: np.ndarray  # logged speed: distance travelled over time between rows [m/s]
    time_delta_s: np.ndarray  # its elapsed time minus the ideal's at each station [s]


def other_laps(analysis, distance_m, length_m, time_ideal_s) -> list[OtherLap]:
    """The session's complete laps other than the analysed one, on its stations."""
    out = []
    for tl in getattr(analysis, "complete_laps", None) or []:
        if tl.number == analysis.lap.number or len(tl.distance_m) < 3:
            continue
        d = np.asarray(tl.distance_m, dtype=np.float64)
        t = np.asarray(tl.time_s, dtype=np.float64)
        at = np.asarray(distance_m) * (tl.length_m / length_m)
        elapsed = np.interp(at, d, t)
        mid_speed = np.diff(d) / np.maximum(np.diff(t), 1e-9)
        speed = np.interp(at, 0.5 * (d[1:] + d[:-1]), mid_speed)
        out.append(OtherLap(int(tl.number), float(tl.lap_time_s), speed, elapsed - time_ideal_s))
    return out


def _best_of_laps(best: BestOfLaps | None, corners) -> float:
    """Total of the own-best composite [s]; adds ``best_s`` and ``best_lap`` to the corners."""
    if best is None:
        return float("nan")
    by_name = {str(name): j for j, name in enumerate(best.names)}
    for c in corners:
        j = by_name.get(c["name"])
        if j is not None:
            c["best_s"] = float(best.best_s[j])
            c["best_lap"] = int(best.best_lap[j])
    return float(best.composite_lap_time_s)


def report_view(analysis) -> ReportView:
    """Collect what the report needs from a pipeline Analysis (see module docstring)."""
    driven = analysis.driven
    ideal = analysis.ideal
    line = driven.line
    comparison = analysis.comparison
    s = np.asarray(line.distance_m, dtype=np.float64)
    t_real = np.asarray(driven.time_s, dtype=np.float64)
    t_ideal = np.asarray(ideal.time_s, dtype=np.float64)
    corners = corner_rows(comparison)
    _with_bands(corners, getattr(analysis, "bands", None))
    _with_line(corners, getattr(analysis, "line", None))
    warnings = [str(w) for w in analysis.warnings]
    fit_warnings = analysis.fit.warnings if analysis.fit is not None else []
    for extra in (driven.warnings, fit_warnings):
        # the pipeline may already carry them with the log's name in front
        warnings += [str(w) for w in extra if not any(x.endswith(str(w)) for x in warnings)]
    return ReportView(
        source=str(analysis.log_path),
        lap_number=int(analysis.lap.number),
        lap_time_s=float_or_nan(analysis.lap.time_s),
        lap_distance_m=float_or_nan(analysis.lap.distance_m),
        ideal_time_s=float(ideal.lap_time_s),
        grip_scale=float(analysis.grip_scale),
        grip_estimate=float_or_nan(analysis.grip_estimate),
        time_left_s=float(comparison.time_left_s),
        distance_m=s,
        length_m=float(line.length_m),
        x_m=None if line.x_m is None else np.asarray(line.x_m, dtype=np.float64),
        y_m=None if line.y_m is None else np.asarray(line.y_m, dtype=np.float64),
        curvature_1_m=np.asarray(line.curvature_1_m, dtype=np.float64),
        time_real_s=t_real - t_real[0],
        time_ideal_s=t_ideal - t_ideal[0],
        time_delta_s=np.asarray(comparison.time_delta_s, dtype=np.float64),
        speed_real_m_s=np.asarray(driven.speed_m_s, dtype=np.float64),
        speed_ideal_m_s=np.asarray(ideal.speed_m_s, dtype=np.float64),
        ax_real_m_s2=np.asarray(driven.accel_lon_m_s2, dtype=np.float64),
        ay_real_m_s2=np.asarray(driven.accel_lat_m_s2, dtype=np.float64),
        ax_ideal_m_s2=np.asarray(ideal.accel_lon_m_s2, dtype=np.float64),
        ay_ideal_m_s2=np.asarray(ideal.accel_lat_m_s2, dtype=np.float64),
        throttle=np.asarray(driven.throttle, dtype=np.float64),
        brake_pa=np.asarray(driven.brake_pa, dtype=np.float64),
        corners=corners,
        vehicle=analysis.vehicle,
        fit=analysis.fit,
        best_time_s=_best_of_laps(analysis.best_of_laps, corners),
        warnings=warnings,
        n_laps=sum(1 for lp in analysis.laps if lp.complete),
        yaw_rate_rad_s=np.asarray(driven.yaw_rate_rad_s, dtype=np.float64),
        agreement=driven.agreement,
        fit_laps=[int(n) for n in analysis.fit_laps],
        curvature_check=driven.curvature_check,
        gg_bands=analysis.gg_bands,
        pedals_real=_pedals(comparison, "actual"),
        pedals_ideal=_pedals(comparison, "ideal"),
        time_left_words=comparison.time_left_words(),
        session=getattr(analysis, "session", None),
        bands=getattr(analysis, "bands", None),
        other_laps=other_laps(analysis, s, float(line.length_m), t_ideal - t_ideal[0]),
        session_info=dict(getattr(analysis, "session_info", None) or {}),
        line=getattr(analysis, "line", None),
    )


def laps_summary(laps) -> list[dict]:
    """summary.json's ``laps``: one record per lap of the log, in order (docs/outputs.md, summary.json).

    Parameters
    ----------
    laps : list of laps.Lap
        Every lap of the log. [-]

    Returns
    -------
    list of dict
        ``number`` [-], ``kind`` (``out``, ``flying``, ``in``, ``pit``, ``partial``) and
        ``time_s`` [s] of each lap. [-]
    """
    return [{"number": int(lp.number), "kind": lp.kind, "time_s": float(lp.time_s)} for lp in laps]


def _pedals(comparison: LapComparison, which: str) -> dict:
    """The pedal traces of one lap as the comparison drew them (shares 0-1), and what they are.

    ``brake`` and ``drive`` arrays [-], ``brake_source`` and ``drive_source``: 'pedal',
    'pressure' (share of the lap's highest), 'acceleration' (share of the limit the
    lap's acceleration needs) or 'ideal' (the ideal's, drawn phase by phase).
    """
    brake = getattr(comparison, f"brake_share_{which}")
    drive = getattr(comparison, f"drive_share_{which}")
    if brake is None or drive is None:
        return {}
    if which == "ideal":
        sources = ("ideal", "ideal")
    else:
        sources = (
            "pressure" if comparison.brake_logged else "acceleration",
            "pedal" if comparison.throttle_logged else "acceleration",
        )
    return {
        "brake": np.asarray(brake, dtype=np.float64),
        "drive": np.asarray(drive, dtype=np.float64),
        "brake_source": sources[0],
        "drive_source": sources[1],
    }


def _with_bands(corners, bands) -> None:
    """Each corner row gets its time-left band and rank group; a corner whose band includes zero gets a note in place of its advice (:func:`limitlap.bands.advice_shown`)."""
    if bands is None:
        return
    from limitlap.bands import advice_shown

    for i, c in enumerate(corners):
        band = tuple(bands.corner_bands_s[i])
        c["time_left_band_s"] = band
        c["rank_group"] = int(bands.rank_group[i])
        c["plain"] = advice_shown(c["name"], c["time_left_s"], band, c["plain"])
        if "_summary" in c:
            c["_summary"] = {**c["_summary"], "advice": c["plain"]}


def _with_line(corners, line) -> None:
    """Each corner row gets its better line's keys (docs/outputs.md, summary.json: ``line_time_s`` and the rest) and the line record itself (``_line``, for the report)."""
    if line is None:
        return
    from limitlap.advice import line_advice

    for c, cl in zip(corners, line.corners, strict=True):
        keys = {
            "line_time_s": cl.line_time_s,
            "line_told": cl.told,
            "line_note": "" if cl.told else LINE_NARROW_NOTE,
            "line_offsets_m": {
                "turn_in": cl.turn_in_offset_m,
                "apex": cl.apex_offset_m,
                "exit": cl.exit_offset_m,
            },
            "line_turn_in_later_m": cl.turn_in_later_m,
            "line_apex_later_m": cl.apex_later_m,
            "line_advice": line_advice(cl),
        }
        c.update(keys)
        c["_line"] = cl
        if "_summary" in c:
            c["_summary"] = {**c["_summary"], **keys}


#: What a corner's ``line_note`` says when its corridor is too narrow to tell.
LINE_NARROW_NOTE = (
    "corridor too narrow to tell: the laps' lines here differ by less than their own uncertainty"
)


def _line_keys(line) -> dict:
    """The better line's top-level summary.json keys: ``line_time_s`` and ``line`` (docs/outputs.md)."""
    if line is None:
        return {}
    band = line.corridor
    note = ""
    if line.line_time_s is None:
        note = (
            LINE_NARROW_NOTE
            if len(band.laps) > 1 or band.source != "laps"
            else ("one lap only and no track edges: no corridor to look in")
        )
    return {
        "line_time_s": line.line_time_s,
        "line": {
            "corridor": band.source,
            "laps": list(band.laps),
            "uncertainty_m": band.uncertainty_m,
            "driven_time_s": line.driven_time_s,
            "min_curvature_time_s": line.min_curvature_time_s,
            "better_time_s": line.better_time_s,
            "curvature_rate_max_1_m2": line.rate_max_1_m2,
            "curvature_rate_bound_1_m2": line.rate_bound_1_m2,
            "note": note,
        },
    }


def session_laps(table) -> list[dict]:
    """summary.json ``laps`` (docs/outputs.md): one record per lap of the log, in order.

    ``number``, ``kind``, ``time_s``; for each lap timed gate to gate also
    ``ideal_time_s``, ``time_left_s``, ``grip_estimate`` and ``corner_times_s`` (corner
    order).
    """
    out = []
    for r in table.laps:
        rec = {"number": r.number, "kind": r.kind, "time_s": r.time_s}
        if r.timed:
            rec["ideal_time_s"] = r.ideal_time_s
            rec["time_left_s"] = r.time_left_s
            rec["grip_estimate"] = r.grip_estimate
            rec["corner_times_s"] = None if r.corner_times_s is None else list(r.corner_times_s)
        out.append(rec)
    return out


def _band_keys(v: ReportView, ideal: dict) -> dict:
    """The bands' summary.json keys: ``ideal.time_band_s`` and ``band_coverage`` added to ``ideal``; the top-level extras returned."""
    b = v.bands
    if b is None:
        return {}
    ideal["time_band_s"] = list(b.ideal_time_band_s)
    ideal["band_coverage"] = b.coverage
    return {
        "time_left_band_s": list(b.time_left_band_s),
        "bands": {
            "method": "bootstrap over the flying laps (docs/methods.md, How sure)",
            "coverage": b.coverage,
            "resamples": b.n_resamples,
            "laps": b.n_laps,
            "envelope_sd_s": b.envelope_sd_s,
            "line_sd_s": b.line_sd_s,
        },
    }


_CORNER_KEYS = (
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


_LINE_KEYS = (
    "line_time_s",
    "line_told",
    "line_note",
    "line_offsets_m",
    "line_turn_in_later_m",
    "line_apex_later_m",
    "line_advice",
)


def summary_corner(c: dict, rounded: bool = True) -> dict:
    """A corner's summary.json record (docs/outputs.md, Corners), from its report row.

    The report page carries the same records, rounded as summary.json is written;
    ``rounded=False`` keeps the numbers as computed (summary.json rounds when written).
    """
    if "_summary" in c:
        rec = dict(c["_summary"])
        rec.setdefault("plain", c["plain"])
    else:
        rec = {k: c[k] for k in _CORNER_KEYS}
        rec["plain"] = c["plain"]
    for key in ("best_s", "best_lap", "label", "time_left_band_s", "rank_group", *_LINE_KEYS):
        if key in c:
            rec[key] = c[key]
    return _plain(rec) if rounded else rec


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
    v = report_view(analysis)
    corners = [summary_corner(c, rounded=False) for c in v.corners]
    best_rec = {"time_s": v.best_time_s, "complete_laps": v.n_laps}
    if analysis.best_of_laps is not None:
        best_rec.update(analysis.best_of_laps.summary_dict())
    ideal = {"time_s": v.ideal_time_s, "grip_scale": v.grip_scale}
    extras = _band_keys(v, ideal)
    every_lap = {}
    if v.session is not None:
        every_lap = {
            "laps": session_laps(v.session),
            "consistency": [dataclasses.asdict(c) for c in v.session.consistency],
        }
    return {
        "schema": SUMMARY_SCHEMA,
        "lap": {"number": v.lap_number, "time_s": v.lap_time_s, "distance_m": v.lap_distance_m},
        "ideal": ideal,
        "time_left_s": v.time_left_s,
        **extras,
        **_line_keys(getattr(analysis, "line", None)),
        "grip_estimate": v.grip_estimate,
        "corners": corners,
        "session": dict(v.session_info),
        "laps": laps_summary(analysis.laps),
        **every_lap,
        "best_of_laps": best_rec,
        "envelope": {
            "fitted": v.fit is not None,
            "laps": list(v.fit_laps),
        },
        "warnings": list(v.warnings),
    }


def _profile_columns(v: ReportView):
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


def stepper(progress, total):
    """A ``step(name)`` callback that counts the steps done and reports each."""
    state = {"done": 0}

    def step(name):
        state["done"] += 1
        if progress is not None:
            progress(min(state["done"], total), total, name)

    return step


def write_outputs(
    analysis,
    out_dir,
    *,
    figures: bool = True,
    units: Units = METRIC,
    progress: Progress | None = None,
) -> dict:
    """Write everything ``analyse`` leaves in its output folder.

    Parameters
    ----------
    analysis : pipeline.Analysis
        The finished analysis.
    out_dir : str, Path or OutputSet
        Output folder, replaced whole by this run's files (:func:`output_set`); or a set
        open for more files of the same run.
    figures : bool
        Also write the figures as PNG pictures (matplotlib); the page always has its
        interactive figures.
    units : formatting.Units
        How the page and the pictures show speeds and distances; the files for programs
        keep their documented units.
    progress : callable, optional
        ``progress(done, total, step)`` after each step; None = silent.

    Returns
    -------
    dict
        File kind -> path written: ``summary``, ``profile``, ``envelope``, ``report`` and
        one entry per PNG (its file name).
    """
    from limitlap import report

    v = report_view(analysis)
    cols = specs = None
    if figures:
        cols, specs = report.page_figures(v, units)
        specs += report.detail_figures(v, cols, units)
    step = stepper(progress, 4 + (len(specs) if figures else 0))
    written = {}
    with output_set(out_dir) as out:
        written["summary"] = out.write("summary.json", summary_json_text(build_summary(analysis)))
        step("summary.json")
        columns, col_units = _profile_columns(v)
        written["profile"] = out.write("profile.csv", profile_csv_text(columns, col_units))
        step("profile.csv")
        fit_info = None
        if v.fit is not None:
            fit_info = {"quality": v.fit.quality, "uncertainty": v.fit.uncertainty}
        written["envelope"] = out.write("envelope.toml", envelope_toml_text(v.vehicle, fit_info))
        step("envelope.toml")
        if figures:
            from limitlap.pictures import picture

            for spec in specs:
                name = f"{spec.key}.png"
                written[name] = out.write(name, picture(spec, cols))
                step(f"{spec.key} figure")
        written["report"] = out.write("report.html", report.report_html(v, units))
        step("report.html")
    return written


#: Schema string of versus.json (docs/outputs.md, Lap against lap).
VERSUS_SCHEMA = "limitlap.versus/1"


def versus_summary(result) -> dict:
    """versus.json (docs/outputs.md, Lap against lap) of a :class:`limitlap.versus.Versus`."""

    def side(s):
        return {
            "label": s.label,
            "log": s.log_path,
            "lap": s.lap.number,
            "time_s": float(s.lap.time_s),
            "ideal_time_s": float(s.ideal.lap_time_s),
            "time_left_s": float(s.comparison.time_left_s),
            "distance_m": float(s.driven.line.length_m),
        }

    return {
        "schema": VERSUS_SCHEMA,
        "a": side(result.a),
        "b": side(result.b),
        "lap_delta_s": result.lap_delta_s,
        "envelope": {
            "fitted": result.fit is not None,
            "logs": list(result.envelope_logs),
            "grip_scale": result.grip_scale,
        },
        "corners": [
            {
                "name": c.name,
                "start_m": c.start_m,
                "apex_m": c.apex_m,
                "end_m": c.end_m,
                "time_a_s": c.time_a_s,
                "time_b_s": c.time_b_s,
                "delta_s": c.delta_s,
                "time_left_a_s": c.time_left_a_s,
                "time_left_b_s": c.time_left_b_s,
                "sentence": c.sentence,
            }
            for c in result.corners
        ],
        "warnings": list(result.warnings),
    }


def write_versus(result, out_dir, *, figures: bool = True) -> dict:
    """Write what ``limitlap versus`` leaves in its folder: versus.json, the common envelope.toml, the figures and report.html (one set, :func:`output_set`).

    Returns
    -------
    dict
        File kind -> path written.
    """
    from limitlap.report import versus_figures, versus_html

    written = {}
    with output_set(out_dir) as out:
        written["summary"] = out.write("versus.json", summary_json_text(versus_summary(result)))
        fit_info = None
        if result.fit is not None:
            fit_info = {"quality": result.fit.quality, "uncertainty": result.fit.uncertainty}
        written["envelope"] = out.write(
            "envelope.toml", envelope_toml_text(result.vehicle, fit_info)
        )
        figure_list = versus_figures(result) if figures else []
        for name, _caption, png in figure_list:
            written[name] = out.write(name, png)
        written["report"] = out.write("report.html", versus_html(result, figure_list))
    return written
