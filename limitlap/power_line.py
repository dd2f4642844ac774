r"""Power and drag from the full-throttle, straight-line samples of a session.

At full throttle on a straight the car is on its power limit, so those samples are noisy
points on the power line :math:`m a_x + C_{rr} m g = P/v - \tfrac12\rho v^2 C_D A`; a
central (Huber-loss) line fit of them gives power and drag area without the lift a high
quantile would get from the noise (docs/methods.md, Envelope fit). The envelope fit
(:mod:`limitlap.envelope`) calls :func:`full_throttle_power_drag` after its passes.

References
----------
.. [1] P. J. Huber, "Robust estimation of a location parameter", *Annals of Mathematical
   Statistics* 35(1):73-101, 1964.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from limitlap import _kernels
from limitlap.limits import normal_load_n
from limitlap.samples import mad_scale
from limitlap.units import G0_M_S2

#: Throttle at or above this share counts as full throttle. [-]
FULL_THROTTLE = 0.98


#: A full-throttle sample calibrates power and drag only when the pedal stayed at full
#: throttle this long either side of it: the spike test's running median (half of 0.3 s)
#: and the 3 Hz Gaussian low-pass (3 sigma = 0.13 s) carry the deceleration of a lift
#: or of the braking at the end of a straight back into the samples before it, which
#: would pull the power line down at the highest speeds and make the drag too large.
#: 0.3 s is those two reaches added up. [s]
THROTTLE_HELD_S = 0.3


def full_throttle_held(throttle, rows, reach):
    """True where no row within ``reach`` rows of ``rows`` (ascending) is below full throttle (a blank counts as below); one compiled scan (``_kernels.held_at_least``)."""
    return _kernels.held_at_least(
        np.ascontiguousarray(throttle, dtype=np.float64),
        rows.astype(np.int64),
        int(reach),
        FULL_THROTTLE,
    )


def huber_line_fit(design, y, max_iter=50, rtol=1e-8):
    r"""Linear least squares with Huber's loss, by iteratively reweighted least squares.

    Huber's loss (quadratic within :math:`k = 1.345\,s` of the fit, linear beyond; 95 %
    efficiency for normal errors) with the scale :math:`s = 1.4826\,\mathrm{MAD}` of the
    residuals re-estimated each step (P. J. Huber, *Robust Statistics*, Wiley, 1981,
    ch. 7; P. W. Holland and R. E. Welsch, "Robust regression using iteratively
    reweighted least-squares", *Commun. Statist.* A6, 1977; constants from memory), the
    MAD taken over at most :data:`_SCALE_SAMPLES` evenly spread residuals (the scale only
    sets where the loss turns linear). Stops when no parameter moves by more than
    ``rtol`` of itself. A gear change at full throttle (the drive cut for a fraction of a
    second) gives a few samples far below the power line, which would pull a plain
    least-squares fit down. Returns the parameters and the final :math:`k`.
    """
    # Columns scaled to unit norm (the 1/v and v² columns differ by 1e5), normal
    # equations of the two columns solved directly: a few vector operations a step.
    norm = np.sqrt(np.einsum("ij,ij->j", design, design))
    c = np.ascontiguousarray((design / norm).T)
    y = np.asarray(y, dtype=np.float64)
    w = np.ones_like(y)
    x = None
    k = math.inf
    stride = max(1, y.shape[0] // _SCALE_SAMPLES)
    for _ in range(max_iter + 1):
        wc = c * w
        x_new = np.linalg.solve(wc @ c.T, wc @ y)
        done = x is not None and np.all(np.abs(x_new - x) <= rtol * np.abs(x))
        x = x_new
        if done:
            break
        r = y - x @ c
        some = r[::stride]
        scale = mad_scale(some)
        if not scale > 0.0:
            break
        k = 1.345 * scale
        w = k / np.maximum(np.abs(r), k)  # 1 within k of the fit
    return x / norm, k


#: Residuals the robust line fit's scale is taken from, at most. [-]
_SCALE_SAMPLES = 2000


def full_throttle_power_drag(v, ax, ay, rows, throttle, veh, names, sample_rate_hz=None):
    """Power and drag from full-throttle straight-line samples (see fit_envelope Notes).

    ``v``, ``ax``, ``ay`` are the samples in use, at the (ascending) ``rows`` of the log;
    ``throttle`` is per row of the log. With ``sample_rate_hz`` (the samples were
    low-pass filtered) only samples with the pedal held at full throttle for
    :data:`THROTTLE_HELD_S` either side count. The fit is :func:`huber_line_fit`.
    Returns the vehicle with both replaced and the mask (over ``v``) of the samples they
    were fitted to, or None when there is no throttle channel, too few such samples
    (< 200) or too narrow a speed range (< 10 m/s) to separate them.
    """
    if throttle is None or "power_w" not in names or "drag_area_m2" not in names:
        return None
    thr_rows = np.asarray(throttle, dtype=np.float64)
    if thr_rows.ndim != 1 or (rows.size and rows[-1] >= thr_rows.shape[0]):
        return None
    thr = np.take(thr_rows, rows)  # only the samples in use are looked at
    m = veh.mass_kg
    with np.errstate(invalid="ignore", divide="ignore"):
        power_limited = veh.power_w / np.maximum(v, 1e-3) < 0.9 * veh.mu_trac * normal_load_n(
            v, veh
        )
        pick = (thr >= FULL_THROTTLE) & (np.abs(ay) < 2.0) & power_limited & np.isfinite(ax)
    if sample_rate_hz is not None and pick.any():
        reach = math.ceil(THROTTLE_HELD_S * float(sample_rate_hz))
        pick[pick] = full_throttle_held(thr_rows, rows[pick], reach)
    if pick.sum() < 200 or np.ptp(v[pick]) < 10.0:
        return None
    vp = v[pick]
    y = m * ax[pick] + veh.rolling_coeff * m * G0_M_S2
    design = np.column_stack([1.0 / vp, -0.5 * veh.air_density_kg_m3 * vp * vp])
    (power_w, drag_area_m2), _ = huber_line_fit(design, y)
    if not (power_w > 0 and drag_area_m2 >= 0):
        return None
    return replace(veh, power_w=float(power_w), drag_area_m2=float(drag_area_m2)), pick
