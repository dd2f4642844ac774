r"""The driven line of a lap: low-rate GNSS fused with speed and the inertial channels.

Curvature from GNSS positions alone is dominated by their noise (docs/methods.md, Driven line: about
15 % radius error from three 1 m-noise points on a 50 m corner). The line of a lap is
therefore rebuilt in two fixed-interval smoothing steps at the log's full rate, then
closed and resampled by distance:

1. **Heading.** The state is the heading :math:`\psi_k` and a gyro bias :math:`b_k` at
   every row; the process is :math:`\psi_{k+1} = \psi_k + (r_k - b_k)\,\Delta t_k`
   (+ noise) with a random-walk bias, where :math:`r` is the yaw rate, or the course rate
   :math:`a_y / v` from the lateral accelerometer, or both averaged with inverse-variance
   weights measured in the log (:func:`_inertial_sources`); the measurements are the
   GNSS course over ground from the chord between the fixes either side of each fix,
   read through the inertial heading's shape over the chord (:func:`_gnss_course`), so
   a chord across a turn-in or a dropout does not pull the heading towards its mean
   direction. The maximum-likelihood estimate over the whole stretch is the
   Rauch-Tung-Striebel fixed-interval smoother of this linear-Gaussian model (Rauch,
   Tung & Striebel 1965); here it is computed as the equivalent regularised least-squares
   problem, whose normal matrix is banded (bandwidth 2 with the states interleaved), in
   one banded Cholesky solve.
2. **Position.** East and north separately, :math:`p_{k+1} = p_k + v_k\cos\psi_k\,\Delta t_k`
   (+ noise) with the GNSS fixes as measurements: the same smoother, tridiagonal.
3. **Closure** (Casanova et al. 2001, who make the reconstructed lap close without a
   jump at the start/finish line): the heading mismatch after one lap (minus a whole
   turn) and the position mismatch are spread linearly over the lap's distance.
4. **Curvature** on uniform stations: the inertial heading's (Hermite-interpolated
   between rows, smoothed by a short Gaussian) plus the smoothed heading's beyond
   :data:`SHAPE_CROSSOVER_M` (a complementary filter, :func:`_closed_curvature`); height
   is a periodic low-pass (Fourier) of the GNSS altitude, gradient its derivative.

Curvature is cross-checked against :math:`a_y/v^2` and :math:`r/v` (docs/methods.md, Driven line,
:math:`\kappa = a_n / v^2 = \dot\chi / v`), and, independently of the fusion, the
GNSS-only curvature of a smoothing spline is compared with each channel's own path
through the same spline (like with like); the figures go into
:attr:`DrivenLap.agreement`, with the noise measured and how far the rate leaves each
corner's minimum speed uncertain (docs/methods.md, Rates and noise).

Without yaw rate and lateral acceleration the course rate of the GNSS smoothing spline
takes the gyro's place, its smoothing then chosen from the fixes' measured noise
(:func:`gnss_only_cutoff_s`). Planar ``x``/``y`` logs (simulators) go through the same steps.

References
----------
.. [1] D. Casanova, R. S. Sharp, P. Symonds, "Construction of race circuit geometry from
   on-car measurements", Proc. IMechE Part D 215(9):1033-1042, 2001.
.. [2] H. E. Rauch, F. Tung, C. T. Striebel, "Maximum likelihood estimates of linear
   dynamic systems", AIAA Journal 3(8):1445-1450, 1965 (page numbers from memory [M]).
.. [3] P. Craven and G. Wahba, "Smoothing noisy data with spline functions", Numer. Math.
   31:377-403, 1979 (GCV; details from memory [M]).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import interpolate, linalg
from scipy.ndimage import gaussian_filter1d

from limitlap import noise
from limitlap.errors import LimitlapError
from limitlap.line import Line
from limitlap.units import DEG_TO_RAD, G0_M_S2, KMH_TO_M_S

# Noise levels. The yaw-rate gyro's, the lateral accelerometer's and the GNSS course's
# are measured from each log (limitlap.noise: white noise from the channel's own second
# differences; the course's from the scatter of successive course measurements); these
# are the defaults when a lap holds too few samples to measure them, and a tenth of each
# is the floor (a noiseless simulator log would otherwise get an infinite weight).
# Typical of a motorsport logger with an automotive MEMS IMU and a single-band GNSS
# module: common practice, no published source [M].
#: Yaw-rate gyro white noise per sample (default). [rad/s]
SIGMA_YAW_RAD_S = 0.5 * DEG_TO_RAD
#: Lateral accelerometer white noise per sample (default). [m/s²]
SIGMA_ACCEL_M_S2 = 0.05 * G0_M_S2
#: Heading model error (sideslip changes, vibration), random walk. [rad²/s]
Q_HEADING_RAD2_S = 1.0e-4
#: Gyro bias random walk. [(rad/s)²/s]
Q_BIAS = 1.0e-6
#: Sample-to-sample (white) part of the GNSS position error, per axis (default). [m]
SIGMA_FIX_WHITE_M = 0.15
#: Whole GNSS position error, per axis. [m]
SIGMA_FIX_M = 1.0
#: Dead-reckoning position random walk (speed scale, heading error). [m²/s]
Q_POSITION_M2_S = 0.05
#: Shortest baseline for a GNSS course measurement. [m]
MIN_BASELINE_M = 2.0
#: Time between the fixes either side of a course measurement, at least one fix
#: interval each way. [s]
COURSE_SPAN_S = 0.2
#: Slowest speed at which course and curvature mean anything. [m/s]
MIN_SPEED_M_S = 3.0
#: Gaussian smoothing of the inertial curvature along the line (standard deviation).
#: Every metre of it is ideal-lap time the driver cannot find where the curvature rises
#: fast: a 1 m Gaussian on the exact curvature of tests/arc_circuit.py (steps into its
#: arcs) makes the ideal 0.38 % faster, 0.5 m 0.18 %. With the fixes' noise kept out of
#: the curvature (SHAPE_CROSSOVER_M) only the gyro's is left to average: 0.5 m brought
#: seeded generated sessions at 100 Hz from 0.02 s too fast to within 0.01 s on average
#: and the demo session from 0.03 s too fast to 0.03 s slow. [m]
CURVATURE_SMOOTHING_M = 0.5
#: Crossover of the line's curvature between its two sources (standard deviation of the
#: Gaussian low-pass in distance): detail shorter than about this comes from the
#: inertial channels alone, longer from the heading the GNSS course corrects. Below
#: 10 m the fixes' noise came through the course into the corners' peaks (the ideal
#: lap 0.1 % slower on generated sessions at 5-10 Hz); 30 m and 100 m did as well as
#: each other (measured with benchmarks/rates.py and seeded sessions, 5-200 Hz). [m]
SHAPE_CROSSOVER_M = 30.0
#: GNSS-path splines of the cross-check: period at which the smoothing spline's response
#: falls to one half, whatever the fix rate. The spline minimises sum (y - f)² +
#: lam int f''² dt; with fixes dt apart the sum is about int (y - f)² dt / dt, so it
#: acts like the filter 1 / (1 + lam dt w^4) (Craven & Wahba 1979 [M]; measured on sines
#: at 5-25 Hz in tests/test_rates.py) and lam = (T / 2 pi)^4 / dt puts the half at
#: period T. 2 s keeps a corner's shape (2-5 s long) and leaves the GNSS noise a tenth
#: of the curvature or less at 5-25 Hz. [s]
GNSS_CUTOFF_S = 2.0
#: GNSS-only lines (no yaw rate, no lateral acceleration): the same spline's half-response
#: period, from the fixes' own white noise sigma (:func:`limitlap.noise.difference_noise`
#: of east and north from third differences, the larger): ``GNSS_ONLY_CUTOFF_S * (sigma / GNSS_ONLY_NOISE_M) **
#: 0.25``, within GNSS_ONLY_CUTOFF_RANGE_S. Too short a period lets the fixes' noise into
#: the curvature (a noisy corner is a slower corner), too long shaves the corners' peaks
#: (a faster one). Measured on generated sessions at 10 and 25 Hz, with the true car on
#: the rebuilt line (seeds 1-2, noise 0.5-2 times the generator's): the period that gave
#: the generator's ideal lap time was 1.0-1.1 s at 0.05 m, 1.25-1.3 s at 0.1 m and 1.5 s
#: at 0.2 m of measured noise, at either rate. The smoothing chosen by generalised
#: cross-validation, used before, took the fixes' time-correlated error for signal: the
#: ideal on its lines came out 0.9-2.1 % slow (common practice, no published source). [s]
GNSS_ONLY_CUTOFF_S = 1.3
GNSS_ONLY_NOISE_M = 0.1
GNSS_ONLY_CUTOFF_RANGE_S = (0.8, 3.0)
#: Height: shortest wavelength kept by the periodic low-pass. [m]
HEIGHT_CUTOFF_M = 150.0
#: Padding either side of the lap given to the smoothers (edge effects). [s]
PAD_S = 5.0
#: Rows a second a lap's path alone is rebuilt from (:func:`rebuild_path`): a faster log
#: keeps every k-th row; 50 Hz rows give the 100 Hz line (docs/methods.md, Rates). [Hz]
PATH_RATE_HZ = 50.0
#: Agreement below which the result carries a warning: correlation of the line's
#: curvature with a channel's, and the relative RMS difference. Common practice, no
#: published source.
MIN_CORRELATION = 0.9
MAX_RELATIVE_RMS = 0.25


#: Corners for the rate warning: curvature peaks tighter than this radius. [m]
MIN_APEX_RADIUS_M = 400.0
#: The rate warning is given when the corners' minimum speeds are uncertain by this much
#: or more (median over the corners; a corner's time left moves by about its length
#: over v times dv / v: 0.05 s for 1 km/h through a 100 m corner at 80 km/h). [km/h]
MIN_SPEED_DOUBT_KMH = 1.0
#: Slowest speed at which the curvature cross-check divides by speed. [m/s]
CHECK_MIN_SPEED_M_S = 10.0


@dataclass(frozen=True, eq=False)
class CurvatureCheck:
    """The line's curvature measured two more ways, at its stations (NaN where unknown).

    Attributes
    ----------
    from_accel_lat_1_m, from_yaw_rate_1_m : numpy.ndarray
        :math:`a_y/v^2` and :math:`r/v`, smoothed as the line's curvature; NaN below
        :data:`CHECK_MIN_SPEED_M_S` and where the log has no such channel. [1/m]
    fast : numpy.ndarray of bool
        Stations faster than :data:`CHECK_MIN_SPEED_M_S`. [-]
    """

    from_accel_lat_1_m: np.ndarray
    from_yaw_rate_1_m: np.ndarray
    fast: np.ndarray

    @property
    def available(self) -> bool:
        """Whether either channel gave a curvature anywhere. [-]."""
        return bool(
            np.isfinite(self.from_accel_lat_1_m).any() or np.isfinite(self.from_yaw_rate_1_m).any()
        )


@dataclass(frozen=True, eq=False)
class DrivenLap:
    """The line a lap actually drove, with the lap's channels on its stations (SI).

    Attributes
    ----------
    line : Line
        Closed line, station 0 at the gate, uniform spacing, with x/y/z (ENU). [m]
    time_s : numpy.ndarray
        Time since the lap's start at each station. [s]
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2, yaw_rate_rad_s : numpy.ndarray
        Logged channels at each station (interpolated by distance); NaN where the log
        has no such channel. [m/s], [m/s²], [m/s²], [rad/s]
    throttle, brake_pa, gear : numpy.ndarray
        Pedal position [0-1], brake pressure [Pa], gear [-] (nearest sample).
    agreement : dict
        Curvature cross-check figures (see :func:`reconstruct_lap`).
    warnings : list of str
        One line each.
    steer_rad : numpy.ndarray
        Steering-wheel angle, + left. [rad]
    lap_time_s : float or None
        The lap's time gate to gate (from the lap split), so comparisons close the lap
        exactly as the lap table does. [s]
    curvature_check : CurvatureCheck or None
        The line's curvature from a_y/v² and r/v, for the data check.
    """

    line: Line
    time_s: np.ndarray
    speed_m_s: np.ndarray
    accel_lon_m_s2: np.ndarray
    accel_lat_m_s2: np.ndarray
    yaw_rate_rad_s: np.ndarray
    throttle: np.ndarray
    brake_pa: np.ndarray
    gear: np.ndarray
    agreement: dict = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    steer_rad: np.ndarray | None = None
    lap_time_s: float | None = None
    curvature_check: CurvatureCheck | None = None


# --------------------------------------------------------------------------- smoothers


def _fill(t, values):
    """Linear interpolation over NaN (and held at the ends)."""
    ok = np.isfinite(values)
    if ok.all():
        return values
    if not ok.any():
        return np.zeros_like(values)
    return np.interp(t, t[ok], values[ok])


def smooth_heading(dt_s, rate_rad_s, rate_var, fix_index, course_rad, course_var):
    r"""Heading and gyro bias at every row: fixed-interval smoother (RTS) as banded LSQ.

    Minimises

    .. math::
        \sum_k \frac{(\psi_{k+1}-\psi_k-(r_k-b_k)\Delta t_k)^2}{\sigma_{r,k}^2\Delta t_k^2
        + q_\psi \Delta t_k} + \sum_k \frac{(b_{k+1}-b_k)^2}{q_b\Delta t_k}
        + \sum_j \frac{(\psi_{i_j}-\chi_j)^2}{\sigma_{\chi,j}^2},

    the negative log-likelihood of the linear-Gaussian model, so the minimiser equals the
    Rauch-Tung-Striebel smoothed estimate (Rauch, Tung & Striebel 1965).

    Parameters
    ----------
    dt_s : numpy.ndarray
        Time step from each row to the next, n - 1 values. [s]
    rate_rad_s, rate_var : numpy.ndarray
        Heading rate per row (gyro or a_y/v) [rad/s] and its variance [(rad/s)²].
    fix_index : numpy.ndarray
        Rows that carry a course measurement (int).
    course_rad, course_var : numpy.ndarray
        Course at those rows (unwrapped near the integrated heading) [rad]; variance [rad²].

    Returns
    -------
    psi_rad, bias_rad_s : numpy.ndarray
        Heading [rad] and bias [rad/s] per row.
    """
    n = rate_rad_s.shape[0]
    m = 2 * n
    r = 0.5 * (rate_rad_s[1:] + rate_rad_s[:-1])
    var_r = 0.5 * (rate_var[1:] + rate_var[:-1])
    w1 = 1.0 / (var_r * dt_s**2 + Q_HEADING_RAD2_S * dt_s)
    w2 = 1.0 / (Q_BIAS * dt_s)
    diag = np.zeros(m)
    up1 = np.zeros(m)  # M[j-1, j] stored at j
    up2 = np.zeros(m)  # M[j-2, j] stored at j
    rhs = np.zeros(m)
    k = np.arange(n - 1)
    ip, ib, iq = 2 * k, 2 * k + 1, 2 * k + 2  # psi_k, b_k, psi_{k+1}
    # rows psi_{k+1} - psi_k + b_k dt = r dt
    diag[ip] += w1
    diag[ib] += w1 * dt_s**2
    diag[iq] += w1
    up1[ib] += -w1 * dt_s  # (psi_k, b_k)
    up2[iq] += -w1  # (psi_k, psi_{k+1})
    up1[iq] += w1 * dt_s  # (b_k, psi_{k+1})
    rhs[ip] += -w1 * r * dt_s
    rhs[ib] += w1 * dt_s * r * dt_s
    rhs[iq] += w1 * r * dt_s
    # rows b_{k+1} - b_k = 0
    diag[ib] += w2
    diag[ib + 2] += w2
    up2[ib + 2] += -w2
    # measurements and a weak prior on the first bias
    np.add.at(diag, 2 * fix_index, 1.0 / course_var)
    np.add.at(rhs, 2 * fix_index, course_rad / course_var)
    diag[1] += 1.0  # prior b_0 ~ N(0, 1 (rad/s)^2)
    if fix_index.shape[0] == 0:
        diag[0] += 1.0  # no course at all: anchor psi_0 = 0
    ab = np.vstack([up2, up1, diag])
    z = linalg.solveh_banded(ab, rhs, lower=False, check_finite=False)
    return z[0::2], z[1::2]


def smooth_track(dt_s, step_m, fix_index, fix_m, fix_var):
    r"""Position along one axis at every row: dead reckoning steps fused with fixes (RTS).

    Minimises :math:`\sum_k (p_{k+1}-p_k-\delta_k)^2/(q_p\Delta t_k) + \sum_j
    (p_{i_j}-z_j)^2/\sigma_z^2` (tridiagonal normal equations).

    Parameters
    ----------
    dt_s : numpy.ndarray
        Time steps, n - 1 values. [s]
    step_m : numpy.ndarray
        Dead-reckoning displacement of each step, n - 1 values. [m]
    fix_index : numpy.ndarray
        Rows with a fix (int).
    fix_m, fix_var : numpy.ndarray
        Fix coordinate [m] and variance [m²].

    Returns
    -------
    numpy.ndarray
        Coordinate per row. [m]
    """
    n = step_m.shape[0] + 1
    w = 1.0 / (Q_POSITION_M2_S * dt_s)
    diag = np.zeros(n)
    up = np.zeros(n)
    rhs = np.zeros(n)
    diag[:-1] += w
    diag[1:] += w
    up[1:] = -w
    rhs[:-1] -= w * step_m
    rhs[1:] += w * step_m
    np.add.at(diag, fix_index, 1.0 / fix_var)
    np.add.at(rhs, fix_index, fix_m / fix_var)
    if fix_index.shape[0] == 0:
        diag[0] += 1.0
    return linalg.solveh_banded(np.vstack([up, diag]), rhs, lower=False, check_finite=False)


def _dead_reckoned(t, v, psi):
    """Path integrated from speed and heading, as complex east + i north per row. [m]."""
    step = 0.5 * (v[1:] + v[:-1]) * np.diff(t) * np.exp(0.5j * (psi[1:] + psi[:-1]))
    return np.concatenate([[0.0], np.cumsum(step)])


def _gnss_course(t, x, y, fix, v, psi_dr):
    r"""Course over ground at fixes, from the chord between the fixes either side.

    The chord from fix a to fix c points along the path's mean direction between them,
    not along the tangent at the fix b in between wherever the curvature changes (a
    turn-in, or a long chord across a dropout). The heading's shape between a and c is
    taken from the inertial channels instead: with :math:`D` the dead-reckoned
    displacement a -> c from speed and the integrated heading rate :math:`\psi_{dr}`, and
    :math:`C` the chord, :math:`\arg(C/D)` is the offset of :math:`\psi_{dr}` from the true
    heading, so the course at b is :math:`\psi_{dr,b} + \arg(C/D)`: exact for any shape
    the inertial channels follow, whatever the fix rate or the gap.

    The variance is :math:`s^2/|C|^2`; :math:`s` (in metres) is measured from the scatter
    of successive offsets :math:`\arg(C/D)` that share no fix (:func:`_course_scale`).
    Returns the rows of the measurements (int), the course [rad], its variance [rad²]
    and s [m] (NaN without measurements).
    """
    f = np.flatnonzero(fix)
    none = (f[:0], np.zeros(0), np.zeros(0), math.nan)
    if f.shape[0] < 3:
        return none
    dt_fix = float(np.median(np.diff(t[f])))
    half = max(1, math.ceil(0.5 * COURSE_SPAN_S / max(dt_fix, 1e-6) - 1e-9))
    if f.shape[0] <= 2 * half:
        return none
    a, b, c = f[: -2 * half], f[half:-half], f[2 * half :]
    chord = (x[c] - x[a]) + 1j * (y[c] - y[a])
    z = _dead_reckoned(t, v, psi_dr)
    dr = z[c] - z[a]
    base = np.abs(chord)
    ok = (base >= MIN_BASELINE_M) & (np.abs(dr) >= MIN_BASELINE_M)
    if not ok.any():
        return none
    offset = np.unwrap(np.angle(chord[ok] / dr[ok]))
    base, b = base[ok], b[ok]
    scale = _course_scale(offset, base, 2 * half + 1)  # chords that share no fix
    return b, psi_dr[b] + offset, (scale / base) ** 2, scale


def _course_scale(offset, base, apart):
    """Noise of the course offsets in metres of chord: s with var(offset) = s² / base².

    Offsets ``apart`` measurements apart share no fix; their difference, divided by
    sqrt(1/b_j² + 1/b_k²), scatters as s (the heading's slow drift between them is left
    out by the median). The default ``sqrt(2) SIGMA_FIX_WHITE_M`` (two fixes' white
    error) when there are too few, a tenth of it the floor. [m]
    """
    default = math.sqrt(2.0) * SIGMA_FIX_WHITE_M
    if offset.shape[0] <= apart + noise.MIN_DIFFERENCES:
        return default
    d = offset[apart:] - offset[:-apart]
    z = d / np.sqrt(base[apart:] ** -2 + base[:-apart] ** -2)
    return max(noise.mad_scale(z), 0.1 * default)


def _divided_difference_weights(windows):
    """``1 / prod_{k != i} (x_i - x_k)`` for each row of ``windows`` (points of a row distinct)."""
    m = windows.shape[1]
    out = np.empty_like(windows)
    for i in range(m):  # m <= 5: loops over the window, vectorised over the rows
        pp = np.ones(windows.shape[0])
        for k in range(m):
            if k != i:
                pp = pp * (windows[:, i] - windows[:, k])
        out[:, i] = 1.0 / pp
    return out


def _smoothing_spline(x, y, lam):
    """Cubic smoothing spline of ``y`` (rows at ``x``, one column per series) for a fixed ``lam``.

    The same computation as SciPy's ``make_smoothing_spline(x, y, lam=lam)`` (natural
    spline basis, Eubank 1999 eqs. 2.1.7 and 2.2.10 as cited there), step for step so the
    result is identical, with its per-point Python loop over the penalty's divided
    differences vectorised (40 times faster on a lap of fixes).
    """
    n = x.shape[0]
    t = np.r_[[x[0]] * 3, x, [x[-1]] * 3]
    xb = interpolate.BSpline.design_matrix(x, t, 3)
    a = np.zeros((5, n))
    for i in range(1, 4):
        a[i, 2:-2] = xb[i : i - 4, 3:-3][np.diag_indices(n - 4)]
    a[1, 1] = xb[0, 0]
    a[2, :2] = ((x[2] + x[1] - 2 * x[0]) * xb[0, 0], xb[1, 1] + xb[1, 2])
    a[3, :2] = ((x[2] - x[0]) * xb[1, 1], xb[2, 2])
    a[1, -2:] = (xb[-3, -3], (x[-1] - x[-3]) * xb[-2, -2])
    a[2, -2:] = (xb[-2, -3] + xb[-2, -2], (2 * x[-1] - x[-2] - x[-3]) * xb[-1, -1])
    a[3, -2] = xb[-1, -1]
    pen = np.zeros((5, n))
    pen[2:, 0] = _divided_difference_weights(x[None, :3])[0]
    pen[1:, 1] = _divided_difference_weights(x[None, :4])[0]
    windows = np.lib.stride_tricks.sliding_window_view(x, 5)  # x[j-2:j+3], j = 2..n-3
    pen[:, 2:-2] = ((x[4:] - x[:-4])[:, None] * _divided_difference_weights(windows)).T
    pen[:-1, -2] = -_divided_difference_weights(x[None, -4:])[0]
    pen[:-2, -1] = _divided_difference_weights(x[None, -3:])[0]
    pen *= 6
    c = linalg.solve_banded((2, 2), a + lam * pen, y)
    c0, c1, cm0, cm1 = c[0:1], c[1:2], c[-1:-2:-1], c[-2:-3:-1]
    coef = np.r_[
        c0 * (t[5] + t[4] - 2 * t[3]) + c1,
        c0 * (t[5] - t[3]) + c1,
        c[1:-1],
        cm0 * (t[-4] - t[-6]) + cm1,
        cm0 * (2 * t[-4] - t[-5] - t[-6]) + cm1,
    ]
    return interpolate.BSpline.construct_fast(t, coef, 3, axis=0)


def _spline_path(t, x, y, fix, cutoff_s=GNSS_CUTOFF_S):
    """GNSS-only smoothing splines x(t), y(t) of half-response period ``cutoff_s``; course rate and curvature per row."""
    f = np.flatnonzero(fix)
    lam = (cutoff_s / (2 * math.pi)) ** 4 / float(np.median(np.diff(t[f])))
    sxy = _smoothing_spline(t[f], np.column_stack([x[f], y[f]]), lam)
    d1, d2 = sxy.derivative(1)(t), sxy.derivative(2)(t)
    xd, yd, xdd, ydd = d1[:, 0], d1[:, 1], d2[:, 0], d2[:, 1]
    sp2 = np.maximum(xd * xd + yd * yd, 1e-6)
    course_rate = (xd * ydd - yd * xdd) / sp2
    kappa = course_rate / np.sqrt(sp2)
    return course_rate, kappa


def gnss_only_cutoff_s(x_fix, y_fix) -> float:
    """Half-response period of a GNSS-only line's spline, from the fixes' white noise (:data:`GNSS_ONLY_CUTOFF_S`). [s].

    ``x_fix``, ``y_fix``: east and north of the fixes in time order. [m]
    """
    sigmas = [noise.difference_noise(a, order=3) for a in (x_fix, y_fix)]  # curvature left out
    sigma = max((s for s in sigmas if math.isfinite(s)), default=GNSS_ONLY_NOISE_M)
    low, high = GNSS_ONLY_CUTOFF_RANGE_S
    period = GNSS_ONLY_CUTOFF_S * (max(sigma, 1e-9) / GNSS_ONLY_NOISE_M) ** 0.25
    return float(min(max(period, low), high))


def _periodic_lowpass(values, ds_m, cutoff_m):
    """Periodic low-pass (Fourier) and its derivative along the loop."""
    n = values.shape[0]
    spec = np.fft.rfft(values)
    freq = np.fft.rfftfreq(n, d=ds_m)  # [1/m]
    spec[freq > 1.0 / cutoff_m] = 0.0
    smooth = np.fft.irfft(spec, n)
    deriv = np.fft.irfft(spec * (2j * np.pi * freq), n)
    return smooth, deriv


def _compare(kappa, other, mask):
    """RMS difference, relative RMS, correlation and slope of two curvature traces."""
    ok = mask & np.isfinite(other)
    if ok.sum() < 10:
        return None
    a, b = kappa[ok], other[ok]
    rms = float(np.sqrt(np.mean((a - b) ** 2)))
    scale = float(np.sqrt(np.mean(a * a)))
    corr = float(np.corrcoef(a, b)[0, 1]) if np.std(a) > 0 and np.std(b) > 0 else float("nan")
    slope = float(np.dot(a, b) / np.dot(a, a)) if scale > 0 else float("nan")
    return {
        "rms_1_m": rms,
        "relative_rms": rms / scale if scale > 0 else float("nan"),
        "correlation": corr,
        "slope": slope,
    }


# --------------------------------------------------------------------------- the lap


def reconstruct_lap(log, lap, spacing_m: float = 1.0) -> DrivenLap:
    r"""Rebuild the line one lap of ``log`` drove, and put the lap's channels on it.

    Parameters
    ----------
    log : limitlap.logfile.Log
        Session log in SI; position in ``x``/``y`` (ENU, NaN between fixes), ``speed``
        required, ``yaw_rate``, ``accel_lat``, ``altitude`` and the others optional.
    lap : limitlap.laps.Lap
        The lap: ``start_index``/``end_index`` (rows) and ``start_time_s``/``end_time_s``
        (gate crossings).
    spacing_m : float
        Station spacing of the result (rounded so the lap holds a whole number). [m]

    Returns
    -------
    DrivenLap
        ``agreement`` holds, for each of ``"accel_lat"`` (:math:`a_y/v^2`) and
        ``"yaw_rate"`` (:math:`r/v`) and for the line's curvature (``line_vs_*``) and the
        GNSS-only spline's (``gnss_vs_*``): ``rms_1_m``, ``relative_rms``,
        ``correlation``, ``slope``; and ``"fusion"``: the channels used for the heading.

    Notes
    -----
    See the module text for the method (Rauch-Tung-Striebel smoothing, Casanova et al.
    closure). Stations where the car is slower than ``MIN_SPEED_M_S`` take no part in the
    cross-check.
    """
    if not spacing_m > 0:
        raise LimitlapError("station spacing must be positive")
    warnings: list[str] = []
    rows = _lap_rows(log, lap)
    rate, rate_var, used, gnss_kappa, like, measured = _heading_rate(log, lap, rows, warnings)
    psi, bias, course_scale = _heading(rows, rate, rate_var, used)
    px, py, s_row = _positions(rows, psi)
    line, st = _closed_line(log, lap, rows, (psi, rate - bias), px, py, s_row, spacing_m, used)
    ch = _StationChannels(log, rows, st)
    speed_st, ay_st, r_st = ch("speed"), ch("accel_lat"), ch("yaw_rate")
    # a channel derived from the line (GPS-only logs, limitlap.derived) would only be
    # checked against itself: no check is made with it
    ay_check, r_check = ch.measured_only("accel_lat", ay_st), ch.measured_only("yaw_rate", r_st)
    check = _curvature_check(speed_st, ay_check, r_check, st.ds)
    like_st = {name: ch.along(k) for name, k in like.items()}
    agreement = _agreement(
        log, lap, line.curvature_1_m, ch.along(gnss_kappa), like_st, check, warnings
    )
    measured["course_m"] = course_scale
    limits = _rate_limits(rows, used, line, speed_st, measured, ch)
    agreement = {
        "fusion": list(used),
        "bias_rad_s": float(np.median(bias)),
        "noise": measured,
        "rate_limits": limits,
        **agreement,
    }
    warnings += _rate_warning(log, lap, used, limits)
    if st.closure_gap_m > 5.0:
        warnings.append(
            f"{log.path}: lap {lap.number}: the rebuilt lap missed its start by "
            f"{st.closure_gap_m:.1f} m before the closure correction"
        )
    return DrivenLap(
        line=line,
        time_s=ch.along(rows.t) - lap.start_time_s,
        speed_m_s=speed_st,
        accel_lon_m_s2=ch("accel_lon"),
        accel_lat_m_s2=ay_st,
        yaw_rate_rad_s=r_st,
        throttle=ch("throttle"),
        brake_pa=ch("brake"),
        gear=ch("gear", nearest=True),
        agreement=agreement,
        warnings=warnings,
        steer_rad=ch("steer"),
        lap_time_s=float(lap.time_s) if getattr(lap, "time_s", None) is not None else None,
        curvature_check=check,
    )


@dataclass(frozen=True, eq=False)
class RebuiltPath:
    """A lap's line rebuilt alone (:func:`rebuild_path`): ``line`` and ``time_s`` as in :class:`DrivenLap`."""

    line: Line
    time_s: np.ndarray  # at each station, from the gate [s]


def rebuild_path(log, lap, fusion, spacing_m: float = 1.0, max_rate_hz=PATH_RATE_HZ) -> RebuiltPath:
    """The line alone of one lap, rebuilt as :func:`reconstruct_lap` does, with the time at its stations.

    For laps whose line is all that is wanted (the corridor, the bands' neighbours): the
    heading is made from ``fusion``, the channels the analysed lap's rebuild kept
    (``DrivenLap.agreement["fusion"]``), without checking each channel against the GNSS
    course again, no channel is put on the stations, and a log faster than
    ``max_rate_hz`` is rebuilt from about that many rows a second (every fix kept; None:
    every row). With every row, the same stations, heading and positions as
    :func:`reconstruct_lap` gives when it keeps the same channels.
    """
    rows = _lap_rows(log, lap, max_rate_hz)
    sources = [src for src in _inertial_sources(log, rows) if src.name in fusion]
    if sources:
        rate, rate_var = _weighted_rate(sources)
        used = [src.name for src in sources]
    else:
        _, rate, _, rate_var = _gnss_only_rate(rows)
        used = ["gnss"]
    psi, bias, _ = _heading(rows, rate, rate_var, used)
    px, py, s_row = _positions(rows, psi)
    line, st = _closed_line(log, lap, rows, (psi, rate - bias), px, py, s_row, spacing_m, used)
    t_st = np.interp(st.s_st[:-1], st.s_k, rows.t[st.keep]) - lap.start_time_s
    return RebuiltPath(line, t_st)


@dataclass(frozen=True, eq=False)
class _LapRows:
    """The log's rows of one lap (with ``PAD_S`` either side), as the rebuild uses them."""

    rows: slice
    t: np.ndarray  # time [s]
    x_raw: np.ndarray  # east, NaN between fixes [m]
    y_raw: np.ndarray  # north [m]
    fix: np.ndarray  # rows with a position fix [-]
    v: np.ndarray  # speed, gaps filled, >= 0 [m/s]
    dt: np.ndarray  # time steps [s]
    pick: np.ndarray | None = None  # the rows of ``rows`` kept (None: every one) [-]

    def raw(self, column):
        """A log column on the kept rows, blanks left blank."""
        return _kept(column[self.rows], self.pick)

    def filled(self, t_all, column):
        """A log column on the kept rows, blanks filled first on every row (:func:`_fill`)."""
        return _kept(_fill(t_all[self.rows], column[self.rows]), self.pick)


def _kept(values, pick):
    """``values`` on the rows ``pick`` keeps (all of them when None)."""
    return values if pick is None else values[pick]


def _lap_rows(log, lap, max_rate_hz: float | None = None) -> _LapRows:
    """Step 1: the lap's rows, its positions and filled speed; too few rows or fixes raise.

    With ``max_rate_hz`` a faster log keeps every k-th row (and every row with a fix),
    so the rows come at about that rate; channels are filled on every row first.
    """
    t_all = log.time_s
    ch = log.channels
    if "x" not in ch or "y" not in ch or "speed" not in ch:
        raise LimitlapError(f"{log.path}: a driven line needs position and speed")
    lo = int(np.searchsorted(t_all, lap.start_time_s - PAD_S, side="left"))
    hi = int(np.searchsorted(t_all, lap.end_time_s + PAD_S, side="right"))
    lo, hi = max(0, min(lo, lap.start_index)), min(t_all.shape[0], max(hi, lap.end_index))
    sl = slice(lo, hi)
    if hi - lo < 10:
        raise LimitlapError(f"{log.path}: lap {lap.number} has too few rows for a line")
    fix = np.isfinite(ch["x"][sl]) & np.isfinite(ch["y"][sl])
    if fix.sum() < 10:
        raise LimitlapError(f"{log.path}: lap {lap.number} has too few position fixes")
    pick = _thinned(t_all[sl], fix, max_rate_hz)
    t = _kept(t_all[sl], pick)
    v = np.maximum(_kept(_fill(t_all[sl], ch["speed"][sl]), pick), 0.0)
    x_raw, y_raw = _kept(ch["x"][sl], pick), _kept(ch["y"][sl], pick)
    return _LapRows(sl, t, x_raw, y_raw, _kept(fix, pick), v, np.diff(t), pick)


def _thinned(t, fix, max_rate_hz):
    """Rows kept for about ``max_rate_hz`` (every k-th, every fix, the last); None: all."""
    if max_rate_hz is None:
        return None
    step = int(1.0 / (float(np.median(np.diff(t))) * max_rate_hz))
    if step < 2:
        return None
    every = np.zeros(t.shape, bool)
    every[::step] = True
    every[-1] = True
    return np.flatnonzero(every | fix)


@dataclass(frozen=True, eq=False)
class _Source:
    """One inertial channel as a heading rate per row, weighted by its measured noise."""

    name: str
    rate: np.ndarray  # heading rate per row [rad/s]
    var: np.ndarray  # its variance as white noise per row step [(rad/s)²]
    sigma: float  # the channel's white noise per own sample [rad/s] or [m/s²]
    interval_s: float  # between the channel's own samples [s]


def _measured_noise(t, raw, default, dt_row):
    """(white noise per own sample, own interval) of a channel; default when too few. [-]."""
    sigma = noise.difference_noise(raw)
    sigma = default if not math.isfinite(sigma) else max(sigma, 0.1 * default)
    own = noise.own_interval(t, raw)
    return sigma, max(own, dt_row) if math.isfinite(own) else dt_row


def _inertial_sources(log, rows: _LapRows) -> list[_Source]:
    r"""Yaw rate and :math:`a_y/v` as heading rates, each with its measured noise.

    A channel with white noise :math:`\sigma` per own sample, :math:`\Delta t_c` apart,
    adds :math:`\sigma^2 \Delta t_c\,\Delta t` of heading variance over a row step
    :math:`\Delta t` (the random walk of its integral); the smoother's per-step term is
    ``var * dt**2``, so ``var`` is :math:`\sigma^2 \Delta t_c / \Delta t`: a channel at a
    lower rate than the rows (blank cells, interpolated) counts for what it measured.
    """
    t, v, ch, t_all = rows.t, rows.v, log.channels, log.time_s
    dt_row = float(np.median(rows.dt))
    out = []
    if log.measured("yaw_rate"):
        raw = ch["yaw_rate"][rows.rows]  # the noise measured on every row
        sigma, own = _measured_noise(t_all[rows.rows], raw, SIGMA_YAW_RAD_S, dt_row)
        var = np.full(t.shape, sigma**2 * own / dt_row)
        out.append(_Source("yaw_rate", rows.filled(t_all, ch["yaw_rate"]), var, sigma, own))
    if log.measured("accel_lat"):
        raw = ch["accel_lat"][rows.rows]
        sigma, own = _measured_noise(t_all[rows.rows], raw, SIGMA_ACCEL_M_S2, dt_row)
        vv = np.maximum(v, MIN_SPEED_M_S)
        rate = np.where(v > MIN_SPEED_M_S, rows.filled(t_all, ch["accel_lat"]) / vv, 0.0)
        out.append(_Source("accel_lat", rate, (sigma / vv) ** 2 * own / dt_row, sigma, own))
    return out


def _path_curvature_like_gnss(rows: _LapRows, rate):
    """Course rate [rad/s] and curvature [1/m] per row of a heading rate's path, seen as the GNSS path is.

    The path the heading rate and the speed describe, sampled at the fixes and through
    the same smoothing spline (:func:`_spline_path`), so the two compare at one bandwidth.
    """
    psi = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * rows.dt)])
    z = _dead_reckoned(rows.t, rows.v, psi)
    return _spline_path(rows.t, z.real, z.imag, rows.fix)


def _heading_rate(log, lap, rows: _LapRows, warnings: list[str]):
    """Step 2: heading rate from yaw rate and a_y/v, weighted by their measured noise.

    A channel whose gain against the GNSS course rate is far from 1 (sign or scale wrong)
    is left out with a warning; the gain compares the GNSS path with the channel's own
    path through the same smoothing (:func:`_path_curvature_like_gnss`). Without inertial
    channels the GNSS spline's course rate stands in (smoothed over a period from the
    fixes' noise, :func:`gnss_only_cutoff_s`). Returns the rate [rad/s], its variance [rad²/s²], the channels
    used, the GNSS-only curvature per row [1/m], each channel's curvature through the
    GNSS path's smoothing [1/m] and the noise figures measured.
    """
    t, v = rows.t, rows.v
    gnss_rate, gnss_kappa = _spline_path(t, rows.x_raw, rows.y_raw, rows.fix)
    moving = v > MIN_SPEED_M_S
    like, measured, kept = {}, {}, []
    g_ref = gnss_rate[moving]
    for src in _inertial_sources(log, rows):
        measured[src.name] = {"sigma": src.sigma, "interval_s": src.interval_s}
        f_rate, like[src.name] = _path_curvature_like_gnss(rows, src.rate)
        # gain of the channel against the GNSS course rate (uncentred, so a steady
        # circle counts): about 1 when sign and scale are right
        ok_n = moving.sum()
        gain = float(np.dot(f_rate[moving], g_ref) / np.dot(g_ref, g_ref)) if ok_n > 10 else 1.0
        if not 0.5 < gain < 2.0:
            warnings.append(
                f"{log.path}: lap {lap.number}: '{src.name}' does not follow the GNSS course "
                f"(gain {gain:.2f}); left out of the line (sign convention? ISO 8855: + left)"
            )
            continue
        kept.append(src)
    if kept:
        rate, var = _weighted_rate(kept)
        return rate, var, [src.name for src in kept], gnss_kappa, like, measured
    cutoff, gnss_rate, gnss_kappa, var = _gnss_only_rate(rows)
    measured["gnss_cutoff_s"] = cutoff
    return gnss_rate, var, ["gnss"], gnss_kappa, like, measured


def _weighted_rate(sources: list[_Source]):
    """Heading rate [rad/s] and its variance [rad²/s²]: the sources weighted by their noise."""
    num = sum(src.rate / src.var for src in sources)
    den = sum(1.0 / src.var for src in sources)
    return num / den, 1.0 / den


def _gnss_only_rate(rows: _LapRows):
    """(cutoff [s], course rate [rad/s], curvature [1/m], the rate's variance [rad²/s²]) from GNSS alone.

    The fixes' measured noise sets the smoothing. The spline's course rate is smooth and
    already holds all the GNSS information: it is trusted like a gyro, and the course
    measurements only stop the drift.
    """
    cutoff = gnss_only_cutoff_s(rows.x_raw[rows.fix], rows.y_raw[rows.fix])
    gnss_rate, gnss_kappa = _spline_path(rows.t, rows.x_raw, rows.y_raw, rows.fix, cutoff)
    return cutoff, gnss_rate, gnss_kappa, np.full(rows.t.shape, SIGMA_YAW_RAD_S**2)


def _heading(rows: _LapRows, rate, rate_var, used):
    """Step 3: heading [rad], gyro bias [rad/s] and the course noise [m] (smoother on the GNSS course)."""
    t, dt = rows.t, rows.dt
    psi_dr = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * dt)])
    c_idx, course, c_var, scale = _gnss_course(t, rows.x_raw, rows.y_raw, rows.fix, rows.v, psi_dr)
    c_ok = rows.v[c_idx] > MIN_SPEED_M_S
    c_idx, course, c_var = c_idx[c_ok], course[c_ok], c_var[c_ok]
    if used == ["gnss"]:
        c_var = c_var * 100.0
    psi, bias = smooth_heading(dt, rate, rate_var, c_idx, course, c_var)
    return psi, bias, scale


def _positions(rows: _LapRows, psi):
    """Step 4: east and north by the smoother on the fixes, and distance per row. [m]."""
    dt, v = rows.dt, rows.v
    fi = np.flatnonzero(rows.fix)
    vm = 0.5 * (v[1:] + v[:-1]) * dt
    pm = 0.5 * (psi[1:] + psi[:-1])
    fvar = np.full(fi.shape[0], SIGMA_FIX_M**2)
    px = smooth_track(dt, vm * np.cos(pm), fi, rows.x_raw[fi], fvar)
    py = smooth_track(dt, vm * np.sin(pm), fi, rows.y_raw[fi], fvar)
    s_row = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(px), np.diff(py)))])
    return px, py, s_row


@dataclass(frozen=True, eq=False)
class _Stations:
    """Where the line's stations lie on the rows: distances and the rows kept."""

    s_st: np.ndarray  # station distances along the rows' path, closing station included [m]
    s_k: np.ndarray  # distance of each kept row (strictly increasing) [m]
    keep: np.ndarray  # rows kept (a car standing still repeats its distance) [-]
    ds: float  # station spacing [m]
    closure_gap_m: float  # how far the rebuilt lap missed its start [m]


def _heading_slope(rows: _LapRows, rate, psi, s_row):
    """dψ/ds at each row. [rad/m].

    The bias-corrected heading rate over the speed along the smoothed path (so it agrees
    with the rows' distances), or the heading's own differences where the car is slow.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        speed = np.gradient(s_row, rows.t)
        from_rate = rate / speed
        from_psi = np.gradient(psi, s_row)
    fast = (rows.v > MIN_SPEED_M_S) & (speed > MIN_SPEED_M_S)
    return np.where(fast, from_rate, from_psi)


def _closed_line(log, lap, rows, heading, px, py, s_row, spacing_m, used):
    """Step 5: stations at even spacing, closure correction, curvature, heights.

    ``heading`` is the smoothed heading ψ [rad] and the bias-corrected heading rate
    [rad/s] per row. The curvature's detail comes from the rate alone (its integral, the
    inertial heading, reaches the stations by cubic Hermite interpolation with slope
    rate / speed: between sparse rows, metres apart at a low rate, the curvature then
    follows the rate at each row instead of a chord's mean over the step, which shaves
    a corner's peak), its slow part from the smoothed heading (:func:`_closed_curvature`).
    """
    psi, rate = heading
    shape = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * rows.dt)])
    slope = _heading_slope(rows, rate, shape, s_row)
    s_a = float(np.interp(lap.start_time_s, rows.t, s_row))
    s_b = float(np.interp(lap.end_time_s, rows.t, s_row))
    length = s_b - s_a
    if not length > 10.0 * spacing_m:
        raise LimitlapError(f"{log.path}: lap {lap.number} is too short for a line")
    n_st = max(8, round(length / spacing_m))
    ds = length / n_st
    s_st = s_a + np.arange(n_st + 1) * ds  # includes the closing station
    keep = np.concatenate([[True], np.diff(s_row) > 0])  # standing still: drop repeats
    s_k = s_row[keep]

    def at(values):
        return np.interp(s_st, s_k, values[keep])

    psi_st = at(psi)
    shape_st = _hermite(s_k, shape[keep], slope[keep], s_st)
    turn = psi_st[-1] - psi_st[0]
    turns = round(turn / (2 * math.pi))
    heading_gap = turn - 2 * math.pi * turns
    frac = (s_st - s_a) / length
    psi_c = psi_st - frac * heading_gap
    x_st, y_st = at(px), at(py)
    gap_x, gap_y = x_st[-1] - x_st[0], y_st[-1] - y_st[0]
    x_c, y_c = x_st - frac * gap_x, y_st - frac * gap_y
    kappa = _closed_curvature(psi_c, shape_st, turns, ds, length)
    z, grad = _heights(log, rows, s_row, s_st, frac, ds, n_st)
    gap = float(math.hypot(gap_x, gap_y))
    meta = {
        "lap": lap.number,
        "closure_gap_m": gap,
        "heading_gap_rad": float(heading_gap),
        "turns": int(turns),
        "fusion": list(used),
    }
    line = Line(np.arange(n_st) * ds, kappa, grad, length, True, x_c[:-1], y_c[:-1], z, meta)
    return line, _Stations(s_st, s_k, keep, ds, gap)


def _hermite(s_k, values, slope, s_out):
    """Cubic Hermite interpolation of values with slopes at strictly increasing s_k.

    Held beyond the ends; linear when fewer than two slopes are finite.
    """
    ok = np.isfinite(slope) & np.isfinite(values)
    if ok.sum() < 2:
        return np.interp(s_out, s_k, values)
    spline = interpolate.CubicHermiteSpline(s_k[ok], values[ok], slope[ok], extrapolate=False)
    out = spline(np.clip(s_out, s_k[ok][0], s_k[ok][-1]))
    return out


def _closed_curvature(psi_c, shape_st, turns, ds, length):
    r"""Curvature of the closed lap from the inertial shape and the smoothed heading. [1/m].

    A complementary filter (W. T. Higgins, "A comparison of complementary and Kalman
    filtering", IEEE Trans. Aerospace and Electronic Systems AES-11(3):321-325, 1975
    [M]): the inertial heading's curvature (``shape_st``, centred differences) smoothed
    by :data:`CURVATURE_SMOOTHING_M`, plus what the GNSS-corrected heading ``psi_c``
    adds at scales longer than :data:`SHAPE_CROSSOVER_M` (the difference of the two
    curvatures, low-passed): the gyro's bias and scale, a slow sideslip, never the fixes'
    sample-to-sample noise, which the heading smoother lets through at the course
    measurements' rate. Then shifted so the lap turns a whole number of turns exactly.
    """
    loop = psi_c[:-1]
    ahead = np.append(loop[1:], psi_c[-1])
    behind = np.insert(loop[:-1], 0, psi_c[-2] - 2 * math.pi * turns)
    from_heading = (ahead - behind) / (2 * ds)
    from_shape = np.gradient(shape_st, ds)[:-1]
    kappa = gaussian_filter1d(from_shape, CURVATURE_SMOOTHING_M / ds, mode="wrap")
    kappa += gaussian_filter1d(from_heading - from_shape, SHAPE_CROSSOVER_M / ds, mode="wrap")
    kappa -= (kappa.sum() * ds - 2 * math.pi * turns) / length  # exact whole turn
    return kappa


def _heights(log, rows, s_row, s_st, frac, ds, n_st):
    """Heights [m] and gradient [-] at the stations, low-passed and closed; zero without."""
    if not log.has("altitude"):
        return np.zeros(n_st), np.zeros(n_st)
    alt = rows.raw(log.channels["altitude"])
    zf = np.isfinite(alt)
    z_st = np.interp(s_st, s_row[zf], alt[zf])
    z_st = z_st - frac * (z_st[-1] - z_st[0])
    return _periodic_lowpass(z_st[:-1], ds, HEIGHT_CUTOFF_M)


class _StationChannels:
    """Step 6: the log's channels on the line's stations (interpolated by distance)."""

    def __init__(self, log, rows: _LapRows, st: _Stations):
        self.log, self.rows, self.st = log, rows.rows, st
        self.s_in = st.s_st[:-1]

    def along(self, per_row):
        """A per-row array at the stations."""
        return np.interp(self.s_in, self.st.s_k, per_row[self.st.keep])

    def measured_only(self, name, values):
        """``values`` (a channel at the stations) when the log measured it, else NaN."""
        return values if self.log.measured(name) else np.full(values.shape, np.nan)

    def __call__(self, name, nearest=False):
        n_st = self.s_in.shape[0]
        if not self.log.has(name):
            return np.full(n_st, np.nan)
        sl, keep, s_k = self.rows, self.st.keep, self.st.s_k
        val = self.log.channel_rows(name, sl.start, sl.stop)[keep]  # a deferred trace: these rows
        ok = np.isfinite(val)
        if not ok.any():
            return np.full(n_st, np.nan)
        if nearest:
            j = np.clip(np.searchsorted(s_k[ok], self.s_in), 0, ok.sum() - 1)
            return val[ok][j].astype(np.float64)
        return np.interp(self.s_in, s_k[ok], val[ok])


def _curvature_check(speed, accel_lat, yaw_rate, ds) -> CurvatureCheck:
    """Step 7: curvature from a_y/v² and from r/v at the stations, smoothed as the line's.

    NaN below ``CHECK_MIN_SPEED_M_S``, where dividing by v² magnifies noise, and where the
    log has no such channel.
    """
    fast = np.isfinite(speed) & (speed > CHECK_MIN_SPEED_M_S)
    series = []
    for values, denom in ((accel_lat, speed**2), (yaw_rate, speed)):
        if not np.isfinite(values).any():
            series.append(np.full(speed.shape, np.nan))
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            k = np.where(fast, values / denom, 0.0)
        k = gaussian_filter1d(np.nan_to_num(k), CURVATURE_SMOOTHING_M / max(ds, 1e-6), mode="wrap")
        series.append(np.where(fast, k, np.nan))
    return CurvatureCheck(series[0], series[1], fast)


def _apexes(line: Line) -> np.ndarray:
    """Stations of the line's corners: peaks of |curvature| tighter than MIN_APEX_RADIUS_M, 30 m apart."""
    from scipy.signal import find_peaks

    k = np.abs(line.curvature_1_m)
    ds = float(line.length_m / line.n)
    peaks, _ = find_peaks(k, height=1.0 / MIN_APEX_RADIUS_M, distance=max(1, round(30.0 / ds)))
    return peaks


def _rate_limits(rows: _LapRows, used, line: Line, speed_st, measured, ch) -> dict:
    r"""How far the log's rates leave each corner's minimum speed uncertain. [km/h] and [Hz].

    Two parts, both from the data at each apex (:func:`_apexes`), turned into speed by
    :math:`\delta v = \tfrac12 v\,\delta\kappa / \kappa` (:math:`v = \sqrt{a_y/\kappa}`
    at a corner's limit):

    - resolution: the line's shape comes from samples :math:`\Delta s = v / f` apart
      (f the rate of the channels that give it: the inertial ones, or the GNSS fixes
      without them); :math:`\delta\kappa` is what a running mean over one such step
      takes off the apex's curvature, what a path sampled that coarsely can miss;
    - noise, without inertial channels: half the difference of the curvatures of the
      odd and of the even fixes (two independent halves; the whole set's error is about
      that), through the cross-check's spline.

    Returns ``shape_rate_hz``, ``source`` and ``min_speed_kmh`` (one per apex, largest
    first); empty ``min_speed_kmh`` without apexes.
    """
    from scipy.ndimage import uniform_filter1d

    gnss_only = used == ["gnss"]
    if gnss_only:
        f = np.flatnonzero(rows.fix)
        rate = 1.0 / float(np.median(np.diff(rows.t[f]))) if f.size > 2 else math.nan
    else:
        rate = 1.0 / min(measured[name]["interval_s"] for name in used)
    out = {"shape_rate_hz": rate, "source": "gnss" if gnss_only else "inertial"}
    apex = _apexes(line)
    if apex.size == 0 or not math.isfinite(rate):
        return {**out, "min_speed_kmh": []}
    k = np.abs(line.curvature_1_m)
    ds = float(line.length_m / line.n)
    v = np.nan_to_num(speed_st[apex])
    dk = np.zeros(apex.size)
    for i, (j, vj) in enumerate(zip(apex, v, strict=True)):
        width = max(1, round(vj / rate / ds))
        dk[i] = max(k[j] - float(uniform_filter1d(k, width, mode="wrap")[j]), 0.0)
    if gnss_only:
        dk += _odd_even_curvature(rows, ch)[apex]
    dv = 0.5 * v * dk / k[apex] / KMH_TO_M_S
    return {**out, "min_speed_kmh": sorted(dv.tolist(), reverse=True)}


def _odd_even_curvature(rows: _LapRows, ch) -> np.ndarray:
    """Half the difference of the odd and the even fixes' curvature at the stations. [1/m]."""
    f = np.flatnonzero(rows.fix)
    halves = []
    for part in (f[0::2], f[1::2]):
        fix = np.zeros(rows.fix.shape, bool)
        fix[part] = True
        halves.append(ch.along(_spline_path(rows.t, rows.x_raw, rows.y_raw, fix)[1]))
    return 0.5 * np.abs(np.abs(halves[0]) - np.abs(halves[1]))


def _rate_warning(log, lap, used, limits) -> list[str]:
    """One line when the rates leave the corners' minimum speeds uncertain by MIN_SPEED_DOUBT_KMH or more."""
    dv = limits.get("min_speed_kmh") or []
    if not dv or float(np.median(dv)) < MIN_SPEED_DOUBT_KMH:
        return []
    rate = limits["shape_rate_hz"]
    what = (
        f"GPS at {rate:.3g} Hz with no yaw rate or lateral acceleration"
        if used == ["gnss"]
        else f"{' and '.join(n.replace('_', ' ') for n in used)} at {rate:.3g} Hz"
    )
    return [
        f"{log.path}: lap {lap.number}: {what}: the corners' minimum speeds are uncertain by "
        f"about {np.median(dv):.0f} km/h (up to {dv[0]:.0f} km/h) from the line's shape at "
        "this rate; a faster log or a yaw-rate channel narrows it"
    ]


def _agreement(log, lap, kappa, k_gnss, like, check: CurvatureCheck, warnings):
    """Step 8: how the line's and the GNSS path's curvature agree with each channel's.

    The line against :math:`a_y/v^2` and :math:`r/v` smoothed as the line is
    (``check``); the GNSS path against each channel's own path through the GNSS path's
    smoothing (``like``: the same fix times, the same spline), so that what differs is
    what the two measure, not their bandwidths. Only the second warns: the line is built
    from the channels, so it agrees with them by construction.
    """
    agreement: dict = {}
    for name, other in (
        ("accel_lat", check.from_accel_lat_1_m),
        ("yaw_rate", check.from_yaw_rate_1_m),
    ):
        if not log.measured(name):
            continue
        fig = _compare(kappa, other, check.fast)
        if fig is not None:
            agreement[f"line_vs_{name}"] = fig
        if name in like:
            fig = _compare(k_gnss, like[name], check.fast)
            if fig is not None:
                agreement[f"gnss_vs_{name}"] = fig
        fig = agreement.get(f"gnss_vs_{name}")
        if fig and (fig["correlation"] < MIN_CORRELATION or fig["relative_rms"] > MAX_RELATIVE_RMS):
            warnings.append(
                f"{log.path}: lap {lap.number}: curvature from '{name}' agrees poorly with "
                f"the GNSS path (correlation {fig['correlation']:.2f}, "
                f"RMS {fig['relative_rms']:.0%} of the curvature, both smoothed alike; the "
                "report's data-check figure shows where)"
            )
    return agreement


def line_csv_text(line: Line) -> str:
    """The line as docs/formats.md, Line files x/y text: ``x [m],y [m]`` (and ``z [m]`` when known).

    Parameters
    ----------
    line : Line
        A closed line with positions; its stations in driving order, last not repeating
        the first.

    Returns
    -------
    str
        CSV text with a header row, millimetre resolution.
    """
    if line.x_m is None or line.y_m is None:
        raise LimitlapError("line has no x/y positions to write")
    cols = [line.x_m, line.y_m] + ([line.z_m] if line.z_m is not None else [])
    header = "x [m],y [m]" + (",z [m]" if line.z_m is not None else "")
    body = "\n".join(",".join(f"{v:.3f}" for v in row) for row in np.column_stack(cols))
    return header + "\n" + body + "\n"


def elapsed_from_gate(driven):
    """Elapsed time from the gate at each station, and the lap time. [s]."""
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
