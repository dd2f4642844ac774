"""Target sheets before a session: targets.csv and a printable PDF and PNG per condition.

The tables come from :func:`limitlap.targets.target_table`; every file is written
into one set by :func:`limitlap.atomic.output_set`. Format: docs/outputs.md, Target
sheets.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import TYPE_CHECKING

from limitlap.atomic import output_set
from limitlap.formatting import METRIC, Units
from limitlap.outputs import Progress, csv_cell, float_or_nan, stepper
from limitlap.units import KMH_TO_M_S

if TYPE_CHECKING:
    from limitlap.targets import TargetCondition


def _condition(cond: TargetCondition, length_m=None, *, car: str = "", date: str = "") -> dict:
    """A target table as a plain dict for the sheet and the CSV (distances m, speeds m/s).

    ``car`` and ``date`` are printed on the sheet ("" leaves them out).
    """
    k = float(cond.grip_scale)
    length = float_or_nan(length_m if length_m is not None else getattr(cond, "length_m", None))
    corners = [
        {
            "name": str(r.name),
            "label": str(getattr(r, "label", "") or ""),
            "apex_m": float_or_nan(r.apex_m),
            "brake_points_m": [float(x) for x in getattr(r, "brake_points_m", ())],
            "brake_start_m": float_or_nan(r.brake_start_m),
            "before_apex_m": float_or_nan(r.brake_before_apex_m),
            "entry_speed_m_s": float_or_nan(r.entry_speed_m_s),
            "min_speed_m_s": float_or_nan(r.min_speed_m_s),
            "min_speed_at_m": float_or_nan(getattr(r, "min_speed_at_m", None)),
            "exit_speed_m_s": float_or_nan(r.exit_speed_m_s),
            "segment_time_s": float_or_nan(r.segment_time_s),
        }
        for r in cond.corners
    ]
    text = getattr(cond, "condition", "") or (cond.label or f"{k:g}")
    return {
        "label": str(cond.label) if cond.label else f"grip {k:.2f}",
        "condition": text,
        "grip_scale": k,
        "lap_time_s": float(cond.lap_time_s),
        "length_m": length,
        "car": car,
        "date": date,
        "corners": corners,
    }


def _slug(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", text.lower()).strip("_") or "condition"


#: Header of targets.csv (docs/outputs.md, Target sheets).
CSV_HEADER = (
    "condition,grip_scale [-],lap_time [s],corner,label,apex [m],brake_start [m],"
    "brake_before_apex [m],entry_speed [km/h],min_speed [km/h],exit_speed [km/h],"
    "segment_time [s],brake_points [m],min_speed_at [m]"
)


def _num(x, nd):
    """A CSV number: ``nd`` decimals, the rounding of ``targets --json``; empty if unknown."""
    return "" if not math.isfinite(x) else f"{round(x, nd) + 0.0:.{nd}f}"


def targets_csv_text(conditions, *, length_m: float | None = None) -> str:
    """CSV of the target tables: one row per condition and corner.

    Parameters
    ----------
    conditions : list
        Records of :func:`limitlap.targets.target_table` (docs/outputs.md, Target sheets fields).
    length_m : float, optional
        Lap length (records carry their own). [m]

    Returns
    -------
    str
        Distances and speeds to 0.1, times and grip scales to 0.001, as ``targets
        --json``; ``brake_points`` lists every brake point, separated by spaces.
    """
    kmh = 1.0 / KMH_TO_M_S
    rows = [CSV_HEADER]
    for c in (_condition(x, length_m) for x in conditions):
        for r in c["corners"]:
            cells = [
                csv_cell(c["condition"]),
                _num(c["grip_scale"], 3),
                _num(c["lap_time_s"], 3),
                csv_cell(r["name"]),
                csv_cell(r["label"]),
                _num(r["apex_m"], 1),
                _num(r["brake_start_m"], 1),
                _num(r["before_apex_m"], 1),
                _num(r["entry_speed_m_s"] * kmh, 1),
                _num(r["min_speed_m_s"] * kmh, 1),
                _num(r["exit_speed_m_s"] * kmh, 1),
                _num(r["segment_time_s"], 3),
                " ".join(_num(x, 1) for x in r["brake_points_m"]),
                _num(r["min_speed_at_m"], 1),
            ]
            rows.append(",".join(cells))
    return "\n".join(rows) + "\n"


def write_target_sheets(
    conditions,
    out_dir,
    circuit_name: str,
    *,
    length_m: float | None = None,
    car: str = "",
    date: str = "",
    progress: Progress | None = None,
    units: Units = METRIC,
) -> list[Path]:
    """Write a printable one-page sheet per condition (PDF and PNG) and targets.csv.

    Parameters
    ----------
    conditions : list
        Records of :func:`limitlap.targets.target_table` (docs/outputs.md, Target sheets fields; an optional
        ``condition``/``label`` names it, e.g. "wet").
    out_dir : str, Path or OutputSet
        Output folder, replaced whole by these files (:func:`limitlap.atomic.output_set`);
        or a set open for more files of the same run.
    circuit_name : str
        Heading of each sheet.
    length_m : float, optional
        Lap length (records carry their own). [m]
    car : str
        The car (the vehicle file's or envelope's name), printed on each sheet.
    date : str
        The date the sheets are for (ISO 8601, e.g. the session's), printed on each sheet.
    progress : callable, optional
        ``progress(done, total, step)``; None = silent.
    units : formatting.Units
        How the printed sheets show speeds and distances; targets.csv keeps km/h and m.

    Returns
    -------
    list of Path
        Files written: per condition ``targets_<label>.pdf`` and ``.png``, then targets.csv.
    """
    conds = [_condition(c, length_m, car=car, date=date) for c in conditions]
    step = stepper(progress, 2 * len(conds) + 1)
    written, seen = [], set()
    with output_set(out_dir) as out:
        for c in conds:
            slug = _slug(c["label"])
            if slug in seen:
                slug = f"{slug}_{c['grip_scale']:.2f}".replace(".", "_")
            seen.add(slug)
            for fmt in ("pdf", "png"):
                data = _sheet(c, circuit_name, fmt, units)
                written.append(out.write(f"targets_{slug}.{fmt}", data))
                step(f"target sheet {c['label']} ({fmt})")
        written.append(out.write("targets.csv", targets_csv_text(conditions, length_m=length_m)))
        step("targets.csv")
    return written


def _sheet(condition: dict, circuit_name: str, fmt: str, units: Units) -> bytes:
    """One condition's printable page (PDF or PNG), drawn by matplotlib (:func:`limitlap.figures.target_sheet`)."""
    from limitlap import figures as fg
    from limitlap import report

    return fg.target_sheet(condition, circuit_name, report.SAFETY_CAUTION, fmt=fmt, units=units)
