r"""Targets before a session: per-corner speeds and brake points for a grip scale.

For each condition (a grip scale k on the envelope's friction coefficients,
docs/formats.md, Vehicle files) the ideal profile is solved on the line and read corner
by corner: the speed where braking starts, the brake point (from the gate and before the
apex), the minimum speed, the speed at the end of the corner's segment and the segment
time. The corners are found once on the line and reused for every condition, so the
tables line up.

Named conditions are defaults, overridable by the user (:data:`CONDITIONS`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from limitlap import limits
from limitlap.corners import Corner, find_corners
from limitlap.errors import LimitlapError
from limitlap.line import Line
from limitlap.markers import (
    Trace,
    corner_markers,
    lowest_speed,
    station_accel,
    unwrap_after,
    unwrapped_bounds,
    wrap_distance,
    zone_u,
)
from limitlap.solve import Profile, solve_profile
from limitlap.units import KMH_TO_M_S
from limitlap.vehicle import Vehicle, check_grip_scale

#: Default grip scales of the named conditions. Common practice, no published source:
#: a damp track and intermediate tyres are usually put at 0.8-0.9 of dry grip, rain
#: tyres on a wet track at 0.6-0.75. For comparison, a road-tyre handbook table (Bosch
#: Automotive Handbook, new tyre, about 0.2 mm of water) gives wet/dry friction of about
#: 0.73-0.76; racing wets on a flooded track can be much lower. Override with your own.
CONDITIONS: dict[str, float] = {"dry": 1.0, "damp": 0.85, "wet": 0.70}

#: One-line caution carried by every target table.
CAUTION = (
    "Targets are theoretical estimates: approach them progressively; wet grip changes "
    "corner to corner and lap to lap; the circuit's regulations, officials and qualified "
    "instructors come first."
)


@dataclass(frozen=True)
class CornerTarget:
    """Targets for one corner at one grip scale (SI; NaN where there is no braking).

    Attributes
    ----------
    name : str
        Corner name.
    apex_m : float
        The corner's minimum-speed apex, from the gate: of the corner's apexes, the one
        nearest the minimum speed that is not before the brake point (the main apex
        unless a compound corner's slowest part is another one). [m]
    entry_speed_m_s : float
        Speed at the entry point: the brake point, or turn-in for a corner taken
        without braking. [m/s]
    brake_start_m : float
        Where braking into the minimum starts, from the gate; NaN without braking. For
        a compound corner braked twice, the braking into the minimum-speed apex. [m]
    brake_before_apex_m : float
        Distance from the brake point to ``apex_m`` (≥ 0); NaN without braking. [m]
    min_speed_m_s : float
        Lowest speed from the entry point to the corner's exit (end of the curvature
        zone), so never above the entry speed. A corner taken still accelerating
        (a flat-out kink after a slower corner) has no minimum of its own: its minimum
        is then the speed at turn-in, equal to its entry speed. [m/s]
    min_speed_at_m : float
        Where it is, from the gate. [m]
    exit_speed_m_s : float
        Speed at the segment end. [m/s]
    segment_time_s : float
        Time through the segment. [s]
    """

    name: str
    apex_m: float
    entry_speed_m_s: float
    brake_start_m: float
    brake_before_apex_m: float
    min_speed_m_s: float
    min_speed_at_m: float
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
    """

    grip_scale: float
    lap_time_s: float
    corners: tuple[CornerTarget, ...]
    label: str | None
    profile: Profile


def resolve_condition(
    condition: str | float, conditions: Mapping[str, float] | None = None
) -> tuple[str | None, float]:
    """A condition name or a number as (label, grip scale).

    Parameters
    ----------
    condition : str or float
        'dry', 'damp', 'wet' (or a name of ``conditions``), or a grip scale. [-]
    conditions : mapping, optional
        Names to grip scales, overriding :data:`CONDITIONS`. [-]

    Returns
    -------
    tuple
        (name or None, grip scale checked to 0.2-2.0).

    Examples
    --------
    >>> resolve_condition("wet")
    ('wet', 0.7)
    >>> resolve_condition(0.9)
    (None, 0.9)
    """
    table = dict(CONDITIONS if conditions is None else conditions)
    if isinstance(condition, str):
        key = condition.strip().lower()
        if key in table:
            return key, check_grip_scale(table[key])
        try:
            return None, check_grip_scale(float(key))
        except ValueError:
            names = ", ".join(sorted(table))
            raise LimitlapError(
                f"unknown condition '{condition}' (use a grip scale or one of {names})"
            ) from None
    return None, check_grip_scale(condition)


def target_table(
    line: Line,
    vehicle: Vehicle,
    grip_scale: float,
    corners: Sequence[Corner] | None = None,
    *,
    label: str | None = None,
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

    Returns
    -------
    TargetCondition

    Notes
    -----
    The profile is :func:`limitlap.solve.solve_profile` (quasi-steady-state point mass,
    Lenzo & Rossi 2020). Brake start is where the ideal's speed starts falling into
    the corner's minimum (its last local maximum before it), at the first crossing of
    2.5 m/s² deceleration after it, interpolated between stations, as for the ideal in
    :func:`limitlap.compare.compare_lap`. Apex, brake point and minimum are those of
    the corner's minimum speed (see :class:`CornerTarget`).
    """
    k = check_grip_scale(grip_scale)
    if corners is None:
        corners = find_corners(line)
    prof = solve_profile(line, vehicle, k)
    tr = _profile_trace(line, prof, vehicle.scaled(k))
    bounds = unwrapped_bounds(corners, tr.length, tr.closed)
    exits = _exit_speeds(line, prof, corners)
    out = tuple(
        _corner_target(c, bound, tr, v_exit)
        for c, bound, v_exit in zip(corners, bounds, exits, strict=True)
    )
    return TargetCondition(k, float(prof.lap_time_s), out, label, prof)


def _profile_trace(line: Line, prof: Profile, env: Vehicle) -> Trace:
    """The ideal profile on ``line`` as a :class:`~limitlap.markers.Trace`.

    ``env`` is the envelope at the profile's grip scale, for the drive it leaves after
    the lateral demand (:func:`limitlap.limits.drive_accel_available_m_s2`).
    """
    grad = np.asarray(line.gradient, dtype=np.float64)
    sin_grad = grad / np.sqrt(1.0 + grad * grad)
    return Trace(
        line.distance_m,
        float(line.length_m),
        line.closed,
        prof.time_s,
        prof.lap_time_s,
        prof.speed_m_s,
        station_accel(prof, line.closed),
        prof.accel_lat_m_s2,
        limits.drive_accel_available_m_s2(prof.speed_m_s, prof.accel_lat_m_s2, env, sin_grad),
    )


def _exit_speeds(line: Line, prof: Profile, corners: Sequence[Corner]) -> list[float]:
    """The profile's speed at each corner's segment end, linear between stations. [m/s]."""
    s_ext = np.append(line.distance_m, float(line.length_m))
    v_ext = np.append(prof.speed_m_s, prof.speed_m_s[0] if line.closed else prof.speed_m_s[-1])
    return [float(np.interp(c.end_m, s_ext, v_ext)) for c in corners]


def _corner_target(c: Corner, bound, tr: Trace, exit_speed_m_s: float) -> CornerTarget:
    """One corner's targets on the ideal's trace.

    ``bound`` is the corner's entry of :func:`limitlap.markers.unwrapped_bounds`
    (unwrapped start, apex, end and search limits [m]); ``exit_speed_m_s`` the speed at
    the segment end [m/s].
    """
    start_u, apex_u, end_u, lo, hi = bound
    length, closed = tr.length, tr.closed
    seg_time = tr.time_at_mod(c.end_m) - tr.time_at_mod(c.start_m)
    if closed and c.end_m <= c.start_m:
        seg_time += tr.lap_time
    zone = zone_u(c, start_u, length, closed)
    mk = corner_markers(tr, lo, start_u, end_u, hi, None, False, zone, apex_u, profile_brake=True)
    braked = math.isfinite(mk.brake_start)
    entry_u = mk.brake_start if braked else zone[0]
    entry = float(np.interp(entry_u, tr.u, tr.v))
    v_min, min_u = _minimum_after_entry(tr, entry_u, entry, zone[1])
    apex_at = _apex_of_minimum(c, start_u, entry_u, min_u, length, closed)
    before = apex_at - mk.brake_start if braked else math.nan
    return CornerTarget(
        name=c.name,
        apex_m=wrap_distance(apex_at, length, closed),
        entry_speed_m_s=entry,
        brake_start_m=wrap_distance(mk.brake_start, length, closed),
        brake_before_apex_m=float(before),
        min_speed_m_s=float(v_min),
        min_speed_at_m=wrap_distance(min_u, length, closed),
        exit_speed_m_s=exit_speed_m_s,
        segment_time_s=float(seg_time),
    )


def _minimum_after_entry(tr: Trace, entry_u: float, entry_speed: float, exit_u: float):
    """Lowest speed [m/s] from the entry point to the zone's exit, and where [m] (unwrapped).

    Turn-in is included: a corner still accelerating has its minimum, equal to the entry
    speed, there. An entry point between stations is its own minimum when the stations
    after it are faster.
    """
    v_min, min_u, _ = lowest_speed(tr, entry_u, max(exit_u, entry_u) + 1e-9)
    if not v_min <= entry_speed:  # the entry point lies between stations
        v_min, min_u = entry_speed, entry_u
    return v_min, min_u


def _apex_of_minimum(c: Corner, start_u, entry_u, min_u, length: float, closed: bool) -> float:
    """The apex of the minimum: the corner's apex nearest it not before the entry point.

    The minimum's own place when every apex is before the entry point. [m] (unwrapped)
    """
    apexes_u = [unwrap_after(a, start_u, length, closed) for a in c.apexes_m]
    after = [a for a in apexes_u if a >= entry_u] or [min_u]
    return min(after, key=lambda a: abs(a - min_u))


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
        out.append(target_table(line, vehicle, k, corners, label=label))
    return out


def _r(x, nd):
    return None if x is None or not math.isfinite(x) else round(float(x), nd)


def targets_json(conditions: Sequence[TargetCondition]) -> dict:
    """The ``targets --json`` form of docs/outputs.md, Target sheets (km/h, m, s).

    Distances and speeds are rounded to 0.1, times to 0.001; a corner taken without
    braking has ``brake_start_m`` null.

    Parameters
    ----------
    conditions : sequence of TargetCondition

    Returns
    -------
    dict
        ``{"conditions": [{"grip_scale", "lap_time_s", "corners": [{"name", "apex_m",
        "entry_speed_kmh", "brake_start_m", "min_speed_kmh", "exit_speed_kmh",
        "segment_time_s"}]}]}``.
    """
    k = 1.0 / KMH_TO_M_S
    return {
        "conditions": [
            {
                "grip_scale": float(c.grip_scale),
                "lap_time_s": _r(c.lap_time_s, 3),
                "corners": [
                    {
                        "name": t.name,
                        "apex_m": _r(t.apex_m, 1),
                        "entry_speed_kmh": _r(t.entry_speed_m_s * k, 1),
                        "brake_start_m": _r(t.brake_start_m, 1),
                        "min_speed_kmh": _r(t.min_speed_m_s * k, 1),
                        "exit_speed_kmh": _r(t.exit_speed_m_s * k, 1),
                        "segment_time_s": _r(t.segment_time_s, 3),
                    }
                    for t in c.corners
                ],
            }
            for c in conditions
        ]
    }
