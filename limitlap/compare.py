r"""Corners of a line, and the real lap against the ideal one corner by corner.

Three steps, all on the stations of one line (SI throughout):

1. :func:`find_corners` finds the bends from the line's smoothed curvature with a
   threshold with hysteresis, joins same-direction bends that follow closely into one
   corner with several apexes, names them in driving order from the gate and cuts the
   lap into segments that tile it, one per corner, with the boundaries in the middle of
   the straights.
2. :func:`compare_lap` puts the real lap and the ideal :class:`~limitlap.solve.Profile`
   on the same distance axis: time delta along the lap, and per corner the time left,
   minimum speeds, brake points, where full drive begins, peak lateral acceleration, the
   share of grip used, the time left split into braking, mid-corner and exit phases, and
   one plain-language line for the driver.
3. :func:`best_of_laps` builds the composite of each segment's best time over a
   session's complete laps.

Segment times are differences of elapsed time interpolated at the segment boundaries,
so the corners' times telescope to the lap time: the corners' time left adds up to the
lap's (INTERFACE §5; REFERENCES T1.10).

Distances are metres from the gate, in ``[0, length)``; the one segment that runs
through the gate of a closed lap has ``start_m > end_m`` (and a single corner that
covers the whole lap has ``start_m == end_m``).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from scipy.ndimage import gaussian_filter1d

from limitlap import limits
from limitlap.errors import LimitlapError
from limitlap.line import Line
from limitlap.solve import Profile
from limitlap.units import G0_M_S2, KMH_TO_M_S
from limitlap.vehicle import Vehicle

# --- Defaults of corner detection (common practice of the trade, no published source) ---
#: Gaussian smoothing of curvature before the thresholds (standard deviation). [m]
SMOOTHING_M = 8.0
#: A bend starts where |curvature| exceeds this (radius under 250 m)... [1/m]
ENTER_CURVATURE_1_M = 1.0 / 250.0
#: ... and lasts while |curvature| stays above this (radius under 500 m). [1/m]
LEAVE_CURVATURE_1_M = 1.0 / 500.0
#: A bend must change the heading by at least this much to count (15°). [rad]
MIN_TURN_RAD = math.radians(15.0)
#: A second apex inside one bend needs a dip of |curvature| before it of at least this
#: share of its own peak (peak prominence, as ``scipy.signal.find_peaks``). [-]
APEX_PROMINENCE = 0.3
#: Same-direction bends closer than this form one corner with two apexes. [m]
MERGE_GAP_M = 50.0

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
#: Throttle at or above this counts as full drive. [-]
FULL_THROTTLE = 0.98
#: Without a throttle channel, full drive is a_x at or above this share of the driving
#: limit left after the lateral demand. [-]
FULL_DRIVE_SHARE = 0.9
#: ... counted only where the envelope leaves at least this forward acceleration. [m/s²]
FULL_DRIVE_MIN_M_S2 = 0.5
#: Stations where the ideal's combined usage is at least this count as grip-limited;
#: a corner's grip used is measured there only. [-]
GRIP_LIMITED_USAGE = 0.95


@dataclass(frozen=True)
class Corner:
    """One corner and its segment of the lap (distances from the gate, SI).

    Attributes
    ----------
    name : str
        "T1", "T2", ... in driving order from the gate, or a given name.
    start_m, end_m : float
        Segment bounds, in the middle of the straights either side; ``start_m > end_m``
        for the segment through the gate, ``start_m == end_m`` for one segment
        covering the whole lap. [m]
    apex_m : float
        Main apex: the point of largest |curvature| (lowest cornering speed limit). [m]
    apexes_m : tuple of float
        Every apex in driving order (two or more for a compound corner). [m]
    turn_in_m, exit_m : float
        Where the curvature zone begins and ends (the hysteresis thresholds). [m]
    direction : str
        'left' (+ curvature, ISO 8855) or 'right'.
    peak_curvature_1_m : float
        Smoothed curvature at the main apex, signed. [1/m]
    """

    name: str
    start_m: float
    apex_m: float
    apexes_m: tuple[float, ...]
    end_m: float
    turn_in_m: float
    exit_m: float
    direction: str
    peak_curvature_1_m: float


# ----------------------------------------------------------------------------------
# Corner detection
# ----------------------------------------------------------------------------------


def smoothed_curvature(line: Line, smoothing_m: float = SMOOTHING_M) -> np.ndarray:
    """Curvature smoothed by a Gaussian of standard deviation ``smoothing_m``.

    Parameters
    ----------
    line : Line
        The line; stations are taken as evenly spaced at their median step.
    smoothing_m : float
        Standard deviation of the Gaussian; 0 leaves the curvature as it is. [m]

    Returns
    -------
    numpy.ndarray
        Smoothed curvature, + left. [1/m]

    Notes
    -----
    Closed lines wrap round the gate (``scipy.ndimage.gaussian_filter1d``,
    ``mode='wrap'``); open lines repeat their end values.
    """
    kappa = np.asarray(line.curvature_1_m, dtype=np.float64)
    n = kappa.shape[0]
    ds = line.ds_m[: n if line.closed else n - 1]
    sigma = float(smoothing_m) / float(np.median(ds))
    if sigma <= 0.0:
        return kappa.copy()
    return gaussian_filter1d(kappa, sigma, mode="wrap" if line.closed else "nearest")


def _runs(values: np.ndarray) -> list[tuple[int, int]]:
    """Inclusive index ranges of equal consecutive values."""
    change = np.flatnonzero(np.diff(values) != 0) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change - 1, [values.shape[0] - 1]])
    return list(zip(starts.tolist(), ends.tolist(), strict=True))


def _plateau_middle(values: np.ndarray, i: int, tol: float) -> int:
    """Middle of the run of values within ``tol`` of ``values[i]`` that contains i."""
    near = np.abs(values - values[i]) <= tol
    lo = i
    while lo > 0 and near[lo - 1]:
        lo -= 1
    hi = i
    while hi < values.shape[0] - 1 and near[hi + 1]:
        hi += 1
    return (lo + hi) // 2


def peak_prominences(x):
    """Local maxima of ``x`` and the prominence of each.

    A peak is a sample higher than its left neighbour and than the first different sample
    to its right (a flat top counts once, at its middle, rounded down); its prominence is
    its height above the higher of the two lowest points between it and the nearest
    higher sample on each side (or the array's end). The definitions and the search of
    ``scipy.signal.find_peaks`` with ``prominence=0`` (Scipy's documentation, after the
    topographic prominence), re-written here because importing ``scipy.signal`` costs the
    command line half a second; the tests hold the two equal.

    Parameters
    ----------
    x : array-like
        Samples (one corner's |curvature|: a few hundred). [any]

    Returns
    -------
    peaks : numpy.ndarray
        Indices of the peaks, increasing. [-]
    prominences : numpy.ndarray
        Prominence of each, in the units of ``x``.

    Examples
    --------
    >>> p, h = peak_prominences([0.0, 2.0, 1.0, 3.0, 3.0, 0.0])
    >>> p.tolist(), h.tolist()
    ([1, 3], [1.0, 3.0])
    """
    x = np.asarray(x, dtype=np.float64)
    n = x.shape[0]
    if n < 3:
        return np.zeros(0, np.int64), np.zeros(0)
    # Steps that change the value, in order: a rise followed (after any flat run) by a
    # fall brackets a peak, its flat top from the sample after the rise to the one
    # before the fall.
    step = np.sign(np.diff(x))
    moves = np.flatnonzero(step)
    turn = (step[moves[:-1]] > 0) & (step[moves[1:]] < 0)
    left, right = moves[:-1][turn] + 1, moves[1:][turn]
    peaks = ((left + right) // 2).astype(np.int64)
    prom = np.empty(peaks.shape[0])
    for k, p in enumerate(peaks.tolist()):  # a handful of peaks per corner
        higher_left = np.flatnonzero(x[:p] > x[p])
        lo = higher_left[-1] + 1 if higher_left.size else 0
        higher_right = np.flatnonzero(x[p + 1 :] > x[p])
        hi = p + 1 + higher_right[0] if higher_right.size else n
        prom[k] = x[p] - max(x[lo : p + 1].min(), x[p:hi].min())
    return peaks, prom


def find_corners(
    line: Line,
    names: Sequence[str] | None = None,
    *,
    smoothing_m: float = SMOOTHING_M,
    enter_curvature_1_m: float = ENTER_CURVATURE_1_M,
    leave_curvature_1_m: float = LEAVE_CURVATURE_1_M,
    min_turn_rad: float = MIN_TURN_RAD,
    merge_gap_m: float = MERGE_GAP_M,
    apexes_m: Sequence[float] | None = None,
) -> list[Corner]:
    r"""Corners of a line from its curvature, with segments that tile the lap.

    Parameters
    ----------
    line : Line
        Closed lap (segments wrap round the gate) or open stretch.
    names : sequence of str, optional
        Names in driving order from the gate (e.g. from a track file); default T1, T2, ...
        Without ``apexes_m`` their number must match the corners found.
    apexes_m : sequence of float, optional
        Apex of each named corner, from the gate (a track file's ``apex_m``) [m]. Each
        name goes to the corner whose curvature zone holds its apex; a named apex
        outside every zone found (a fast bend under the thresholds) makes a corner of
        its own, from where |curvature| falls to half its peak nearby; several names in
        one zone give one corner with the first name; a corner found with no name is
        called after the corner before it with a "+" ("T8+").
    smoothing_m : float
        Gaussian smoothing of curvature (standard deviation). [m]
    enter_curvature_1_m, leave_curvature_1_m : float
        Hysteresis thresholds on |curvature|: a bend starts above the first and lasts
        while above the second. [1/m]
    min_turn_rad : float
        Least heading change of a bend. [rad]
    merge_gap_m : float
        Same-direction bends with less straight than this between them are one corner
        with several apexes. [m]

    Returns
    -------
    list of Corner
        In driving order from the gate.

    Notes
    -----
    The apexes of a bend are the stations of locally largest smoothed |curvature|
    whose peak stands out by at least 30 % of its height (the middle of the run when
    the value is a plateau, as on a constant-radius arc); the main apex is the largest. For
    every vehicle of INTERFACE §3 the cornering speed limit
    :math:`v^2 = \mu g / (|\kappa| - \mu k_z/m)` is strictly decreasing in
    :math:`|\kappa|` where grip limits at all, so these are the local minima of the
    speed limit, the QSS critical points (REFERENCES §1.2), for any car: no vehicle
    is needed. Boundaries sit halfway between one corner's exit and the next one's
    turn-in. Thresholds are common practice, not published values.
    """
    if not (0.0 < leave_curvature_1_m <= enter_curvature_1_m):
        raise LimitlapError("corner thresholds must satisfy 0 < leave <= enter")
    n = line.n
    length = float(line.length_m)
    s = np.asarray(line.distance_m, dtype=np.float64)
    ks = smoothed_curvature(line, smoothing_m)
    mag = np.abs(ks)
    state = np.where(mag > leave_curvature_1_m, np.sign(ks), 0.0).astype(np.int8)
    ds = line.ds_m

    # Rotate a closed lap so that station 0 of the work arrays starts a run: no run wraps.
    if line.closed:
        change = np.flatnonzero(state != np.roll(state, 1))
        if change.size == 0:
            if state[0] == 0:
                return []
            rot = 0  # one bend all the way round (a circle)
        else:
            rot = int(change[0])
    else:
        rot = 0
    idx = (np.arange(n) + rot) % n
    u = s[idx] + np.where(idx < rot, length, 0.0)  # unwrapped, increasing
    st = state[idx]

    zones = []  # (turn_in_u, exit_u, direction, [(apex_u, |kappa|, signed kappa)])
    for i0, i1 in _runs(st):
        if st[i0] == 0:
            continue
        seg = idx[i0 : i1 + 1]
        if mag[seg].max() <= enter_curvature_1_m:
            continue
        if float(np.sum(mag[seg] * ds[seg])) < min_turn_rad:
            continue
        zm = mag[seg]
        tol = 1e-9 * zm.max()
        peaks, prominences = peak_prominences(np.concatenate([[0.0], zm, [0.0]]))
        keep = prominences >= APEX_PROMINENCE * zm[peaks - 1]
        apex_js = {_plateau_middle(zm, int(p) - 1, tol) for p in peaks[keep]}
        apex_js.add(_plateau_middle(zm, int(np.argmax(zm)), tol))
        apexes = [(u[i0 + j], zm[j], ks[seg[j]]) for j in sorted(apex_js)]
        zones.append([u[i0], u[i1], int(st[i0]), apexes, []])
    named = None
    if names is not None and apexes_m is not None:
        ap = np.asarray(apexes_m, dtype=np.float64)
        if ap.shape != (len(names),):
            raise LimitlapError(f"{ap.size} corner apexes given for {len(names)} names")
        if np.isfinite(ap).all():
            named = list(zip(ap.tolist(), [str(x) for x in names], strict=True))
    if not zones and named is None:
        return []

    # Join same-direction bends close together (also across the gate on a lap).
    merged = zones[:1]
    for z in zones[1:]:
        last = merged[-1]
        if z[2] == last[2] and z[0] - last[1] < merge_gap_m:
            last[1] = z[1]
            last[3].extend(z[3])
        else:
            merged.append(z)
    if line.closed and len(merged) > 1:
        first, last = merged[0], merged[-1]
        if first[2] == last[2] and first[0] + length - last[1] < merge_gap_m:
            last[1] = first[1] + length
            last[3].extend((a + length, m, k) for a, m, k in first[3])
            merged.pop(0)
    if named is not None:
        merged = _place_named_apexes(merged, named, u, idx, mag, ks, length, line.closed)

    # Boundaries halfway along the straights.
    m = len(merged)
    if line.closed:
        bounds = np.empty(m)
        for j in range(m):
            nxt = merged[(j + 1) % m][0] + (length if j == m - 1 else 0.0)
            bounds[j] = 0.5 * (merged[j][1] + nxt)
        bounds = np.mod(bounds, length)
        starts = np.roll(bounds, 1)
        ends = bounds
    else:
        inner = np.array([0.5 * (merged[j][1] + merged[j + 1][0]) for j in range(m - 1)])
        starts = np.concatenate([[0.0], inner])
        ends = np.concatenate([inner, [length]])

    def wrap(d):
        return float(np.mod(d, length)) if line.closed else float(d)

    out = []
    for j, z in enumerate(merged):
        apexes = sorted(z[3])
        main = max(apexes, key=lambda a: a[1])
        out.append(
            Corner(
                name="",
                start_m=float(starts[j]),
                apex_m=wrap(main[0]),
                apexes_m=tuple(wrap(a[0]) for a in apexes),
                end_m=float(ends[j]),
                turn_in_m=wrap(z[0]),
                exit_m=wrap(z[1]),
                direction="left" if z[2] > 0 else "right",
                peak_curvature_1_m=float(main[2]),
            )
        )
    if named is not None:
        order = sorted(range(len(out)), key=lambda j: out[j].apex_m)
        final, prev = [], None
        for j in order:
            nm = merged[j][4][0][1] if merged[j][4] else None
            if nm is None:  # a bend found that the track file does not name
                nm = f"{prev}+" if prev is not None else "start+"
            else:
                prev = nm
            final.append((out[j], nm))
        if final and final[0][1] == "start+":  # name it after the last named corner
            last_named = next((nm for _, nm in reversed(final) if not nm.endswith("+")), "T")
            final[0] = (final[0][0], f"{last_named}+")
        return [_renamed(c, nm) for c, nm in final]
    out.sort(key=lambda c: c.apex_m)
    if names is None:
        names = [f"T{i + 1}" for i in range(len(out))]
    names = [str(x) for x in names]
    if len(names) != len(out):
        raise LimitlapError(f"{len(names)} corner names given but the line has {len(out)} corners")
    return [_renamed(c, nm) for nm, c in zip(names, out, strict=True)]


def _renamed(c: Corner, name: str) -> Corner:
    return replace(c, name=name)


def _place_named_apexes(zones, named, u, idx, mag, ks, length, closed, slack_m=10.0, snap_m=15.0):
    """Attach (apex_m, name) pairs to curvature zones; make zones for unmatched apexes.

    ``u`` is the unwrapped station distance of the work arrays (``idx`` maps to
    stations), zones are [turn_in, exit, direction, apexes, names] on that axis.
    """
    u0 = float(u[0])
    n = u.shape[0]
    for a, name in named:
        ua = u0 + float(np.mod(a - u0, length)) if closed else float(a)
        host = None
        for z in zones:
            for cand in (ua, ua + length) if closed else (ua,):
                if z[0] - slack_m <= cand <= z[1] + slack_m:
                    host, ua = z, cand
                    break
            if host is not None:
                break
        i = int(np.argmin(np.abs(u - ua)))
        near = np.flatnonzero(np.abs(u - ua) <= snap_m)
        j = int(near[np.argmax(mag[idx[near]])]) if near.size else i
        if host is not None:
            host[4].append((ua, name))
            # A second name in one zone marks a second apex, unless one was found there.
            if len(host[4]) > 1 and min(abs(a[0] - u[j]) for a in host[3]) > snap_m:
                host[3].append((float(u[j]), float(mag[idx[j]]), float(ks[idx[j]])))
            continue
        # A corner the thresholds missed: its apex where the track file puts it.
        apex = (float(u[i]), float(mag[idx[i]]), float(ks[idx[i]]))
        peak, sign = mag[idx[j]], np.sign(ks[idx[j]])
        lo = hi = j
        while lo > 0 and mag[idx[lo - 1]] >= 0.5 * peak and np.sign(ks[idx[lo - 1]]) == sign:
            lo -= 1
        while hi < n - 1 and mag[idx[hi + 1]] >= 0.5 * peak and np.sign(ks[idx[hi + 1]]) == sign:
            hi += 1
        zones.append([float(u[lo]), float(u[hi]), int(sign) if sign else 1, [apex], [(ua, name)]])
    zones.sort(key=lambda z: z[0])
    for z in zones:
        z[4].sort()
    for p, q in itertools.pairwise(zones):  # keep zones apart
        if q[0] < p[1]:
            mid = 0.5 * (q[0] + p[1])
            p[1], q[0] = mid, mid
    return zones


# ----------------------------------------------------------------------------------
# Traces on an unwrapped distance axis
# ----------------------------------------------------------------------------------


class _Trace:
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
        """Elapsed time at a distance in [0, length]. [s]"""
        return float(
            np.interp(d, np.append(self.s_lap, self.length), np.append(self.t_lap, self.lap_time))
        )

    def time_at(self, u):
        """Elapsed time at an unwrapped distance. [s]"""
        return float(np.interp(u, *self.t_u))

    def window(self, lo, hi):
        """Index range [i0, i1) of stations with lo <= u < hi."""
        return int(np.searchsorted(self.u, lo, "left")), int(np.searchsorted(self.u, hi, "left"))


def _drive_accel_available(speed_m_s, accel_lat_m_s2, vehicle: Vehicle, sin_grad):
    r"""Forward acceleration the envelope allows with the lateral demand, as the solver.

    :math:`a = (\min(\mu_t N (1-u^n)^{1/n}, P/v) - R)/m - g\sin\theta`,
    :math:`u = m|a_y|/(\mu_y N)` (INTERFACE §3 combined law). [m/s²]
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    m = vehicle.mass_kg
    normal = np.maximum(limits.normal_load_n(v, vehicle), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        usage = np.where(normal > 0, m * np.abs(accel_lat_m_s2) / (vehicle.mu_lat * normal), 1.0)
        fx = vehicle.mu_trac * normal * limits.available_share(usage, vehicle.exponent)
        power = np.where(v > 0, vehicle.power_w / np.where(v > 0, v, 1.0), np.inf)
    fx = np.minimum(fx, power)
    return (fx - limits.resistance_n(v, vehicle)) / m - G0_M_S2 * np.asarray(sin_grad)


def station_accel(profile: Profile, closed: bool) -> np.ndarray:
    """A profile's longitudinal acceleration at its stations. [m/s²]

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


def _min_speed(tr: _Trace, lo, hi):
    """Lowest speed in [lo, hi) and where (middle of a flat minimum). [m/s], [m] (unwrapped)."""
    i0, i1 = tr.window(lo, hi)
    v = tr.v[i0:i1]
    if v.size == 0 or not np.isfinite(v).any():
        return math.nan, math.nan, None
    j = int(np.nanargmin(v))
    j = _plateau_middle(np.where(np.isfinite(v), v, np.inf), j, 1e-9)
    return float(v[j]), float(tr.u[i0 + j]), i0 + j


def _braking_signal(tr: _Trace, brake_threshold_pa):
    """Positive where braking: brake pressure over its threshold, else decel over its."""
    if tr.brake is not None and brake_threshold_pa is not None:
        return tr.brake - brake_threshold_pa
    return -tr.ax - BRAKE_DECEL_M_S2


def _brake_zone(tr: _Trace, f, lo, i_min, gap_m=BRAKE_GAP_M):
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


def _profile_brake_start(tr: _Trace, f, lo, i_min):
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


def _full_drive(tr: _Trace, i_min, hi, use_throttle):
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
class _Markers:
    min_speed: float
    min_at: float
    brake_start: float
    brake_end: float
    full_drive: float
    peak_lat: float
    i_min: int | None


def _zone_u(corner: Corner, start_u: float, length: float, closed: bool):
    """Turn-in and exit of the corner's curvature zone on the unwrapped axis. [m]"""
    z0 = _unwrap_after(corner.turn_in_m, start_u, length, closed)
    z1 = z0 + (
        float(np.mod(corner.exit_m - corner.turn_in_m, length))
        if closed
        else corner.exit_m - corner.turn_in_m
    )
    return z0, z1


def _corner_markers(
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
    # Minimum speed within the curvature zone (turn-in to exit, both included): a corner
    # taken flat or still accelerating has its "minimum" there, not at the segment start.
    v_min, at, i_min = _min_speed(tr, zone[0], zone[1] + 1e-9)
    # Still slowing at the zone's edge (braking for the next corner, or still
    # accelerating from the last): no minimum of its own; take the speed at the apex.
    v_ext, _, _ = _min_speed(tr, max(lo_brake, zone[0] - EDGE_M), min(hi_drive, zone[1] + EDGE_M))
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
    return _Markers(v_min, at, b0, b1, fd, peak, i_min)


def _unwrapped_bounds(corners: Sequence[Corner], length: float, closed: bool):
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
        """The INTERFACE §5 corner keys first (km/h where the key says so), then extras.

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


def hundredths(time_s: float) -> float:
    """A time as shown to 0.01 s: exactly 0 when it rounds to 0.00, so no "-0.00". [s]

    >>> hundredths(-0.004), hundredths(-0.012)
    (0.0, -0.012)
    """
    return 0.0 if math.isfinite(time_s) and round(time_s, 2) == 0 else time_s


def _fmt_m(x):
    return f"{abs(x):.0f} m"


def advice_line(name, time_left_s, brake_later_m, min_speed_gain_m_s, full_drive_sooner_m):
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

    Returns
    -------
    str
        Speeds in km/h, distances in m. Differences under 2 m or 1 km/h are left out
        (common practice: engineers discuss brake points to a few metres and apex speeds
        to 1-2 km/h, REFERENCES §7).

    Examples
    --------
    >>> advice_line("T6", 0.21, 12.0, 6 / 3.6, 15.0)
    'T6: 0.21 s — the ideal brakes 12 m later, carries 6 km/h more at the minimum, and is at full drive 15 m sooner'
    """
    parts = []
    if math.isfinite(brake_later_m) and abs(brake_later_m) >= 2.0:
        parts.append(
            f"the ideal brakes {_fmt_m(brake_later_m)} "
            f"{'later' if brake_later_m > 0 else 'earlier'}"
        )
    dv_kmh = min_speed_gain_m_s / KMH_TO_M_S
    if math.isfinite(dv_kmh) and abs(dv_kmh) >= 1.0:
        parts.append(
            f"carries {abs(dv_kmh):.0f} km/h {'more' if dv_kmh > 0 else 'less'} at the minimum"
        )
    if math.isfinite(full_drive_sooner_m) and abs(full_drive_sooner_m) >= 2.0:
        parts.append(
            f"is at full drive {_fmt_m(full_drive_sooner_m)} "
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


def _elapsed(driven):
    """Elapsed time from the gate at each station, and the lap time. [s]"""
    t = np.asarray(driven.time_s, dtype=np.float64)
    if not np.isfinite(t).all():
        raise LimitlapError("the real lap's time has gaps")
    t = t - t[0]
    lap_time = getattr(driven, "lap_time_s", None)
    if lap_time is None:
        line = driven.line
        v = np.asarray(driven.speed_m_s, dtype=np.float64)
        v_end = 0.5 * (v[-1] + v[0]) if np.isfinite(v[[0, -1]]).all() else math.nan
        step = line.ds_m[-1] if line.closed else 0.0
        if step > 0 and not (v_end > 0):
            raise LimitlapError("the real lap has no speed at the gate to close the lap time")
        lap_time = t[-1] + (step / v_end if step > 0 else 0.0)
    return t, float(lap_time)


def _driven_channels(driven, line: Line):
    """Speed, a_x, a_y of the real lap; a missing sample of a_x / a_y is filled from speed
    and curvature (a_x = v dv/ds, a_y = kappa v^2)."""
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
        :func:`limitlap.envelope.grip_estimate` on the lap's stations against
        ``vehicle`` at grip 1 (None where no sample is grip-limited). [-]
    corner_grip_estimates : mapping name -> float, or sequence in corner order, optional
        Grip scale found per corner; default
        :func:`limitlap.envelope.grip_estimate_by_segment` on the stations. [-]

    Returns
    -------
    LapComparison

    Notes
    -----
    Segment times are elapsed-time differences at the segment bounds (linear in
    distance between stations), so they add up to the lap times and the corners' time
    left to the lap's (INTERFACE §5). Brake start is where brake pressure first exceeds
    5 % of the lap's 99th-percentile pressure, or without pressure where a_x first falls
    below -2.5 m/s², in the braking zone before the minimum speed, interpolated between
    stations. Full drive is throttle ≥ 98 %, or without throttle (and always for the
    ideal) a_x reaching 90 % of the forward acceleration the envelope leaves after the
    lateral demand. The ideal's brake start is taken from its speed profile: the first
    crossing of -2.5 m/s² after the last local maximum of speed before the minimum, so a
    trail-braking dip of the deceleration does not split the zone. Grip used is the
    real lap's time-weighted mean of combined usage (:func:`limitlap.limits.combined_usage`)
    over the ideal's, where the ideal is grip-limited (usage ≥ 0.95). The time-left phases are cut where the
    ideal stops braking and where it reaches full drive. Thresholds and quantiles are
    common practice, not published values.
    """
    line = driven.line
    n = line.n
    if ideal.speed_m_s.shape[0] != n or not np.allclose(ideal.distance_m, line.distance_m):
        raise LimitlapError("the ideal profile is not on the real lap's stations")
    k = float(ideal.grip_scale if grip_scale is None else grip_scale)
    env = vehicle.scaled(k) if k != 1.0 else vehicle.require_complete()
    length = float(line.length_m)
    sin_grad = np.asarray(line.gradient) / np.sqrt(1.0 + np.asarray(line.gradient) ** 2)

    t_act, lap_act = _elapsed(driven)
    v_act, ax_act, ay_act = _driven_channels(driven, line)
    brake = _optional_channel(driven, "brake_pa")
    throttle = _optional_channel(driven, "throttle")
    brake_thr = None
    if brake is not None:
        p99 = float(np.nanquantile(brake, 0.99))
        if not p99 > 0:  # braking on under 1 % of the lap: take the highest pressure
            p99 = float(np.nanmax(brake))
        brake_thr = BRAKE_PRESSURE_SHARE * p99 if p99 > 0 else None
    usage_act = limits.combined_usage(v_act, ax_act, ay_act, env, sin_grad)
    actual = _Trace(
        line.distance_m,
        length,
        line.closed,
        t_act,
        lap_act,
        v_act,
        ax_act,
        ay_act,
        _drive_accel_available(v_act, ay_act, env, sin_grad),
        brake=brake if brake_thr is not None else None,
        throttle=throttle,
        usage=usage_act,
        dwell=np.asarray(line.ds_m, dtype=np.float64) / np.maximum(v_act, 0.1),
    )
    v_id = ideal.speed_m_s
    ax_id = station_accel(ideal, line.closed)
    usage_id = limits.combined_usage(v_id, ax_id, ideal.accel_lat_m_s2, env, sin_grad)
    best = _Trace(
        line.distance_m,
        length,
        line.closed,
        ideal.time_s,
        ideal.lap_time_s,
        v_id,
        ax_id,
        ideal.accel_lat_m_s2,
        _drive_accel_available(v_id, ideal.accel_lat_m_s2, env, sin_grad),
        usage=usage_id,
    )

    if grip_estimate is None or corner_grip_estimates is None:
        est_all, est_seg = _grip_estimates(
            t_act, lap_act, v_act, ax_act, ay_act, vehicle, line, corners
        )
        grip_estimate = est_all if grip_estimate is None else grip_estimate
        if corner_grip_estimates is None:
            corner_grip_estimates = est_seg
    grips = _per_corner_values(corner_grip_estimates, corners, "corner grip estimates")
    bounds = _unwrapped_bounds(corners, length, line.closed)
    rows = []
    for c, (start_u, apex_u, end_u, lo, hi), g in zip(corners, bounds, grips, strict=True):
        end_mod = c.end_m
        a_s = actual.time_at_mod(end_mod) - actual.time_at_mod(c.start_m)
        i_s = best.time_at_mod(end_mod) - best.time_at_mod(c.start_m)
        if line.closed and c.end_m <= c.start_m:
            a_s += actual.lap_time
            i_s += best.lap_time
        zone = _zone_u(c, start_u, length, line.closed)
        ma = _corner_markers(
            actual, lo, start_u, end_u, hi, brake_thr, throttle is not None, zone, apex_u
        )
        mi = _corner_markers(
            best, lo, start_u, end_u, hi, None, False, zone, apex_u, profile_brake=True
        )
        # Phases cut where the ideal stops braking and where it reaches full drive.
        cut_a = mi.brake_end
        if not math.isfinite(cut_a):
            cut_a = _unwrap_after(c.turn_in_m, start_u, length, line.closed)
        cut_b = mi.full_drive
        if not math.isfinite(cut_b):
            cut_b = _unwrap_after(c.exit_m, start_u, length, line.closed)
        cut_a = min(max(cut_a, start_u), end_u)
        cut_b = min(max(cut_b, cut_a), end_u)

        def left(u0, u1):
            return (actual.time_at(u1) - actual.time_at(u0)) - (best.time_at(u1) - best.time_at(u0))

        raw = _grip_used(actual, best, start_u, end_u)
        later = mi.brake_start - ma.brake_start
        sooner = ma.full_drive - mi.full_drive
        rows.append(
            dict(
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
                min_speed_actual_at_m=_mod(ma.min_at, length, line.closed),
                min_speed_ideal_m_s=mi.min_speed,
                min_speed_ideal_at_m=_mod(mi.min_at, length, line.closed),
                brake_start_actual_m=_mod(ma.brake_start, length, line.closed),
                brake_start_ideal_m=_mod(mi.brake_start, length, line.closed),
                brake_later_m=later,
                full_drive_actual_m=_mod(ma.full_drive, length, line.closed),
                full_drive_ideal_m=_mod(mi.full_drive, length, line.closed),
                full_drive_sooner_m=sooner,
                peak_accel_lat_actual_m_s2=ma.peak_lat,
                peak_accel_lat_ideal_m_s2=mi.peak_lat,
                grip_used=min(max(raw, 0.0), 1.0) if math.isfinite(raw) else math.nan,
                grip_used_raw=raw,
                grip_estimate=g,
                advice=advice_line(c.name, a_s - i_s, later, mi.min_speed - ma.min_speed, sooner),
            )
        )
    order = sorted(range(len(rows)), key=lambda i: -rows[i]["time_left_s"])
    for r, i in enumerate(order):
        rows[i]["rank"] = r + 1
    delta = t_act - np.asarray(ideal.time_s, dtype=np.float64)
    return LapComparison(
        distance_m=np.asarray(line.distance_m, dtype=np.float64).copy(),
        length_m=length,
        speed_actual_m_s=v_act,
        speed_ideal_m_s=np.asarray(v_id, dtype=np.float64).copy(),
        time_delta_s=delta,
        lap_time_s=lap_act,
        ideal_lap_time_s=float(ideal.lap_time_s),
        time_left_s=lap_act - float(ideal.lap_time_s),
        grip_scale=k,
        grip_estimate=None if grip_estimate is None else float(grip_estimate),
        corners=tuple(CornerComparison(**r) for r in rows),
    )


def _grip_used(actual: _Trace, ideal: _Trace, start_u: float, end_u: float) -> float:
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


def _unwrap_after(d, start_u, length, closed):
    """Distance d on the unwrapped axis, at or after ``start_u``. [m]"""
    return float(start_u + np.mod(d - start_u, length)) if closed else float(d)


#: Uniform rate the real lap's stations are resampled to in time for the grip
#: estimates, so they are filtered as a raw log is (limitlap.envelope.select_samples). [Hz]
GRIP_RESAMPLE_HZ = 50.0


def _grip_estimates(t, lap_time, v, ax, ay, vehicle: Vehicle, line: Line, corners):
    """Grip scale the lap used, overall and per corner (limitlap.envelope), at grip 1.

    The stations' channels carry the logger's noise unfiltered; resampled to a uniform
    time grid they get the despiking and low-pass of a raw log, the same filtering as
    the overall estimate of :func:`limitlap.pipeline.analyse`, so that noise does not
    raise the 99 % quantile of a corner's few hundred samples.
    """
    from limitlap import envelope

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
        overall = envelope.grip_estimate(vg, axg, ayg, vehicle, sample_rate_hz=GRIP_RESAMPLE_HZ)
    except LimitlapError:
        overall = None
    seg = segment_index(dg, line.length_m, corners, line.closed)
    per = envelope.grip_estimate_by_segment(
        vg, axg, ayg, vehicle, seg, sample_rate_hz=GRIP_RESAMPLE_HZ
    )
    per = np.concatenate([per, np.full(max(0, len(corners) - per.shape[0]), np.nan)])
    return overall, [None if not math.isfinite(x) else float(x) for x in per[: len(corners)]]


def _mod(u, length, closed):
    if not math.isfinite(u):
        return math.nan
    return float(np.mod(u, length)) if closed else float(u)


def segment_index(distance_m, length_m: float, corners: Sequence[Corner], closed=True):
    """Segment number (position in ``corners``) of each distance; -1 in none.

    Parameters
    ----------
    distance_m : array-like
        Distances from the gate. [m]
    length_m : float
        Lap length. [m]
    corners : sequence of Corner
        Segments that tile the lap.
    closed : bool
        A lap: the segment with ``start_m >= end_m`` runs through the gate.

    Returns
    -------
    numpy.ndarray of int
        Index per distance; every station of a tiled lap gets exactly one. [-]
    """
    d = np.asarray(distance_m, dtype=np.float64)
    out = np.full(d.shape, -1, dtype=np.int64)
    for j, c in enumerate(corners):
        if closed:
            span = c.end_m - c.start_m if c.end_m > c.start_m else c.end_m + length_m - c.start_m
            inside = np.mod(d - c.start_m, length_m) < span
        else:
            inside = (d >= c.start_m) & ((d < c.end_m) | ((j == len(corners) - 1) & (d <= c.end_m)))
        out[inside & (out < 0)] = j
    return out


# ----------------------------------------------------------------------------------
# Best of the session's own laps
# ----------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class BestOfLaps:
    """Each segment's best time over a session's complete laps (SI).

    Attributes
    ----------
    names : tuple of str
        Segment (corner) names in driving order.
    lap_numbers : tuple of int
        The laps compared, in the order of the rows of ``segment_times_s``.
    segment_times_s : numpy.ndarray
        Segment time per lap and segment, shape (laps, segments). [s]
    best_s : numpy.ndarray
        Best time per segment. [s]
    best_lap : tuple of int
        Lap number that set each best.
    composite_lap_time_s : float
        Sum of the best segment times. [s]
    lap_times_s : numpy.ndarray
        Each lap's time (the sum of its segments). [s]
    ideal_s : numpy.ndarray or None
        The ideal's segment times, when an ideal profile was given. [s]
    ideal_lap_time_s : float or None
        The ideal lap time. [s]
    """

    names: tuple[str, ...]
    lap_numbers: tuple[int, ...]
    segment_times_s: np.ndarray
    best_s: np.ndarray
    best_lap: tuple[int, ...]
    composite_lap_time_s: float
    lap_times_s: np.ndarray
    ideal_s: np.ndarray | None = None
    ideal_lap_time_s: float | None = None

    def summary_dict(self) -> dict:
        """Plain record for summary.json (SI, unrounded)."""
        segs = []
        for j, name in enumerate(self.names):
            row = {"name": name, "best_s": float(self.best_s[j]), "lap": self.best_lap[j]}
            if self.ideal_s is not None:
                row["ideal_s"] = float(self.ideal_s[j])
            segs.append(row)
        return {
            "composite_time_s": self.composite_lap_time_s,
            "ideal_time_s": self.ideal_lap_time_s,
            "laps": list(self.lap_numbers),
            "segments": segs,
        }


def segment_times(distance_m, length_m, elapsed_s, lap_time_s, corners, scale=1.0):
    """Time spent in each corner's segment, bounds scaled by ``scale`` (closed lap).

    Parameters
    ----------
    distance_m : array-like
        Stations from the gate. [m]
    length_m : float
        Lap length. [m]
    elapsed_s : array-like
        Elapsed time at each station from the gate. [s]
    lap_time_s : float
        Time back to the gate. [s]
    corners : sequence of Corner
        Segments on the reference line.
    scale : float
        Factor from the reference line's distances to this lap's (length ratio). [-]

    Returns
    -------
    numpy.ndarray
        Segment times, adding up to ``lap_time_s``. [s]
    """
    s = np.append(np.asarray(distance_m, dtype=np.float64), length_m)
    t = np.append(np.asarray(elapsed_s, dtype=np.float64) - elapsed_s[0], lap_time_s)
    starts = np.array([c.start_m for c in corners]) * scale
    ends = np.array([c.end_m for c in corners]) * scale
    wraps = np.array([c.end_m <= c.start_m for c in corners])
    out = np.interp(ends, s, t) - np.interp(starts, s, t)
    return out + np.where(wraps, lap_time_s, 0.0)


def best_of_laps(
    laps: Sequence,
    corners: Sequence[Corner],
    *,
    reference_length_m: float,
    lap_numbers: Sequence[int] | None = None,
    ideal: Profile | None = None,
    ideal_length_m: float | None = None,
) -> BestOfLaps:
    """Composite of each segment's best time over the complete laps of a session.

    Parameters
    ----------
    laps : sequence of DrivenLap or pipeline.LapTimeline
        Complete laps (``line``, ``time_s``, ``speed_m_s``; optional ``lap_time_s``), or
        records with ``distance_m``, ``length_m``, ``time_s`` and ``lap_time_s`` in place
        of a line.
    corners : sequence of Corner
        Segments found on the reference lap's line.
    reference_length_m : float
        Length of the line the corners were found on. [m]
    lap_numbers : sequence of int, optional
        Lap numbers; default 1, 2, ...
    ideal : Profile, optional
        The ideal on the reference line, for its segment times beside the composite.
    ideal_length_m : float, optional
        Length of the ideal's line; default ``reference_length_m``. [m]

    Returns
    -------
    BestOfLaps

    Notes
    -----
    Laps' measured lengths differ by a few metres, so the reference bounds are mapped
    to each lap by distance fraction (bound × lap length / reference length).
    """
    if not laps:
        raise LimitlapError("no complete laps to build the best-of-laps composite from")
    if not corners:
        raise LimitlapError("no corners to split the laps into segments")
    numbers = (
        tuple(range(1, len(laps) + 1))
        if lap_numbers is None
        else tuple(int(x) for x in lap_numbers)
    )
    if len(numbers) != len(laps):
        raise LimitlapError(f"{len(numbers)} lap numbers given for {len(laps)} laps")
    rows = []
    totals = []
    for lap in laps:
        t, total = _elapsed(lap)
        line = getattr(lap, "line", lap)  # a timeline carries distance_m and length_m itself
        rows.append(
            segment_times(
                line.distance_m,
                line.length_m,
                t,
                total,
                corners,
                line.length_m / reference_length_m,
            )
        )
        totals.append(total)
    table = np.vstack(rows)
    j_best = np.argmin(table, axis=0)
    best = table[j_best, np.arange(table.shape[1])]
    ideal_s = ideal_total = None
    if ideal is not None:
        lref = reference_length_m if ideal_length_m is None else ideal_length_m
        ideal_s = segment_times(
            ideal.distance_m,
            lref,
            ideal.time_s,
            ideal.lap_time_s,
            corners,
            lref / reference_length_m,
        )
        ideal_total = float(ideal.lap_time_s)
    return BestOfLaps(
        names=tuple(c.name for c in corners),
        lap_numbers=numbers,
        segment_times_s=table,
        best_s=best,
        best_lap=tuple(numbers[j] for j in j_best),
        composite_lap_time_s=float(best.sum()),
        lap_times_s=np.asarray(totals),
        ideal_s=ideal_s,
        ideal_lap_time_s=ideal_total,
    )
