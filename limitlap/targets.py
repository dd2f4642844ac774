r"""Targets before a session: per-corner speeds and brake points for a grip scale.

For each condition (a grip scale k on the envelope's friction coefficients,
docs/formats.md, Vehicle files) the ideal profile is solved on the line and each corner
read off it with :func:`limitlap.markers.corner_marks`, the same reading the comparison
gives the ideal (docs/methods.md, Corner record): every brake point, the entry speed,
the minimum speed and where, the exit speed, and the segment time. The corners are
found once on the line and reused for every condition, so the tables line up; for the
same line, envelope and grip scale the numbers are those of summary.json's ideal.

Named conditions are defaults, overridable by the user
(:data:`limitlap.conditions.CONDITIONS`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from limitlap.conditions import CONDITIONS, condition_text, resolve_condition
from limitlap.corners import Corner, find_corners
from limitlap.line import Line
from limitlap.markers import corner_marks, ideal_trace, unwrapped_bounds, wrap_distance
from limitlap.solve import Profile, solve_profile
from limitlap.units import KMH_TO_M_S
from limitlap.vehicle import Vehicle, check_grip_scale

__all__ = [
    "CAUTION",
    "CONDITIONS",
    "CornerTarget",
    "TargetCondition",
    "resolve_condition",
    "target_table",
    "target_tables",
    "targets_json",
]

#: One-line caution carried by every target table.
CAUTION = (
    "Targets are theoretical estimates: approach them progressively; wet grip changes "
    "corner to corner and lap to lap; the circuit's regulations, officials and qualified "
    "instructors come first."
)


@dataclass(frozen=True)
class CornerTarget:
    """Targets for one corner at one grip scale (SI; NaN where there is none).

    The fields are the corner record of docs/methods.md (Corner record), read off the
    ideal profile.

    Attributes
    ----------
    name, label : str
        Corner name and the track file's label ("" without one).
    apex_m : float
        The corner's main apex, from the gate (the same at every grip scale). [m]
    brake_points_m : tuple of float
        Start of every deceleration into the corner (a lift counts), in driving order:
        one per braking zone that reaches it (two for a double apex braked twice). [m]
    brake_start_m : float
        The first of them; NaN when the corner is taken without slowing. [m]
    brake_before_apex_m : float
        Distance from ``brake_start_m`` to ``apex_m`` along the lap; NaN without
        braking. [m]
    entry_speed_m_s : float
        Speed at ``brake_start_m``; NaN without braking. [m/s]
    min_speed_m_s : float
        The profile's lowest minimum of speed in the corner; for a corner taken without
        slowing (no minimum of its own), the speed at its apex. [m/s]
    min_speed_at_m : float
        Where it is, from the gate. [m]
    own_minimum : bool
        The ideal slows in this corner.
    exit_speed_m_s : float
        Speed where the corner's curvature zone ends. [m/s]
    segment_time_s : float
        Time through the segment. [s]
    """

    name: str
    label: str
    apex_m: float
    brake_points_m: tuple[float, ...]
    brake_start_m: float
    brake_before_apex_m: float
    entry_speed_m_s: float
    min_speed_m_s: float
    min_speed_at_m: float
    own_minimum: bool
    exit_speed_m_s: float
    segment_time_s: float


@dataclass(frozen=True, eq=False)
class TargetCondition:
    """The target table for one grip scale.

    Attributes
    ----------
    grip_scale : float
        Grip scale k. [-]
    lap_time_s : float
        Ideal lap time. [s]
    corners : tuple of CornerTarget
        In driving order.
    label : str or None
        Condition name ('dry', 'wet', ...) when it came from one.
    profile : Profile
        The ideal profile the table was read from.
    condition : str
        The condition as outputs name it: its name, or the number as given. [-]
    length_m : float
        Lap length of the line. [m]
    """

    grip_scale: float
    lap_time_s: float
    corners: tuple[CornerTarget, ...]
    label: str | None
    profile: Profile
    condition: str = ""
    length_m: float = math.nan


def target_table(
    line: Line,
    vehicle: Vehicle,
    grip_scale: float,
    corners: Sequence[Corner] | None = None,
    *,
    label: str | None = None,
    condition: str | None = None,
) -> TargetCondition:
    r"""Per-corner targets on ``line`` at one grip scale.

    Parameters
    ----------
    line : Line
        Closed lap (or open stretch) to drive.
    vehicle : Vehicle
        Complete envelope at grip scale 1.
    grip_scale : float
        Grip scale k, 0.2-2.0. [-]
    corners : sequence of Corner, optional
        Default :func:`limitlap.corners.find_corners` on ``line``; pass the same list
        to every condition so the tables line up.
    label : str, optional
        Condition name to carry.
    condition : str, optional
        The condition as given (default the label, else the grip scale).

    Returns
    -------
    TargetCondition

    Notes
    -----
    The profile is :func:`limitlap.solve.solve_profile` (quasi-steady-state point mass,
    Lenzo & Rossi 2020), read by :func:`limitlap.markers.corner_marks` on
    :func:`limitlap.markers.ideal_trace`, as the comparison reads the ideal.
    """
    k = check_grip_scale(grip_scale)
    if corners is None:
        corners = find_corners(line)
    prof = solve_profile(line, vehicle, k)
    tr = ideal_trace(prof, line, vehicle.scaled(k) if k != 1.0 else vehicle.require_complete())
    bounds = unwrapped_bounds(corners, tr.length, tr.closed)
    out = tuple(_corner_target(c, bound, tr) for c, bound in zip(corners, bounds, strict=True))
    text = condition or label or condition_text(k)
    return TargetCondition(k, float(prof.lap_time_s), out, label, prof, text, tr.length)


def _corner_target(c: Corner, bound, tr) -> CornerTarget:
    """One corner's targets on the ideal's trace.

    ``bound`` is the corner's entry of :func:`limitlap.markers.unwrapped_bounds`
    (unwrapped start, apex, end and search limits [m]).
    """
    apex_u = bound[1]
    length, closed = tr.length, tr.closed
    seg_time = tr.time_at_mod(c.end_m) - tr.time_at_mod(c.start_m)
    if closed and c.end_m <= c.start_m:
        seg_time += tr.lap_time
    mk = corner_marks(tr, c, bound)
    before = apex_u - mk.brake_start
    if closed and math.isfinite(before):
        before = float(np.mod(before, length))
    return CornerTarget(
        name=c.name,
        label=c.label,
        apex_m=c.apex_m,
        brake_points_m=tuple(wrap_distance(u, length, closed) for u in mk.brake_points),
        brake_start_m=wrap_distance(mk.brake_start, length, closed),
        brake_before_apex_m=float(before),
        entry_speed_m_s=mk.entry_speed,
        min_speed_m_s=mk.min_speed,
        min_speed_at_m=wrap_distance(mk.min_at, length, closed),
        own_minimum=mk.own_minimum,
        exit_speed_m_s=mk.exit_speed,
        segment_time_s=float(seg_time),
    )


def target_tables(
    line: Line,
    vehicle: Vehicle,
    conditions: Sequence[str | float],
    corners: Sequence[Corner] | None = None,
    *,
    named: Mapping[str, float] | None = None,
) -> list[TargetCondition]:
    """Target tables for several conditions, on corners found once.

    Parameters
    ----------
    line : Line
    vehicle : Vehicle
        Complete envelope at grip 1.
    conditions : sequence of str or float
        Condition names ('dry', 'damp', 'wet') or grip scales. [-]
    corners : sequence of Corner, optional
        Default :func:`limitlap.corners.find_corners` on ``line``.
    named : mapping, optional
        Names to grip scales, overriding :data:`CONDITIONS`. [-]

    Returns
    -------
    list of TargetCondition
    """
    if corners is None:
        corners = find_corners(line)
    out = []
    for cond in conditions:
        label, k = resolve_condition(cond, named)
        text = condition_text(cond)
        out.append(target_table(line, vehicle, k, corners, label=label, condition=text))
    return out


def _r(x, nd):
    return None if x is None or not math.isfinite(x) else round(float(x), nd)


def _corner_json(t: CornerTarget) -> dict:
    """One corner of ``targets --json``: the interface's keys, then the added ones."""
    k = 1.0 / KMH_TO_M_S
    return {
        "name": t.name,
        "apex_m": _r(t.apex_m, 1),
        "entry_speed_kmh": _r(t.entry_speed_m_s * k, 1),
        "brake_start_m": _r(t.brake_start_m, 1),
        "min_speed_kmh": _r(t.min_speed_m_s * k, 1),
        "exit_speed_kmh": _r(t.exit_speed_m_s * k, 1),
        "segment_time_s": _r(t.segment_time_s, 3),
        "label": t.label,
        "brake_points_m": [_r(x, 1) for x in t.brake_points_m],
        "brake_before_apex_m": _r(t.brake_before_apex_m, 1),
        "min_speed_at_m": _r(t.min_speed_at_m, 1),
        "own_minimum": bool(t.own_minimum),
    }


def targets_json(conditions: Sequence[TargetCondition]) -> dict:
    """The ``targets --json`` form of docs/outputs.md, Target sheets (km/h, m, s).

    Distances and speeds are rounded to 0.1, times to 0.001; a value that does not
    exist (no braking: brake point, entry speed) is null.

    Parameters
    ----------
    conditions : sequence of TargetCondition

    Returns
    -------
    dict
        ``{"conditions": [{"grip_scale", "lap_time_s", "corners": [...], "condition"}]}``;
        each corner has the interface's keys (``name``, ``apex_m``, ``entry_speed_kmh``,
        ``brake_start_m``, ``min_speed_kmh``, ``exit_speed_kmh``, ``segment_time_s``)
        then ``label``, ``brake_points_m``, ``brake_before_apex_m``, ``min_speed_at_m``
        and ``own_minimum``.
    """
    return {
        "conditions": [
            {
                "grip_scale": float(c.grip_scale),
                "lap_time_s": _r(c.lap_time_s, 3),
                "corners": [_corner_json(t) for t in c.corners],
                "condition": c.condition or condition_text(c.grip_scale),
            }
            for c in conditions
        ]
    }
