r"""Per-corner markers on one lap's trace: brake points, entry, minimum and exit speed, full drive.

A :class:`Trace` holds one lap's channels (real or ideal) on an unwrapped distance axis
(three copies of a closed lap, so a corner's zone never wraps round the gate), with the
pedal shares (brake and drive, 0-1) drawn in the report. :func:`corner_marks` reads one
corner's record of docs/methods.md (Corner record) off it: every brake point that
leads into the corner, the entry speed, the minimum speed and where, the exit speed,
where full drive begins, and the peak lateral acceleration. The comparison
(:mod:`limitlap.compare`) and the target tables (:mod:`limitlap.targets`) both take
their numbers from here, from the same trace of the ideal (:func:`ideal_trace`), so a
corner reads the same in every output.

The speed's turning points come from one pass with hysteresis (:func:`speed_extrema`):
a peak is confirmed once the speed has fallen :data:`MIN_SPEED_DROP_M_S` below it, a
minimum once it has risen that much above it, so ripples smaller than that (curvature
noise of a measured line, logger noise) make no brake point and no minimum.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from limitlap import limits
from limitlap.corners import Corner
from limitlap.power_line import FULL_THROTTLE
from limitlap.solve import Profile
from limitlap.units import G0_M_S2, KMH_TO_M_S
from limitlap.vehicle import Vehicle

# --- Defaults of the per-corner markers (common practice, no published source) ---
#: Hysteresis of the speed's turning points: a braking zone takes at least this off the
#: speed, and a minimum ends where the speed has risen this much above it. [m/s]
MIN_SPEED_DROP_M_S = 1.0


#: A minimum of speed this far outside the corner's curvature zone (and inside its
#: segment) is still the corner's. [m]
EDGE_M = 25.0


#: Where the minimum speed is: the middle of the stretch round it within this of the
#: minimum (1 km/h, the resolution of the speeds shown). [m/s]
MIN_SPEED_BAND_M_S = 1.0 * KMH_TO_M_S


#: Full drive from a share of the drive limit (the ideal's, or a real lap's without a
#: throttle channel) begins where the share reaches this... [-]
FULL_DRIVE_ON = 0.95


#: ... and counts once it stays above this for :data:`FULL_DRIVE_HOLD_S`. [-]
FULL_DRIVE_OFF = 0.85


#: With a throttle channel: full throttle is :data:`limitlap.power_line.FULL_THROTTLE`
#: (98 %), ended by a fall below this. [-]
FULL_THROTTLE_OFF = 0.90


#: Full drive must last this long to count (a pedal blip or noise does not). [s]
FULL_DRIVE_HOLD_S = 0.3


class Trace:
    """One lap's channels on an unwrapped axis (three copies of a closed lap).

    ``brake_share`` and ``drive_share`` are the pedal traces of the report, 0-1: a real
    lap's pedals (or its acceleration's share of the limits), the ideal's from
    :func:`ideal_pedal_shares`; ``pedal`` says the drive share is a throttle pedal.
    """

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
        brake_share,
        drive_share,
        *,
        pedal=False,
        usage=None,
        dwell=None,
    ):
        self.length = float(length_m)
        self.closed = bool(closed)
        self.lap_time = float(lap_time_s)
        self.pedal = bool(pedal)
        s = np.asarray(distance_m, dtype=np.float64)
        t = np.asarray(elapsed_s, dtype=np.float64)
        self.s_lap = s
        self.t_lap = t
        self.n = s.shape[0]
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
        self.brake_share = tile(brake_share)
        self.drive_share = tile(drive_share)
        self.usage = tile(usage)
        self.dwell = tile(dwell)
        self.peaks, self.valleys = speed_extrema(self.v)

    def lap_part(self, a):
        """The lap's own stations of a tiled array (the middle copy of a closed lap)."""
        return a[self.n : 2 * self.n] if self.closed else a

    def time_at_mod(self, d):
        """Elapsed time at a distance in [0, length]. [s]."""
        return float(
            np.interp(d, np.append(self.s_lap, self.length), np.append(self.t_lap, self.lap_time))
        )

    def time_at(self, u):
        """Elapsed time at an unwrapped distance. [s]."""
        return float(np.interp(u, *self.t_u))

    def speed_at(self, u):
        """Speed at an unwrapped distance, linear between stations. [m/s]."""
        return float(np.interp(u, self.u, self.v))

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


def speed_extrema(v, drop_m_s: float = MIN_SPEED_DROP_M_S):
    """The speed's turning points, with hysteresis: peaks and minima, alternating.

    One pass (the "zigzag" of a turning-point filter): a peak is confirmed when the
    speed falls ``drop_m_s`` below the highest speed since the last minimum, a minimum
    when it rises ``drop_m_s`` above the lowest since the last peak. A peak is placed at
    the last station of its top (where the speed starts falling), a minimum at its
    lowest station. Blanks (NaN) are passed over.

    Parameters
    ----------
    v : array-like
        Speed along the trace. [m/s]
    drop_m_s : float
        Hysteresis. [m/s]

    Returns
    -------
    peaks, valleys : numpy.ndarray of int
        Station indices, increasing. [-]

    Examples
    --------
    >>> p, m = speed_extrema([10.0, 20.0, 20.0, 12.0, 12.5, 12.2, 30.0, 25.0])
    >>> p.tolist(), m.tolist()
    ([2, 6], [3])
    """
    v = np.asarray(v, dtype=np.float64)
    peaks, valleys = [], []
    good = np.flatnonzero(np.isfinite(v))
    if good.size < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    # Running highs and lows change only where the speed turns (or is level), so the
    # pass visits those stations alone: the same result, a fraction of the steps.
    d = np.diff(v[good])
    turns = np.flatnonzero(d[1:] * d[:-1] <= 0.0) + 1
    visit = good[np.concatenate([turns, [good.size - 1]])]
    hi = lo = int(good[0])
    first = v[hi]
    state = 0  # 0: undecided, 1: rising (looking for a peak), -1: falling (for a minimum)
    for i in visit.tolist():
        x = v[i]
        rose, fell = v[hi] > first, v[lo] < first  # so far: the start is no extremum
        if x >= v[hi]:
            hi = i
        if x < v[lo]:
            lo = i
        if state >= 0 and x < v[hi] - drop_m_s:
            if state == 1 or rose:
                peaks.append(hi)
            state, lo = -1, i
        elif state <= 0 and x > v[lo] + drop_m_s:
            if state == -1 or fell:
                valleys.append(lo)
            state, hi = 1, i
    return np.asarray(peaks, dtype=np.int64), np.asarray(valleys, dtype=np.int64)


def _band_middle(tr: Trace, i: int, band: float) -> float:
    """Middle of the stretch round station i where the speed stays within ``band`` of v[i]. [m]."""
    v = tr.v
    lo = hi = i
    while lo > 0 and np.isfinite(v[lo - 1]) and v[lo - 1] <= v[i] + band:
        lo -= 1
    while hi < v.shape[0] - 1 and np.isfinite(v[hi + 1]) and v[hi + 1] <= v[i] + band:
        hi += 1
    return 0.5 * float(tr.u[lo] + tr.u[hi])


def _full_drive(tr: Trace, u0: float, u1: float) -> float:
    """First point in [u0, u1) where full drive begins (docs/methods.md, Corner record). [m].

    The drive share must reach the on-threshold and not fall below the off-threshold
    for :data:`FULL_DRIVE_HOLD_S` (or until ``u1``); NaN when it never does.
    """
    i0, i1 = tr.window(u0, u1)
    share = tr.drive_share[i0:i1]
    on, off = (FULL_THROTTLE, FULL_THROTTLE_OFF) if tr.pedal else (FULL_DRIVE_ON, FULL_DRIVE_OFF)
    above = share >= on  # False where blank
    starts = np.flatnonzero(above & ~np.concatenate([[False], above[:-1]]))
    below = np.flatnonzero(~(share >= off))
    for k in starts.tolist():
        after = below[below > k]
        if after.size:
            held = tr.time_at(tr.u[i0 + after[0]]) - tr.time_at(tr.u[i0 + k])
            if held < FULL_DRIVE_HOLD_S:
                continue
        j = i0 + k
        if j == i0 or not np.isfinite(share[k - 1]):
            return float(tr.u[j])
        g0, g1 = share[k - 1] - on, share[k] - on
        return float(tr.u[j - 1] + (-g0 / (g1 - g0)) * (tr.u[j] - tr.u[j - 1]))
    return math.nan


@dataclass(frozen=True)
class Marks:
    """One corner's record on one trace (unwrapped distances, SI; NaN where none).

    Attributes
    ----------
    brake_points : tuple of float
        Start of every deceleration into the corner (a lift counts), in driving order:
        one per braking zone that reaches it. [m]
    entry_speed : float
        Speed at the first brake point; NaN when the corner is taken without slowing. [m/s]
    min_speed, min_at : float
        The lowest minimum of speed in the corner [m/s] and where it is [m]; for a
        corner without a minimum of its own (taken without slowing), the speed at its
        main apex and the apex.
    own_minimum : bool
        The speed has a minimum of its own in the corner.
    exit_speed : float
        Speed at the end of the curvature zone. [m/s]
    full_drive : float
        Where full drive begins after the corner's last minimum (or its apex). [m]
    peak_lat : float
        Peak lateral acceleration in the segment. [m/s²]
    last_min_at : float
        Where the corner's last minimum is (its apex without one). [m]
    """

    brake_points: tuple[float, ...]
    entry_speed: float
    min_speed: float
    min_at: float
    own_minimum: bool
    exit_speed: float
    full_drive: float
    peak_lat: float
    last_min_at: float

    @property
    def brake_start(self) -> float:
        """The first brake point; NaN without one. [m]."""
        return self.brake_points[0] if self.brake_points else math.nan


def zone_u(corner: Corner, start_u: float, length: float, closed: bool):
    """Turn-in and exit of the corner's curvature zone on the unwrapped axis. [m]."""
    z0 = unwrap_after(corner.turn_in_m, start_u, length, closed)
    z1 = z0 + (
        float(np.mod(corner.exit_m - corner.turn_in_m, length))
        if closed
        else corner.exit_m - corner.turn_in_m
    )
    return z0, z1


def corner_marks(tr: Trace, corner: Corner, bound) -> Marks:
    """One corner's record on one trace (see :class:`Marks`, docs/methods.md, Corner record).

    Parameters
    ----------
    tr : Trace
        The lap (real or ideal).
    corner : Corner
        The corner.
    bound : tuple of float
        Its entry of :func:`unwrapped_bounds`: unwrapped segment start, main apex,
        segment end and the search limits before and after. [m]

    Returns
    -------
    Marks
    """
    start_u, apex_u, end_u, _, hi = bound
    z0, z1 = zone_u(corner, start_u, tr.length, tr.closed)
    w0, w1 = max(start_u, z0 - EDGE_M), min(end_u, z1 + EDGE_M)
    mins = tr.valleys[(tr.u[tr.valleys] >= w0) & (tr.u[tr.valleys] <= w1)]
    points = []
    for i in mins.tolist():  # the peak before each minimum (they alternate)
        before = tr.peaks[tr.peaks < i]
        if before.size:  # its last station: never after the speed starts falling
            points.append(float(tr.u[before[-1]]))
    if mins.size:
        i_min = int(mins[np.argmin(tr.v[mins])])
        v_min, at = float(tr.v[i_min]), _band_middle(tr, i_min, MIN_SPEED_BAND_M_S)
        last = _band_middle(tr, int(mins[-1]), MIN_SPEED_BAND_M_S)
    else:
        v_min, at, last = tr.speed_at(apex_u), apex_u, apex_u
    later = tr.peaks[tr.u[tr.peaks] > last]
    drive_end = min(hi, float(tr.u[later[0]])) if later.size else hi
    i0, i1 = tr.window(start_u, end_u)
    ay = np.abs(tr.ay[i0:i1])
    return Marks(
        brake_points=tuple(points),
        entry_speed=tr.speed_at(points[0]) if points else math.nan,
        min_speed=v_min,
        min_at=at,
        own_minimum=bool(mins.size),
        exit_speed=tr.speed_at(z1),
        full_drive=_full_drive(tr, last, drive_end),
        peak_lat=float(np.nanmax(ay)) if np.isfinite(ay).any() else math.nan,
        last_min_at=last,
    )


# ----------------------------------------------------------------------------- pedals


def _tyre_force_shares(speed, ax_tyre, env: Vehicle):
    r"""Brake and drive shares of the tyre force a longitudinal acceleration needs.

    ``ax_tyre`` is the acceleration the tyres give (gravity along a grade included, as
    an accelerometer measures it) [m/s²]; the force :math:`F_x = m a + R` against
    :math:`\mu_b N` or :math:`\min(\mu_t N, P/v)` (:func:`limitlap.limits.longitudinal_shares`).
    """
    brake, drive = limits.longitudinal_shares(speed, ax_tyre, env)
    return np.clip(brake, 0.0, 1.0), np.clip(drive, 0.0, 1.0)


def ideal_pedal_shares(v, ax, sin_grad, env: Vehicle, closed: bool):
    r"""The ideal's brake and drive shares, drawn phase by phase from its speed.

    The ideal's speed is cut at its turning points (:func:`speed_extrema`) into falling
    and rising phases. In a falling phase the drive share is 0 and the brake share the
    least-squares fit that rises to its peak and then only falls; in a rising phase the
    brake share is 0 and the drive share the least-squares fit that only rises
    (isotonic regression by pool-adjacent-violators, ``scipy.optimize.isotonic_regression``;
    Barlow, Bartholomew, Bremner & Brunk, *Statistical inference under order
    restrictions*, Wiley, 1972). The raw shares are those of the tyre force the speed
    profile needs (:math:`a_x + g\sin\theta`, :func:`limitlap.limits.longitudinal_shares`);
    the fit keeps their level and takes out the back-and-forth that curvature noise of a
    measured line puts into a profile held on the lateral limit, which a driver would
    otherwise read as pedal instructions.

    Parameters
    ----------
    v, ax : array-like
        The ideal's speed [m/s] and longitudinal acceleration at the stations [m/s²].
    sin_grad : array-like or float
        Sine of the grade at the stations (+ uphill). [-]
    env : Vehicle
        The envelope at the ideal's grip scale.
    closed : bool
        A lap: phases run round the gate.

    Returns
    -------
    brake, drive : numpy.ndarray
        Shares 0-1 at the stations. [-]
    """
    from scipy.optimize import isotonic_regression

    v = np.asarray(v, dtype=np.float64)
    n = v.shape[0]
    raw_b, raw_d = _tyre_force_shares(
        v, np.asarray(ax, dtype=np.float64) + G0_M_S2 * np.asarray(sin_grad), env
    )
    reps = 3 if closed else 1
    vt, bt, dt = (np.tile(a, reps) for a in (v, raw_b, raw_d))
    peaks, valleys = speed_extrema(vt)
    cuts = np.unique(np.concatenate([[0], peaks, valleys, [vt.shape[0] - 1]]))
    brake, drive = np.zeros(vt.shape[0]), np.zeros(vt.shape[0])
    for a, b in zip(cuts[:-1].tolist(), cuts[1:].tolist(), strict=True):
        if b <= a:
            continue
        seg = slice(a, b + 1)
        if vt[b] < vt[a]:  # falling: brake rises to its peak, then only falls
            x = np.nan_to_num(bt[seg])
            k = int(np.argmax(x))
            up = isotonic_regression(x[: k + 1]).x
            down = isotonic_regression(x[k:], increasing=False).x
            brake[seg] = np.concatenate([up[:-1], [max(up[-1], down[0])], down[1:]])
        else:  # rising: drive only rises
            drive[seg] = isotonic_regression(np.nan_to_num(dt[seg])).x
    part = slice(n, 2 * n) if closed else slice(0, n)
    return np.clip(brake[part], 0.0, 1.0), np.clip(drive[part], 0.0, 1.0)


def actual_pedal_shares(v, ax, env: Vehicle, throttle=None, brake_pa=None):
    """A real lap's pedal traces, 0-1: its pedals where logged, else its acceleration's share.

    Parameters
    ----------
    v, ax : array-like
        Speed [m/s] and longitudinal acceleration (as measured: gravity along a grade
        included) [m/s²] at the stations.
    env : Vehicle
        The envelope at the ideal's grip scale.
    throttle : array-like, optional
        Pedal position 0-1. [-]
    brake_pa : array-like, optional
        Brake pressure; shown as a share of the lap's highest. [Pa]

    Returns
    -------
    brake, drive : numpy.ndarray
        Shares 0-1 at the stations. [-]
    """
    brake, drive = _tyre_force_shares(v, ax, env)
    if throttle is not None:
        drive = np.clip(np.asarray(throttle, dtype=np.float64), 0.0, 1.0)
    if brake_pa is not None:
        p = np.asarray(brake_pa, dtype=np.float64)
        top = float(np.nanmax(p)) if np.isfinite(p).any() else 0.0
        if top > 0.0:
            brake = np.clip(p / top, 0.0, 1.0)
    return brake, drive


def ideal_trace(profile: Profile, line, env: Vehicle) -> Trace:
    """The ideal profile on ``line`` as a :class:`Trace`: the one every output reads.

    ``env`` is the envelope at the profile's grip scale.
    """
    grad = np.asarray(line.gradient, dtype=np.float64)
    sin_grad = grad / np.sqrt(1.0 + grad * grad)
    v = np.asarray(profile.speed_m_s, dtype=np.float64)
    ax = station_accel(profile, line.closed)
    ay = np.asarray(profile.accel_lat_m_s2, dtype=np.float64)
    brake, drive = ideal_pedal_shares(v, ax, sin_grad, env, line.closed)
    return Trace(
        line.distance_m,
        float(line.length_m),
        line.closed,
        profile.time_s,
        profile.lap_time_s,
        v,
        ax,
        ay,
        brake,
        drive,
        usage=limits.combined_usage(v, ax, ay, env, sin_grad),
    )


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
