r"""The real lap against the ideal one, corner by corner.

:func:`compare_lap` puts the real lap and the ideal :class:`~limitlap.solve.Profile` on
the same distance axis, on the corners of :mod:`limitlap.corners`: time delta along the
lap, and per corner the time left, the corner record of each lap (brake points, entry,
minimum and exit speeds, full drive: :func:`limitlap.markers.corner_marks`), peak
lateral acceleration, the share of grip used, the time left split into approach,
braking, mid-corner and exit phases, and one plain-language line for the driver
(:mod:`limitlap.advice`). The pedal traces the report draws come from here too.

Segment times are differences of elapsed time interpolated at the segment boundaries,
so the corners' times telescope to the lap time: the corners' time left adds up to the
lap's (docs/outputs.md, summary.json). Distances are metres from the gate, in
``[0, length)``.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from limitlap import limits
from limitlap.advice import (
    TIME_RESOLUTION_S,
    CornerDifferences,
    advice_line,
    distance_resolution_m,
)
from limitlap.corners import Corner, segment_index
from limitlap.driven import elapsed_from_gate
from limitlap.errors import LimitlapError, WarningLine
from limitlap.line import Line
from limitlap.markers import (
    Marks,
    Trace,
    actual_pedal_shares,
    corner_marks,
    ideal_trace,
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

#: A lap quicker than the ideal in at least this share of its corners beats the grip
#: scale "everywhere": the scale is too low (common practice, no published source). [-]
BEATEN_SHARE = 0.75


# ----------------------------------------------------------------------------------
# Comparison records
# ----------------------------------------------------------------------------------


def _none_if_nan(x):
    if x is None:
        return None
    x = float(x)
    return None if not math.isfinite(x) else x


def _kmh(x):
    return _none_if_nan(x / KMH_TO_M_S)


def _metres(points):
    return [float(x) for x in points]


@dataclass(frozen=True)
class CornerComparison:
    """One corner of the real lap against the ideal (SI; NaN where not found).

    The corner's record (docs/methods.md, Corner record) for both laps, and what
    tells them apart.

    Attributes
    ----------
    name, direction, label, note : str
        Corner name; 'left' or 'right'; the track file's label and note (:class:`Corner`).
    start_m, apex_m, end_m, turn_in_m, exit_m : float
        As :class:`Corner` (from the gate). [m]
    apexes_m : tuple of float
        Every apex of the corner. [m]
    apex_names : tuple of str
        The track file's name of each apex. [-]
    actual_s, ideal_s, time_left_s : float
        Segment time of the real lap and of the ideal, and their difference
        (+ = the real lap is slower). [s]
    time_left_approach_s, time_left_braking_s, time_left_mid_s, time_left_exit_s : float
        Time left from the segment start to the first brake point of either lap (the
        approach, where time carried from the corner before shows), from there to where
        the ideal's last minimum is, from there to where the ideal is at full drive,
        and from there to the segment end; they add up to ``time_left_s``. [s]
    brake_points_actual_m, brake_points_ideal_m : tuple of float
        Start of every deceleration into the corner (a lift counts). [m]
    brake_start_actual_m, brake_start_ideal_m : float
        The first of them; NaN without braking. [m]
    entry_speed_actual_m_s, entry_speed_ideal_m_s : float
        Speed at the first brake point; NaN without one. [m/s]
    min_speed_actual_m_s, min_speed_ideal_m_s : float
        The corner's lowest minimum of speed, or the speed at the apex for a corner
        taken without slowing. [m/s]
    min_speed_actual_at_m, min_speed_ideal_at_m : float
        Where it is. [m]
    own_minimum_actual, own_minimum_ideal : bool
        The lap slows in the corner (has a minimum of its own there).
    exit_speed_actual_m_s, exit_speed_ideal_m_s : float
        Speed where the curvature zone ends. [m/s]
    brake_later_m : float
        How much later the ideal's first brake point is (+ = later). [m]
    full_drive_actual_m, full_drive_ideal_m : float
        Where full drive begins after the corner's last minimum. [m]
    full_drive_sooner_m : float
        How much sooner the ideal is at full drive (+ = sooner). [m]
    peak_accel_lat_actual_m_s2, peak_accel_lat_ideal_m_s2 : float
        Largest |lateral acceleration| in the segment. [m/s²]
    grip_used : float
        Share of the available combined grip the real lap used where the ideal is at
        the limit: over the segment's stations where the ideal's combined usage
        (:func:`limitlap.limits.combined_usage`) is at least 0.95, the mean of real
        usage over ideal usage, weighted by the real lap's time there; clipped to 0-1.
        NaN where the ideal is nowhere grip-limited in the segment (a flat-out kink). [-]
    grip_used_raw : float
        The same before clipping (above 1 where the lap went outside the envelope). [-]
    grip_estimate : float or None
        Grip scale found in this corner (from the envelope module), when given. [-]
    rank : int
        1 = most time left.
    advice : str
        One plain-language line for the driver (km/h and m).
    differences : advice.CornerDifferences
        What the advice is read from (to word it in other units). [-]
    """

    name: str
    direction: str
    label: str
    note: str
    start_m: float
    apex_m: float
    apexes_m: tuple[float, ...]
    apex_names: tuple[str, ...]
    end_m: float
    turn_in_m: float
    exit_m: float
    actual_s: float
    ideal_s: float
    time_left_s: float
    time_left_approach_s: float
    time_left_braking_s: float
    time_left_mid_s: float
    time_left_exit_s: float
    brake_points_actual_m: tuple[float, ...]
    brake_points_ideal_m: tuple[float, ...]
    brake_start_actual_m: float
    brake_start_ideal_m: float
    entry_speed_actual_m_s: float
    entry_speed_ideal_m_s: float
    min_speed_actual_m_s: float
    min_speed_actual_at_m: float
    min_speed_ideal_m_s: float
    min_speed_ideal_at_m: float
    own_minimum_actual: bool
    own_minimum_ideal: bool
    exit_speed_actual_m_s: float
    exit_speed_ideal_m_s: float
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
    differences: CornerDifferences | None = None

    def advice_in(self, units=None) -> str:
        """The advice line in the units a person chose (km/h and m: :attr:`advice`)."""
        if units is None or self.differences is None or units.name == "metric":
            return self.advice
        return advice_line(self.differences, units)

    def summary_dict(self) -> dict:
        """The docs/outputs.md, summary.json corner keys first (km/h where the key says so), then extras.

        NaN becomes ``None`` (JSON null); values are not rounded.
        """
        d = {
            "name": self.name,
            "start_m": self.start_m,
            "apex_m": self.apex_m,
            "end_m": self.end_m,
            "actual_s": self.actual_s,
            "ideal_s": self.ideal_s,
            "time_left_s": self.time_left_s,
            "min_speed_actual_kmh": _kmh(self.min_speed_actual_m_s),
            "min_speed_ideal_kmh": _kmh(self.min_speed_ideal_m_s),
            "brake_start_actual_m": _none_if_nan(self.brake_start_actual_m),
            "brake_start_ideal_m": _none_if_nan(self.brake_start_ideal_m),
            "grip_used": _none_if_nan(self.grip_used),
        }
        d.update(self._extras())
        return d

    def _extras(self) -> dict:
        """The keys after the interface's twelve (docs/outputs.md, summary.json)."""
        return {
            "rank": self.rank,
            "label": self.label,
            "direction": self.direction,
            "apexes_m": list(self.apexes_m),
            "apex_names": list(self.apex_names),
            "note": self.note,
            "turn_in_m": self.turn_in_m,
            "exit_m": self.exit_m,
            "time_left_approach_s": self.time_left_approach_s,
            "time_left_braking_s": self.time_left_braking_s,
            "time_left_mid_s": self.time_left_mid_s,
            "time_left_exit_s": self.time_left_exit_s,
            "brake_points_actual_m": _metres(self.brake_points_actual_m),
            "brake_points_ideal_m": _metres(self.brake_points_ideal_m),
            "entry_speed_actual_kmh": _kmh(self.entry_speed_actual_m_s),
            "entry_speed_ideal_kmh": _kmh(self.entry_speed_ideal_m_s),
            "min_speed_actual_at_m": _none_if_nan(self.min_speed_actual_at_m),
            "min_speed_ideal_at_m": _none_if_nan(self.min_speed_ideal_at_m),
            "own_minimum_actual": self.own_minimum_actual,
            "own_minimum_ideal": self.own_minimum_ideal,
            "exit_speed_actual_kmh": _kmh(self.exit_speed_actual_m_s),
            "exit_speed_ideal_kmh": _kmh(self.exit_speed_ideal_m_s),
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
    brake_share_actual, drive_share_actual, brake_share_ideal, drive_share_ideal : numpy.ndarray
        The pedal traces at the stations, 0-1: the real lap's pedals where logged (else
        its acceleration's share of the limits), the ideal's drawn phase by phase
        (:func:`limitlap.markers.ideal_pedal_shares`). [-]
    throttle_logged, brake_logged : bool
        The real lap's drive and brake traces are its pedals.
    warnings : tuple of str
        What the comparison found about the grip scale itself.
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
    brake_share_actual: np.ndarray | None = None
    drive_share_actual: np.ndarray | None = None
    brake_share_ideal: np.ndarray | None = None
    drive_share_ideal: np.ndarray | None = None
    throttle_logged: bool = False
    brake_logged: bool = False
    warnings: tuple[str, ...] = ()

    def ranked(self) -> list[CornerComparison]:
        """Corners from most to least time left."""
        return sorted(self.corners, key=lambda c: c.rank)

    def corner_summaries(self, ranked: bool = False) -> list[dict]:
        """:meth:`CornerComparison.summary_dict` of every corner (driving order or ranked)."""
        return [c.summary_dict() for c in (self.ranked() if ranked else self.corners)]

    def time_left_words(self) -> str:
        """The lap's time left in words when it is negative; empty otherwise.

        >>> import numpy as np
        >>> c = LapComparison(np.zeros(1), 1.0, np.zeros(1), np.zeros(1), np.zeros(1),
        ...                   80.0, 82.5, -2.5, 0.8, None, ())
        >>> c.time_left_words()
        'the lap is 2.50 s quicker than the ideal at grip scale 0.80: it used more grip than that scale allows'
        """
        if not self.time_left_s <= -TIME_RESOLUTION_S:
            return ""
        return (
            f"the lap is {-self.time_left_s:.2f} s quicker than the ideal at grip scale "
            f"{self.grip_scale:.2f}: it used more grip than that scale allows"
        )


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
        From :func:`limitlap.corners.find_corners` on ``driven.line``.
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
    left to the lap's (docs/outputs.md, summary.json). Each lap's corner record is
    :func:`limitlap.markers.corner_marks` on its trace; the ideal's trace is
    :func:`limitlap.markers.ideal_trace`, the one the target tables read. Grip used is
    the real lap's time-weighted mean of combined usage
    (:func:`limitlap.limits.combined_usage`) over the ideal's where the ideal is
    grip-limited (usage ≥ 0.95). Thresholds are common practice (docs/methods.md,
    Corners and comparison).
    """
    line = driven.line
    if ideal.speed_m_s.shape[0] != line.n or not np.allclose(ideal.distance_m, line.distance_m):
        raise LimitlapError("the ideal profile is not on the real lap's stations")
    k = float(ideal.grip_scale if grip_scale is None else grip_scale)
    env = vehicle.scaled(k) if k != 1.0 else vehicle.require_complete()
    sin_grad = np.asarray(line.gradient) / np.sqrt(1.0 + np.asarray(line.gradient) ** 2)
    channels = (*elapsed_from_gate(driven), *_driven_channels(driven, line))
    t_act, lap_act, v_act, _, _ = channels
    actual, logged = _actual_trace(driven, env, sin_grad, channels)
    best = ideal_trace(ideal, line, env)
    grip_estimate, grips = _grip_values(
        channels, vehicle, line, corners, grip_estimate, corner_grip_estimates
    )
    rows = _corner_rows(corners, grips, actual, best)
    cmp_ = LapComparison(
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
        brake_share_actual=actual.lap_part(actual.brake_share),
        drive_share_actual=actual.lap_part(actual.drive_share),
        brake_share_ideal=best.lap_part(best.brake_share),
        drive_share_ideal=best.lap_part(best.drive_share),
        throttle_logged=logged[0],
        brake_logged=logged[1],
    )
    return dataclasses.replace(cmp_, warnings=scale_warnings(cmp_))


def scale_warnings(cmp_: LapComparison) -> tuple[str, ...]:
    """A warning when the lap beats the ideal nearly everywhere: the grip scale is too low.

    The lap must be quicker than the ideal by more than :data:`TIME_RESOLUTION_S` and in
    at least :data:`BEATEN_SHARE` of its corners; the warning suggests the grip the lap
    showed when it is known.
    """
    corners = cmp_.corners
    quicker = sum(c.time_left_s < 0.0 for c in corners)
    if not (cmp_.time_left_s <= -TIME_RESOLUTION_S and quicker >= BEATEN_SHARE * len(corners)):
        return ()
    fact = (
        "this lap used more grip than the scale allows: the scale is too low (the lap is "
        f"{-cmp_.time_left_s:.2f} s quicker than the ideal at grip scale "
        f"{cmp_.grip_scale:.2f}, and quicker in {quicker} of {len(corners)} corners)"
    )
    if cmp_.grip_estimate is not None and cmp_.grip_estimate > cmp_.grip_scale:
        return (WarningLine(fact, hint="grip_scale", value=cmp_.grip_estimate),)
    return (fact,)


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


def _corner_rows(corners, grips, actual: Trace, best: Trace):
    """Every corner's :class:`CornerComparison` fields in driving order, ranked.

    ``rank`` 1 is the corner with most time left; the rest as :func:`_corner_row`.
    """
    bounds = unwrapped_bounds(corners, actual.length, actual.closed)
    m = len(corners)
    rows = [
        _corner_row(c, corners[j - 1].name if m > 1 else "", bound, g, actual, best)
        for j, (c, bound, g) in enumerate(zip(corners, bounds, grips, strict=True))
    ]
    order = sorted(range(len(rows)), key=lambda i: -rows[i]["time_left_s"])
    for r, i in enumerate(order):
        rows[i]["rank"] = r + 1
    return rows


def _optional_channel(driven, name):
    a = getattr(driven, name, None)
    if a is None:
        return None
    a = np.asarray(a, dtype=np.float64)
    return a if np.isfinite(a).any() else None


def _actual_trace(driven, env: Vehicle, sin_grad, channels):
    """The real lap as a :class:`Trace`, and whether its throttle and brake are logged.

    ``channels`` are the elapsed time from the gate per station and the lap time
    (:func:`limitlap.driven.elapsed_from_gate`) [s], then speed [m/s] and longitudinal
    and lateral acceleration [m/s²] per station.
    """
    line = driven.line
    t_act, lap_act, v_act, ax_act, ay_act = channels
    brake = _optional_channel(driven, "brake_pa")
    throttle = _optional_channel(driven, "throttle")
    if brake is not None and not np.nanmax(brake) > 0:
        brake = None
    brake_share, drive_share = actual_pedal_shares(v_act, ax_act, env, throttle, brake)
    trace = Trace(
        line.distance_m,
        float(line.length_m),
        line.closed,
        t_act,
        lap_act,
        v_act,
        ax_act,
        ay_act,
        brake_share,
        drive_share,
        pedal=throttle is not None,
        usage=limits.combined_usage(v_act, ax_act, ay_act, env, sin_grad),
        dwell=np.asarray(line.ds_m, dtype=np.float64) / np.maximum(v_act, 0.1),
    )
    return trace, (throttle is not None, brake is not None)


def _phase_cuts(c: Corner, ma: Marks, mi: Marks, start_u, end_u, length, closed):
    """Where the approach, braking, mid-corner and exit phases meet (unwrapped). [m].

    The approach ends at the first brake point of either lap (turn-in when neither
    brakes); braking ends at the ideal's last minimum (turn-in when it does not slow);
    mid-corner ends where the ideal is at full drive (the zone's exit when it is not).
    """
    z0, z1 = zone_u(c, start_u, length, closed)
    firsts = [x for x in (ma.brake_start, mi.brake_start) if math.isfinite(x)]
    cuts = [
        min(firsts) if firsts else z0,
        mi.last_min_at if mi.own_minimum else z0,
        mi.full_drive if math.isfinite(mi.full_drive) else z1,
    ]
    out, low = [], start_u
    for x in cuts:
        low = min(max(x, low), end_u)
        out.append(low)
    return out


def _segment_times(c: Corner, actual: Trace, best: Trace) -> tuple[float, float]:
    """The real lap's and the ideal's time from the corner's start to its end (across the gate on a closed lap). [s]."""
    a_s = actual.time_at_mod(c.end_m) - actual.time_at_mod(c.start_m)
    i_s = best.time_at_mod(c.end_m) - best.time_at_mod(c.start_m)
    if actual.closed and c.end_m <= c.start_m:
        a_s += actual.lap_time
        i_s += best.lap_time
    return a_s, i_s


def _phase_times(c: Corner, bound, ma: Marks, mi: Marks, actual: Trace, best: Trace) -> list:
    """Time left in the approach, braking, mid-corner and exit (:func:`_phase_cuts`). [s]."""
    start_u, _, end_u, _, _ = bound
    inner = _phase_cuts(c, ma, mi, start_u, end_u, actual.length, actual.closed)
    cuts = [start_u, *inner, end_u]
    return [
        (actual.time_at(b) - actual.time_at(a)) - (best.time_at(b) - best.time_at(a))
        for a, b in itertools.pairwise(cuts)
    ]


def _differences(c, previous, start_u, times, marks, traces) -> CornerDifferences:
    """What the advice line is made from (:class:`limitlap.advice.CornerDifferences`)."""
    (a_s, i_s, phases), (ma, mi), (actual, best) = times, marks, traces
    return CornerDifferences(
        name=c.name,
        time_left_s=a_s - i_s,
        approach_s=phases[0],
        braking_s=phases[1],
        mid_s=phases[2],
        exit_s=phases[3],
        brake_later_m=mi.brake_start - ma.brake_start,
        min_speed_gain_m_s=mi.min_speed - ma.min_speed,
        full_drive_sooner_m=ma.full_drive - mi.full_drive,
        brake_resolution_m=distance_resolution_m(mi.entry_speed),
        drive_resolution_m=distance_resolution_m(best.speed_at(mi.full_drive))
        if math.isfinite(mi.full_drive)
        else distance_resolution_m(math.nan),
        previous=previous,
        arrival_deficit_m_s=best.speed_at(start_u) - actual.speed_at(start_u),
        ideal_without_slowing=not mi.own_minimum,
        real_brake_m=wrap_distance(ma.brake_start, actual.length, actual.closed),
        real_min_speed_m_s=ma.min_speed,
    )


def _corner_row(c: Corner, previous: str, bound, g, actual: Trace, best: Trace):
    """One corner's comparison as the fields of :class:`CornerComparison` (rank aside)."""
    start_u, _, end_u, _, _ = bound
    a_s, i_s = _segment_times(c, actual, best)
    ma, mi = corner_marks(actual, c, bound), corner_marks(best, c, bound)
    phases = _phase_times(c, bound, ma, mi, actual, best)
    raw = _grip_used(actual, best, start_u, end_u)
    diff = _differences(c, previous, start_u, (a_s, i_s, phases), (ma, mi), (actual, best))

    def wrap(u):
        return wrap_distance(u, actual.length, actual.closed)

    return dict(
        name=c.name,
        direction=c.direction,
        label=c.label,
        note=c.note,
        start_m=c.start_m,
        apex_m=c.apex_m,
        apexes_m=c.apexes_m,
        apex_names=c.apex_names,
        end_m=c.end_m,
        turn_in_m=c.turn_in_m,
        exit_m=c.exit_m,
        actual_s=a_s,
        ideal_s=i_s,
        time_left_s=a_s - i_s,
        time_left_approach_s=phases[0],
        time_left_braking_s=phases[1],
        time_left_mid_s=phases[2],
        time_left_exit_s=phases[3],
        brake_points_actual_m=tuple(wrap(u) for u in ma.brake_points),
        brake_points_ideal_m=tuple(wrap(u) for u in mi.brake_points),
        brake_start_actual_m=wrap(ma.brake_start),
        brake_start_ideal_m=wrap(mi.brake_start),
        entry_speed_actual_m_s=ma.entry_speed,
        entry_speed_ideal_m_s=mi.entry_speed,
        min_speed_actual_m_s=ma.min_speed,
        min_speed_actual_at_m=wrap(ma.min_at),
        min_speed_ideal_m_s=mi.min_speed,
        min_speed_ideal_at_m=wrap(mi.min_at),
        own_minimum_actual=ma.own_minimum,
        own_minimum_ideal=mi.own_minimum,
        exit_speed_actual_m_s=ma.exit_speed,
        exit_speed_ideal_m_s=mi.exit_speed,
        brake_later_m=diff.brake_later_m,
        full_drive_actual_m=wrap(ma.full_drive),
        full_drive_ideal_m=wrap(mi.full_drive),
        full_drive_sooner_m=diff.full_drive_sooner_m,
        peak_accel_lat_actual_m_s2=ma.peak_lat,
        peak_accel_lat_ideal_m_s2=mi.peak_lat,
        grip_used=min(max(raw, 0.0), 1.0) if math.isfinite(raw) else math.nan,
        grip_used_raw=raw,
        grip_estimate=g,
        advice=advice_line(diff),
        differences=diff,
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
