r"""The real lap against the ideal one, corner by corner.

:func:`compare_lap` puts the real lap and the ideal :class:`~limitlap.solve.Profile` on
the same distance axis, on the corners of :mod:`limitlap.corners`: time delta along the
lap, and per corner the time left, minimum speeds, brake points, where full drive begins,
peak lateral acceleration, the share of grip used, the time left split into braking,
mid-corner and exit phases, and one plain-language line for the driver.

Segment times are differences of elapsed time interpolated at the segment boundaries,
so the corners' times telescope to the lap time: the corners' time left adds up to the
lap's (docs/outputs.md, summary.json). Distances are metres from the gate, in
``[0, length)``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from limitlap import limits
from limitlap.corners import Corner, segment_index
from limitlap.driven import elapsed_from_gate
from limitlap.errors import LimitlapError
from limitlap.formatting import METRIC, hundredths
from limitlap.line import Line
from limitlap.markers import (
    BRAKE_PRESSURE_SHARE,
    Trace,
    corner_markers,
    station_accel,
    unwrap_after,
    unwrapped_bounds,
    wrap_distance,
    zone_u,
)
from limitlap.solve import Profile
from limitlap.units import KMH_TO_M_S
from limitlap.vehicle import Vehicle

#: Stations where the ideal's combined usage is at least this count as grip-limited; a
#: corner's grip used is measured there only (common practice, no published source). [-]
GRIP_LIMITED_USAGE = 0.95


# ----------------------------------------------------------------------------------
# Comparison records
# ----------------------------------------------------------------------------------


def _none_if_nan(x):
    if x is None:
        return None
    x = float(x)
    return None if not math.isfinite(x) else x


@dataclass(frozen=True)
class CornerComparison:
    """One corner of the real lap against the ideal (SI; NaN where not found).

    Attributes
    ----------
    name, direction : str
        Corner name; 'left' or 'right'.
    start_m, apex_m, end_m, turn_in_m, exit_m : float
        As :class:`Corner` (from the gate). [m]
    apexes_m : tuple of float
        Every apex of the corner. [m]
    actual_s, ideal_s, time_left_s : float
        Segment time of the real lap and of the ideal, and their difference
        (+ = the real lap is slower). [s]
    time_left_braking_s, time_left_mid_s, time_left_exit_s : float
        Time left from the segment start to where the ideal stops braking, from there to
        where the ideal is at full drive, and from there to the segment end; they add up
        to ``time_left_s``. [s]
    min_speed_actual_m_s, min_speed_ideal_m_s : float
        Lowest speed from turn-in to exit (the curvature zone). [m/s]
    min_speed_actual_at_m, min_speed_ideal_at_m : float
        Where it is. [m]
    brake_start_actual_m, brake_start_ideal_m : float
        Where the braking that leads into the corner starts; NaN without braking. [m]
    brake_later_m : float
        How much later the ideal brakes (+ = later). [m]
    full_drive_actual_m, full_drive_ideal_m : float
        Where full drive begins after the minimum speed. [m]
    full_drive_sooner_m : float
        How much sooner the ideal is at full drive (+ = sooner). [m]
    peak_accel_lat_actual_m_s2, peak_accel_lat_ideal_m_s2 : float
        Largest |lateral acceleration| in the segment. [m/s²]
    grip_used : float
        Share of the available combined grip the real lap used where the ideal is at
        the limit: over the segment's stations where the ideal's combined usage
        (:func:`limitlap.limits.combined_usage`) is at least 0.95, the mean of real
        usage over ideal usage, weighted by the real lap's time there; clipped to 0-1.
        About 1 in a corner driven at the limit, lower where grip was left unused
        (early braking, a lift, late throttle). NaN where the ideal is nowhere
        grip-limited in the segment (a flat-out kink). [-]
    grip_used_raw : float
        The same before clipping (above 1 where the lap went outside the envelope). [-]
    grip_estimate : float or None
        Grip scale found in this corner (from the envelope module), when given. [-]
    rank : int
        1 = most time left.
    advice : str
        One plain-language line for the driver.
    """

    name: str
    direction: str
    start_m: float
    apex_m: float
    apexes_m: tuple[float, ...]
    end_m: float
    turn_in_m: float
    exit_m: float
    actual_s: float
    ideal_s: float
    time_left_s: float
    time_left_braking_s: float
    time_left_mid_s: float
    time_left_exit_s: float
    min_speed_actual_m_s: float
    min_speed_actual_at_m: float
    min_speed_ideal_m_s: float
    min_speed_ideal_at_m: float
    brake_start_actual_m: float
    brake_start_ideal_m: float
    brake_later_m: float
    full_drive_actual_m: float
    full_drive_ideal_m: float
    full_drive_sooner_m: float
    peak_accel_lat_actual_m_s2: float
    peak_accel_lat_ideal_m_s2: float
    grip_used: float
    grip_used_raw: float
    grip_estimate: float | None
    rank: int
    advice: str

    def summary_dict(self) -> dict:
        """The docs/outputs.md, summary.json corner keys first (km/h where the key says so), then extras.

        NaN becomes ``None`` (JSON null); values are not rounded.
        """
        k = 1.0 / KMH_TO_M_S
        d = {
            "name": self.name,
            "start_m": self.start_m,
            "apex_m": self.apex_m,
            "end_m": self.end_m,
            "actual_s": self.actual_s,
            "ideal_s": self.ideal_s,
            "time_left_s": self.time_left_s,
            "min_speed_actual_kmh": _none_if_nan(self.min_speed_actual_m_s * k),
            "min_speed_ideal_kmh": _none_if_nan(self.min_speed_ideal_m_s * k),
            "brake_start_actual_m": _none_if_nan(self.brake_start_actual_m),
            "brake_start_ideal_m": _none_if_nan(self.brake_start_ideal_m),
            "grip_used": _none_if_nan(self.grip_used),
        }
        extras = {
            "rank": self.rank,
            "direction": self.direction,
            "apexes_m": list(self.apexes_m),
            "turn_in_m": self.turn_in_m,
            "exit_m": self.exit_m,
            "time_left_braking_s": self.time_left_braking_s,
            "time_left_mid_s": self.time_left_mid_s,
            "time_left_exit_s": self.time_left_exit_s,
            "min_speed_actual_at_m": _none_if_nan(self.min_speed_actual_at_m),
            "min_speed_ideal_at_m": _none_if_nan(self.min_speed_ideal_at_m),
            "brake_later_m": _none_if_nan(self.brake_later_m),
            "full_drive_actual_m": _none_if_nan(self.full_drive_actual_m),
            "full_drive_ideal_m": _none_if_nan(self.full_drive_ideal_m),
            "full_drive_sooner_m": _none_if_nan(self.full_drive_sooner_m),
            "peak_accel_lat_actual_m_s2": _none_if_nan(self.peak_accel_lat_actual_m_s2),
            "peak_accel_lat_ideal_m_s2": _none_if_nan(self.peak_accel_lat_ideal_m_s2),
            "grip_used_raw": _none_if_nan(self.grip_used_raw),
            "grip_estimate": _none_if_nan(self.grip_estimate),
            "advice": self.advice,
        }
        d.update(extras)
        return d


@dataclass(frozen=True, eq=False)
class LapComparison:
    """The real lap against the ideal on the same distance axis (SI).

    Attributes
    ----------
    distance_m : numpy.ndarray
        Stations of the real lap's line, from the gate. [m]
    length_m : float
        Lap length. [m]
    speed_actual_m_s, speed_ideal_m_s : numpy.ndarray
        Speeds at the stations. [m/s]
    time_delta_s : numpy.ndarray
        Elapsed time of the real lap minus the ideal's (+ = the real lap is behind). [s]
    lap_time_s, ideal_lap_time_s, time_left_s : float
        Real lap time, ideal lap time, and their difference. [s]
    grip_scale : float
        Grip scale of the ideal. [-]
    grip_estimate : float or None
        Grip scale the lap actually used (from the envelope module), when given. [-]
    corners : tuple of CornerComparison
        In driving order; :meth:`ranked` sorts them by time left.
    """

    distance_m: np.ndarray
    length_m: float
    speed_actual_m_s: np.ndarray
    speed_ideal_m_s: np.ndarray
    time_delta_s: np.ndarray
    lap_time_s: float
    ideal_lap_time_s: float
    time_left_s: float
    grip_scale: float
    grip_estimate: float | None
    corners: tuple[CornerComparison, ...]

    def ranked(self) -> list[CornerComparison]:
        """Corners from most to least time left."""
        return sorted(self.corners, key=lambda c: c.rank)

    def corner_summaries(self, ranked: bool = False) -> list[dict]:
        """:meth:`CornerComparison.summary_dict` of every corner (driving order or ranked)."""
        return [c.summary_dict() for c in (self.ranked() if ranked else self.corners)]


#: A corner driven this much quicker than the ideal (and no marker apart) is called out:
#: a corner's time is good to about a hundredth of a second (100 Hz rows, interpolated
#: along distance), so less than two hundredths is the ideal's time within the
#: measurement. Common practice, no published source. [s]
QUICKER_THAN_IDEAL_S = 0.02


def advice_line(
    name, time_left_s, brake_later_m, min_speed_gain_m_s, full_drive_sooner_m, units=METRIC
):
    """One line a driver understands, e.g. "T6: 0.21 s — the ideal brakes 12 m later, ...".

    Parameters
    ----------
    name : str
        Corner name.
    time_left_s : float
        Time left in the corner. [s]
    brake_later_m : float
        How much later the ideal brakes; NaN when unknown. [m]
    min_speed_gain_m_s : float
        Ideal minus real minimum speed. [m/s]
    full_drive_sooner_m : float
        How much sooner the ideal is at full drive; NaN when unknown. [m]
    units : formatting.Units
        How speeds and distances are written (km/h and m by default).

    Returns
    -------
    str
        Speeds and distances in ``units``. Differences under 2 m or 1 km/h are left out
        (common practice: engineers discuss brake points to a few metres and apex speeds
        to 1-2 km/h, docs/methods.md, Rules of thumb).

    Examples
    --------
    >>> advice_line("T6", 0.21, 12.0, 6 / 3.6, 15.0)
    'T6: 0.21 s — the ideal brakes 12 m later, carries 6 km/h more at the minimum, and is at full drive 15 m sooner'
    """
    parts = []
    if math.isfinite(brake_later_m) and abs(brake_later_m) >= 2.0:
        parts.append(
            f"the ideal brakes {units.distance_text(abs(brake_later_m))} "
            f"{'later' if brake_later_m > 0 else 'earlier'}"
        )
    dv_kmh = min_speed_gain_m_s / KMH_TO_M_S
    if math.isfinite(dv_kmh) and abs(dv_kmh) >= 1.0:
        parts.append(
            f"carries {units.speed_text(abs(min_speed_gain_m_s))} "
            f"{'more' if dv_kmh > 0 else 'less'} at the minimum"
        )
    if math.isfinite(full_drive_sooner_m) and abs(full_drive_sooner_m) >= 2.0:
        parts.append(
            f"is at full drive {units.distance_text(abs(full_drive_sooner_m))} "
            f"{'sooner' if full_drive_sooner_m > 0 else 'later'}"
        )
    head = f"{name}: {hundredths(time_left_s):.2f} s"
    if not parts:
        if time_left_s <= -QUICKER_THAN_IDEAL_S:
            return f"{head} — quicker than the ideal here; the envelope may be set too low"
        return f"{head} — same brake point, minimum speed and drive point as the ideal"
    if parts[0].startswith("carries") or parts[0].startswith("is at"):
        parts[0] = "the ideal " + parts[0]
    if len(parts) == 1:
        text = parts[0]
    else:
        text = ", ".join(parts[:-1]) + ", and " + parts[-1]
    return f"{head} — {text}"


def _driven_channels(driven, line: Line):
    """Speed, a_x, a_y of the real lap; a missing sample of a_x / a_y is filled from speed and curvature (a_x = v dv/ds, a_y = kappa v^2)."""
    v = np.asarray(driven.speed_m_s, dtype=np.float64)
    if not np.isfinite(v).any():
        raise LimitlapError("the real lap has no speed")
    s = np.asarray(line.distance_m, dtype=np.float64)
    good = np.isfinite(v)
    if not good.all():
        v = np.interp(s, s[good], v[good], period=line.length_m if line.closed else None)
    b = v * v
    if line.closed:
        db = (np.roll(b, -1) - np.roll(b, 1)) / (line.ds_m + np.roll(line.ds_m, 1))
    else:
        db = np.gradient(b, s)
    ax_from_v = 0.5 * db
    ay_from_k = line.curvature_1_m * b

    def pick(name, fallback):
        a = getattr(driven, name, None)
        if a is None:
            return fallback
        a = np.asarray(a, dtype=np.float64)
        return np.where(np.isfinite(a), a, fallback)

    return v, pick("accel_lon_m_s2", ax_from_v), pick("accel_lat_m_s2", ay_from_k)


def _optional_channel(driven, name):
    a = getattr(driven, name, None)
    if a is None:
        return None
    a = np.asarray(a, dtype=np.float64)
    return a if np.isfinite(a).any() else None


def _per_corner_values(values, corners, what):
    if values is None:
        return [None] * len(corners)
    if isinstance(values, Mapping):
        return [None if values.get(c.name) is None else float(values[c.name]) for c in corners]
    vals = list(values)
    if len(vals) != len(corners):
        raise LimitlapError(f"{len(vals)} {what} given for {len(corners)} corners")
    return [None if x is None else float(x) for x in vals]


def compare_lap(
    driven,
    ideal: Profile,
    vehicle: Vehicle,
    corners: Sequence[Corner],
    *,
    grip_scale: float | None = None,
    grip_estimate: float | None = None,
    corner_grip_estimates: Mapping[str, float] | Sequence[float] | None = None,
) -> LapComparison:
    r"""The real lap against the ideal profile, corner by corner.

    Parameters
    ----------
    driven : DrivenLap
        The real lap: ``line`` (its stations are the common axis), ``time_s``,
        ``speed_m_s``, ``accel_lon_m_s2``, ``accel_lat_m_s2``, optional ``throttle``
        (0-1) and ``brake_pa``, all per station, NaN where missing. An optional
        ``lap_time_s`` attribute gives the lap time; otherwise the last step is closed
        at the mean of the last and first speeds. [s], [m/s], [m/s²], [-], [Pa]
    ideal : Profile
        :func:`limitlap.solve.solve_profile` on ``driven.line``.
    vehicle : Vehicle
        Complete envelope at grip scale 1.
    corners : sequence of Corner
        From :func:`find_corners` on ``driven.line``.
    grip_scale : float, optional
        Grip scale of the envelope the lap is measured against; default the ideal's. [-]
    grip_estimate : float, optional
        Grip scale the lap used (e.g. from the raw samples); default
        :func:`limitlap.grip.grip_estimate` on the lap's stations against
        ``vehicle`` at grip 1 (None where no sample is grip-limited). [-]
    corner_grip_estimates : mapping name -> float, or sequence in corner order, optional
        Grip scale found per corner; default
        :func:`limitlap.grip.grip_estimate_by_segment` on the stations. [-]

    Returns
    -------
    LapComparison

    Notes
    -----
    Segment times are elapsed-time differences at the segment bounds (linear in
    distance between stations), so they add up to the lap times and the corners' time
    left to the lap's (docs/outputs.md, summary.json). Minimum speed, brake point and
    full drive are :func:`limitlap.markers.corner_markers` on each lap: braking is brake
    pressure over 5 % of the lap's 99th-percentile pressure, else a_x below -2.5 m/s²;
    full drive is throttle ≥ 98 %, else (and always for the ideal) a_x at 90 % of what
    the envelope leaves after the lateral demand; the ideal's brake point is taken from
    its speed profile, so a trail-braking dip does not split the zone. Grip used is the
    real lap's time-weighted mean of combined usage (:func:`limitlap.limits.combined_usage`)
    over the ideal's where the ideal is grip-limited (usage ≥ 0.95). The time-left
    phases are cut where the ideal stops braking and where it reaches full drive.
    Thresholds are common practice (docs/methods.md, Corners and comparison).
    """
    line = driven.line
    if ideal.speed_m_s.shape[0] != line.n or not np.allclose(ideal.distance_m, line.distance_m):
        raise LimitlapError("the ideal profile is not on the real lap's stations")
    k = float(ideal.grip_scale if grip_scale is None else grip_scale)
    env = vehicle.scaled(k) if k != 1.0 else vehicle.require_complete()
    sin_grad = np.asarray(line.gradient) / np.sqrt(1.0 + np.asarray(line.gradient) ** 2)
    channels = (*elapsed_from_gate(driven), *_driven_channels(driven, line))
    t_act, lap_act, v_act, _, _ = channels
    actual, brake_thr, has_throttle = _actual_trace(driven, env, sin_grad, channels)
    best = _ideal_trace(ideal, line, env, sin_grad)
    grip_estimate, grips = _grip_values(
        channels, vehicle, line, corners, grip_estimate, corner_grip_estimates
    )
    rows = _corner_rows(corners, grips, actual, best, brake_thr, has_throttle)
    return LapComparison(
        distance_m=np.asarray(line.distance_m, dtype=np.float64).copy(),
        length_m=actual.length,
        speed_actual_m_s=v_act,
        speed_ideal_m_s=np.asarray(ideal.speed_m_s, dtype=np.float64).copy(),
        time_delta_s=t_act - np.asarray(ideal.time_s, dtype=np.float64),
        lap_time_s=lap_act,
        ideal_lap_time_s=float(ideal.lap_time_s),
        time_left_s=lap_act - float(ideal.lap_time_s),
        grip_scale=k,
        grip_estimate=None if grip_estimate is None else float(grip_estimate),
        corners=tuple(CornerComparison(**r) for r in rows),
    )


def _grip_values(channels, vehicle: Vehicle, line: Line, corners, grip_estimate, per_corner):
    """The lap's grip estimate as given, and one value per corner in corner order. [-].

    Where either is not given, both are estimated from the real lap's stations
    (:func:`_grip_estimates`; ``channels`` as for :func:`_actual_trace`) and the missing
    one taken from there.
    """
    if grip_estimate is None or per_corner is None:
        est_all, est_seg = _grip_estimates(*channels, vehicle, line, corners)
        grip_estimate = est_all if grip_estimate is None else grip_estimate
        if per_corner is None:
            per_corner = est_seg
    return grip_estimate, _per_corner_values(per_corner, corners, "corner grip estimates")


def _corner_rows(corners, grips, actual: Trace, best: Trace, brake_thr, has_throttle):
    """Every corner's :class:`CornerComparison` fields in driving order, ranked.

    ``rank`` 1 is the corner with most time left; the rest as :func:`_corner_row`.
    """
    bounds = unwrapped_bounds(corners, actual.length, actual.closed)
    rows = [
        _corner_row(c, bound, g, actual, best, brake_thr, has_throttle)
        for c, bound, g in zip(corners, bounds, grips, strict=True)
    ]
    order = sorted(range(len(rows)), key=lambda i: -rows[i]["time_left_s"])
    for r, i in enumerate(order):
        rows[i]["rank"] = r + 1
    return rows


def _brake_threshold(brake):
    """Brake pressure that counts as braking: a share of the lap's 99th percentile. [Pa]."""
    if brake is None:
        return None
    p99 = float(np.nanquantile(brake, 0.99))
    if not p99 > 0:  # braking on under 1 % of the lap: take the highest pressure
        p99 = float(np.nanmax(brake))
    return BRAKE_PRESSURE_SHARE * p99 if p99 > 0 else None


def _actual_trace(driven, env: Vehicle, sin_grad, channels):
    """The real lap as a :class:`Trace`, its brake threshold [Pa] and whether it has throttle.

    ``channels`` are the elapsed time from the gate per station and the lap time
    (:func:`limitlap.driven.elapsed_from_gate`) [s], then speed [m/s] and longitudinal
    and lateral acceleration [m/s²] per station.
    """
    line = driven.line
    t_act, lap_act, v_act, ax_act, ay_act = channels
    brake = _optional_channel(driven, "brake_pa")
    throttle = _optional_channel(driven, "throttle")
    brake_thr = _brake_threshold(brake)
    trace = Trace(
        line.distance_m,
        float(line.length_m),
        line.closed,
        t_act,
        lap_act,
        v_act,
        ax_act,
        ay_act,
        limits.drive_accel_available_m_s2(v_act, ay_act, env, sin_grad),
        brake=brake if brake_thr is not None else None,
        throttle=throttle,
        usage=limits.combined_usage(v_act, ax_act, ay_act, env, sin_grad),
        dwell=np.asarray(line.ds_m, dtype=np.float64) / np.maximum(v_act, 0.1),
    )
    return trace, brake_thr, throttle is not None


def _ideal_trace(ideal: Profile, line: Line, env: Vehicle, sin_grad) -> Trace:
    """The ideal profile as a :class:`Trace` on the real lap's stations."""
    v_id = ideal.speed_m_s
    ax_id = station_accel(ideal, line.closed)
    return Trace(
        line.distance_m,
        float(line.length_m),
        line.closed,
        ideal.time_s,
        ideal.lap_time_s,
        v_id,
        ax_id,
        ideal.accel_lat_m_s2,
        limits.drive_accel_available_m_s2(v_id, ideal.accel_lat_m_s2, env, sin_grad),
        usage=limits.combined_usage(v_id, ax_id, ideal.accel_lat_m_s2, env, sin_grad),
    )


def _phase_cuts(c: Corner, mi, start_u: float, end_u: float, length: float, closed: bool):
    """Where the ideal stops braking and where it reaches full drive (unwrapped). [m]."""
    cut_a = mi.brake_end
    if not math.isfinite(cut_a):
        cut_a = unwrap_after(c.turn_in_m, start_u, length, closed)
    cut_b = mi.full_drive
    if not math.isfinite(cut_b):
        cut_b = unwrap_after(c.exit_m, start_u, length, closed)
    cut_a = min(max(cut_a, start_u), end_u)
    return cut_a, min(max(cut_b, cut_a), end_u)


def _corner_row(c: Corner, bound, g, actual: Trace, best: Trace, brake_thr, has_throttle):
    """One corner's comparison as the fields of :class:`CornerComparison` (rank aside)."""
    start_u, apex_u, end_u, lo, hi = bound
    length, closed = actual.length, actual.closed
    a_s = actual.time_at_mod(c.end_m) - actual.time_at_mod(c.start_m)
    i_s = best.time_at_mod(c.end_m) - best.time_at_mod(c.start_m)
    if closed and c.end_m <= c.start_m:
        a_s += actual.lap_time
        i_s += best.lap_time
    zone = zone_u(c, start_u, length, closed)
    ma = corner_markers(actual, lo, start_u, end_u, hi, brake_thr, has_throttle, zone, apex_u)
    mi = corner_markers(best, lo, start_u, end_u, hi, None, False, zone, apex_u, profile_brake=True)
    cut_a, cut_b = _phase_cuts(c, mi, start_u, end_u, length, closed)

    def left(u0, u1):
        return (actual.time_at(u1) - actual.time_at(u0)) - (best.time_at(u1) - best.time_at(u0))

    raw = _grip_used(actual, best, start_u, end_u)
    later = mi.brake_start - ma.brake_start
    sooner = ma.full_drive - mi.full_drive
    return dict(
        name=c.name,
        direction=c.direction,
        start_m=c.start_m,
        apex_m=c.apex_m,
        apexes_m=c.apexes_m,
        end_m=c.end_m,
        turn_in_m=c.turn_in_m,
        exit_m=c.exit_m,
        actual_s=a_s,
        ideal_s=i_s,
        time_left_s=a_s - i_s,
        time_left_braking_s=left(start_u, cut_a),
        time_left_mid_s=left(cut_a, cut_b),
        time_left_exit_s=left(cut_b, end_u),
        min_speed_actual_m_s=ma.min_speed,
        min_speed_actual_at_m=wrap_distance(ma.min_at, length, closed),
        min_speed_ideal_m_s=mi.min_speed,
        min_speed_ideal_at_m=wrap_distance(mi.min_at, length, closed),
        brake_start_actual_m=wrap_distance(ma.brake_start, length, closed),
        brake_start_ideal_m=wrap_distance(mi.brake_start, length, closed),
        brake_later_m=later,
        full_drive_actual_m=wrap_distance(ma.full_drive, length, closed),
        full_drive_ideal_m=wrap_distance(mi.full_drive, length, closed),
        full_drive_sooner_m=sooner,
        peak_accel_lat_actual_m_s2=ma.peak_lat,
        peak_accel_lat_ideal_m_s2=mi.peak_lat,
        grip_used=min(max(raw, 0.0), 1.0) if math.isfinite(raw) else math.nan,
        grip_used_raw=raw,
        grip_estimate=g,
        advice=advice_line(c.name, a_s - i_s, later, mi.min_speed - ma.min_speed, sooner),
    )


def _grip_used(actual: Trace, ideal: Trace, start_u: float, end_u: float) -> float:
    r"""Share of the available grip the real lap used where the ideal is at the limit.

    Over the segment's stations where the ideal's combined usage is at least
    ``GRIP_LIMITED_USAGE`` (grip-limited, not power-limited or cruising), the mean of
    real usage over ideal usage weighted by the real lap's time at each station
    (:math:`\Delta s / v`). NaN where the ideal is nowhere grip-limited (a flat-out
    kink). Not clipped (noise or an envelope set too low can take it above 1). [-]
    """
    i0, i1 = actual.window(start_u, end_u)
    ua, ui, w = actual.usage[i0:i1], ideal.usage[i0:i1], actual.dwell[i0:i1]
    sel = np.isfinite(ua) & np.isfinite(ui) & np.isfinite(w) & (ui >= GRIP_LIMITED_USAGE)
    if not sel.any():
        return math.nan
    return float(np.sum(w[sel] * ua[sel] / ui[sel]) / np.sum(w[sel]))


#: Uniform rate the real lap's stations are resampled to in time for the grip
#: estimates, so they are filtered as a raw log is (limitlap.samples.select_samples). [Hz]
GRIP_RESAMPLE_HZ = 50.0


def _grip_estimates(t, lap_time, v, ax, ay, vehicle: Vehicle, line: Line, corners):
    """Grip scale the lap used, overall and per corner (limitlap.grip), at grip 1.

    The stations' channels carry the logger's noise unfiltered; resampled to a uniform
    time grid they get the despiking and low-pass of a raw log, the same filtering as
    the overall estimate of :func:`limitlap.pipeline.analyse`, so that noise does not
    raise the 99 % quantile of a corner's few hundred samples.
    """
    from limitlap import grip

    s = np.asarray(line.distance_m, dtype=np.float64)
    if line.closed:
        s = np.append(s, line.length_m)
        t = np.append(t, lap_time)
        v, ax, ay = (np.append(a, a[0]) for a in (v, ax, ay))
    tg = np.arange(0.0, float(t[-1]), 1.0 / GRIP_RESAMPLE_HZ)
    vg, axg, ayg = (np.interp(tg, t, a) for a in (v, ax, ay))
    dg = np.interp(tg, t, s)
    if line.closed:
        dg = np.mod(dg, line.length_m)
    try:
        overall = grip.grip_estimate(vg, axg, ayg, vehicle, sample_rate_hz=GRIP_RESAMPLE_HZ)
    except LimitlapError:
        overall = None
    seg = segment_index(dg, line.length_m, corners, line.closed)
    per = grip.grip_estimate_by_segment(vg, axg, ayg, vehicle, seg, sample_rate_hz=GRIP_RESAMPLE_HZ)
    per = np.concatenate([per, np.full(max(0, len(corners) - per.shape[0]), np.nan)])
    return overall, [None if not math.isfinite(x) else float(x) for x in per[: len(corners)]]
