"""GNSS positions: local frame, fixes, dropouts, distance travelled, dead reckoning.

Latitude and longitude on the WGS84 ellipsoid go to a local east-north-up frame
(pymap3d); a log's GPS fix rows and its dropouts (gaps while the car moved) are found,
its distance travelled integrated from speed, and a dropout of up to
:data:`BRIDGE_INERTIAL_MAX_S` bridged by dead reckoning from speed and yaw rate (up to
:data:`BRIDGE_MAX_S` along the chord when the log has no inertial channel).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from limitlap.logfile import Log

#: Fixes further apart than this many nominal GPS intervals count as a dropout.
#: Common practice, no published source.
_DROPOUT_INTERVALS = 3.0


#: Shortest gap reported as a dropout whatever the GPS rate. [s] Common practice.
_DROPOUT_MIN_S = 0.5


#: A gap over which the car moved less than this is not a dropout (parked car). [m]
_DROPOUT_MIN_TRAVEL_M = 5.0


#: Longest dropout bridged when the log has no yaw rate and no lateral acceleration (the
#: chord between the fixes, by distance: good for timing, not for the line). [s]
BRIDGE_MAX_S = 2.0

#: Longest dropout bridged by dead reckoning from speed and yaw rate (or a_y / v). A
#: heading error from a gyro bias b grows the cross-track error as v b T² / 2: 2.6 m at
#: 60 m/s, 0.2 deg/s and 5 s, before the closure on the fix after the gap takes it out;
#: the line's rebuild estimates the bias from the GNSS course around the gap. Common
#: practice, no published source. [s]
BRIDGE_INERTIAL_MAX_S = 5.0


#: Speed below which a_y / v is too noisy to use as a yaw rate. [m/s] Common practice.
_YAW_FROM_AY_MIN_SPEED_M_S = 3.0


@dataclass(frozen=True)
class Dropout:
    """A stretch of a log without a GPS fix while the car moved.

    Attributes
    ----------
    start_index, end_index : int
        Rows of the fixes either side of the gap (the gap is strictly between them).
    start_time_s, end_time_s : float
        Times of those fixes. [s]
    bridged : bool
        True when short enough to be bridged (:func:`bridge_limit_s`).
    """

    start_index: int
    end_index: int
    start_time_s: float
    end_time_s: float
    bridged: bool

    @property
    def duration_s(self) -> float:
        """Length of the gap. [s]."""
        return self.end_time_s - self.start_time_s


def to_enu(lat, lon, altitude, fix):
    """WGS84 fixes -> east/north [m] at the first fix (pymap3d, WGS84 ellipsoid)."""
    import pymap3d  # deferred with polars: only logs need it

    first = int(np.argmax(fix))
    rows = np.flatnonzero(fix)  # only the fixes are converted
    height = np.zeros(rows.size) if altitude is None else altitude[rows]  # a copy
    known = np.isfinite(height)
    h0 = float(height[0]) if known[0] else (float(height[known][0]) if known.any() else 0.0)
    height[~known] = h0
    origin = (float(lat[first]), float(lon[first]), h0)
    x = np.full_like(lat, np.nan)
    y = np.full_like(lat, np.nan)
    east, north, _ = pymap3d.geodetic2enu(lat[rows], lon[rows], height, *origin)
    x[rows] = east
    y[rows] = north
    return x, y, origin


def enu_of(lat, lon, origin) -> tuple[np.ndarray, np.ndarray]:
    """WGS84 points [deg] -> east/north [m] in a log's frame at ``origin`` (latitude, longitude, height), on the origin's height (pymap3d, WGS84 ellipsoid)."""
    import pymap3d

    lat = np.asarray(lat, dtype=np.float64)
    east, north, _ = pymap3d.geodetic2enu(
        lat, np.asarray(lon, float), np.full_like(lat, origin[2]), *origin
    )
    return np.asarray(east), np.asarray(north)


def fix_rows(log: Log) -> np.ndarray:
    """Rows with a new GPS fix (a value held from the previous fix is not new)."""
    return log.remembered("fix_rows", _compute_fix_rows)


def _compute_fix_rows(log: Log) -> np.ndarray:
    x, y = log.channels["x"], log.channels["y"]
    rows = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    if rows.size > 1:
        held = np.concatenate(([False], (np.diff(x[rows]) == 0) & (np.diff(y[rows]) == 0)))
        rows = rows[~held]
    return rows


def travelled_m(log: Log) -> np.ndarray:
    """Distance travelled since the first row, trapezoidal integral of ``speed``. [m].

    Blank speed cells are filled by linear interpolation in time.
    """
    return log.remembered("travelled_m", _compute_travelled_m)


def _compute_travelled_m(log: Log) -> np.ndarray:
    t = log.time_s
    v = log.channels["speed"]
    ok = np.isfinite(v)
    if not ok.all():
        v = np.interp(t, t[ok], v[ok])
    # 0.5 (v[1:] + v[:-1]) diff(t), summed: one compiled pass (the same operations in the
    # same order as numpy's, so the same bits; tested) instead of four full-length arrays
    from limitlap import _kernels

    return _kernels.trapezoid_running(
        np.ascontiguousarray(t), np.ascontiguousarray(v, dtype=np.float64)
    )


def bridge_limit_s(log: Log) -> float:
    """Longest GPS dropout the log's channels can bridge: :data:`BRIDGE_INERTIAL_MAX_S` with a yaw rate or lateral acceleration, else :data:`BRIDGE_MAX_S`. [s]."""
    inertial = log.measured("yaw_rate") or log.measured("accel_lat")
    return BRIDGE_INERTIAL_MAX_S if inertial else BRIDGE_MAX_S


def gps_dropouts(log: Log, bridge_s: float | None = None) -> list[Dropout]:
    """Gaps between GPS fixes longer than the logger's own rate explains.

    A gap counts when it is longer than ``3`` nominal fix intervals (the median) and
    at least 0.5 s, and the car moved at least 5 m meanwhile (a parked car with no new
    fix loses nothing). These thresholds are common practice, no published source.

    Parameters
    ----------
    log : Log
        A log as :func:`read_log` returns it.
    bridge_s : float, optional
        Longest gap marked ``bridged``; default :func:`bridge_limit_s`. [s]

    Returns
    -------
    list of Dropout
        In time order.
    """
    bridge_s = bridge_limit_s(log) if bridge_s is None else bridge_s
    return list(
        log.remembered(
            ("gps_dropouts", float(bridge_s)), lambda lg: _compute_dropouts(lg, bridge_s)
        )
    )


def _compute_dropouts(log: Log, bridge_s: float) -> tuple[Dropout, ...]:
    rows = fix_rows(log)
    if rows.size < 2:
        return ()
    t = log.time_s[rows]
    gap = np.diff(t)
    nominal = float(np.median(gap))
    s = travelled_m(log)[rows]
    moved = np.diff(s)
    idx = np.flatnonzero(
        (gap > max(_DROPOUT_INTERVALS * nominal, _DROPOUT_MIN_S)) & (moved >= _DROPOUT_MIN_TRAVEL_M)
    )
    return tuple(
        Dropout(
            int(rows[k]), int(rows[k + 1]), float(t[k]), float(t[k + 1]), bool(gap[k] <= bridge_s)
        )
        for k in idx
    )


def dropout_warnings(log: Log, rows: np.ndarray) -> list[str]:
    """One warning line per GPS dropout of the log, with its spreadsheet row."""
    out = []
    limit = bridge_limit_s(log)
    how = (
        "bridged from speed and yaw rate"
        if log.measured("yaw_rate")
        else "bridged from speed and lateral acceleration"
        if log.measured("accel_lat")
        else "bridged along the chord (no yaw rate or lateral acceleration)"
    )
    for d in gps_dropouts(log):
        what = how if d.bridged else f"longer than {limit:g} s: the lap holding it is not complete"
        out.append(
            f"{log.path}: GPS dropout of {d.duration_s:.1f} s between rows {rows[d.start_index]} and "
            f"{rows[d.end_index]} ({d.start_time_s:.2f}-{d.end_time_s:.2f} s); {what}"
        )
    return out


def _yaw_rate_rad_s(log: Log) -> np.ndarray | None:
    """Yaw rate from ``yaw_rate``, else a_y / v (ISO 8855 signs); None when neither exists."""
    t = log.time_s
    if log.measured("yaw_rate"):
        r = log.channels["yaw_rate"]
        ok = np.isfinite(r)
        return r if ok.all() else np.interp(t, t[ok], r[ok])
    if log.measured("accel_lat"):
        ay = log.channels["accel_lat"]
        v = log.channels["speed"]
        ok = np.isfinite(ay) & np.isfinite(v) & (v > _YAW_FROM_AY_MIN_SPEED_M_S)
        if ok.any():
            # Steady turning: a_y = v * r (Milliken & Milliken 1995, §5.3); no side slip rate.
            return np.interp(t, t[ok], ay[ok] / v[ok])
    return None


def fill_position(log: Log, bridge_s: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Position at every row of the log, for timing (gate crossings), not for curvature.

    Between two fixes the position moves along the chord in proportion to the distance
    travelled (integrated speed), which keeps the timing right when the car brakes or
    accelerates between fixes. Across a dropout of at most ``bridge_s`` the path is dead
    reckoned from speed and yaw rate (or a_y / v), heading taken from the chord before the
    gap, and the end error spread in proportion to distance so both fixes are met (a
    closure correction as in Casanova et al., Proc. IMechE Part D 215(9), 2001). Longer
    dropouts, and rows before the first or after the last fix, are NaN.

    Parameters
    ----------
    log : Log
        A log as :func:`read_log` returns it.
    bridge_s : float, optional
        Longest dropout to bridge; default :func:`bridge_limit_s`. [s]

    Returns
    -------
    x_m, y_m : numpy.ndarray
        East and north at every row (read-only: kept for the next caller). [m]
    """
    bridge_s = bridge_limit_s(log) if bridge_s is None else bridge_s
    return log.remembered(
        ("fill_position", float(bridge_s)), lambda lg: _compute_fill(lg, bridge_s)
    )


def _compute_fill(log: Log, bridge_s: float) -> tuple[np.ndarray, np.ndarray]:
    x, y = log.channels["x"], log.channels["y"]
    t = log.time_s
    rows = fix_rows(log)
    s = travelled_m(log)
    # Strictly increasing parameter: distance, with time to order rows of a parked car.
    p = s + 1e-6 * (t - t[0])
    xf = np.interp(p, p[rows], x[rows], left=np.nan, right=np.nan)
    yf = np.interp(p, p[rows], y[rows], left=np.nan, right=np.nan)
    yaw = None
    for d in gps_dropouts(log, bridge_s):
        inside = slice(d.start_index + 1, d.end_index)
        if not d.bridged:
            xf[inside] = np.nan
            yf[inside] = np.nan
            continue
        if yaw is None:
            yaw = _yaw_rate_rad_s(log)
            if yaw is None:
                break  # no inertial channel: the chord by distance stays
        k = int(np.searchsorted(rows, d.start_index))
        if k == 0:
            continue
        prev = rows[k - 1]
        span = slice(d.start_index, d.end_index + 1)
        # The chord before the gap points along the path half-way between its fixes.
        heading0 = np.arctan2(y[d.start_index] - y[prev], x[d.start_index] - x[prev])
        heading0 += 0.5 * (t[d.start_index] - t[prev]) * yaw[d.start_index]
        tt = t[span]
        r = yaw[span]
        heading = heading0 + np.concatenate(
            ([0.0], np.cumsum(0.5 * (r[1:] + r[:-1]) * np.diff(tt)))
        )
        ds = np.diff(s[span])
        mid = 0.5 * (heading[1:] + heading[:-1])
        ex = x[d.start_index] + np.concatenate(([0.0], np.cumsum(ds * np.cos(mid))))
        ny = y[d.start_index] + np.concatenate(([0.0], np.cumsum(ds * np.sin(mid))))
        total = s[d.end_index] - s[d.start_index]
        share = (s[span] - s[d.start_index]) / total if total > 0 else np.linspace(0, 1, tt.size)
        ex -= share * (ex[-1] - x[d.end_index])
        ny -= share * (ny[-1] - y[d.end_index])
        xf[span] = ex
        yf[span] = ny
    return xf, yf
