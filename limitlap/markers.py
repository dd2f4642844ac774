r"""Per-corner markers on one lap's trace: minimum speed, brake point, full drive.

A :class:`Trace` holds one lap's channels (real or ideal) on an unwrapped distance axis
(three copies of a closed lap, so a corner's zone never wraps round the gate);
:func:`corner_markers` finds on it, for one corner's segment, the minimum speed and
where, the start and end of the braking that leads into it, where full drive begins,
and the peak lateral acceleration. The comparison (:mod:`limitlap.compare`) and the
target sheets (:mod:`limitlap.targets`) both take their markers from here.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from limitlap.corners import Corner, plateau_middle
from limitlap.power_line import FULL_THROTTLE
from limitlap.solve import Profile

# --- Defaults of the per-corner markers (common practice, no published source) ---
#: Deceleration beyond which a car without a brake-pressure channel counts as braking
#: (about 0.25 g: above lift-off drag of road and GT cars). [m/s²]
BRAKE_DECEL_M_S2 = 2.5


#: Brake pressure above this share of the lap's 99th-percentile pressure counts as
#: braking. [-]
BRAKE_PRESSURE_SHARE = 0.05


#: Braking interrupted for less than this still counts as one braking zone. [m]
BRAKE_GAP_M = 5.0


#: A corner's minimum speed must also be the lowest this far either side of its
#: curvature zone; otherwise the speed there belongs to a neighbour's braking. [m]
EDGE_M = 25.0


#: A release of the brakes in which the speed rises by at most this (coasting, or
#: holding speed on the lateral limit between two applications) is still one braking
#: zone, however long: the speed has not stopped falling into the corner. [m/s]
COAST_RISE_M_S = 0.5


#: A braking zone must take at least this off the speed to count as a brake point. [m/s]
MIN_BRAKE_DROP_M_S = 1.0


#: Without a throttle channel, full drive is a_x at or above this share of the driving
#: limit left after the lateral demand. [-]
FULL_DRIVE_SHARE = 0.9


#: ... counted only where the envelope leaves at least this forward acceleration. [m/s²]
FULL_DRIVE_MIN_M_S2 = 0.5


class Trace:
    """One lap's channels on an unwrapped axis (three copies of a closed lap)."""

    def __init__(
        self,
        distance_m,
        length_m,
        closed,
        elapsed_s,
        lap_time_s,
        speed,
        ax,
        ay,
        drive_avail,
        brake=None,
        throttle=None,
        usage=None,
        dwell=None,
    ):
        self.length = float(length_m)
        self.closed = bool(closed)
        self.lap_time = float(lap_time_s)
        s = np.asarray(distance_m, dtype=np.float64)
        t = np.asarray(elapsed_s, dtype=np.float64)
        self.s_lap = s
        self.t_lap = t
        reps = 3 if closed else 1
        shift = np.arange(reps) - (1 if closed else 0)
        self.u = (s[None, :] + shift[:, None] * self.length).ravel()
        t3 = (t[None, :] + shift[:, None] * self.lap_time).ravel()
        if closed:
            self.t_u = np.append(self.u, 2 * self.length), np.append(t3, 2 * self.lap_time)
        else:
            self.t_u = self.u, t3

        def tile(a):
            return None if a is None else np.tile(np.asarray(a, dtype=np.float64), reps)

        self.v = tile(speed)
        self.ax = tile(ax)
        self.ay = tile(ay)
        self.drive_avail = tile(drive_avail)
        self.brake = tile(brake)
        self.throttle = tile(throttle)
        self.usage = tile(usage)
        self.dwell = tile(dwell)

    def time_at_mod(self, d):
        """Elapsed time at a distance in [0, length]. [s]."""
        return float(
            np.interp(d, np.append(self.s_lap, self.length), np.append(self.t_lap, self.lap_time))
        )

    def time_at(self, u):
        """Elapsed time at an unwrapped distance. [s]."""
        return float(np.interp(u, *self.t_u))

    def window(self, lo, hi):
        """Index range [i0, i1) of stations with lo <= u < hi."""
        return int(np.searchsorted(self.u, lo, "left")), int(np.searchsorted(self.u, hi, "left"))


def station_accel(profile: Profile, closed: bool) -> np.ndarray:
    """A profile's longitudinal acceleration at its stations. [m/s²].

    :attr:`Profile.accel_lon_m_s2` belongs to the step leaving each station (its value
    holds at the step's middle); the mean of the steps either side puts it on the
    station, as a logged sample is, so thresholds crossed between stations are not
    biased by half a step.
    """
    a = np.asarray(profile.accel_lon_m_s2, dtype=np.float64)
    before = np.roll(a, 1) if closed else np.concatenate([a[:1], a[:-1]])
    return 0.5 * (a + before)


def _crossing(u, f, i):
    """Distance where f crosses 0 between stations i-1 and i (f[i-1] < 0 <= f[i])."""
    if i <= 0 or not (np.isfinite(f[i - 1]) and np.isfinite(f[i])) or f[i] == f[i - 1]:
        return float(u[i])
    w = -f[i - 1] / (f[i] - f[i - 1])
    return float(u[i - 1] + min(max(w, 0.0), 1.0) * (u[i] - u[i - 1]))


def lowest_speed(tr: Trace, lo, hi):
    """Lowest speed in [lo, hi) and where (middle of a flat minimum). [m/s], [m] (unwrapped)."""
    i0, i1 = tr.window(lo, hi)
    v = tr.v[i0:i1]
    if v.size == 0 or not np.isfinite(v).any():
        return math.nan, math.nan, None
    j = int(np.nanargmin(v))
    j = plateau_middle(np.where(np.isfinite(v), v, np.inf), j, 1e-9)
    return float(v[j]), float(tr.u[i0 + j]), i0 + j


def _braking_signal(tr: Trace, brake_threshold_pa):
    """Positive where braking: brake pressure over its threshold, else decel over its."""
    if tr.brake is not None and brake_threshold_pa is not None:
        return tr.brake - brake_threshold_pa
    return -tr.ax - BRAKE_DECEL_M_S2


def _brake_zone(tr: Trace, f, lo, i_min, gap_m=BRAKE_GAP_M):
    """Start and end of the braking zone that leads to station i_min.

    Walks back from ``i_min`` to the last braking station after ``lo``, then back over
    the zone (gaps under ``gap_m`` bridged, and gaps of any length in which the speed
    rises by at most ``COAST_RISE_M_S``, so the braking starts where the speed starts
    falling into the corner, as for the ideal in :func:`_profile_brake_start`).
    Returns unwrapped (start, end) or NaNs, also when the zone
    takes off less than ``MIN_BRAKE_DROP_M_S``.
    """
    i_lo = int(np.searchsorted(tr.u, lo, "left"))
    if i_min is None or i_min <= i_lo:
        return math.nan, math.nan
    on = f[i_lo : i_min + 1] > 0.0  # False where blank (NaN)
    if not on.any():
        return math.nan, math.nan
    last = i_lo + int(np.flatnonzero(on)[-1])
    first = last
    u = tr.u
    while first > i_lo:
        if f[first - 1] > 0.0:
            first -= 1
            continue
        prev_on = np.flatnonzero(f[i_lo:first] > 0.0)
        if prev_on.size:
            j = i_lo + int(prev_on[-1])
            gap = u[first] - u[j]
            # A short release, or a longer one without getting back on the power (the
            # speed does not rise), is still the same braking into the corner.
            rise = np.nanmax(tr.v[j : first + 1]) - tr.v[j]
            if gap <= gap_m or rise <= COAST_RISE_M_S:
                first = j
                continue
        break
    # Braking that takes off less than this is a brush of the brakes, not a brake point.
    if np.nanmax(tr.v[first : i_min + 1]) - tr.v[i_min] < MIN_BRAKE_DROP_M_S:
        return math.nan, math.nan
    start = _crossing(u, f, first) if first > i_lo else float(u[first])
    end_i = last + 1
    end = _crossing(u, -f, end_i) if end_i < u.shape[0] else float(u[last])
    return start, end


def _profile_brake_start(tr: Trace, f, lo, i_min):
    """Brake point of a clean speed profile (the ideal): where its speed starts falling.

    Walks back from the minimum at ``i_min`` while the speed does not fall going
    forward (ripples under ``COAST_RISE_M_S``, from curvature noise of a measured line,
    do not stop it), to the last local maximum of speed after ``lo``; the brake point is the
    first crossing of the braking signal ``f`` (deceleration over its threshold) at or
    after that maximum, interpolated as in :func:`_brake_zone`. Deceleration that dips
    under the threshold while the speed keeps falling (trail braking) therefore does not
    split the zone. NaN when the fall has no braking in it (a lift, drag in a flat-out
    kink) or takes off less than ``MIN_BRAKE_DROP_M_S``. [m] (unwrapped)
    """
    i_lo = int(np.searchsorted(tr.u, lo, "left"))
    if i_min is None or i_min <= i_lo:
        return math.nan
    v = tr.v
    j = top = i_min
    while j > i_lo and v[j - 1] >= v[top] - COAST_RISE_M_S:
        j -= 1
        if v[j] > v[top]:
            top = j
    # The highest speed walked over, the last station of a flat top.
    seg = v[top : i_min + 1]
    j = top + int(np.flatnonzero(seg >= v[top] - 1e-9 * max(v[top], 1.0))[-1])
    if v[j] - v[i_min] < MIN_BRAKE_DROP_M_S:
        return math.nan
    on = np.flatnonzero(f[j : i_min + 1] > 0.0)
    if on.size == 0:
        return math.nan
    first = j + int(on[0])
    return _crossing(tr.u, f, first) if first > i_lo else float(tr.u[first])


def _full_drive(tr: Trace, i_min, hi, use_throttle):
    """First point after the minimum where full drive is reached (unwrapped) or NaN."""
    if i_min is None:
        return math.nan
    i1 = int(np.searchsorted(tr.u, hi, "left"))
    if use_throttle:
        g = tr.throttle - FULL_THROTTLE
    else:
        # Only where the envelope leaves real drive: at the lateral limit of a steady
        # arc the drive left is negative (drag) and "a share of it" means nothing.
        g = np.where(
            tr.drive_avail > FULL_DRIVE_MIN_M_S2, tr.ax - FULL_DRIVE_SHARE * tr.drive_avail, -1.0
        )
    hit = np.flatnonzero(g[i_min:i1] >= 0.0)  # False where blank (NaN)
    if hit.size == 0:
        return math.nan
    return _crossing(tr.u, g, i_min + int(hit[0]))


@dataclass(frozen=True)
class Markers:
    """One corner's markers on one trace (unwrapped distances, SI; NaN where none).

    Attributes
    ----------
    min_speed, min_at : float
        Minimum speed [m/s] and where [m].
    brake_start, brake_end : float
        The braking zone that leads into the corner. [m]
    full_drive : float
        Where full drive begins after the minimum. [m]
    peak_lat : float
        Peak lateral acceleration in the segment. [m/s²]
    i_min : int or None
        Station of the minimum on the trace.
    """

    min_speed: float
    min_at: float
    brake_start: float
    brake_end: float
    full_drive: float
    peak_lat: float
    i_min: int | None


def zone_u(corner: Corner, start_u: float, length: float, closed: bool):
    """Turn-in and exit of the corner's curvature zone on the unwrapped axis. [m]."""
    z0 = unwrap_after(corner.turn_in_m, start_u, length, closed)
    z1 = z0 + (
        float(np.mod(corner.exit_m - corner.turn_in_m, length))
        if closed
        else corner.exit_m - corner.turn_in_m
    )
    return z0, z1


def corner_markers(
    tr,
    lo_brake,
    start_u,
    end_u,
    hi_drive,
    brake_threshold_pa,
    use_throttle,
    zone,
    apex_u=None,
    profile_brake=False,
):
    """Markers of one corner's segment on one trace (see :class:`Markers`).

    ``lo_brake``/``hi_drive`` bound the search for the braking zone and for full drive,
    ``start_u``/``end_u`` are the segment, ``zone`` the curvature zone (unwrapped, [m]);
    ``profile_brake`` takes the brake point from the speed profile (the ideal's).
    """
    # Minimum speed within the curvature zone (turn-in to exit, both included): a corner
    # taken flat or still accelerating has its "minimum" there, not at the segment start.
    v_min, at, i_min = lowest_speed(tr, zone[0], zone[1] + 1e-9)
    # Still slowing at the zone's edge (braking for the next corner, or still
    # accelerating from the last): no minimum of its own; take the speed at the apex.
    v_ext, _, _ = lowest_speed(tr, max(lo_brake, zone[0] - EDGE_M), min(hi_drive, zone[1] + EDGE_M))
    if i_min is not None and v_ext < v_min - 1e-9 and apex_u is not None:
        i_min = int(np.argmin(np.abs(tr.u - apex_u)))
        v_min, at = float(tr.v[i_min]), float(tr.u[i_min])
    f = _braking_signal(tr, brake_threshold_pa)
    b0, b1 = _brake_zone(tr, f, lo_brake, i_min)
    if profile_brake:  # the ideal: its brake point from the speed profile itself
        b0 = _profile_brake_start(tr, f, lo_brake, i_min)
        if math.isfinite(b0) and not math.isfinite(b1):
            b1 = float(tr.u[i_min])
        elif not math.isfinite(b0):
            b1 = math.nan
    fd = _full_drive(tr, i_min, hi_drive, use_throttle)
    i0, i1 = tr.window(start_u, end_u)
    ay = np.abs(tr.ay[i0:i1])
    peak = float(np.nanmax(ay)) if np.isfinite(ay).any() else math.nan
    return Markers(v_min, at, b0, b1, fd, peak, i_min)


def unwrapped_bounds(corners: Sequence[Corner], length: float, closed: bool):
    """Per corner: start, apex, end (unwrapped, end > start) and brake/drive search limits."""
    m = len(corners)
    out = []
    for j, c in enumerate(corners):
        start = c.start_m
        end = c.end_m if (c.end_m > c.start_m or not closed) else c.end_m + length
        apex = start + np.mod(c.apex_m - start, length) if closed else c.apex_m
        if closed:
            prev = corners[(j - 1) % m].apex_m
            lo = start - np.mod(start - prev, length) if m > 1 else apex - length
            nxt = corners[(j + 1) % m].apex_m
            hi = end + np.mod(nxt - end, length) if m > 1 else apex + length
        else:
            lo = corners[j - 1].apex_m if j > 0 else 0.0
            hi = corners[j + 1].apex_m if j < m - 1 else c.end_m
        out.append((float(start), float(apex), float(end), float(lo), float(hi)))
    return out


def unwrap_after(d, start_u, length, closed):
    """Distance d on the unwrapped axis, at or after ``start_u``. [m]."""
    return float(start_u + np.mod(d - start_u, length)) if closed else float(d)


def wrap_distance(u, length, closed):
    """An unwrapped distance back on the lap, in [0, length) for a closed one [m]."""
    if not math.isfinite(u):
        return math.nan
    return float(np.mod(u, length)) if closed else float(u)
