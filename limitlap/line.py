"""The racing line: distance along it, curvature, gradient, resampling.

A :class:`Line` is what the solver drives on. It is built from x/y points with a periodic
smoothing spline (so curvature is not raw finite differences of noisy points), or taken
as given from a distance/curvature table.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from limitlap.errors import LimitlapError


@dataclass(frozen=True, eq=False)
class Line:
    """A line to drive, sampled at stations along it (all SI).

    Attributes
    ----------
    distance_m : numpy.ndarray
        Distance of each station from the first, starting at 0. [m]
    curvature_1_m : numpy.ndarray
        Path curvature, + for left-hand bends (ISO 8855). [1/m]
    gradient : numpy.ndarray
        dz/ds, + uphill. [-]
    length_m : float
        Closed: the full loop, including the step from the last station back to the
        first; open: ``distance_m[-1]``. [m]
    closed : bool
        True for a lap (periodic), False for an open stretch.
    x_m, y_m, z_m : numpy.ndarray or None
        Plane position (east, north) and height where known. [m]
    """

    distance_m: np.ndarray
    curvature_1_m: np.ndarray
    gradient: np.ndarray
    length_m: float
    closed: bool = True
    x_m: np.ndarray | None = None
    y_m: np.ndarray | None = None
    z_m: np.ndarray | None = None
    meta: dict = field(default_factory=dict)

    @property
    def ds_m(self) -> np.ndarray:
        """Step from each station to the next; closed lines wrap the last one. [m]."""
        ends = np.append(self.distance_m[1:], self.length_m)
        return ends - self.distance_m

    @property
    def n(self) -> int:
        """Number of stations."""
        return int(self.distance_m.shape[0])


def line_from_curvature(distance_m, curvature_1_m, gradient=None, *, closed=True, length_m=None):
    """Line from a distance/curvature table (docs/formats.md, Line files, second form).

    Parameters
    ----------
    distance_m, curvature_1_m : array-like
        Strictly increasing distance [m]; curvature, + left [1/m].
    gradient : array-like, optional
        dz/ds [-]; level when absent.
    closed : bool
        A lap when True: the step from the last point back to the first is taken equal
        to the mean step unless ``length_m`` is given.
    length_m : float, optional
        Full loop length. [m]

    Returns
    -------
    Line
    """
    s = np.asarray(distance_m, dtype=np.float64)
    k = np.asarray(curvature_1_m, dtype=np.float64)
    if s.ndim != 1 or s.shape != k.shape or s.shape[0] < 3:
        raise LimitlapError("a line needs at least 3 stations of distance and curvature")
    if not (np.isfinite(s).all() and np.isfinite(k).all()):
        raise LimitlapError("line distance and curvature must be finite")
    if np.any(np.diff(s) <= 0):
        raise LimitlapError("line distance must increase strictly")
    grad = np.zeros_like(s) if gradient is None else np.asarray(gradient, dtype=np.float64)
    s = s - s[0]
    if length_m is None:
        length_m = s[-1] + (s[-1] / (s.shape[0] - 1) if closed else 0.0)
    return Line(s, k, grad, float(length_m), closed)


def line_from_xy(x_m, y_m, z_m=None, *, spacing_m=1.0, smoothing_m=0.005):
    r"""Closed line through x/y points, resampled to a uniform spacing.

    A periodic cubic smoothing spline (FITPACK ``splprep`` with ``per=1``; P. Dierckx,
    *Curve and Surface Fitting with Splines*, Oxford, 1993) is fitted to the points in
    driving order; curvature comes from its derivatives,
    :math:`\kappa = (x'y'' - y'x'') / (x'^2 + y'^2)^{3/2}`.

    Parameters
    ----------
    x_m, y_m : array-like
        Points of a closed loop in driving order; the last does not repeat the first. [m]
    z_m : array-like, optional
        Height; gradient dz/ds comes from the same smoothing. [m]
    spacing_m : float
        Station spacing of the result (rounded so the loop holds a whole number). [m]
    smoothing_m : float
        RMS distance the spline may pass from the points (FITPACK ``s = n σ²``). The
        default, 5 mm, suits a line file written to the millimetre: larger values let
        FITPACK drop knots, and the curvature between sparse knots then errs by more than
        the noise it removes (measured on the bundled circuit: 0.05 m made the ideal lap
        0.6 % slower than on the exact line, 0.005 m 0.06 %). Noisy surveyed points should
        be smoothed before they become a line file. [m]

    Returns
    -------
    Line
    """
    # imported here, not with the module: about 0.3 s that a distance/curvature line never needs
    from scipy import interpolate

    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    if x.ndim != 1 or x.shape != y.shape:
        raise LimitlapError("x and y must be 1-D arrays of equal length")
    if x.shape[0] < 4:
        raise LimitlapError(f"a closed line needs at least 4 points, got {x.shape[0]}")
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise LimitlapError("line points must be finite")
    cols = [x, y] + ([np.asarray(z_m, dtype=np.float64)] if z_m is not None else [])
    pts = np.vstack(cols)
    step = np.hypot(np.diff(x, append=x[0]), np.diff(y, append=y[0]))
    keep = step > 1e-9  # drop repeated points: splprep needs distinct parameters
    pts = pts[:, keep]
    step = step[keep]
    if pts.shape[1] < 4:
        raise LimitlapError("a closed line needs at least 4 distinct points")
    u = np.concatenate([[0.0], np.cumsum(step)])
    closed_pts = np.hstack([pts, pts[:, :1]])
    n_pts = closed_pts.shape[1]
    try:
        with warnings.catch_warnings():  # FITPACK's "s too small" note: the spline stands
            warnings.simplefilter("ignore", RuntimeWarning)
            tck, _ = interpolate.splprep(
                list(closed_pts), u=u, s=n_pts * smoothing_m**2, per=1, k=3, quiet=1
            )
    except (ValueError, TypeError) as err:  # FITPACK refuses degenerate input
        raise LimitlapError(f"cannot fit a smooth closed line through the points: {err}") from err
    # Arc length of the spline by dense Gauss-free sampling (10 per metre of chord).
    u_dense = np.linspace(0.0, u[-1], max(2000, int(10 * u[-1])) + 1)
    dx, dy = interpolate.splev(u_dense, tck, der=1)[:2]
    speed = np.hypot(dx, dy)
    s_dense = np.concatenate([[0.0], np.cumsum(0.5 * (speed[1:] + speed[:-1]) * np.diff(u_dense))])
    length = float(s_dense[-1])
    n_st = max(4, round(length / spacing_m))
    s_st = np.arange(n_st) * (length / n_st)
    u_st = np.interp(s_st, s_dense, u_dense)
    d1 = interpolate.splev(u_st, tck, der=1)
    d2 = interpolate.splev(u_st, tck, der=2)
    p0 = interpolate.splev(u_st, tck, der=0)
    xp, yp, xpp, ypp = d1[0], d1[1], d2[0], d2[1]
    curvature = (xp * ypp - yp * xpp) / np.hypot(xp, yp) ** 3
    if z_m is not None:
        gradient = d1[2] / np.hypot(xp, yp)
        z_out = p0[2]
    else:
        gradient = np.zeros(n_st)
        z_out = None
    return Line(s_st, curvature, gradient, length, True, p0[0], p0[1], z_out)


def self_intersects(x_m, y_m) -> bool:
    """True when the closed polygon through the points crosses itself.

    Segment-pair test by orientation signs (``_kernels.polygon_self_crosses``, a
    sort-and-sweep on x so that only segments whose x-ranges overlap are compared:
    milliseconds for a circuit of thousands of points); adjacent segments, which share an
    end, do not count. A loop through one of its own points again (a figure eight crossing
    at a listed point) counts; repeated points do not.
    """
    from limitlap import _kernels  # deferred: numba is not needed to read a curvature line

    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    if x.shape[0] >= 4:  # drop repeated points as line_from_xy does
        keep = np.hypot(np.diff(x, append=x[0]), np.diff(y, append=y[0])) > 1e-9
        x, y = x[keep], y[keep]
    if x.shape[0] < 4:
        return False
    return bool(_kernels.polygon_self_crosses(np.ascontiguousarray(x), np.ascontiguousarray(y)))
