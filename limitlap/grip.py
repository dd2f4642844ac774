r"""Grip estimates: the grip scale a lap used against an envelope.

The grip scale k multiplies the three friction coefficients only (docs/formats.md,
Vehicle files). A sample's required k is the smallest at which it lies on or inside the
envelope; a lap's (or a corner's) grip estimate is a high quantile of the required k
over its grip-limited samples (docs/methods.md, Grip estimate).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from limitlap.errors import LimitlapError
from limitlap.limits import (
    combined_usage,
    power_force_n,
    resistance_n,
)
from limitlap.samples import select_samples
from limitlap.vehicle import Vehicle


def _grip_demand(speed_m_s, accel_lon_m_s2, accel_lat_m_s2, vehicle: Vehicle, margin=0.0):
    """Required grip scale per sample; ``inf`` beyond ``(1 - margin)`` of the power limit. [-]."""
    vehicle.require_complete()
    v = np.asarray(speed_m_s, dtype=np.float64)
    fx = vehicle.mass_kg * np.asarray(accel_lon_m_s2, dtype=np.float64) + resistance_n(v, vehicle)
    # Tyre share alone: combined_usage of the same car without its power limit.
    k_grip = combined_usage(v, accel_lon_m_s2, accel_lat_m_s2, replace(vehicle, power_w=math.inf))
    power_force = power_force_n(v, vehicle)
    return np.where(fx > (1.0 - margin) * power_force, np.inf, k_grip)


#: Samples driving within this share of the power limit P/v (or beyond it) show the
#: engine's limit, not the tyres': through a flat-out bend the tyres are not asked for
#: their grip, so such samples are left out of the grip estimates, and a corner with no
#: other samples gets none (NaN) rather than a low figure that reads as a damp patch.
#: 5 % is a few times the filtered acceleration noise of a logger at speed; common
#: practice, no published source. [-]
POWER_LIMIT_MARGIN = 0.05


#: A corner's grip estimate needs at least this much time of usable samples (5 at the
#: 50 Hz the comparison resamples a lap to, as before; in time so a raw log at another
#: rate asks for the same stretch of driving). [s]
MIN_SEGMENT_S = 0.1
#: ... and never fewer samples than this, at any rate. Common practice, no published
#: source. [-]
MIN_SEGMENT_SAMPLES = 5


def required_grip_scale(speed_m_s, accel_lon_m_s2, accel_lat_m_s2, vehicle: Vehicle):
    r"""Smallest grip scale k at which each sample lies on or inside the envelope.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        Per-sample speed [m/s] and accelerations, + forward, + left [m/s²].
    vehicle : Vehicle
        Complete vehicle at grip 1.

    Returns
    -------
    numpy.ndarray
        k per sample; ``inf`` where the driving force exceeds the power limit P/v,
        which no grip scale changes. [-]

    Notes
    -----
    k multiplies the three friction coefficients only (docs/formats.md, Vehicle files). The tyre law's
    limits are all proportional to k, so its share at scale k is :math:`u_1/k`, with
    :math:`u_1` the tyre share at k = 1; power is a separate limit
    :math:`F_x \le P/v` that k does not change (:func:`limitlap.limits.combined_usage`,
    the solver's model). Hence :math:`k = u_1`, or ``inf`` when :math:`F_x > P/v`.
    """
    return _grip_demand(speed_m_s, accel_lon_m_s2, accel_lat_m_s2, vehicle)


def _prepare(speed_m_s, accel_lon_m_s2, accel_lat_m_s2, mask, min_speed_m_s, sample_rate_hz):
    sel = select_samples(
        speed_m_s,
        accel_lon_m_s2,
        accel_lat_m_s2,
        mask,
        sample_rate_hz=sample_rate_hz,
        min_speed_m_s=min_speed_m_s,
    )
    return sel.speed_m_s, sel.accel_lon_m_s2, sel.accel_lat_m_s2, sel.used


def grip_estimate(
    speed_m_s,
    accel_lon_m_s2,
    accel_lat_m_s2,
    vehicle: Vehicle,
    *,
    quantile=0.99,
    mask=None,
    sample_rate_hz=None,
    min_speed_m_s=10.0,
) -> float:
    """Grip scale at which the vehicle's envelope just bounds what the samples showed.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        Per-sample speed [m/s] and accelerations, + forward, + left [m/s²].
    vehicle : Vehicle
        Complete vehicle (envelope at grip 1), e.g. fitted on a dry session.
    quantile : float, default 0.99
        High quantile of the per-sample required scale, the same statistic as the
        envelope fit, so spikes do not set it. [-]
    mask : array-like of bool, optional
        Samples to consider. [-]
    sample_rate_hz : float, optional
        Uniform sample rate of a raw log: the samples are then despiked and low-pass
        filtered by :func:`select_samples` first, as :func:`fit_envelope` does, so that
        noise does not raise the estimate. Leave out for already smooth samples (e.g. a
        reconstructed lap on distance stations). [Hz]
    min_speed_m_s : float, default 10.0
        Slower samples are left out. [m/s]

    Returns
    -------
    float
        Grip scale k; near 1 when ``vehicle`` was fitted from the same samples. Not
        clipped to the 0.2-2.0 range of ``--grip``. [-]

    Notes
    -----
    Per sample the required scale comes from :func:`required_grip_scale`; samples beyond
    the power limit (no grip scale explains them: an under-estimated power, or noise on
    a full-throttle straight), and those within :data:`POWER_LIMIT_MARGIN` of it (they
    show the engine's limit, not the tyres'), are left out.

    Examples
    --------
    >>> car = Vehicle("demo", 1000.0, 1e9, 0.0, 0.0, 0.0, mu_lat=1.0, mu_brk=1.0,
    ...               mu_trac=1.0, exponent=2.0)
    >>> round(grip_estimate([20.0, 20.0], [0.0, 0.0], [7.0, 8.0], car, quantile=1.0), 4)
    0.8158
    """
    v, ax, ay, ok = _prepare(
        speed_m_s, accel_lon_m_s2, accel_lat_m_s2, mask, min_speed_m_s, sample_rate_hz
    )
    k = _grip_demand(v[ok], ax[ok], ay[ok], vehicle, POWER_LIMIT_MARGIN)
    k = k[np.isfinite(k)]
    if k.size == 0:
        raise LimitlapError(
            f"no samples faster than {min_speed_m_s:g} m/s and within the power limit to "
            "estimate the grip scale from"
        )
    return float(np.quantile(k, quantile))


def grip_estimate_by_segment(
    speed_m_s,
    accel_lon_m_s2,
    accel_lat_m_s2,
    vehicle: Vehicle,
    segment_index,
    *,
    quantile=0.99,
    mask=None,
    sample_rate_hz=None,
    min_speed_m_s=10.0,
    min_samples=None,
) -> np.ndarray:
    """Grip scale per segment (corner), as :func:`grip_estimate` within each.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        Per-sample speed [m/s] and accelerations [m/s²].
    vehicle : Vehicle
        Complete vehicle at grip 1.
    segment_index : array-like of int
        Segment number 0..S-1 of each sample; negative = in no segment. [-]
    quantile, mask, sample_rate_hz, min_speed_m_s
        As in :func:`grip_estimate`.
    min_samples : int, optional
        Segments with fewer usable samples get NaN; default :data:`MIN_SEGMENT_S` of
        samples at ``sample_rate_hz`` (5 at the 50 Hz the comparison resamples to),
        never fewer than :data:`MIN_SEGMENT_SAMPLES`, and that floor without a rate. [-]

    Returns
    -------
    numpy.ndarray
        k per segment, length max(segment_index) + 1; NaN where too few samples. [-]
    """
    v, ax, ay, ok = _prepare(
        speed_m_s, accel_lon_m_s2, accel_lat_m_s2, mask, min_speed_m_s, sample_rate_hz
    )
    if min_samples is None:
        rate = 0.0 if sample_rate_hz is None else float(sample_rate_hz)
        min_samples = max(MIN_SEGMENT_SAMPLES, round(MIN_SEGMENT_S * rate))
    seg = np.asarray(segment_index)
    if seg.shape != v.shape or not np.issubdtype(seg.dtype, np.integer):
        raise LimitlapError("segment index must be one integer per sample")
    n_seg = int(seg.max()) + 1 if seg.size else 0
    out = np.full(max(n_seg, 0), np.nan)
    k = np.full(v.shape, np.inf)
    k[ok] = _grip_demand(v[ok], ax[ok], ay[ok], vehicle, POWER_LIMIT_MARGIN)
    good = ok & np.isfinite(k) & (seg >= 0)
    if not good.any():
        return out
    kk, ss = k[good], seg[good]
    order = np.lexsort((kk, ss))
    keys, start, count = np.unique(ss[order], return_index=True, return_counts=True)
    enough = count >= min_samples
    pos = quantile * (count - 1)  # linear interpolation between ranks, as numpy.quantile
    lo = start + np.floor(pos).astype(np.int64)
    hi = start + np.ceil(pos).astype(np.int64)
    frac = pos - np.floor(pos)
    val = kk[order][lo] * (1.0 - frac) + kk[order][hi] * frac
    out[keys[enough]] = val[enough]
    return out


def grip_estimates_of_stretches(
    speed_m_s,
    accel_lon_m_s2,
    accel_lat_m_s2,
    vehicle: Vehicle,
    bounds,
    *,
    mask=None,
    quantile=0.99,
    step: int = 1,
    min_speed_m_s=10.0,
    min_samples=5,
) -> np.ndarray:
    """Grip scale of each stretch of already filtered samples, as :func:`grip_estimate` of each.

    The required grip scale is found once over the rows from the first stretch's start
    to the last one's end (every ``step``-th row), then each stretch's quantile taken on
    its own rows; no sort of the whole.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        Filtered per-sample speed [m/s] and accelerations [m/s²] (e.g. a whole log's
        :func:`limitlap.samples.select_samples`).
    vehicle : Vehicle
        Complete vehicle at grip 1.
    bounds : sequence of (int, int)
        Each stretch's first row and the row after its last. [-]
    mask : array-like of bool, optional
        Samples to consider. [-]
    quantile, min_speed_m_s
        As in :func:`grip_estimate`.
    step : int
        Every ``step``-th row only (a rate the low-pass leaves nothing above). [-]
    min_samples : int
        A stretch with fewer usable samples gets NaN. [-]

    Returns
    -------
    numpy.ndarray
        k per stretch; NaN where too few samples. [-]
    """
    if not bounds:
        return np.empty(0)
    lo = min(b[0] for b in bounds)
    hi = max(b[1] for b in bounds)
    rows = slice(lo, hi, max(int(step), 1))
    v = np.asarray(speed_m_s, dtype=np.float64)[rows]
    ax = np.asarray(accel_lon_m_s2, dtype=np.float64)[rows]
    ay = np.asarray(accel_lat_m_s2, dtype=np.float64)[rows]
    ok = np.isfinite(v) & np.isfinite(ax) & np.isfinite(ay) & (v >= min_speed_m_s)
    if mask is not None:
        ok &= np.asarray(mask, dtype=bool)[rows]
    k = np.full(v.shape, np.inf)
    k[ok] = _grip_demand(v[ok], ax[ok], ay[ok], vehicle, POWER_LIMIT_MARGIN)
    out = np.full(len(bounds), np.nan)
    stride = rows.step
    for i, (a, b) in enumerate(bounds):
        part = k[-(-(a - lo) // stride) : -(-(b - lo) // stride)]
        part = part[np.isfinite(part)]
        if part.size >= min_samples:
            out[i] = float(np.quantile(part, quantile))
    return out
