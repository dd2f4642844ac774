r"""The g-g-V grip envelope fitted to a driver's best samples, and the grip estimate.

The envelope is the point-mass model of docs/formats.md, Vehicle files (functions in
:mod:`limitlap.limits`, shared with the solver): with :math:`q = \tfrac12\rho v^2` and
:math:`N = m g + q C_L A`, the tyre forces obey

.. math:: (|F_x| / F_{x,max})^n + (|F_y| / \mu_y N)^n \le 1,

:math:`F_{x,max} = \mu_t N` when driving and :math:`\mu_b N` when braking,
:math:`F_x = m a_x + q C_D A + C_{rr} m g`, :math:`F_y = m a_y`; power is a separate
limit :math:`F_x \le P/v`, as in the solver.

Fitting follows the polar-binning method (docs/methods.md, Envelope fit): normalise every sample by
a provisional envelope at its own speed, so the boundary becomes the unit superellipse;
bin by speed band and by direction; take the sample at a high quantile of the
normalised radius in each bin as a boundary point; fit the physical parameters to the
boundary points with robust least squares; repeat the normalisation with the fitted
envelope until the parameters settle. A high quantile rather than the maximum keeps
single spikes out (for samples uniform over the area the q-quantile of the normalised
radius is :math:`\sqrt q`, docs/methods.md, Envelope fit).

References
----------
.. [1] R. S. Rice, "Measuring Car-Driver Interaction with the g-g Diagram", SAE
   Technical Paper 730018, 1973, doi:10.4271/730018.
.. [2] W. F. Milliken and D. L. Milliken, *Race Car Vehicle Dynamics*, SAE R-146, 1995
   (friction circle and ellipse).
.. [3] R. Koenker and G. Bassett, "Regression quantiles", Econometrica 46(1):33-50,
   1978 (high quantile as the boundary statistic; details from memory).
.. [4] A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*,
   Prentice Hall (window/kernel smoothing as a zero-phase low-pass; the Gaussian's
   Fourier transform is again a Gaussian -- textbook result, chapter from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from statistics import NormalDist

import numpy as np
from scipy.ndimage import gaussian_filter1d

from limitlap import _kernels
from limitlap.errors import LimitlapError
from limitlap.least_squares import soft_l1_least_squares, standard_errors
from limitlap.limits import (
    combined_usage,
    drive_force_max_n,
    normal_load_n,
    resistance_n,
)
from limitlap.power_line import full_throttle_power_drag
from limitlap.samples import Selection, filtered_again, select_samples
from limitlap.solve import vehicle_array
from limitlap.units import G0_M_S2
from limitlap.vehicle import EXPONENT_MAX, GRIP_COEFF_MAX, Vehicle

#: Rolling-resistance coefficient used when the vehicle file gives none. It cannot be
#: separated from the friction coefficients in the g-g data (it adds to braking and
#: subtracts from traction by the same constant). Common practice, no published source.
ROLLING_COEFF_DEFAULT = 0.012

#: Plausibility windows for fitted values: (low, high, unit label, factor to the label).
#: Lateral limit from docs/checks.md, C4.6 (0.5-6 g); the others are common practice, no
#: published source (wide enough for road cars to single-seaters).
PLAUSIBLE = {
    "lateral_g": (0.5, 6.0),
    "mu": (0.3, 3.0),
    "exponent": (1.2, 6.0),
    "power_w": (5.0e3, 1.5e6),
    "drag_area_m2": (0.05, 3.0),
    "downforce_area_m2": (-0.5, 8.0),
}

# Parameter order in the least-squares vector, with internal scale to SI and bounds (SI).
_PARAMS = (
    "mu_lat",
    "mu_brk",
    "mu_trac",
    "exponent",
    "power_w",
    "drag_area_m2",
    "downforce_area_m2",
)
_BOUNDS = {
    "mu_lat": (0.05, GRIP_COEFF_MAX),
    "mu_brk": (0.05, GRIP_COEFF_MAX),
    "mu_trac": (0.05, GRIP_COEFF_MAX),
    "exponent": (1.0, EXPONENT_MAX),
    "power_w": (1.0e3, 5.0e6),
    "drag_area_m2": (0.0, 5.0),
    "downforce_area_m2": (-2.0, 20.0),
}
_SCALE = {"power_w": 1.0e5}  # fit power in units of 100 kW for conditioning

#: Rate the low-passed samples are thinned to for the fit when a session has plenty of
#: them. After the 3 Hz Gaussian low-pass the signal's content at 12.5 Hz (this rate's
#: Nyquist frequency) is down to exp(-ln2/2 (12.5/3)^2) ~ 0.2 %, so 25 Hz samples hold the
#: same curve as 100 Hz ones (sampling theorem; the Gaussian's response from [4]_). [Hz]
FIT_RATE_HZ = 25.0
#: Thinning never leaves fewer samples than this: short sessions keep every sample, since
#: the high-quantile rank in sparsely filled direction bins is what thinning would upset
#: (measured: a two-lap session thinned to 20 Hz moved its fitted exponent 2.0 -> 1.8,
#: a one-hour session thinned to 25 Hz moved its ideal lap by 0.003 s). [-]
FIT_MIN_SAMPLES = 60_000


#: A direction bin gives a boundary point when it holds this much of the driver's time
#: (20 samples at 100 Hz, the count the fit was built with); a speed band is sparse with
#: less than :data:`NEAR_LIMIT_S` of samples near the limit (30 at 100 Hz). At 100 Hz
#: after the 3 Hz low-pass, neighbouring samples share their noise (the kernel is
#: 2 sqrt(pi) sigma = 0.16 s wide), so 20 of them are one or two independent values; at
#: 10 Hz each is independent: counts in time keep what a bin stands for at every rate
#: (measured: with 20 samples a bin, the demo session thinned to 5 Hz kept 41 boundary
#: points and fitted a traction limit of 8 g; with the counts in time, 80 and 1.24 g).
#: Common practice, no published source. [s]
MIN_BIN_S = 0.2
#: See :data:`MIN_BIN_S`. [s]
NEAR_LIMIT_S = 0.3
#: Fewest samples a bin's high quantile is taken from at any rate (the 0.99 quantile of
#: fewer is their maximum), and fewest near the limit before a band is called sparse. [-]
MIN_BIN_FLOOR = 8
#: See :data:`MIN_BIN_FLOOR`. [-]
NEAR_LIMIT_FLOOR = 10
#: Bin counts of samples without a rate (on distance stations): as at 100 Hz. [-]
_COUNTS_WITHOUT_RATE = (20, 30)


def bin_counts(sample_rate_hz) -> tuple[int, int]:
    """(fewest samples for a bin's boundary point, fewest near the limit for a band) at a rate.

    From :data:`MIN_BIN_S` and :data:`NEAR_LIMIT_S` at the accelerations' own rate, never
    below the floors; :data:`_COUNTS_WITHOUT_RATE` without a rate. [-]

    Examples
    --------
    >>> bin_counts(100.0), bin_counts(10.0), bin_counts(None)
    ((20, 30), (8, 10), (20, 30))
    """
    if sample_rate_hz is None:
        return _COUNTS_WITHOUT_RATE
    fs = float(sample_rate_hz)
    return max(MIN_BIN_FLOOR, round(MIN_BIN_S * fs)), max(
        NEAR_LIMIT_FLOOR, round(NEAR_LIMIT_S * fs)
    )


@dataclass(frozen=True, eq=False)
class EnvelopeBand:
    """One speed band of the fitted envelope, for reporting and plotting.

    Attributes
    ----------
    speed_lo_m_s, speed_hi_m_s : float
        Band edges. [m/s]
    n_samples : int
        Used samples in the band. [-]
    n_near_limit : int
        Of those, samples within 5 % of the fitted limit (combined usage >= 0.95). [-]
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : numpy.ndarray
        The boundary points found in the band (one per direction bin). [m/s], [m/s²]
    """

    speed_lo_m_s: float
    speed_hi_m_s: float
    n_samples: int
    n_near_limit: int
    speed_m_s: np.ndarray
    accel_lon_m_s2: np.ndarray
    accel_lat_m_s2: np.ndarray


@dataclass(frozen=True, eq=False)
class EnvelopeFit:
    """Result of :func:`fit_envelope`.

    Attributes
    ----------
    vehicle : Vehicle
        Complete vehicle: the base's given values plus the fitted ones.
    quality : dict[str, float]
        ``rms_residual_m_s2`` (radial distance of the boundary points from the fitted
        envelope, in the tyre-force plane), ``share_outside_tyre_limit`` (used samples
        beyond the friction limits: up to half of those driven on the limit, the noise
        scattering them both ways once it is taken out of the envelope),
        ``share_above_power_line`` (of the full-throttle samples the power and drag were
        calibrated on, see :func:`fit_envelope`'s Notes, the share above the power line:
        about half, that fit being a central one; NaN without that calibration),
        ``n_used``, ``n_boundary_points``, ``speed_min_m_s``, ``speed_max_m_s``,
        ``quantile``, ``noise_m_s2`` (:attr:`Selection.noise_m_s2`),
        ``noise_offset_m_s2`` and ``noise_offset_power_m_s2`` (how far outside the tyre
        limit and the power line their boundary points were fitted, :func:`_noise_offsets`),
        ``passes``.
    uncertainty : dict[str, float]
        One standard deviation per fitted parameter, same names and units as
        :class:`Vehicle` fields.
    bands : tuple[EnvelopeBand, ...]
        Per speed band: sample counts and boundary points.
    used : numpy.ndarray
        Mask over the input samples: True where a sample went into the fit. [-]
    fitted : tuple[str, ...]
        Names of the vehicle fields taken from the fit.
    warnings : list[str]
        Plain one-line notes for the user.
    """

    vehicle: Vehicle
    quality: dict
    uncertainty: dict
    bands: tuple
    used: np.ndarray
    fitted: tuple
    warnings: list = field(default_factory=list)


def _vehicle_from(x, names, base):
    values = {k: float(val) * _SCALE.get(k, 1.0) for k, val in zip(names, x, strict=True)}
    return replace(base, **values)


def _tyre_plane(v, ax, ay, veh):
    """Normalised tyre-force shares (sx, sy) and the tyre-force radius |F|/m. [-], [m/s²]."""
    m = veh.mass_kg
    fx = m * ax + resistance_n(v, veh)
    normal = normal_load_n(v, veh)
    fx_max = np.where(fx >= 0.0, drive_force_max_n(v, veh), veh.mu_brk * normal)
    return fx / fx_max, m * ay / (veh.mu_lat * normal), np.hypot(fx / m, ay)


def _usage_and_direction(v, ax, ay, veh, work=None):
    """``combined_usage`` and ``arctan2`` of :func:`_tyre_plane`'s shares, sharing the forces.

    The formulas of :func:`limitlap.limits.combined_usage` and :func:`_tyre_plane`: the
    forces and shares in one compiled pass (``_kernels.tyre_plane_parts``), the powers
    and the arctangent by numpy's vectorised functions, all into five work arrays
    (``work``, shape (5, n), reused by the caller across passes; fresh when None) instead
    of a score of temporaries; tests hold the results equal to the two functions', bit
    for bit. Returns views of ``work``; its first and last rows keep the tyre and power
    shares (for :func:`_noise_offsets`). [-], [rad]
    """
    tyre, power, sx, sy = _tyre_and_power_shares(v, ax, ay, veh, work)
    usage = np.maximum(tyre, power, out=None if work is None else work[1])
    np.arctan2(sy, sx, out=sx)
    return usage, sx


def _tyre_and_power_shares(v, ax, ay, veh, work=None):
    """The two parts of ``combined_usage`` (their maximum), and the direction shares.

    Returns views of ``work`` (see :func:`_usage_and_direction`): the tyre share (the
    superellipse of the friction limits alone), the power share F_x v / P, and the shares
    s_x, s_y whose ``arctan2`` is the direction in the normalised g-g plane. [-]
    """
    v = np.ascontiguousarray(v, dtype=np.float64)
    work = np.empty((5, v.shape[0])) if work is None else work
    tyre, tyre_y, sx, sy, power = work
    _kernels.tyre_plane_parts(
        v,
        np.ascontiguousarray(ax, dtype=np.float64),
        np.ascontiguousarray(ay, dtype=np.float64),
        vehicle_array(veh),
        tyre,
        tyre_y,
        sx,
        sy,
        power,
    )
    n = veh.exponent
    np.power(tyre, n, out=tyre)
    np.power(tyre_y, n, out=tyre_y)
    tyre += tyre_y
    np.power(tyre, 1.0 / n, out=tyre)
    return tyre, power, sx, sy


def _residuals(v, ax, ay, veh):
    """Radial distance of points from the envelope in the tyre-force plane. [m/s²].

    Combined usage u is homogeneous of degree 1 along a ray from the tyre-force
    origin (F_x,max depends only on the sign of F_x), so the envelope crosses the ray
    at |F|/u and the point lies |F|(1 - 1/u)/m outside it (negative inside).
    """
    u = combined_usage(v, ax, ay, veh)
    _, _, r = _tyre_plane(v, ax, ay, veh)
    return r * (1.0 - 1.0 / np.maximum(u, 1e-9))


#: Kernel parameter index of each fitted parameter (see :func:`_plane_residuals`).
_KERNEL_INDEX = {
    "mu_lat": _kernels.I_MU_LAT,
    "mu_brk": _kernels.I_MU_BRK,
    "mu_trac": _kernels.I_MU_TRAC,
    "exponent": _kernels.I_EXPONENT,
    "power_w": _kernels.I_POWER,
    "drag_area_m2": _kernels.I_DRAG_AREA,
    "downforce_area_m2": _kernels.I_LIFT_AREA,
}


def _plane_residuals(v, ax, ay, names, veh, lo, hi):
    r"""``(fun, jac)`` of :func:`_residuals` of the points for the parameter vector ``x``.

    The same quantities as :func:`_tyre_plane` and :func:`limitlap.limits.combined_usage`
    in compiled passes (``_kernels.envelope_residuals``; tests hold them to 1e-12), for the
    hundreds of evaluations a least-squares fit makes. ``jac`` is the forward-difference
    Jacobian with SciPy's default step for it, :math:`\sqrt{\epsilon}\max(1, |x|)`, taken
    backwards where a forward step would leave the bounds ``lo``-``hi``, and the step made
    exact in floating point (``(x + h) - x``), all evaluations in one kernel call.
    """
    base = vehicle_array(veh)
    where = np.array([_KERNEL_INDEX[k] for k in names], dtype=np.int64)
    scale = np.array([_SCALE.get(k, 1.0) for k in names])

    def fun(x):
        return _kernels.envelope_residuals(v, ax, ay, base, where, scale, np.asarray(x, float))

    def jac(x):
        x = np.asarray(x, dtype=np.float64)
        h = _FD_STEP * np.where(x >= 0.0, 1.0, -1.0) * np.maximum(1.0, np.abs(x))
        h = np.where((x + h > hi) | (x + h < lo), -h, h)
        h = (x + h) - x
        return _kernels.envelope_residuals_jacobian(v, ax, ay, base, where, scale, x, h)

    return fun, jac


#: Relative forward-difference step, the square root of double precision (SciPy's default
#: for ``least_squares``'s "2-point" Jacobian). [-]
_FD_STEP = float(np.finfo(np.float64).eps) ** 0.5


def _boundary_points(v, ax, ay, veh, band, n_angle_bins, quantile, min_bin_samples, work=None):
    """Index of the sample at the ``quantile`` rank of normalised radius in every bin."""
    # the powers and arctangent by numpy: on tens of thousands of samples its vectorised
    # pow/arctan2 beat a kernel's scalar ones (measured 3.5 vs 9 ms a pass on 84k samples)
    rho, phi = _usage_and_direction(v, ax, ay, veh, work)
    abin = np.minimum(
        ((phi + np.pi) / (2 * np.pi) * n_angle_bins).astype(np.int64), n_angle_bins - 1
    )
    key = band * n_angle_bins + abin
    if np.isfinite(phi).all() and np.isfinite(rho).all():
        # same samples as the sort below, by a counting sort per bin (numba kernel)
        count = np.bincount(key)
        full = count >= min_bin_samples
        rank = np.where(full, np.rint(quantile * (count - 1)).astype(np.int64), -1)
        idx = _kernels.boundary_points(key.astype(np.int64), rho.astype(np.float64), rank)
        return idx[full], np.flatnonzero(full) // n_angle_bins
    order = np.lexsort((rho, key))
    keys, start, count = np.unique(key[order], return_index=True, return_counts=True)
    full = count >= min_bin_samples
    rank = start[full] + np.rint(quantile * (count[full] - 1)).astype(np.int64)
    return order[rank], keys[full] // n_angle_bins


def _provisional(v, ax, ay, base, quantile):
    """A first envelope from plain quantiles: no aero, friction ellipse."""
    g = G0_M_S2

    def q(values, default):
        return float(np.quantile(values, quantile)) if values.size >= 10 else default

    mu_lat = q(np.abs(ay), 1.0 * g) / g
    mu_brk = q(-ax[ax < 0], mu_lat * g) / g
    mu_trac = q(ax[ax > 0], mu_lat * g) / g
    m = base.mass_kg
    drive = ax > 0
    p_demo = q(m * ax[drive] * v[drive], 2.0e5) if drive.any() else 2.0e5
    veh = replace(
        base,
        mu_lat=max(mu_lat, 0.1),
        mu_brk=max(mu_brk, 0.1),
        mu_trac=max(mu_trac, 0.1),
        exponent=2.0 if base.exponent is None else base.exponent,
        power_w=base.power_w if base.power_w is not None else math.inf,
        drag_area_m2=base.drag_area_m2 if base.drag_area_m2 is not None else 0.0,
        downforce_area_m2=base.downforce_area_m2 if base.downforce_area_m2 is not None else 0.0,
        rolling_coeff=(
            base.rolling_coeff if base.rolling_coeff is not None else ROLLING_COEFF_DEFAULT
        ),
    )
    start = {"power_w": max(1.5 * p_demo, 2.0e4), "drag_area_m2": 0.5, "downforce_area_m2": 0.5}
    return veh, start, max(p_demo, 2.0e4)


def fit_envelope(
    speed_m_s,
    accel_lon_m_s2,
    accel_lat_m_s2,
    base: Vehicle,
    *,
    mask=None,
    sample_rate_hz=None,
    quantile=0.99,
    band_width_m_s=5.0,
    n_angle_bins=36,
    min_bin_samples=None,
    min_near_limit=None,
    min_speed_m_s=10.0,
    loss_scale_m_s2=0.1,
    max_passes=5,
    throttle=None,
    fit_rate_hz=FIT_RATE_HZ,
    selection: Selection | None = None,
    remove_noise: bool = True,
    noise_m_s2: float | None = None,
) -> EnvelopeFit:
    r"""Fit the g-g-V envelope of docs/formats.md, Vehicle files to the samples a driver demonstrated.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        Per-sample speed [m/s], longitudinal (+ forward) and lateral (+ left)
        acceleration [m/s²].
    base : Vehicle
        Known values. Mass is required; ``power_w``, ``drag_area_m2`` and
        ``downforce_area_m2`` are fitted where ``None``; ``rolling_coeff`` falls back to
        :data:`ROLLING_COEFF_DEFAULT` where ``None``. Friction coefficients and exponent
        are always fitted (the base's, when given, are the starting point).
    mask : array-like of bool, optional
        True for samples on complete laps. [-]
    sample_rate_hz : float, optional
        Uniform sample rate, enables spike removal and low-pass filtering
        (:func:`select_samples`). [Hz]
    quantile : float, default 0.99
        Rank of the boundary sample in each bin; 0.95-0.99 is the usual range
        (docs/methods.md, Envelope fit). [-]
    band_width_m_s : float, default 5.0
        Width of the speed bands. [m/s]
    n_angle_bins : int, default 36
        Direction bins in the normalised g-g plane (10° each). [-]
    min_bin_samples : int, optional
        A bin with fewer samples gives no boundary point (a high quantile of a handful of
        samples is biased low). Default from the accelerations' own rate
        (:func:`bin_counts`): 20 at 100 Hz, 8 at 20 Hz and below. [-]
    min_near_limit : int, optional
        A band with fewer samples within 5 % of the limit gets a warning. Default from
        the rate (:func:`bin_counts`): 30 at 100 Hz, 10 at 33 Hz and below. [-]
    min_speed_m_s : float, default 10.0
        Slower samples are dropped. [m/s]
    loss_scale_m_s2 : float, default 0.1
        Soft-L1 loss scale: boundary points further than this from the envelope count
        less than quadratically. [m/s²]
    max_passes : int, default 5
        Normalise-bin-fit passes at most; stops when no parameter moves by more than
        0.1 % or by more than a tenth of its standard error (samples changing bins make
        the passes jitter by a few tenths of a percent, well inside the fit's own
        uncertainty). [-]
    throttle : array-like, optional
        Pedal position per sample (0-1). Where given, power and drag are calibrated on
        the full-throttle, power-limited samples by a central (least-squares) fit, see
        Notes. [-]
    fit_rate_hz : float or None, default FIT_RATE_HZ
        With ``sample_rate_hz``, a long session's filtered samples are thinned to about
        this rate before binning (never below :data:`FIT_MIN_SAMPLES` samples); None keeps
        every sample. [Hz]
    selection : Selection, optional
        :func:`select_samples` of these same arrays with this sample rate and minimum
        speed but no mask, made beforehand (the pipeline makes it in a second thread while
        it splits the laps); ``mask`` is applied to it. [-]
    remove_noise : bool, default True
        Take out of the envelope the width the sensor noise adds to a high quantile
        (:func:`_noise_offsets`), give the boundary points back what the low-pass took off
        them (:func:`_filter_shrink`) and leave out the points far inside (bins not driven
        to the limit, :data:`FAR_INSIDE_M_S2`); nothing without a sample rate, which leaves
        the samples unfiltered and their noise unknown: see Notes. [-]
    noise_m_s2 : float, optional
        The accelerations' noise when it is known otherwise than from their differences
        (derived channels, whose noise is as smooth as they are:
        :func:`limitlap.derived.lateral_noise`): the noise lift is taken from it, and
        nothing is given back for the low-pass. [m/s²]

    Returns
    -------
    EnvelopeFit

    Notes
    -----
    Least squares (:func:`scipy.optimize.least_squares`, ``loss="soft_l1"``) on the radial
    distance of the boundary points from the envelope in the tyre-force plane. The lateral
    limit's growth with speed separates downforce from friction, the braking and traction
    limits' growth then gives drag, and the driving side at speed gives power. The
    uncertainty is the Gauss-Newton covariance :math:`s^2 (J^T J)^{-1}` at the solution,
    treating boundary points as independent (they are order statistics of different bins,
    so this is an approximation). Gradient and banking are not modelled. Weak priors
    (centred on typical values, worth 0.01 m/s² per prior standard deviation) keep
    parameters the data cannot determine finite; a warning then says so.

    At full throttle on a straight the car *is* on its power limit, so those samples are
    not a cloud inside the envelope but noisy points on it; a high quantile of them sits
    above the limit by the noise (about two standard deviations), which would make the
    ideal faster on every straight. With a throttle channel, power and drag are therefore
    refitted by a central (Huber-loss) line fit of :math:`m a_x + C_{rr} m g = P/v -
    \tfrac12\rho v^2 C_D A` over the full-throttle (≥ 98 %, held for 0.3 s either side
    so that the filtered deceleration of a lift does not reach in), nearly straight
    (|a_y| < 2 m/s²), power-limited samples, and the friction values refitted with those
    held (common practice, no published source).

    A high quantile of samples that lie on the limit with noise sits above the limit:
    by the normal quantile times the noise's standard deviation (2.33 sigma at 0.99) when
    every sample of a bin is on the limit, less when most are inside. Left in, it widens
    the envelope by the sensor's noise (about 1 % of the grip for 0.03 g white noise at
    100 Hz after the 3 Hz low-pass) and the ideal lap gains time no driver can find. The
    low-pass works the other way where the path through the g-g plane bends (sweeping
    along the limit, turning from one limit onto another): it averages a sample on the
    limit with neighbours inside it (about 0.2 % of grip on generated sessions' fast
    corners). With ``remove_noise``, each boundary point's shrink is estimated as one
    pass of the low-pass minus two (:func:`_filter_shrink`), and the lift from where the
    near-limit samples, given their shrink back, are densest, for the tyre limit and the
    power line apart (:func:`_noise_offsets`, :func:`_pile_levels`; the noise level from
    the accelerations' second differences, :func:`filtered_noise`). Each boundary point
    is fitted its limit's lift minus its own shrink outside the envelope (one more fit, or
    the refit after the power calibration, whose central power line gets about no lift),
    the lifts moved until that pile lies on the refitted envelope (a few rounds), and
    points far inside it left out (:data:`FAR_INSIDE_M_S2`).
    """
    if base.mass_kg is None or not (base.mass_kg > 0):
        raise LimitlapError(f"vehicle '{base.name}' needs a positive mass to fit an envelope")
    if not 0.5 <= quantile < 1.0:
        raise LimitlapError(f"envelope quantile {quantile} is outside 0.5-1")
    if selection is None:
        sel = select_samples(
            speed_m_s,
            accel_lon_m_s2,
            accel_lat_m_s2,
            mask,
            sample_rate_hz=sample_rate_hz,
            min_speed_m_s=min_speed_m_s,
        )
    else:
        sel = selection if mask is None else selection.within(mask)
    used = _thinned(sel, sample_rate_hz, fit_rate_hz)
    rows = np.flatnonzero(used)  # the rows in use, found once
    v, ax, ay = (np.take(a, rows) for a in (sel.speed_m_s, sel.accel_lon_m_s2, sel.accel_lat_m_s2))
    twice = filtered_again(sel, rows) if remove_noise and noise_m_s2 is None else None
    dense = _densified(rows, v, ax, ay, sel.sample_rate_hz, sample_rate_hz, twice)
    default_bin, default_near = bin_counts(dense.rate_hz)
    min_bin_samples = default_bin if min_bin_samples is None else min_bin_samples
    min_near_limit = default_near if min_near_limit is None else min_near_limit
    if dense.v.size < min_bin_samples * 4:
        raise LimitlapError(
            f"only {v.size} usable samples above {min_speed_m_s:g} m/s on complete laps; "
            "too few to fit a grip envelope"
        )
    problem = _FitProblem(
        dense.v, dense.ax, dense.ay, base, quantile, band_width_m_s, min_speed_m_s,
        n_angle_bins, min_bin_samples, loss_scale_m_s2,
    )  # fmt: skip
    problem.twice = dense.twice  # the low-pass's own shrink, taken out with the noise
    veh, bp, passes = problem.passes(max_passes)
    calibrated = full_throttle_power_drag(
        v, ax, ay, rows, throttle, veh, problem.names, sample_rate_hz
    )
    noise = sel.noise_m_s2 * dense.noise_factor if noise_m_s2 is None else noise_m_s2
    noise = noise if remove_noise else 0.0
    veh, bp, lifts, full_throttle, shrink = problem.calibrated_and_lifted(
        veh, bp, calibrated, noise
    )
    res, uncertainty = problem.uncertainty(veh, bp)
    if full_throttle is not None:  # over the samples; the interpolated ones come after
        full_throttle = np.concatenate([full_throttle, np.zeros(dense.v.size - v.size, bool)])
    quality = {
        "rms_residual_m_s2": float(np.sqrt(np.mean(res**2))),
        **_outside_shares(problem, veh, full_throttle),
        "n_used": int(v.size),
        "n_boundary_points": int(bp[0].size),
        "speed_min_m_s": float(v.min()),
        "speed_max_m_s": float(v.max()),
        "quantile": float(quantile),
        "noise_m_s2": float(sel.noise_m_s2 if noise_m_s2 is None else noise_m_s2),
        "fit_rate_hz": float(dense.rate_hz) if dense.rate_hz is not None else math.nan,
        "noise_offset_m_s2": float(lifts[0]),
        "noise_offset_power_m_s2": float(lifts[1]),
        "filter_shrink_m_s2": shrink,
        "passes": int(passes),
    }
    bands, warnings = _bands_and_warnings(problem, bp, min_near_limit)
    warnings.extend(_plausibility(veh, v, problem.names, uncertainty))
    warnings.extend(_noise_warning(veh, v, sel, lifts[0] if remove_noise else None))
    if base.rolling_coeff is None:
        warnings.append(
            f"rolling resistance not given: {ROLLING_COEFF_DEFAULT} assumed "
            "(it cannot be told apart from grip in the g-g data)"
        )
    return EnvelopeFit(
        veh.require_complete(), quality, uncertainty, bands, used, tuple(problem.names), warnings
    )


#: Samples at a lower rate are interpolated up to this rate for the binning, so that the
#: driver's path through the g-g plane is a line and not scattered points: the bins of
#: a 10 Hz log then fill as those of a 100 Hz log (the rate the binning's counts and
#: widths were set at) and the fit sees the same shape. Measured on two-lap generated
#: sessions thinned to 10 Hz: without it 49 boundary points, the exponent and the
#: traction limit ran to their bounds and the ideal came out 1.6-2.4 % fast (seeds 5,
#: 8); with it within 0.3 %. [Hz]
DENSE_RATE_HZ = 100.0


@dataclass(frozen=True, eq=False)
class _Dense:
    """The fit's samples, interpolated up to :data:`DENSE_RATE_HZ` when slower."""

    v: np.ndarray  # [m/s]
    ax: np.ndarray  # [m/s²]
    ay: np.ndarray  # [m/s²]
    rate_hz: float | None  # rate of these samples (None: no rate) [Hz]
    noise_factor: float  # their noise's standard deviation over the samples' [-]
    twice: tuple | None = None  # a_x, a_y low-passed twice (filtered_again), or None [m/s²]


def _densified(rows, v, ax, ay, own_rate_hz, row_rate_hz, twice=None) -> _Dense:
    r"""The samples with k - 1 points interpolated linearly between neighbours, k = DENSE_RATE_HZ / rate.

    Only between samples that follow one another in the log (one own sample interval
    apart); order does not matter to the binning, so the new points are appended.
    Linear interpolation keeps each new point on the segment between two samples, so
    inside any convex envelope they both lie in (no overshoot, as for the low-pass).
    White noise of standard deviation :math:`\sigma` becomes
    :math:`\sigma\sqrt{(1-f)^2 + f^2}` at fraction f; ``noise_factor`` is the root mean
    square of that over the samples, what :func:`_noise_offsets` is then given. The
    twice-filtered accelerations ``twice`` (or None), at the same samples, are
    interpolated alike.
    """
    if own_rate_hz is None or own_rate_hz * 1.5 >= DENSE_RATE_HZ or rows.size < 2:
        return _Dense(v, ax, ay, own_rate_hz, 1.0, twice)
    k = round(DENSE_RATE_HZ / own_rate_hz)
    step = round(row_rate_hz / own_rate_hz) if row_rate_hz else 1
    pairs = np.flatnonzero(np.diff(rows) == max(step, 1))
    f = np.arange(1, k) / k
    parts = [
        np.concatenate([a, (a[pairs, None] * (1.0 - f) + a[pairs + 1, None] * f).ravel()])
        for a in (v, ax, ay, *(twice or ()))
    ]
    share = (1.0 + np.sum((1.0 - f) ** 2 + f**2)) / k  # mean variance factor of a step
    return _Dense(*parts[:3], own_rate_hz * k, math.sqrt(share), tuple(parts[3:]) or None)


def _thinned(sel: Selection, sample_rate_hz, fit_rate_hz):
    """The selection's ``used`` thinned to every step-th sample, about ``fit_rate_hz`` (see FIT_MIN_SAMPLES).

    The step comes from the accelerations' own rate (:attr:`Selection.sample_rate_hz`):
    when they are logged on every k-th row only, every step-th of those rows is kept.
    """
    used = sel.used
    rate = sel.sample_rate_hz if sel.sample_rate_hz is not None else sample_rate_hz
    if rate is None or fit_rate_hz is None:
        return used
    step = min(int(float(rate) // float(fit_rate_hz)), int(used.sum()) // FIT_MIN_SAMPLES)
    if step <= 1:
        return used
    every = np.zeros(used.shape[0], dtype=bool)  # thinning in time, not of the selection
    if sample_rate_hz is None or rate == float(sample_rate_hz):
        every[::step] = True
    else:  # samples on some rows only: every step-th of the rows that carry one
        carriers = np.flatnonzero(np.isfinite(sel.accel_lon_m_s2))
        every[carriers[::step]] = True
    return used & every


class _FitProblem:
    """The envelope fit's samples, binning, parameters, bounds and weak priors.

    One fit's state: the samples ``v, ax, ay`` [m/s, m/s²] and their speed band, the
    fitted parameter names with their internal scale and bounds, the priors, the work
    arrays reused by every binning pass, ``offset``, how far outside the envelope the
    boundary points are fitted [m/s²] (``fit_envelope`` Notes), and ``twice``, the
    samples' accelerations low-passed a second time (None when they were not filtered,
    or the noise is left in).
    """

    def __init__(
        self, v, ax, ay, base, quantile, band_width_m_s, min_speed_m_s, n_angle_bins,
        min_bin_samples, loss_scale_m_s2,
    ):  # fmt: skip
        self.v, self.ax, self.ay = v, ax, ay
        self.quantile = quantile
        self.n_angle_bins, self.min_bin_samples = n_angle_bins, min_bin_samples
        self.loss_scale_m_s2 = loss_scale_m_s2
        self.edges = np.arange(min_speed_m_s, v.max() + band_width_m_s, band_width_m_s)
        self.band = np.clip(
            np.searchsorted(self.edges, v, side="right") - 1, 0, self.edges.size - 2
        )
        veh, start, p_demo = _provisional(v, ax, ay, base, quantile)
        names = list(_PARAMS[:4]) + [k for k in _PARAMS[4:] if getattr(base, k) is None]
        x0 = np.array([getattr(veh, k) if k not in start else start[k] for k in names])
        if base.has_grip:
            x0[:4] = [base.mu_lat, base.mu_brk, base.mu_trac, base.exponent]
        x0 = x0 / np.array([_SCALE.get(k, 1.0) for k in names])
        self.lo = np.array([_BOUNDS[k][0] / _SCALE.get(k, 1.0) for k in names])
        self.hi = np.array([_BOUNDS[k][1] / _SCALE.get(k, 1.0) for k in names])
        self.x0 = np.clip(x0, self.lo + 1e-9, self.hi - 1e-9)
        self.names, self.start_vehicle = names, veh
        # Weak priors: (centre, standard deviation) in internal units.
        prior = {
            "power_w": (p_demo / 1e5, p_demo / 1e5),
            "drag_area_m2": (0.7, 1.0),
            "downforce_area_m2": (0.0, 2.0),
        }
        self.pri = [(i, *prior[k]) for i, k in enumerate(names) if k in prior]
        self.w_prior = 0.01  # m/s² per prior standard deviation
        self.work = np.empty((5, v.shape[0]))  # _usage_and_direction's arrays, reused
        self.offset = 0.0
        self.twice = None  # a_x, a_y of these samples low-passed twice, or None [m/s²]
        self.usage = None  # combined usage of every sample, once the fit is done [-]

    def boundary(self, veh):
        """The boundary points of every bin under the normalisation by ``veh``."""
        idx, bp_band = _boundary_points(
            self.v, self.ax, self.ay, veh, self.band, self.n_angle_bins, self.quantile,
            self.min_bin_samples, self.work,
        )  # fmt: skip
        return idx, bp_band, self.v[idx], self.ax[idx], self.ay[idx]

    def fit_points(self, sub, veh, start, bv, bax, bay):
        """Least squares of the parameters ``names[sub]`` (the others held at ``veh``'s)."""
        lo, hi, w_prior = self.lo[sub], self.hi[sub], self.w_prior
        sub_names = [self.names[i] for i in sub]
        sub_pri = [(sub.index(i), c, sd) for i, c, sd in self.pri if i in sub]
        plane, plane_jac = _plane_residuals(bv, bax, bay, sub_names, veh, lo, hi)
        prior_jac = np.zeros((len(sub_pri), len(sub)))
        for row, (i, _, sd) in enumerate(sub_pri):
            prior_jac[row, i] = w_prior / sd

        def fun(x):
            extra = [w_prior * (x[i] - c) / sd for i, c, sd in sub_pri]
            return np.concatenate((plane(x) - self.offset, extra))

        def jac(x):
            return np.vstack((plane_jac(x), prior_jac))

        return soft_l1_least_squares(fun, jac, start, lo, hi, self.loss_scale_m_s2)

    def passes(self, max_passes):
        """Normalise-bin-fit passes until the parameters settle: vehicle, points, passes."""
        every = list(range(len(self.names)))
        veh, x0, bp, passes = self.start_vehicle, self.x0, None, 0
        for passes in range(1, max_passes + 1):
            idx, bp_band, bv, bax, bay = self.boundary(veh)
            if idx.size < len(self.names) + 3:
                raise LimitlapError(
                    f"only {idx.size} direction bins hold {self.min_bin_samples} or more "
                    "samples; too few to fit a grip envelope"
                )
            sol = self.fit_points(every, veh, x0, bv, bax, bay)
            step = np.abs(sol.x - x0)
            moved = np.max(step / np.maximum(np.abs(x0), 1e-6))
            x0 = sol.x
            veh = _vehicle_from(sol.x, self.names, veh)
            bp = (idx, bp_band, bv, bax, bay, sol)
            if passes > 1 and (moved < 1e-3 or np.all(step < 0.1 * standard_errors(sol, idx.size))):
                break
        self.x0 = x0
        return veh, bp, passes

    def calibrated_and_lifted(self, veh, bp, calibrated, noise_m_s2):
        """The fit after the power/drag calibration, with the noise lift and the low-pass's shrink taken out.

        ``calibrated`` is :func:`full_throttle_power_drag`'s result (or None);
        ``noise_m_s2`` the filtered noise (0 leaves the points on the limit). Each
        boundary point is fitted its lift minus its own filter shrink outside the envelope
        (:func:`_filter_shrink`), the lift of each limit set so that the shrink-corrected
        samples near it pile up on the refitted envelope (:func:`_pile_levels`, a few
        rounds). Points far inside the envelope (:data:`FAR_INSIDE_M_S2`) are left out.
        Returns the vehicle, the boundary points used, the lifts (tyre, power) [m/s²], the
        full-throttle rows used (or None) and the boundary points' mean filter shrink
        [m/s²].
        """
        lifts, full_throttle, shrink = (0.0, 0.0), None, 0.0
        if calibrated is not None:
            veh, full_throttle = calibrated
        if calibrated is None and not noise_m_s2 > 0.0 and self.twice is None:
            return veh, bp, lifts, full_throttle, shrink
        idx, bp_band, bv, bax, bay = self.boundary(veh)  # leaves the shares in work
        if noise_m_s2 > 0.0:  # from the samples' shares the binning left in work
            w = self.work
            lifts = _noise_offsets(
                self.v, self.ax, self.ay, veh, noise_m_s2, self.quantile, w[0], w[4],
                self.twice,
            )  # fmt: skip
        far = FAR_INSIDE_M_S2 + FAR_INSIDE_NOISE * noise_m_s2
        keep = _residuals(bv, bax, bay, veh) >= -far  # bins not driven to the limit: out
        corrected = noise_m_s2 > 0.0 or self.twice is not None  # remove_noise, with a rate
        if corrected and np.count_nonzero(keep) >= len(self.names) + 3:
            idx, bp_band, bv, bax, bay = (a[keep] for a in (idx, bp_band, bv, bax, bay))
        tyre_b, power_b = _tyre_and_power_shares(bv, bax, bay, veh)[:2]
        on_power = power_b >= tyre_b  # each point fitted off the limit it is on
        shrinks = np.zeros(idx.size)
        if self.twice is not None:
            twice_b = (self.twice[0][idx], self.twice[1][idx])
            shrinks = _filter_shrink(bv, bax, bay, twice_b, veh, on_power)
            shrink = float(np.mean(shrinks))
        top = NormalDist().inv_cdf(self.quantile) * noise_m_s2
        for rounds in range(1, _PILE_ROUNDS + 1):
            self.offset = np.where(on_power, lifts[1], lifts[0]) - shrinks
            fitted, sol = self._refit(veh, calibrated, bv, bax, bay)
            if not noise_m_s2 > 0.0 or rounds == _PILE_ROUNDS:
                break
            levels = self._levels(fitted, noise_m_s2)  # 0 once the envelope is on the piles
            if max(abs(lv) for lv in levels) < _PILE_TOLERANCE * noise_m_s2:
                break
            lifts = tuple(
                float(np.clip(b - lv, 0.0, top)) for b, lv in zip(lifts, levels, strict=True)
            )
        bp = (idx, bp_band, bv, bax, bay, sol if calibrated is None else bp[5])
        return fitted, bp, lifts, full_throttle, shrink

    def _levels(self, veh, noise_m_s2):
        """:func:`_pile_levels` of the samples under ``veh`` (0, 0 without noise). [m/s²]."""
        if not noise_m_s2 > 0.0:
            return 0.0, 0.0
        tyre, power = _tyre_and_power_shares(self.v, self.ax, self.ay, veh, self.work)[:2]
        return _pile_levels(
            self.v, self.ax, self.ay, veh, noise_m_s2, self.quantile, tyre, power, self.twice
        )

    def _refit(self, veh, calibrated, bv, bax, bay):
        """The boundary points fitted ``offset`` off the envelope: every parameter from ``veh``'s, or with the calibrated power and drag held. Returns the vehicle and the solution."""
        if calibrated is None:
            sol = self.fit_points(list(range(len(self.names))), veh, self.x0, bv, bax, bay)
            return _vehicle_from(sol.x, self.names, veh), sol
        keep = [i for i, k in enumerate(self.names) if k not in ("power_w", "drag_area_m2")]
        names_f = [self.names[i] for i in keep]
        x0f = np.array([getattr(veh, k) / _SCALE.get(k, 1.0) for k in names_f])
        start_f = np.clip(x0f, self.lo[keep] + 1e-9, self.hi[keep] - 1e-9)
        sol_f = self.fit_points(keep, veh, start_f, bv, bax, bay)
        return _vehicle_from(sol_f.x, names_f, veh), sol_f

    def uncertainty(self, veh, bp):
        """Residuals of the boundary points [m/s²] and the parameters' standard errors [SI].

        Gauss-Newton covariance :math:`s^2 (J^T J)^{-1}` at the solution.
        """
        _, _, bv, bax, bay, sol = bp
        res = _residuals(bv, bax, bay, veh) - self.offset
        dof = max(res.size - len(self.names), 1)
        s2 = float(np.sum(res**2) / dof)
        cov = np.linalg.pinv(sol.jac.T @ sol.jac) * s2
        sigma = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        return res, {k: float(sigma[i] * _SCALE.get(k, 1.0)) for i, k in enumerate(self.names)}


def _outside_shares(problem: _FitProblem, veh, full_throttle) -> dict:
    """Shares of samples beyond the tyre limit and above the power line; usage in work."""
    tyre, power = _tyre_and_power_shares(problem.v, problem.ax, problem.ay, veh, problem.work)[:2]
    # The power line calibrated on the full-throttle samples is a central fit of them
    # (fit_envelope Notes): about half lie above it, by the noise.
    share_power = (
        float(np.mean(power[full_throttle] > 1.0)) if full_throttle is not None else math.nan
    )
    # Beyond the friction limits (up to half of the samples driven on the limit).
    share_tyre = float(np.mean(tyre > 1.0))
    problem.usage = np.maximum(tyre, power, out=tyre)  # combined_usage, bit for bit
    return {"share_outside_tyre_limit": share_tyre, "share_above_power_line": share_power}


def _bands_and_warnings(problem: _FitProblem, bp, min_near_limit):
    """Per speed band: samples, samples near the limit, boundary points; sparse warning."""
    _, bp_band, bv, bax, bay, _ = bp
    edges, band = problem.edges, problem.band
    n_bands = edges.size - 1
    in_band = np.bincount(band, minlength=n_bands)  # samples per band, and near the limit
    near_limit = np.bincount(band[problem.usage >= 0.95], minlength=n_bands)
    bands, warnings, sparse = [], [], []
    for b in range(n_bands):
        if in_band[b] == 0:
            continue
        sel_b = bp_band == b
        near = int(near_limit[b])
        lo_b, hi_b = float(edges[b]), float(edges[b + 1])
        bands.append(
            EnvelopeBand(lo_b, hi_b, int(in_band[b]), near, bv[sel_b], bax[sel_b], bay[sel_b])
        )
        if near < min_near_limit:
            sparse.append(f"{lo_b:.0f}-{hi_b:.0f}")
    if sparse:
        warnings.append(
            f"speed band{'s' if len(sparse) > 1 else ''} {', '.join(sparse)} m/s: fewer than "
            f"{min_near_limit} samples within 5 % of the fitted limit; the envelope there "
            "rests on the neighbouring bands (the g-g diagram shows the samples)"
        )
    return tuple(bands), warnings


#: A noise lift is estimated only from at least this many samples near the limit. [-]
_MIN_TAIL_SAMPLES = 30

#: Rounds of refitting the boundary points at most, each lift moved by how far the
#: shrink-corrected samples near its limit pile up off the refitted envelope, and the
#: distance that counts as on it, as a share of the noise (the pile's level is read on
#: a 0.05 sigma histogram). [-]
_PILE_ROUNDS = 4
#: See :data:`_PILE_ROUNDS`. [-]
_PILE_TOLERANCE = 0.05

#: A boundary point further inside the envelope fitted through them than this plus
#: :data:`FAR_INSIDE_NOISE` times the filtered noise is left out of the final fit: its
#: bin was not driven to the limit (a flat-out bend where power limits, a corner taken
#: gently, the low-pass's path across a step between two limits), and under the soft-L1
#: loss each such point still pulls the envelope in by about the loss scale. Points near
#: the limit lie within a few tenths of it (measured on generated sessions at 5-100 Hz:
#: within about 0.5 m/s² at 100 Hz, more at lower rates where the noise is larger; the
#: points of bins never driven there 1-4 m/s² inside;
#: left in, they took about 2 % off the fitted downforce area and made the ideal lap
#: about 0.02 s slower over seeds 100-105). Five times the default loss scale; common
#: practice, no published source. [m/s²]
FAR_INSIDE_M_S2 = 0.5
#: See :data:`FAR_INSIDE_M_S2`: the noise scatters the points near the limit too. [-]
FAR_INSIDE_NOISE = 2.0

#: Samples of a share of the limit above this take part in the lift estimate (the peak
#: of those on the limit and its upper half lie well above it at any noise level met:
#: 4 sigma of 0.4 m/s², the noise of 5 Hz samples, is 0.1 of a 1.6 g limit). [-]
_NEAR_LIMIT_SHARE = 0.8


def _noise_offsets(v, ax, ay, veh, noise, quantile, tyre, power, twice=None):
    r"""How far the sensor noise lifts the boundary points above the tyre limit and above the power line.

    [m/s²].

    Samples driven on a limit, with noise of standard deviation :math:`\sigma` (the
    filtered noise, :attr:`Selection.noise_m_s2`), scatter about it as
    :math:`N(0, \sigma^2)`; an envelope fitted through high-quantile points lies
    :math:`b` outside the limit, so those samples pile up at :math:`-b` from it, and
    samples inside the limit (driven below it) spread lower still: :math:`-b` is where
    the distances are densest (:func:`_pile_levels`). It is kept within
    :math:`[0, z_q \sigma]` (:math:`z_q` the normal quantile of ``quantile``: the lift
    when every sample of a bin is on the limit), so the noise correction never widens
    the envelope (the low-pass's shrink given back to each point can,
    :func:`_filter_shrink`) and never narrows it by more than the noise can have widened
    it.

    Why from the peak and not from the samples beyond the envelope alone (their mean
    against a truncated normal's): how far the high quantile of a bin lies above the
    limit depends on how many independent noise values the bin holds (the 3 Hz low-pass
    makes 100 Hz samples neighbours in noise; a 10 Hz log's are all independent and
    few), and at low rates only a few dozen samples lie beyond, too few to tell the lift
    apart from the bins' scatter; the peak holds hundreds at any rate.

    The tyre limit's samples (tyre share ``tyre`` above :data:`_NEAR_LIMIT_SHARE`, not
    power-limited) give their radial distance from it; the power line's (power share
    ``power`` above it and above the tyre share) their longitudinal excess
    :math:`(s_P - 1) P / (m v)`. A power line calibrated as a central fit (throttle
    channel) has its peak on it: its lift comes out 0. Each is 0 without noise or with
    fewer than :data:`_MIN_TAIL_SAMPLES` samples near the limit.

    With ``twice`` (the accelerations low-passed a second time,
    :func:`limitlap.samples.filtered_again`), each sample's distance is first given back
    what the low-pass took off it (:func:`_filter_shrink`): the samples on the limit then
    pile up where the limit is, whether the driver held it or swept along it.
    """
    top = NormalDist().inv_cdf(quantile) * noise
    levels = _pile_levels(v, ax, ay, veh, noise, quantile, tyre, power, twice)
    return tuple(float(np.clip(-lv, 0.0, top)) for lv in levels)


def _pile_levels(v, ax, ay, veh, noise, quantile, tyre, power, twice=None):
    """Where the samples near the tyre limit and near the power line are densest, from each (+ outside). [m/s²].

    The samples and distances of :func:`_noise_offsets` (which see), the level of each
    from :func:`_pile_level`; (0, 0) without noise, 0 for a limit with fewer than
    :data:`_MIN_TAIL_SAMPLES` samples near it.
    """
    if not noise > 0.0:
        return 0.0, 0.0
    b_tyre = b_power = 0.0
    near = np.flatnonzero((tyre > _NEAR_LIMIT_SHARE) & (tyre > power))
    if near.size >= _MIN_TAIL_SAMPLES:
        r = _radial(v[near], ax[near], ay[near], veh, tyre[near])
        if twice is not None:
            r += r - _radial(v[near], twice[0][near], twice[1][near], veh)
        b_tyre = _pile_level(r, noise, quantile)
    if math.isfinite(veh.power_w):
        on = np.flatnonzero((power > _NEAR_LIMIT_SHARE) & (power >= tyre))
        if on.size >= _MIN_TAIL_SAMPLES:
            excess = (power[on] - 1.0) * veh.power_w / (veh.mass_kg * np.maximum(v[on], 1e-3))
            if twice is not None:
                excess += excess - _power_excess(v[on], twice[0][on], twice[1][on], veh)
            b_power = _pile_level(excess, noise, quantile)
    return b_tyre, b_power


def _radial(v, ax, ay, veh, tyre=None):
    """:func:`_residuals` from the tyre limit alone (power left out), from the tyre shares ``tyre`` when given (:func:`_tyre_and_power_shares`' first, which it computes otherwise). [m/s²]."""
    if tyre is None:
        tyre = _tyre_and_power_shares(v, ax, ay, veh)[0]
    force = np.hypot(ax + resistance_n(v, veh) / veh.mass_kg, ay)
    return force * (1.0 - 1.0 / np.maximum(tyre, 1e-9))


def _power_excess(v, ax, ay, veh):
    """How far each sample's driving force lies above the power line P/v, per mass. [m/s²]."""
    power = _tyre_and_power_shares(v, ax, ay, veh)[1]
    return (power - 1.0) * veh.power_w / (veh.mass_kg * np.maximum(v, 1e-3))


def _filter_shrink(v, ax, ay, twice, veh, on_power):
    r"""How far the low-pass moved each sample inside the limit it is on. [m/s²].

    A sample on the limit whose path through the g-g plane bends (sweeping along the
    limit from braking through cornering to traction, or turning onto it) is averaged
    with neighbours inside the convex envelope, by about :math:`\tfrac12 s^2` times its
    second derivative across the limit (s the kernel's width in time). One pass minus
    two (``ax, ay`` against ``twice``, :func:`limitlap.samples.filtered_again`) is that
    move again: the radial distance from the tyre limit (power left out) for the tyre
    limit's samples, the excess over the power line where ``on_power``. Positive when
    the low-pass moved the sample inside.
    """
    on = on_power & math.isfinite(veh.power_w)
    shrink = np.empty(v.shape[0])
    for part, measure in ((~on, _radial), (on, _power_excess)):
        i = np.flatnonzero(part)
        if i.size:
            shrink[i] = measure(v[i], ax[i], ay[i], veh) - measure(
                v[i], twice[0][i], twice[1][i], veh
            )
    return shrink


def _pile_level(r, noise, quantile):
    r"""The level where the distances r beyond a limit (+ outside) are densest. [m/s²].

    The level :math:`\mu` where the distances are densest, between :math:`-z_q\sigma`
    and :math:`3\sigma`: the samples driven on the limit pile up there, the samples
    inside it spread thinly below. The density is a histogram of 0.05 sigma bins smoothed
    by a Gaussian kernel of half the noise (a kernel density estimate: B. W. Silverman,
    *Density Estimation for Statistics and Data Analysis*, Chapman & Hall, 1986, ch. 3
    [M]); smoothing a normal peak by a Gaussian leaves its mode where it was (a lift of
    :math:`-\mu`, :func:`_noise_offsets`). The densest level, not the first
    from the top that looks like a peak's upper half: a few dozen samples 2-4 sigma
    outside (a region the envelope's shape fits badly, a kerb strike) stopped such a
    search at their own level (a two-lap 20 Hz log: no lift, ideal 0.4 % fast); here they
    are outweighed by the hundreds on the limit. :math:`-z_q\sigma` when the density is
    highest there (or below), 0 with :data:`_MIN_TAIL_SAMPLES` distances or fewer in the
    histogram's range.
    """
    top = NormalDist().inv_cdf(quantile) * noise
    r = np.asarray(r, dtype=np.float64)
    step = 0.05 * noise
    edges = np.arange(-top - 4.0 * noise, 5.0 * noise + step, step)
    # equal bins by count and range: numpy's histogram then bins without sorting r
    count, _ = np.histogram(r, edges.size - 1, (edges[0], edges[-1]))
    if count.sum() <= _MIN_TAIL_SAMPLES:
        return 0.0
    density = gaussian_filter1d(count.astype(np.float64), 0.5 * noise / step, mode="constant")
    centre = 0.5 * (edges[1:] + edges[:-1])
    allowed = np.flatnonzero((centre >= -top) & (centre <= 3.0 * noise))
    best = allowed[int(np.argmax(density[allowed]))]
    if best == allowed[0]:
        return -top  # densest at (or beyond) the whole quantile's lift
    return float(centre[best])


#: How well the noise lift is known, as a share of the filtered noise: measured on the
#: demo session and seeded two-lap sessions thinned to 10 and 5 Hz, where the ideal lap
#: stayed within 0.3 % of the 100 Hz one with noise of 2-3 % of the lateral limit
#: (benchmarks/rates.py): about a quarter of the noise in grip. [-]
LIFT_UNCERTAINTY = 0.25
#: The noise warning is given when the ideal lap's share of that uncertainty (half the
#: grip's: lap time goes about as the square root of grip) reaches this. [-]
NOISE_WARNING_SHARE = 0.0025


def _noise_warning(veh, v, sel: Selection, lift):
    """One line when the accelerations' noise at their rate leaves the grip uncertain.

    ``lift`` is the tyre limit's noise lift taken out [m/s²] (None when the noise was
    left in).
    """
    noise = sel.noise_m_s2
    if sel.sample_rate_hz is None or not noise > 0.0:
        return []
    lateral = veh.mu_lat * float(np.median(normal_load_n(v, veh))) / veh.mass_kg
    grip_share = LIFT_UNCERTAINTY * noise / lateral
    if 0.5 * grip_share < NOISE_WARNING_SHARE:
        return []
    taken = (
        "left in (noise removal off)"
        if lift is None
        else f"{lift:.2f} m/s² of it taken out by estimate"
    )
    return [
        f"accelerations at {sel.sample_rate_hz:.3g} Hz: their noise after the low-pass "
        f"({noise:.2f} m/s², {noise / lateral:.1%} of the lateral limit) widens the "
        f"envelope's high quantile ({taken}): the grip limits are uncertain by about "
        f"±{grip_share:.1%} and the ideal lap by about ±{0.5 * grip_share:.1%}; a faster "
        "log narrows it"
    ]


def _plausibility(veh, v, names, uncertainty):
    """One-line warnings for fitted values outside the plausibility windows."""
    out = []
    lo, hi = PLAUSIBLE["lateral_g"]
    for speed in (float(v.min()), float(v.max())):
        lat_g = veh.mu_lat * float(normal_load_n(speed, veh)) / veh.mass_kg / G0_M_S2
        if not lo <= lat_g <= hi:
            out.append(
                f"fitted lateral limit {lat_g:.2f} g at {speed:.0f} m/s is outside "
                f"the plausible {lo}-{hi} g"
            )
    for k in ("mu_lat", "mu_brk", "mu_trac"):
        lo, hi = PLAUSIBLE["mu"]
        if not lo <= getattr(veh, k) <= hi:
            out.append(f"fitted {k} {getattr(veh, k):.2f} is outside the plausible {lo}-{hi}")
    for k in ("exponent", "power_w", "drag_area_m2", "downforce_area_m2"):
        if k not in names:
            continue
        lo, hi = PLAUSIBLE[k]
        val = getattr(veh, k)
        if not lo <= val <= hi:
            out.append(f"fitted {k} {val:.4g} is outside the plausible {lo:g}-{hi:g}")
        if k != "exponent" and uncertainty[k] > 0.5 * max(abs(val), 1e-3 * hi):
            out.append(
                f"{k} is not well determined by the data ({val:.4g} ± "
                f"{uncertainty[k]:.2g}); give it in the vehicle file if known"
            )
    return out
