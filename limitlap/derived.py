r"""Channels a log lacks, derived from the ones it has: GPS-only logs.

Phones and GPS lap timers log time, position and (mostly) speed at 5-25 Hz, with no
accelerometer or gyro. The grip envelope and the grip estimates need the longitudinal and
lateral accelerations, so they are derived (docs/methods.md, Derived accelerations):

- **speed**, when the log has none: the time derivative of the fixes' path, east and north
  each through a Savitzky-Golay filter [1]_ (a local quadratic fitted by least squares;
  its slope at the window's centre), speed the length of that velocity: distance along
  the smoothed path over time, in the local east-north-up frame the reader put the WGS84
  fixes in (:func:`limitlap.gnss.to_enu`). :func:`speed_from_fixes`.
- **longitudinal acceleration** :math:`a_x = \dot v`: the speed's Savitzky-Golay
  derivative. :func:`derivative`.
- **lateral acceleration** :math:`a_y = v^2\kappa` and, where wanted, the yaw rate
  :math:`r = v\kappa`, with :math:`\kappa` the curvature of the lap's rebuilt line at
  each row (ISO 8855: a left-hand bend has positive curvature, so both are + left).
  :func:`add_accelerations`.

Every window is chosen from the data: the white noise of the channel's own samples
(:func:`limitlap.noise.difference_noise`) and their interval. A Savitzky-Golay derivative
is a fixed linear filter h (:func:`scipy.signal.savgol_coeffs`), so white noise of
standard deviation :math:`\sigma` comes out with standard deviation
:math:`\sigma\lVert h\rVert_2`; the window is the shortest that brings this to the
target (:data:`SPEED_NOISE_TARGET_M_S`, :data:`ACCEL_NOISE_TARGET_M_S2`), and no longer
than :data:`MAX_WINDOW_S`. For a_x from a speed that was itself derived from the fixes
the two filters act one after the other on the fixes' noise: the norm is that of their
convolution.

A derived channel agrees with what it was derived from by construction, so the checks
that compare a channel with the GPS path (:mod:`limitlap.unit_checks`, the line's
curvature cross-check) skip it, and the line's rebuild never takes it as an inertial
source (:meth:`limitlap.logfile.Log.measured`).

References
----------
.. [1] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by
   simplified least squares procedures", Analytical Chemistry 36(8):1627-1639, 1964
   (citation from memory [M]).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import signal

from limitlap import noise
from limitlap.units import G0_M_S2

#: Order of the local polynomials. With a window symmetric about its centre, the slope
#: at the centre of the fitted quadratic equals the fitted line's (Savitzky & Golay
#: 1964: the first-derivative weights of orders 1 and 2 agree). [-]
POLYORDER = 2
#: Noise aimed at in a derived speed: about what a GNSS receiver's Doppler speed shows
#: (0.05-0.1 m/s is the usual data-sheet figure; from memory [M]). [m/s]
SPEED_NOISE_TARGET_M_S = 0.1
#: Noise aimed at in a derived a_x, before the envelope's 3 Hz low-pass: about what an
#: automotive MEMS accelerometer of 0.03 g white noise leaves at 20-50 Hz after it
#: (common practice, no published source). [m/s²]
ACCEL_NOISE_TARGET_M_S2 = 0.1
#: Longest window: a braking zone's onset (a few tenths of a second in the log) is spread
#: over the window, so the peak deceleration of a short braking zone is shaved; 1.5 s is
#: under half of a typical 3-5 s braking zone (common practice, no published source). [s]
MAX_WINDOW_S = 1.5
#: How far from the truth the ideal lap may come out with a_y derived from the GPS line,
#: as the warning says it, by the fixes' rate: (lowest rate [Hz], speed logged [% fast],
#: speed from the fixes [% fast or slow], the a_y noise not read [% fast]). The a_y of a
#: GPS-only line carries the fixes' error through the line's smoothing (6 % of a_y on a
#: circle at 10 Hz, 0.1 m noise); its noise, read from the laps (:func:`lateral_noise`),
#: is taken out of the envelope as a sensor's is. Measured on generated sessions, rows at
#: the GNSS rate (tests/test_gps_only.py's form; seeds 1-8 with speed, 1-6 without):
#: 5-25 Hz -0.88 to +0.16 % with speed (benchmarks/gps_only.py, cut from 100 Hz logs,
#: the same), -0.58 to +1.34 % without (its a_x, from a speed itself smoothed over
#: 1.5 s, shaves the braking limit); 2 Hz -1.39 to +0.12 % and -0.38 to +1.13 %; 1 Hz
#: -3.11 to -0.56 % and -1.46 to +2.29 % (fixes a second apart round the line's corners:
#: the true car on that line alone is up to 3 % fast). With the noise not read (a single
#: lap, or laps not alike), as before it was read: up to 1.3 % fast at 10-25 Hz, 1.55 %
#: at 2 Hz, 1.1 % at 1 Hz. [Hz], [%]
IDEAL_OFF_PERCENT = ((5.0, 1.0, 1.5, 1.5), (2.0, 1.5, 1.5, 2.0), (0.0, 3.5, 2.5, 3.5))
#: Samples further apart than this many of their own intervals break a stretch (the
#: filter never reaches across a dropout). [-]
GAP_INTERVALS = 2.5
#: White noise assumed when a channel has too few samples to measure it: the speed's
#: (:data:`SPEED_NOISE_TARGET_M_S`) and a fix's (a GNSS position's sample-to-sample
#: scatter, common practice, no published source). [m/s], [m]
DEFAULT_SPEED_NOISE_M_S = SPEED_NOISE_TARGET_M_S
DEFAULT_FIX_NOISE_M = 0.15


@dataclass(frozen=True, eq=False)
class Derivative:
    """A channel's time derivative on the log's rows, and how it was smoothed.

    Attributes
    ----------
    values : numpy.ndarray
        The derivative at every row inside a stretch of the channel's samples; NaN
        outside (before the first, after the last, across a gap). [unit/s]
    window_s : float
        Span of the Savitzky-Golay window. [s]
    window : int
        The same in samples (odd). [-]
    interval_s : float
        The channel's own sample interval. [s]
    source_noise : float
        White noise of one sample of the channel (measured, or the default). [unit]
    noise : float
        Standard deviation of that noise in the derivative. [unit/s]
    kernel : numpy.ndarray
        The derivative's weights on the samples, centred (for the noise of a derivative
        of this derivative). [1/s]
    """

    values: np.ndarray
    window_s: float
    window: int
    interval_s: float
    source_noise: float
    noise: float
    kernel: np.ndarray


def savgol_kernel(window: int, interval_s: float) -> np.ndarray:
    """Weights of the Savitzky-Golay first derivative at the window's centre. [1/s].

    Applied as a correlation: ``sum(kernel * samples)`` over a window centred on the
    sample is the slope there (:func:`scipy.signal.savgol_coeffs`, ``use="dot"``).
    """
    return signal.savgol_coeffs(window, POLYORDER, deriv=1, delta=interval_s, use="dot")


def savgol_window(
    sigma, interval_s: float, target: float, before=None, max_s: float = MAX_WINDOW_S
) -> int:
    """The shortest odd window whose derivative leaves white noise ``sigma`` at ``target`` or less. [-].

    ``before`` is a filter the noise went through first (weights on the same samples),
    whose convolution with the derivative sets the noise; at least ``POLYORDER + 1``
    samples, at most ``max_s`` (when even that is not enough, the longest).
    """
    shortest = (POLYORDER + 1) | 1  # odd, longer than the polynomial's order
    longest = max(shortest, int(max_s / interval_s) // 2 * 2 + 1)
    for n in range(shortest, longest + 1, 2):
        h = savgol_kernel(n, interval_s)
        if before is not None:
            h = np.convolve(h, before)
        if sigma * math.sqrt(float(np.dot(h, h))) <= target:
            return n
    return longest


def _stretches(t_k, interval_s):
    """Start and end (exclusive) of the runs of samples no more than GAP_INTERVALS apart."""
    breaks = np.flatnonzero(np.diff(t_k) > GAP_INTERVALS * interval_s) + 1
    starts = np.concatenate(([0], breaks))
    ends = np.concatenate((breaks, [t_k.shape[0]]))
    return starts, ends


def derivative(time_s, values, target, *, sigma=None, default_sigma, before=None) -> Derivative:
    """The Savitzky-Golay derivative of a channel, window chosen from its noise, on the rows.

    Parameters
    ----------
    time_s : array-like
        Time of each row. [s]
    values : array-like
        The channel per row; blanks (NaN) between its own samples. [unit]
    target : float
        Noise wanted in the derivative. [unit/s]
    sigma : float, optional
        White noise of one sample; measured from the samples' second differences
        (:func:`limitlap.noise.difference_noise`: a constant slope leaves none) when not
        given. [unit]
    default_sigma : float
        Used when the samples are too few to measure it. [unit]
    before : numpy.ndarray, optional
        A filter the samples' noise went through already (see :func:`savgol_window`). [-]

    Returns
    -------
    Derivative

    Notes
    -----
    Each stretch of samples (broken where they are more than :data:`GAP_INTERVALS`
    intervals apart) is put on a uniform grid at the samples' median interval (linear
    interpolation; the samples themselves when they are uniform), filtered there
    (:func:`scipy.signal.savgol_filter`, the ends by the polynomial fitted to the first
    and last windows) and read back at every row inside the stretch. A stretch shorter
    than the window stays NaN.
    """
    t = np.asarray(time_s, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    own = np.flatnonzero(np.isfinite(v))
    out = np.full(t.shape, np.nan)
    dt = noise.own_interval(t, v)
    if not math.isfinite(dt) or dt <= 0.0:
        return Derivative(out, math.nan, 0, math.nan, math.nan, math.nan, np.zeros(0))
    if sigma is None:
        sigma = noise.difference_noise(v[own], order=2)
    if not math.isfinite(sigma):
        sigma = default_sigma
    n = savgol_window(sigma, dt, target, before)
    h = savgol_kernel(n, dt)
    both = h if before is None else np.convolve(h, before)
    t_k, v_k = t[own], v[own]
    for a, b in zip(*_stretches(t_k, dt), strict=True):
        if b - a < n:
            continue
        m = round((t_k[b - 1] - t_k[a]) / dt) + 1
        grid = t_k[a] + dt * np.arange(m)
        on_grid = np.interp(grid, t_k[a:b], v_k[a:b])
        d = signal.savgol_filter(on_grid, n, POLYORDER, deriv=1, delta=dt, mode="interp")
        rows = slice(*np.searchsorted(t, [t_k[a], t_k[b - 1]], side="left"))
        rows = slice(rows.start, rows.stop + 1)
        out[rows] = np.interp(t[rows], grid, d)
    noise_out = sigma * math.sqrt(float(np.dot(both, both)))
    return Derivative(out, n * dt, n, dt, float(sigma), noise_out, h)


@dataclass(frozen=True, eq=False)
class SpeedFromFixes:
    """Speed derived from the GPS fixes (:func:`speed_from_fixes`).

    Attributes
    ----------
    speed_m_s : numpy.ndarray
        Per row; NaN outside the stretches of fixes. [m/s]
    window_s : float
        Span of the Savitzky-Golay window on the fixes. [s]
    window : int
        The same in fixes (a stretch of fixes shorter than this gives no speed). [-]
    fix_noise_m : float
        White noise of one fix per axis (measured, or the default). [m]
    noise_m_s : float
        Standard deviation of that noise in the speed. [m/s]
    kernel : numpy.ndarray
        The speed's weights on the fixes (for the noise of its derivative). [1/s]
    """

    speed_m_s: np.ndarray
    window_s: float
    window: int
    fix_noise_m: float
    noise_m_s: float
    kernel: np.ndarray


def speed_from_fixes(time_s, x_m, y_m) -> SpeedFromFixes:
    r"""Speed along the fixes' smoothed path: :math:`\sqrt{\dot x^2 + \dot y^2}`. [m/s].

    Parameters
    ----------
    time_s : array-like
        Time of each row. [s]
    x_m, y_m : array-like
        East and north of each row's fix in the local frame (planar; WGS84 fixes as
        :func:`limitlap.gnss.to_enu` converted them), NaN between fixes. [m]

    Returns
    -------
    SpeedFromFixes

    Notes
    -----
    :math:`\dot x` and :math:`\dot y` are Savitzky-Golay derivatives (:func:`derivative`)
    with one window for both, chosen from the larger of the two axes' measured white
    noise so that the speed's noise is about :data:`SPEED_NOISE_TARGET_M_S`; rows between
    fixes take the derivative interpolated in time. The noise of :math:`\dot x` and
    :math:`\dot y` adds a bias of about :math:`\sigma_v^2 / 2v` to their length (under
    0.001 m/s above 10 m/s at the target), left in.
    """
    t = np.asarray(time_s, dtype=np.float64)
    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    fix = np.isfinite(x) & np.isfinite(y)
    # third differences: a path's second differences hold its curvature (v² κ dt², 0.1 m
    # through a corner at 10 Hz, as large as the fixes' noise); its third, a constant
    # lateral acceleration left out, hold little but noise
    sigmas = [noise.difference_noise(a[fix], order=3) for a in (x, y)]
    sigma = max((s for s in sigmas if math.isfinite(s)), default=DEFAULT_FIX_NOISE_M)
    kw = {"sigma": sigma, "default_sigma": DEFAULT_FIX_NOISE_M}
    xs, ys = np.where(fix, x, np.nan), np.where(fix, y, np.nan)
    dx = derivative(t, xs, SPEED_NOISE_TARGET_M_S, **kw)
    dy = derivative(t, ys, SPEED_NOISE_TARGET_M_S, **kw)
    speed = np.hypot(dx.values, dy.values)
    return SpeedFromFixes(speed, dx.window_s, dx.window, sigma, dx.noise, dx.kernel)


def accel_from_speed(time_s, speed_m_s, from_fixes: SpeedFromFixes | None = None) -> Derivative:
    r"""Longitudinal acceleration :math:`a_x = \dot v` on the rows (+ forward). [m/s²].

    ``from_fixes``: the speed was derived from the fixes (:func:`speed_from_fixes`); the
    noise is then the fixes' through both filters, not the speed's own second
    differences (they are smooth, their noise no longer white).
    """
    if from_fixes is None:
        return derivative(
            time_s, speed_m_s, ACCEL_NOISE_TARGET_M_S2, default_sigma=DEFAULT_SPEED_NOISE_M_S
        )
    return derivative(
        time_s,
        speed_m_s,
        ACCEL_NOISE_TARGET_M_S2,
        sigma=from_fixes.fix_noise_m,
        default_sigma=DEFAULT_FIX_NOISE_M,
        before=from_fixes.kernel,
    )


def lateral_from_curvature(speed_m_s, curvature_1_m):
    r"""Lateral acceleration of motion along a path: :math:`a_y = v^2\kappa` (+ left). [m/s²].

    Normal acceleration of a point moving at speed v along a curve of curvature κ
    (kinematics; Milliken & Milliken, *Race Car Vehicle Dynamics*, SAE 1995, ch. 5); the
    car's sideslip rate is left out.
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    return v * v * np.asarray(curvature_1_m, dtype=np.float64)


def yaw_rate_from_curvature(speed_m_s, curvature_1_m):
    r"""Course rate of motion along a path: :math:`r = v\kappa` (+ counter-clockwise). [rad/s].

    Equal to the yaw rate when the sideslip does not change (same source as
    :func:`lateral_from_curvature`).
    """
    return np.asarray(speed_m_s, dtype=np.float64) * np.asarray(curvature_1_m, dtype=np.float64)


#: Where two laps' a_y are compared (:func:`lateral_noise`): both faster than this, their
#: speeds within SAME_SPEED of each other, the stations within SAME_PLACE_M of each other
#: and within SAME_SHARE of the lap (a stretch of track that passes close by is not the
#: same place). Common practice, no published source. [m/s], [-], [m], [-]
NOISE_MIN_SPEED_M_S = 15.0
SAME_SPEED = 0.05
SAME_PLACE_M = 3.0
SAME_SHARE = 0.05
#: Fewest differences :func:`lateral_noise` gives a figure from. [-]
MIN_NOISE_DIFFERENCES = 200


@dataclass(frozen=True)
class LateralFromLine:
    """How a derived a_y was made (``log.derived["accel_lat"]``), and its noise.

    Attributes
    ----------
    noise_m_s2 : float or None
        :func:`lateral_noise` of the laps it was derived on; None when too few laps. [m/s²]
    """

    noise_m_s2: float | None

    def __str__(self) -> str:
        """How it was made, in words."""
        return "speed squared times the rebuilt line's curvature"


def lateral_noise(rebuilt) -> float | None:
    r"""Noise of a derived :math:`a_y = v^2\kappa`, from laps driven alike at the same place. [m/s²].

    The curvature of a GPS-only line carries the fixes' error through the line's
    smoothing (their white noise and their slow drift alike), and :math:`v^2` turns it into
    lateral acceleration: noise that does not show in the derived channel's own
    differences (it is as smooth as the line), but widens a high quantile of it as a
    sensor's noise would. Two laps driven alike through one place have nearly the same
    :math:`a_y` there, so their difference is mostly the two errors: each station of a lap
    is matched to the previous lap's nearest station (within :data:`SAME_PLACE_M`, and
    :data:`SAME_SHARE` of the lap), where both laps are faster than
    :data:`NOISE_MIN_SPEED_M_S` and within :data:`SAME_SPEED` of each other's speed; the
    noise is the differences' robust spread over :math:`\sqrt 2` (1.4826 times the median
    absolute deviation). A real difference between the laps (another line, another speed)
    only adds to it: the estimate errs large, and the envelope's noise lift with it
    (a narrower envelope, a slower ideal: the safe side).

    ``rebuilt``: (laps.Lap, DrivenLap) pairs. None with fewer than
    :data:`MIN_NOISE_DIFFERENCES` differences (fewer than two laps alike).
    """
    pairs = sorted(rebuilt, key=lambda pair: pair[0].number)
    diffs = [_same_place_differences(a, b) for (_, a), (_, b) in itertools.pairwise(pairs)]
    d = np.concatenate(diffs) if diffs else np.zeros(0)
    if d.size < MIN_NOISE_DIFFERENCES:
        return None
    return noise.mad_scale(d) / math.sqrt(2.0)


def noise_to_take_out(logs) -> tuple[bool, float | None]:
    """(remove_noise, noise_m_s2) for :func:`limitlap.envelope.fit_envelope` on these logs' accelerations (one log's analysis, or a common envelope of several).

    Logged accelerations only: the noise measured from their differences (True, None).
    Any log with derived ones: the largest derived a_y noise read from the laps
    (:func:`noise_of`), or nothing taken out when one's could not be read (False, None).
    """
    if not any(n in log.derived for log in logs for n in ("accel_lon", "accel_lat")):
        return True, None
    noises = [noise_of(log) for log in logs if "accel_lat" in log.derived]
    if not noises or any(n is None for n in noises):
        return False, None
    return True, max(noises)


def noise_of(log) -> float | None:
    """A log's derived a_y noise (:func:`lateral_noise`, kept in ``log.derived``), None when a_y was logged or its noise could not be read. [m/s²]."""
    how = log.derived.get("accel_lat")
    return how.noise_m_s2 if isinstance(how, LateralFromLine) else None


def _same_place_differences(a, b) -> np.ndarray:
    """Lap b's a_y less lap a's at the same place, where both went alike (:func:`lateral_noise`). [m/s²]."""
    from scipy.spatial import cKDTree

    ay_a = lateral_from_curvature(a.speed_m_s, a.line.curvature_1_m)
    ay_b = lateral_from_curvature(b.speed_m_s, b.line.curvature_1_m)
    gap, j = cKDTree(np.column_stack([a.line.x_m, a.line.y_m])).query(
        np.column_stack([b.line.x_m, b.line.y_m])
    )
    share_a = np.asarray(a.line.distance_m) / a.line.length_m
    share_b = np.asarray(b.line.distance_m) / b.line.length_m
    va, vb = np.asarray(a.speed_m_s)[j], np.asarray(b.speed_m_s)
    same = (
        (gap <= SAME_PLACE_M)
        & (np.abs(share_a[j] - share_b) <= SAME_SHARE)
        & (np.minimum(va, vb) > NOISE_MIN_SPEED_M_S)
        & (np.abs(va - vb) <= SAME_SPEED * np.maximum(va, vb))
    )
    d = ay_b[same] - ay_a[j][same]
    return d[np.isfinite(d)]


def line_on_rows(time_s, lap, drv):
    """A rebuilt lap's curvature [1/m] and grade sine [-] at the log's rows inside the lap (NaN elsewhere).

    ``drv.time_s`` is the time from the lap's start at each station; the lap closes on
    its first station at the lap time.
    """
    t = np.asarray(time_s, dtype=np.float64) - lap.start_time_s
    st = np.append(np.asarray(drv.time_s, dtype=np.float64), lap.time_s)
    keep = np.concatenate(([True], np.diff(st) > 0))
    inside = (t >= 0.0) & (t <= lap.time_s)
    out = []
    for per_station in (drv.line.curvature_1_m, drv.line.gradient):
        a = np.asarray(per_station, dtype=np.float64)
        a = np.append(a, a[0])[keep]
        out.append(np.where(inside, np.interp(t, st[keep], a), np.nan))
    kappa, grad = out
    return kappa, grad / np.sqrt(1.0 + grad * grad)


def missing_accelerations(log) -> tuple[str, ...]:
    """The acceleration channels the log lacks (of ``accel_lon``, ``accel_lat``)."""
    return tuple(name for name in ("accel_lon", "accel_lat") if not log.has(name))


@dataclass(frozen=True, eq=False)
class Accelerations:
    """What :func:`add_accelerations` derived.

    Attributes
    ----------
    missing : tuple of str
        The channels the log lacked, now derived.
    accel_lon : Derivative or None
        The longitudinal acceleration's derivative (None when logged).
    speed_from_fixes : bool
        The speed it came from was itself derived from the fixes.
    lateral_noise_m_s2 : float or None
        The derived a_y's noise read from the laps (:func:`lateral_noise`); None when a_y
        was logged or too few laps were alike. [m/s²]
    fix_rate_hz : float
        The GPS fixes' rate (their median interval); NaN with fewer than two. [Hz]
    """

    missing: tuple[str, ...]
    accel_lon: Derivative | None
    speed_from_fixes: bool
    lateral_noise_m_s2: float | None = None
    fix_rate_hz: float = math.nan

    @property
    def smoothing_s(self) -> float:
        """How long a stretch of the log each derived a_x sample averages (the window). [s]."""
        return self.accel_lon.window_s if self.accel_lon is not None else math.nan


def add_accelerations(log, rebuilt) -> Accelerations:
    r"""The log's missing acceleration channels, derived and put into it (marked in ``log.derived``).

    Parameters
    ----------
    log : limitlap.logfile.Log
        The session; ``speed`` logged or derived from the fixes. [-]
    rebuilt : sequence of (laps.Lap, driven.DrivenLap)
        The laps whose rows get a_y (and the grade), with their rebuilt lines. [-]

    Returns
    -------
    Accelerations

    Notes
    -----
    ``accel_lon`` is :math:`\dot v + g\sin\theta` (what an accelerometer measures: the
    specific force, as the envelope reads a logged channel), θ the rebuilt line's grade
    at the row (0 outside the rebuilt laps and on a line without heights); ``accel_lat``
    is :math:`v^2\kappa` inside the rebuilt laps, NaN elsewhere.
    """
    missing = missing_accelerations(log)
    t, v = log.time_s, log.channels["speed"]
    kappa = np.full(t.shape, np.nan)
    sin_grade = np.zeros(t.shape)
    for lap, drv in rebuilt:
        k_lap, s_lap = line_on_rows(t, lap, drv)
        inside = np.isfinite(k_lap)
        kappa[inside], sin_grade[inside] = k_lap[inside], s_lap[inside]
    fixes = log.derived.get("speed")
    fixes = fixes if isinstance(fixes, SpeedFromFixes) else None
    dvdt, lateral = None, None
    if "accel_lon" in missing:
        dvdt = accel_from_speed(t, v, fixes)
        log.channels["accel_lon"] = dvdt.values + G0_M_S2 * sin_grade
        log.derived["accel_lon"] = dvdt
    if "accel_lat" in missing:
        ok = np.isfinite(v)
        filled = v if ok.all() else np.interp(t, t[ok], v[ok])
        log.channels["accel_lat"] = lateral_from_curvature(filled, kappa)
        lateral = lateral_noise(rebuilt)
        log.derived["accel_lat"] = LateralFromLine(lateral)
    return Accelerations(missing, dvdt, fixes is not None, lateral, _fix_rate_hz(log))


def _fix_rate_hz(log) -> float:
    """The rate of the log's GPS fixes (:func:`limitlap.gnss.fix_rows`, median interval). [Hz]."""
    from limitlap.gnss import fix_rows

    t = log.time_s[fix_rows(log)]
    return 1.0 / float(np.median(np.diff(t))) if t.size > 1 else math.nan


def ideal_off_percent(acc: Accelerations) -> tuple[float, bool]:
    """How far the ideal lap on a derived a_y may be off (:data:`IDEAL_OFF_PERCENT`), and whether either way (True) or fast only. [%]."""
    rate = acc.fix_rate_hz if math.isfinite(acc.fix_rate_hz) else 0.0
    _, logged, from_fixes, unread = next(row for row in IDEAL_OFF_PERCENT if rate >= row[0])
    if acc.lateral_noise_m_s2 is None:
        return unread, False
    return (from_fixes, True) if acc.speed_from_fixes else (logged, False)


def ideal_doubt(acc: Accelerations) -> str:
    """:func:`ideal_off_percent` in words: "up to about 1 % fast"."""
    percent, either = ideal_off_percent(acc)
    return f"up to about {percent:g} % {'fast or slow' if either else 'fast'}"


def note(acc: Accelerations) -> str:
    """The sentence that says what was derived and how smooth it is (without the file)."""
    if not acc.missing:
        return ""
    names = " or ".join(f"'{n}'" for n in acc.missing)
    source = "speed (itself from the GPS fixes)" if acc.speed_from_fixes else "speed"
    how = {
        ("accel_lon", "accel_lat"): f"accelerations derived from {source} and the GPS line",
        ("accel_lon",): f"longitudinal acceleration derived from {source}",
        ("accel_lat",): "lateral acceleration derived from speed and the GPS line",
    }[acc.missing]
    said = []
    if math.isfinite(acc.smoothing_s):
        said.append(f"grip limits from them are smoothed by about {acc.smoothing_s:.1f} s")
    if "accel_lat" in acc.missing:
        said.append(f"the ideal lap may come out {ideal_doubt(acc)}")
    return (
        f"no {names} channel: {how}; {', and '.join(said) or 'as they are'} (the unit, sign "
        "and line checks skip a derived channel: it agrees with the GPS by construction)"
    )


def on_stations(drv, lap, time_s, accel_lon_m_s2):
    """A lap rebuilt before its accelerations were derived, with them on its stations.

    a_y is :func:`lateral_from_curvature` of the stations' own speed and curvature (the
    value the rows carry, without their interpolation), a_x the rows' value at each
    station's time.
    """
    t_st = lap.start_time_s + np.asarray(drv.time_s, dtype=np.float64)
    ax = np.asarray(accel_lon_m_s2, dtype=np.float64)
    ok = np.isfinite(ax)
    ax_st = np.interp(t_st, np.asarray(time_s)[ok], ax[ok]) if ok.sum() >= 2 else t_st * np.nan
    ay_st = lateral_from_curvature(drv.speed_m_s, drv.line.curvature_1_m)
    return replace(drv, accel_lon_m_s2=ax_st, accel_lat_m_s2=ay_st)
