"""Cross-checks that catch a channel in the wrong unit or with the wrong sign.

A log's channels describe one motion, so each can be checked against the GNSS path:

- speed against the distance between GPS fixes (the ratio of the two distances over the
  moving stretches);
- longitudinal acceleration against the time derivative of speed;
- lateral acceleration against speed times the GNSS course rate (a_y = v ψ̇);
- yaw rate against the GNSS course rate.

Each gives a factor ``k``, the reference over the channel (least squares through the
origin, the channel as regressor so the reference's noise averages out). ``k`` near 1
is a channel that agrees; ``k`` near a known unit factor or its inverse, or near -1,
names the mix-up ("speed looks like mph labelled km/h: ×1.61 against the GPS"). The
slip angle of a car on the limit is a few degrees, so the course rate equals the yaw
rate to within a few percent in steady cornering (W. F. Milliken and D. L. Milliken,
*Race Car Vehicle Dynamics*, SAE, 1995, ch. 5); tolerances here are wider than that.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.ndimage import uniform_filter1d

from limitlap.gnss import fix_rows, travelled_m
from limitlap.units import DEG_TO_RAD, G0_M_S2, KMH_TO_M_S, MPH_TO_M_S

#: A factor within this ratio of a candidate is taken as that candidate (15 %: wider
#: than slip angle, GNSS chord shortening and sensor scale errors together; common
#: practice, no published source). [-]
MATCH_RATIO = 1.15
#: A channel whose factor is outside this band and near no candidate is reported as
#: disagreeing (common practice, no published source). [-]
DISAGREE_RATIO = 1.4
#: Slowest speed taken into the checks (GNSS course is noise when standing still). [m/s]
MIN_SPEED_M_S = 8.0
#: The checks look at the first this many GNSS fixes (20 minutes at 10 Hz: several
#: laps; a unit is the same all through a log). [-]
MAX_FIXES = 12_000
#: Averaging window of the derivatives (GNSS course and dv/dt are noisy sample to
#: sample). [s]
WINDOW_S = 1.0

_SPEED = (
    (MPH_TO_M_S / KMH_TO_M_S, "mph labelled km/h"),
    (KMH_TO_M_S / MPH_TO_M_S, "km/h labelled mph"),
    (1.0 / KMH_TO_M_S, "m/s labelled km/h"),
    (KMH_TO_M_S, "km/h labelled m/s"),
    (1.0 / MPH_TO_M_S, "m/s labelled mph"),
    (MPH_TO_M_S, "mph labelled m/s"),
)
_ACCEL = (
    (-1.0, "the sign inverted (ISO 8855: x forward, y left)"),
    (G0_M_S2, "g labelled m/s^2"),
    (1.0 / G0_M_S2, "m/s^2 labelled g"),
    (-G0_M_S2, "g labelled m/s^2, sign inverted"),
    (-1.0 / G0_M_S2, "m/s^2 labelled g, sign inverted"),
)
_YAW = (
    (-1.0, "the sign inverted (ISO 8855: + counter-clockwise)"),
    (1.0 / DEG_TO_RAD, "rad/s labelled deg/s"),
    (DEG_TO_RAD, "deg/s labelled rad/s"),
    (-1.0 / DEG_TO_RAD, "rad/s labelled deg/s, sign inverted"),
    (-DEG_TO_RAD, "deg/s labelled rad/s, sign inverted"),
)


@dataclass(frozen=True)
class UnitFinding:
    """A channel that disagrees with the GNSS path.

    Attributes
    ----------
    channel : str
        The channel ("speed", "accel_lon", "accel_lat", "yaw_rate").
    factor : float
        Reference over channel (1 when it agrees). [-]
    mix_up : str
        The likely mix-up ("mph labelled km/h"), or "" when none fits.
    against : str
        What it was checked against.
    """

    channel: str
    factor: float
    mix_up: str
    against: str

    def __str__(self) -> str:
        """One line for the user."""
        if self.mix_up:
            return (
                f"{self.channel.replace('_', ' ')} looks like {self.mix_up}: "
                f"×{self.factor:.3g} against {self.against}"
            )
        return (
            f"{self.channel.replace('_', ' ')} disagrees with {self.against} by "
            f"×{self.factor:.3g}; check its unit and sign"
        )


def check_units(log) -> list[UnitFinding]:
    """Each channel of ``log`` checked against its GNSS path; the ones that disagree.

    Parameters
    ----------
    log : limitlap.logfile.Log
        A log with positions (``x``/``y``) and ``speed``; the other channels optional.

    Returns
    -------
    list of UnitFinding
        Empty when every channel agrees, or when the log moves too little to tell.

    Notes
    -----
    A channel the log did not record but that was derived from the GPS path
    (``log.derived``, :mod:`limitlap.derived`) is not checked: it agrees with the path
    by construction, so a pass would say nothing.
    """
    path = _gnss_path(log)
    if path is None:
        return []
    out = []
    k = _speed_factor(log, path) if log.measured("speed") else math.nan
    out += _judge("speed", k, _SPEED, "the distance between GPS fixes", signed=False)
    # The other checks use speed as the GPS measures it, so a wrong speed unit is not
    # blamed on the accelerations as well.
    speed_scale = k if math.isfinite(k) else 1.0
    for name, against, cands in (
        ("accel_lon", "the rate of change of speed", _ACCEL),
        ("accel_lat", "speed times the GPS course rate", _ACCEL),
        ("yaw_rate", "the GPS course rate", _YAW),
    ):
        if log.measured(name):
            k_ch = _channel_factor(log, path, name, speed_scale)
            out += _judge(name, k_ch, cands, against, signed=True)
    return out


@dataclass(frozen=True)
class _Path:
    """The GNSS fixes and the channels at them (the checks work at these alone).

    At most :data:`MAX_FIXES` fixes, 10-25 a second: the checks cost little beside
    reading the log.
    """

    rows: np.ndarray  # log rows of the fixes
    t: np.ndarray  # their time [s]
    speed: np.ndarray  # the speed channel at the fixes [m/s]
    course_rate: np.ndarray  # ψ̇ from the fixes, averaged over WINDOW_S [rad/s]
    moving: np.ndarray  # fix faster than MIN_SPEED_M_S and not near a gap
    window: int  # WINDOW_S in fixes


def _gnss_path(log) -> _Path | None:
    rows = fix_rows(log)[:MAX_FIXES]
    if rows.size < 20:
        return None
    t = log.time_s[rows]
    x, y = log.channels["x"][rows], log.channels["y"][rows]
    v = _at_fixes(log, "speed", rows)
    heading = np.unwrap(np.arctan2(np.gradient(y), np.gradient(x)))
    dt = float(np.median(np.diff(t)))
    n = max(1, round(WINDOW_S / dt))
    rate = uniform_filter1d(np.gradient(heading, t), n, mode="nearest")
    gaps = np.diff(t) > 3.0 * dt
    near_gap = np.zeros(t.size, dtype=bool)
    for shift in range(n + 1):  # fixes within a window of a gap are left out
        near_gap[: t.size - 1 - shift] |= gaps[shift:]
        near_gap[1 + shift :] |= gaps[: gaps.size - shift]
    return _Path(rows, t, v, rate, (v > MIN_SPEED_M_S) & ~near_gap, n)


def _at_fixes(log, name, rows):
    """A channel at the fix rows (NaN where blank: such fixes drop out of the checks)."""
    return log.channels[name][rows]


def _mean_between_fixes(log, name, rows):
    """A channel's mean from the fix before each fix to the one after.

    That is the span the GNSS references' centred differences see; the mean comes from
    the channel's trapezoidal integral over every row (blank cells interpolated in
    time). Like with like at any fix rate: at 1 Hz the references average 2 s of motion,
    and so must the channel (its value at the fix alone carries its noise and the motion
    faster than the fixes, which the least squares with the channel as regressor turns
    into a factor below 1).
    """
    from limitlap import _kernels

    span = slice(int(rows[0]), int(rows[-1]) + 1)  # the checked fixes' rows only
    t = np.ascontiguousarray(log.time_s[span])
    c = log.channels[name][span]
    ok = np.isfinite(c)
    if ok.sum() < 2:
        return np.full(rows.shape, np.nan)
    if not ok.all():
        c = np.interp(t, t[ok], c[ok])
    area = _kernels.trapezoid_running(t, np.ascontiguousarray(c, dtype=np.float64))
    at = rows - span.start
    lo = np.concatenate([at[:1], at[:-2], at[-2:-1]])
    hi = np.concatenate([at[1:2], at[2:], at[-1:]])
    return (area[hi] - area[lo]) / (t[hi] - t[lo])


def _speed_factor(log, path: _Path) -> float:
    """GPS distance over the distance the speed channel gives, between moving fixes."""
    x, y = log.channels["x"][path.rows], log.channels["y"][path.rows]
    step_gps = np.hypot(np.diff(x), np.diff(y))
    step_speed = np.diff(travelled_m(log)[path.rows])
    use = path.moving[1:] & path.moving[:-1]
    if step_speed[use].sum() < 200.0:  # too little movement to tell
        return math.nan
    return float(step_gps[use].sum() / step_speed[use].sum())


def _channel_factor(log, path: _Path, name: str, speed_scale: float = 1.0) -> float:
    """Least-squares factor reference = k · channel at the moving fixes (NaN if weak).

    ``speed_scale`` corrects the speed channel to the GPS's (see :func:`_speed_factor`).
    Channel and reference are averaged over the same window of fixes.
    """
    n = path.window
    c = uniform_filter1d(_mean_between_fixes(log, name, path.rows), n, mode="nearest")
    v = path.speed * speed_scale
    if name == "accel_lon":
        ref = uniform_filter1d(np.gradient(v, path.t), n, mode="nearest")
        floor = 0.5  # [m/s²] below this rms the straights hold no braking or drive to see
    elif name == "accel_lat":
        ref = v * path.course_rate
        floor = 1.0  # [m/s²]
    else:
        ref = path.course_rate
        floor = 0.05  # [rad/s]
    use = path.moving & np.isfinite(ref) & np.isfinite(c)
    if use.sum() < 50 or np.sqrt(np.mean(ref[use] ** 2)) < floor:
        return math.nan
    cu, ru = c[use], ref[use]  # plain sums: BLAS dot threads cost ms on short vectors
    return float((cu * ru).sum() / (cu * cu).sum())


def _judge(channel, k, candidates, against, *, signed) -> list[UnitFinding]:
    if not math.isfinite(k) or k == 0.0:
        return []
    if k > 0 and abs(math.log(k)) < math.log(MATCH_RATIO):
        return []
    for factor, mix_up in candidates:
        same_sign = (k > 0) == (factor > 0) or not signed
        if same_sign and abs(math.log(abs(k) / abs(factor))) < math.log(MATCH_RATIO):
            return [UnitFinding(channel, k, mix_up, against)]
    if k < 0 or abs(math.log(k)) > math.log(DISAGREE_RATIO):
        return [UnitFinding(channel, k, "", against)]
    return []
