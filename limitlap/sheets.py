"""Target sheets before a session: targets.csv and a printable PDF and PNG per condition.

The tables come from :func:`limitlap.targets.target_table`; every file is written
into one set by :func:`limitlap.atomic.output_set`. Format: docs/outputs.md, Target
sheets.
"""

from __future__ import annotations

import io
import math
import re
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from limitlap.atomic import output_set
from limitlap.figures import IDEAL, INK, agg_figure, styled
from limitlap.formatting import (
    METRIC,
    NOT_AVAILABLE,
    Units,
    brake_points,
    distance,
    lap_time,
    seconds,
    speed_kmh,
)
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
    """One condition's printable page (PDF or PNG), drawn by matplotlib (:func:`target_sheet`)."""
    from limitlap import report

    return target_sheet(condition, circuit_name, report.SAFETY_CAUTION, fmt=fmt, units=units)


# --------------------------------------------------------------------------- the page drawn

#: Pixel size of the printable target sheet's PNG: A4 portrait at 150 dpi.
SHEET_SIZE_PX = (1240, 1754)
#: Resolution of the printable target sheet: A4 = 8.27 x 11.69 in. [dots per inch]
SHEET_DPI = 150
#: The caution box's edge and heading (not a data colour).
CAUTION = "#B8860B"


def _sheet_rows(condition, units: Units) -> list[list[str]]:
    """The sheet's table cells, in the one rounding of every output (limitlap.formatting)."""
    rows = []
    for c in condition["corners"]:
        points = [p for p in c.get("brake_points_m", []) if np.isfinite(p)]
        if not points and np.isfinite(c.get("brake_start_m", np.nan)):
            points = [c["brake_start_m"]]
        rows.append(
            [
                str(c["name"]),
                str(c.get("label", "")),
                distance(c["apex_m"], units),
                brake_points(points, units, blank="no braking"),
                distance(c.get("before_apex_m"), units),
                speed_kmh(c.get("entry_speed_m_s"), units),
                speed_kmh(c["min_speed_m_s"], units),
                speed_kmh(c["exit_speed_m_s"], units),
                seconds(c["segment_time_s"]),
            ]
        )
    return rows


def _sheet_table(fig, header, rows) -> None:
    """The sheet's corner table: header, rule, banded rows, font fitted to the row count."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Rectangle

    n = max(len(rows), 1)
    top, bottom = 0.875, 0.215
    header_h = 0.04
    row_h = min(0.055, (top - header_h - bottom) / n)
    font = max(7.0, min(13.0, row_h * 11.69 * 72 * 0.34))
    cols_x = [0.06, 0.115, 0.38, 0.55, 0.645, 0.725, 0.8, 0.865, 0.95]
    aligns = ["left", "left"] + ["right"] * 7
    y = top
    for x, h, al in zip(cols_x, header, aligns, strict=True):
        fig.text(x, y, h, fontsize=10, ha=al, va="top", color="#444444", linespacing=1.1)
    y -= header_h
    fig.add_artist(Line2D([0.05, 0.95], [y, y], color=INK, lw=1.2))
    y -= 0.2 * row_h
    for i, row in enumerate(rows):
        if i % 2 == 0:
            fig.add_artist(
                Rectangle((0.05, y - row_h), 0.90, row_h, color="#eef3f8", lw=0, zorder=0)
            )
        for j, (x, cell, al) in enumerate(zip(cols_x, row, aligns, strict=True)):
            weight = "bold" if j in (0, 6) else "normal"
            size = font * (0.75 if cell == "no braking" or j == 1 or "+" in cell else 1.0)
            fig.text(
                x, y - row_h * 0.5, cell, fontsize=size, ha=al, va="center",
                fontweight=weight, color=INK,
            )  # fmt: skip
        y -= row_h


@styled
def target_sheet(
    condition, circuit_name: str, caution: str, fmt: str = "png", units: Units = METRIC
) -> bytes:
    """One printable A4 page of targets for one condition, to take to the car.

    Parameters
    ----------
    condition : dict
        ``label`` (e.g. "wet"), ``grip_scale`` [-], ``lap_time_s`` [s], optionally
        ``car`` and ``date`` (printed under the heading), and ``corners``: records with
        ``name``, ``label``, ``apex_m``, ``brake_points_m`` (or ``brake_start_m``),
        ``before_apex_m`` [m], ``entry_speed_m_s``, ``min_speed_m_s``,
        ``exit_speed_m_s`` [m/s] and ``segment_time_s`` [s].
    circuit_name : str
        Printed in the heading.
    caution : str
        Safety caution printed at the foot of the page.
    fmt : {"png", "pdf"}
        Output format.
    units : Units
        Speeds and distances as a person reads them (km/h and m, or mph and ft).

    Returns
    -------
    bytes
        The page; PNG is :data:`SHEET_SIZE_PX` pixels (A4 at 150 dpi).
    """
    import textwrap

    from matplotlib.patches import Rectangle

    fig = agg_figure(*SHEET_SIZE_PX, SHEET_DPI)
    fig.text(0.06, 0.965, f"{circuit_name}", fontsize=20, fontweight="bold", va="top")
    label = condition.get("label") or f"grip {condition['grip_scale']:.2f}"
    fig.text(
        0.06,
        0.93,
        f"Targets: {label}  (grip scale {condition['grip_scale']:.2f})",
        fontsize=15,
        va="top",
    )
    made = f"made {condition['date']}" if condition.get("date") else ""
    about = [x for x in (condition.get("car"), made) if x]
    if about:
        fig.text(0.06, 0.905, "  ·  ".join(about), fontsize=11, va="top", color="#444444")
    fig.text(0.94, 0.965, "target lap", fontsize=12, ha="right", va="top", color="#555555")
    fig.text(
        0.94,
        0.945,
        lap_time(condition["lap_time_s"], decimals=2),
        fontsize=30,
        fontweight="bold",
        ha="right",
        va="top",
        color=IDEAL,
    )
    d, v = units.distance, units.speed
    header = [
        "corner",
        "",
        f"apex\n[{d}]",
        f"brake at\n[{d}]",
        f"before\napex [{d}]",
        f"entry\n[{v}]",
        f"min\n[{v}]",
        f"exit\n[{v}]",
        "segment\n[s]",
    ]
    _sheet_table(fig, header, _sheet_rows(condition, units))
    note = (
        "Brake at: where the ideal's speed starts falling into the corner (a lift counts), "
        "from the start/finish gate, one per braking zone; before apex: from the first "
        "brake point to the apex. Entry: speed at the first brake point; minimum: the "
        "lowest in the corner (at the apex where it is taken without slowing); exit: "
        f"where the corner's curve ends. {NOT_AVAILABLE}: none."
    )
    fig.text(0.06, 0.2, textwrap.fill(note, 105), fontsize=9, va="top", color="#444444")
    fig.add_artist(
        Rectangle((0.05, 0.025), 0.90, 0.115, facecolor="#fff4e0", edgecolor=CAUTION, lw=1.5)
    )
    fig.text(0.07, 0.128, "Caution", fontsize=12, fontweight="bold", va="top", color="#7a4a00")
    fig.text(
        0.07,
        0.105,
        textwrap.fill(caution, 88),
        fontsize=10.5,
        va="top",
        color=INK,
        linespacing=1.35,
    )
    buf = io.BytesIO()
    meta = (
        {"Software": None}
        if fmt == "png"
        else {"Creator": None, "Producer": None, "CreationDate": None}
    )
    fig.savefig(buf, format=fmt, dpi=SHEET_DPI, metadata=meta)
    return buf.getvalue()
