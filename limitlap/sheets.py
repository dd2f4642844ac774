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


def _condition(cond: TargetCondition, length_m=None) -> dict:
    """A target table as a plain dict (km/h); ``before_apex_m`` wraps across the gate."""
    k = float(cond.grip_scale)
    length = float_or_nan(length_m)
    kmh = 1.0 / KMH_TO_M_S
    corners = []
    for r in cond.corners:
        before = float_or_nan(r.brake_before_apex_m)
        if before < 0 and math.isfinite(length):  # braking starts before the gate
            before += length
        corners.append(
            {
                "name": str(r.name),
                "apex_m": float_or_nan(r.apex_m),
                "brake_start_m": float_or_nan(r.brake_start_m),
                "before_apex_m": before if before >= 0 else float("nan"),
                "entry_speed_kmh": float_or_nan(r.entry_speed_m_s) * kmh,
                "min_speed_kmh": float_or_nan(r.min_speed_m_s) * kmh,
                "exit_speed_kmh": float_or_nan(r.exit_speed_m_s) * kmh,
                "segment_time_s": float_or_nan(r.segment_time_s),
            }
        )
    return {
        "label": str(cond.label) if cond.label else f"grip {k:.2f}",
        "grip_scale": k,
        "lap_time_s": float(cond.lap_time_s),
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
                        csv_cell(c["label"]),
                        num(c["grip_scale"], 3),
                        num(c["lap_time_s"], 3),
                        csv_cell(r["name"]),
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
        Lap length, so a brake point before the gate gives its distance before an apex
        after it (records may carry ``length_m`` themselves). [m]
    progress : callable, optional
        ``progress(done, total, step)``; None = silent.
    units : formatting.Units
        How the printed sheets show speeds and distances; targets.csv keeps km/h and m.

    Returns
    -------
    list of Path
        Files written: per condition ``targets_<label>.pdf`` and ``.png``, then targets.csv.
    """
    conds = [_condition(c, length_m) for c in conditions]
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
