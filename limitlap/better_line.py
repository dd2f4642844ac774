r"""A faster line inside the corridor, and the time it would bring, corner by corner.

The ideal lap (:mod:`limitlap.solve`) keeps the driver's line; this stage asks what the
line itself costs (docs/methods.md, Line opportunity). Lines are offsets n(s) from the
reference (the analysed lap's rebuilt line, :class:`limitlap.corridor.Frame`), as
periodic uniform cubic B-splines, so every line is smooth and its curvature is exact:

1. **Geometry** of an offset line (a Frenet frame of the reference, curvature
   :math:`\kappa_r`): with :math:`a = 1 - n\kappa_r`, :math:`q = a^2 + n'^2`, the
   line's step is :math:`\sqrt q\,ds` and its curvature
   :math:`\kappa = \left(\kappa_r + (a n'' + n'(n'\kappa_r + n\kappa_r'))/q\right)/\sqrt q`
   (the heading adds :math:`\theta = \operatorname{atan2}(n', a)` to the reference's).
   At n = 0 it is the reference itself, so the driven line's time here is the ideal
   lap's.
2. **Minimum curvature** (Heilmeier et al. 2020): minimise :math:`\sum_i \kappa_i^2`
   with the curvature linearised about the reference,
   :math:`\kappa \approx \kappa_r + n'' + \kappa_r^2 n`, subject to the corridor: a
   bounded linear least-squares problem in the spline's coefficients (SciPy's
   ``lsq_linear``). A coefficient's bounds are the corridor's tightest over its
   support, so the spline, a convex combination of its coefficients, keeps inside the
   corridor everywhere.
3. **Towards minimum lap time**: from the minimum-curvature line, a bounded
   quasi-Newton descent (L-BFGS-B, Byrd et al. 1995, as SciPy has it) of the QSS lap
   time on the session's envelope, with a penalty on curvature rates beyond the driver's
   own; the gradient by forward differences, every coefficient's line solved in one
   compiled loop (:func:`limitlap._kernels.lap_times_for_lines`). This combination is
   this code's choice, no published source.
4. **Per corner**: the time through the corner's segment on the driven line (the
   ideal's) less that on the better line, both timed at the same cross-sections of the
   track (the reference's stations), is the corner's ``line_time_s``; a segment the
   better line is slower through shows 0 (the corners then add up to more than the
   whole lap's). Where the corridor is narrower than
   :data:`TOLD_WIDTH_M` all through the corner, the laps all took one line there and the
   corner gets no number (:attr:`CornerLine.told` false).

References
----------
.. [1] A. Heilmeier, A. Wischnewski, L. Hermansdorfer, J. Betz, M. Lienkamp and
   B. Lohmann, "Minimum curvature trajectory planning and control for an autonomous race
   car", *Vehicle System Dynamics* 58(10):1497-1527, 2020 (details from memory [M]).
.. [2] R. H. Byrd, P. Lu, J. Nocedal and C. Zhu, "A limited memory algorithm for bound
   constrained optimization", *SIAM J. Scientific Computing* 16(5):1190-1208, 1995.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, sparse
from scipy.ndimage import gaussian_filter1d
from scipy.sparse import linalg as sparse_linalg

from limitlap import _kernels, solve
from limitlap.corners import Corner, plateau_middle
from limitlap.corridor import Corridor, Frame
from limitlap.line import Line
from limitlap.vehicle import Vehicle

#: Knot spacing of the line's spline: shorter than a corner's turn-in (20-50 m), long
#: enough that the descent has few coefficients. [m]
KNOT_M = 6.0
#: Station spacing the descent solves the lap on (the result is timed on the reference's
#: own stations). [m]
DESCENT_STEP_M = 2.0
#: Step of a coefficient for the forward differences. [m]
DIFFERENCE_M = 0.002
#: Iterations of the descent. [-]
ITERATIONS = 25
#: A line may change curvature no faster than the driven line's :data:`RATE_QUANTILE`
#: (over 5 m) times :data:`RATE_ALLOWANCE`: steering no quicker than the driver's own.
RATE_QUANTILE = 0.99
RATE_ALLOWANCE = 1.2
#: Time a curvature rate twice the bound over 10 m costs in the descent (a soft wall). [s]
RATE_PENALTY_S = 0.2
#: A corner is told only where the corridor is at least this wide somewhere from
#: :data:`TOLD_REACH_M` before its turn-in to as far after its exit. [m]
TOLD_WIDTH_M = 0.5
TOLD_REACH_M = 30.0
#: Pull of the minimum-curvature problem towards the driven line, per station and m²
#: of offset: a curvature change of 1e-5 1/m at 0.01 1/m outweighs a metre's shift. [1/m²]
STAY_WEIGHT = 1.0e-9


def _bspline(t):
    """Uniform cubic B-spline β(t) and its first two derivatives at t (knot units). [-]."""
    a = np.abs(t)
    sign = np.sign(t)
    inner = a < 1.0
    outer = (a >= 1.0) & (a < 2.0)
    b0 = np.where(inner, (4.0 - 6.0 * a**2 + 3.0 * a**3) / 6.0, 0.0)
    b0 = np.where(outer, (2.0 - a) ** 3 / 6.0, b0)
    b1 = np.where(inner, (-12.0 * a + 9.0 * a**2) / 6.0, 0.0)
    b1 = np.where(outer, -0.5 * (2.0 - a) ** 2, b1) * sign
    b2 = np.where(inner, (-12.0 + 18.0 * a) / 6.0, 0.0)
    b2 = np.where(outer, 2.0 - a, b2)
    return b0, b1, b2


@dataclass(frozen=True, eq=False)
class Basis:
    """Periodic cubic B-splines on a closed line's stations: n = B0 c, n' = B1 c, n'' = B2 c.

    ``B0``, ``B1``, ``B2`` are sparse (stations x coefficients); coefficient k peaks at
    ``k * knot_m``. [m], [-], [1/m]
    """

    knot_m: float
    b0: sparse.csr_matrix
    b1: sparse.csr_matrix
    b2: sparse.csr_matrix

    @property
    def size(self) -> int:
        """Number of coefficients. [-]."""
        return int(self.b0.shape[1])


def spline_basis(distance_m, length_m: float, knot_m: float = KNOT_M) -> Basis:
    """The :class:`Basis` of knots about ``knot_m`` apart on a closed line of ``length_m``."""
    k = max(8, round(length_m / knot_m))
    h = length_m / k
    s = np.asarray(distance_m, float)
    j = np.floor(s / h).astype(np.int64)
    cols = np.mod(j[:, None] + np.arange(-1, 3)[None, :], k)
    t = s[:, None] / h - (j[:, None] + np.arange(-1, 3)[None, :])
    values = _bspline(t)
    rows = np.repeat(np.arange(s.shape[0]), 4)
    mats = [
        sparse.csr_matrix((v.ravel() / h**p, (rows, cols.ravel())), shape=(s.shape[0], k))
        for p, v in enumerate(values)
    ]
    return Basis(h, *mats)


def coefficient_bounds(basis: Basis, low_m, high_m):
    """Bounds of each coefficient: the corridor's tightest over its support. [m].

    The spline is a convex combination of the coefficients whose support holds a
    station, so within these the line keeps inside the corridor everywhere.
    """
    support = basis.b0.tocsc()
    lo = np.full(basis.size, -np.inf)
    hi = np.full(basis.size, np.inf)
    for k in range(basis.size):
        rows = support.indices[support.indptr[k] : support.indptr[k + 1]]
        if rows.size:
            lo[k], hi[k] = np.max(low_m[rows]), np.min(high_m[rows])
    return lo, hi


def offset_geometry(frame: Frame, n, n1, n2, rows=None):
    """Curvature [1/m] and step length [m] of the offset line at the stations.

    ``rows`` selects stations (default all); the arrays may carry leading axes. The
    formula of the module text; the step leaving station i is ``sqrt(q_i) ds``.
    """
    kr = frame.curvature_1_m if rows is None else frame.curvature_1_m[rows]
    dk = frame.curvature_rate_1_m2 if rows is None else frame.curvature_rate_1_m2[rows]
    a = 1.0 - n * kr
    q = a * a + n1 * n1
    root = np.sqrt(q)
    kappa = (kr + (a * n2 + n1 * (n1 * kr + n * dk)) / q) / root
    return kappa, root * frame.step_m


def positions(frame: Frame, offset_m):
    """The offset line's x/y (east, north) at the stations. [m]."""
    return (
        frame.x_m - offset_m * frame.tangent_y,
        frame.y_m + offset_m * frame.tangent_x,
    )


def box_qp(h, g, lo, hi, iterations: int = 60) -> np.ndarray:
    r"""Minimiser of :math:`\tfrac12 c^T H c + g^T c` for ``lo <= c <= hi``: projected Newton.

    Bertsekas' projected Newton method for simple bounds: a Newton step on the
    coefficients not held at a bound (those at a bound with the gradient pushing out),
    then an Armijo search along the projection arc. ``h`` sparse, positive definite.
    """
    c = np.clip(np.zeros_like(g), lo, hi)

    def cost(x):
        return 0.5 * x @ (h @ x) + g @ x

    for _ in range(iterations):
        r = h @ c + g
        held = ((c <= lo + 1e-9) & (r > 0)) | ((c >= hi - 1e-9) & (r < 0))
        step = np.zeros_like(c)
        free = ~held
        if free.any():
            step[free] = sparse_linalg.spsolve(h[free][:, free].tocsc(), -r[free])
        f0, alpha = cost(c), 1.0
        while True:
            trial = np.clip(c + alpha * step, lo, hi)
            if cost(trial) <= f0 + 1e-4 * r @ (trial - c) or alpha < 1e-6:
                break
            alpha *= 0.5
        moved = np.max(np.abs(trial - c), initial=0.0)
        c = trial
        if moved < 1e-7:
            break
    return c


def min_curvature(frame: Frame, corridor: Corridor, basis: Basis) -> np.ndarray:
    r"""The minimum-curvature line's coefficients (Heilmeier et al. 2020). [m].

    Minimises :math:`\sum (\kappa_r + n'' + \kappa_r^2 n)^2` over the stations,
    coefficients bounded by :func:`coefficient_bounds` (:func:`box_qp`); those the
    corridor holds at zero over their whole support are left out. A tiny pull towards
    the driven line (:data:`STAY_WEIGHT`) settles what the curvature does not care about
    (how far across a straight the line runs).
    """
    lo, hi = coefficient_bounds(basis, corridor.low_m, corridor.high_m)
    free = hi - lo > 1e-6
    c = np.zeros(basis.size)
    if not free.any():
        return c
    kr = frame.curvature_1_m
    a = (basis.b2 + sparse.diags(kr * kr) @ basis.b0).tocsc()[:, free]
    b0 = basis.b0.tocsc()[:, free]
    h = (a.T @ a + STAY_WEIGHT * (b0.T @ b0)).tocsc()
    c[free] = box_qp(h, a.T @ kr, lo[free], hi[free])
    return c


def coarse_frame(frame: Frame, step_m: float = DESCENT_STEP_M) -> Frame:
    """``frame`` at stations about ``step_m`` apart (uniform, interpolated), for the descent."""
    m = max(8, round(frame.length_m / step_m))
    s = np.arange(m) * (frame.length_m / m)
    smooth = 0.5 * step_m / frame.step_m

    def at(values, width=0.0):
        v = gaussian_filter1d(values, width, mode="wrap") if width > 0 else values
        return np.interp(s, frame.distance_m, v, period=frame.length_m)

    tx, ty = at(frame.tangent_x), at(frame.tangent_y)
    norm = np.hypot(tx, ty)
    return Frame(
        distance_m=s,
        x_m=at(frame.x_m),
        y_m=at(frame.y_m),
        tangent_x=tx / norm,
        tangent_y=ty / norm,
        curvature_1_m=at(frame.curvature_1_m, smooth),
        curvature_rate_1_m2=at(frame.curvature_rate_1_m2, smooth),
        gradient=at(frame.gradient, smooth),
        length_m=frame.length_m,
    )


def rate_bound(frame: Frame) -> float:
    """Highest curvature rate a line may have: :data:`RATE_ALLOWANCE` times the driven line's :data:`RATE_QUANTILE` over 5 m. [1/m²]."""
    kappa = gaussian_filter1d(frame.curvature_1_m, 5.0 / frame.step_m, mode="wrap")
    rate = np.abs(np.roll(kappa, -1) - kappa) / frame.step_m
    return RATE_ALLOWANCE * float(np.quantile(rate, RATE_QUANTILE))


def _rate_penalty(curv, steps, bound):
    """:data:`RATE_PENALTY_S` times the squared share of curvature rate beyond ``bound``, per 10 m, summed along each row. [s]."""
    rate = np.abs(np.roll(curv, -1, axis=-1) - curv) / steps
    excess = np.maximum(rate / bound - 1.0, 0.0)
    return RATE_PENALTY_S * np.sum(excess * excess * steps, axis=-1) / 10.0


class _LapTime:
    """Lap time (plus the rate penalty) of a line's coefficients, and its gradient by forward differences.

    Every coefficient's line is the base line with that coefficient moved by
    :data:`DIFFERENCE_M`; only the stations of its support (its window) change, and only
    the stretch of the speed traces that they reach is solved again
    (:func:`limitlap._kernels.lap_time_changes`).
    """

    def __init__(self, frame: Frame, basis: Basis, vehicle: Vehicle, grip_scale, bound):
        self.frame, self.basis, self.bound = frame, basis, bound
        self.veh = solve.vehicle_array(vehicle, grip_scale)
        g = frame.gradient
        self.sin_grad = np.ascontiguousarray(g / np.sqrt(1.0 + g * g))
        self.work = np.empty((_kernels.N_WORK, frame.n))
        h, ds, n = basis.knot_m, frame.step_m, frame.n
        first = np.ceil(np.mod((np.arange(basis.size) - 2.0) * h, frame.length_m) / ds - 1e-9)
        width = math.floor(4.0 * h / ds) + 1
        self.rows = np.mod(first.astype(np.int64)[:, None] + np.arange(width)[None, :], n)
        centre = np.arange(basis.size)[:, None] * h
        half = frame.length_m / 2.0
        t = (np.mod(frame.distance_m[self.rows] - centre + half, frame.length_m) - half) / h
        b0, b1, b2 = _bspline(t)
        self.shape = (b0, b1 / h, b2 / (h * h))

    def geometry(self, c):
        """Curvature and steps of the line of coefficients ``c``. [1/m], [m]."""
        b = self.basis
        return offset_geometry(self.frame, b.b0 @ c, b.b1 @ c, b.b2 @ c)

    def time(self, c) -> float:
        """Lap time plus rate penalty of one line. [s]."""
        curv, steps = self.geometry(c)
        return float(self._solve(curv[None, :], steps[None, :])[0])

    def _solve(self, curv, steps):
        """Lap time plus rate penalty of each row's line. [s]."""
        split = self.frame.n >= _kernels.SPLIT_MIN_STATIONS
        times = _kernels.lap_times_for_lines(
            np.ascontiguousarray(curv),
            np.ascontiguousarray(steps),
            self.sin_grad,
            self.veh,
            self.work,
            split,
        )
        return times + _rate_penalty(curv, steps, self.bound)

    def with_gradient(self, c, free):
        """(time, gradient over the ``free`` coefficients) of the line of ``c``. [s], [s/m]."""
        b = self.basis
        n, n1, n2 = b.b0 @ c, b.b1 @ c, b.b2 @ c
        curv, steps = offset_geometry(self.frame, n, n1, n2)
        ks = np.flatnonzero(free)
        rows = self.rows[ks]
        e = DIFFERENCE_M
        sh = [v[ks] for v in self.shape]
        pk, ps = offset_geometry(
            self.frame, n[rows] + e * sh[0], n1[rows] + e * sh[1], n2[rows] + e * sh[2], rows
        )
        base = self._traces(curv, steps)
        change = _kernels.lap_time_changes(
            curv, self.sin_grad, steps, self.veh, self.work, base[1], rows, pk, ps
        )
        whole = np.flatnonzero(~np.isfinite(change))
        if whole.size:  # a change that reaches the passes' start: solve those lines whole
            all_k = np.tile(curv, (whole.size, 1))
            all_s = np.tile(steps, (whole.size, 1))
            all_k[np.arange(whole.size)[:, None], rows[whole]] = pk[whole]
            all_s[np.arange(whole.size)[:, None], rows[whole]] = ps[whole]
            change[whole] = self._solve(all_k, all_s) - _rate_penalty(all_k, all_s, self.bound)
            change[whole] -= base[0]
        change += self._penalty_change(curv, steps, rows, pk, ps)
        return base[0] + float(_rate_penalty(curv, steps, self.bound)), change / e

    def _traces(self, curv, steps):
        """The base line's pass traces into the scratch: (lap time [s], the passes' start)."""
        i0 = _kernels.pass_traces(
            curv,
            self.sin_grad,
            steps,
            self.veh,
            True,
            0.0,
            0.0,
            np.empty(0),
            self.work,
            self.frame.n >= _kernels.SPLIT_MIN_STATIONS,
        )
        v = np.sqrt(np.minimum(self.work[_kernels.W_FWD], self.work[_kernels.W_BWD]))
        return float(np.sum(2.0 * steps / (v + np.roll(v, -1)))), int(i0)

    def _penalty_change(self, curv, steps, rows, pk, ps):
        """Change of the rate penalty of each row's line (its window and the station before). [s]."""
        n = self.frame.n
        ext = np.concatenate([np.mod(rows[:, :1] - 1, n), rows, np.mod(rows[:, -1:] + 1, n)], 1)
        k_new = curv[ext]
        s_new = steps[ext]
        k_new[:, 1:-1], s_new[:, 1:-1] = pk, ps
        k_old, s_old = curv[ext], steps[ext]

        def terms(k, s):
            rate = np.abs(k[:, 1:] - k[:, :-1]) / s[:, :-1]
            excess = np.maximum(rate / self.bound - 1.0, 0.0)
            return RATE_PENALTY_S * np.sum(excess * excess * s[:, :-1], axis=1) / 10.0

        return terms(k_new, s_new) - terms(k_old, s_old)


def faster_line(frame, basis, bounds, start, vehicle, grip_scale, iterations=ITERATIONS):
    """Coefficients of a line faster than ``start``'s: L-BFGS-B on :class:`_LapTime`. [m].

    ``frame`` and ``basis`` are the descent's (:func:`coarse_frame`); ``bounds`` the
    coefficients' (:func:`coefficient_bounds` on the corridor), which they keep.
    """
    lo, hi = bounds
    free = hi - lo > 1e-6
    problem = _LapTime(frame, basis, vehicle, grip_scale, rate_bound(frame))
    c = np.clip(start, lo, hi)
    if not free.any():
        return c

    def fun(x):
        c[free] = x
        return problem.with_gradient(c, free)

    res = optimize.minimize(
        fun,
        c[free].copy(),
        jac=True,
        method="L-BFGS-B",
        bounds=list(zip(lo[free], hi[free], strict=True)),
        options={"maxiter": iterations},
    )
    c[free] = np.clip(res.x, lo[free], hi[free])
    return c


def line_of(frame: Frame, n, n1, n2) -> Line:
    """The offset line as a :class:`limitlap.line.Line` on the reference's stations (its own distances)."""
    curv, steps = offset_geometry(frame, n, n1, n2)
    x, y = positions(frame, n)
    distance = np.concatenate([[0.0], np.cumsum(steps)[:-1]])
    return Line(distance, curv, frame.gradient, float(steps.sum()), True, x, y)


def segment_times(frame: Frame, elapsed_s, lap_time_s: float, corners) -> np.ndarray:
    """Time through each corner's segment from a line's elapsed time at the reference's stations (bounds placed by the reference's distance; through the gate, wrapped). [s]."""
    s_ring = np.append(frame.distance_m, frame.length_m)
    t_ring = np.append(elapsed_s, lap_time_s)
    out = []
    for c in corners:
        t0, t1 = np.interp([c.start_m, c.end_m], s_ring, t_ring)
        out.append((t1 - t0) % lap_time_s if c.start_m != c.end_m else lap_time_s)
    return np.array(out)


def _lap_times(frame: Frame, curv, steps, vehicle: Vehicle, grip_scale) -> np.ndarray:
    """Closed-lap QSS time of each row's line on the frame's stations. [s]."""
    g = frame.gradient
    return _kernels.lap_times_for_lines(
        np.ascontiguousarray(curv),
        np.ascontiguousarray(steps),
        np.ascontiguousarray(g / np.sqrt(1.0 + g * g)),
        solve.vehicle_array(vehicle, grip_scale),
        np.empty((_kernels.N_WORK, frame.n)),
        frame.n >= _kernels.SPLIT_MIN_STATIONS,
    )


#: A line's turn-in, for comparing two lines alike: where its curvature (smoothed as the
#: corners' is) first reaches this share of its peak in the corner, back from the apex. [-]
TURN_IN_SHARE = 0.3


@dataclass(frozen=True)
class CornerLine:
    """What the better line does in one corner, against the driven line (SI).

    Attributes
    ----------
    name : str
        Corner name. [-]
    told : bool
        False where the corridor is under :data:`TOLD_WIDTH_M` wide all through the
        corner: the laps took one line there, and no line time can be told. [-]
    line_time_s : float or None
        Lap time the better line inside this corner's segment brings, 0 or more; None
        when not told. [s]
    widest_m : float
        Widest corridor from :data:`TOLD_REACH_M` before the turn-in to as far after the
        exit. [m]
    turn_in_offset_m, apex_offset_m, exit_offset_m : float
        The better line's offset from the driven line at the driven line's turn-in, main
        apex and exit, + towards the corner's outside (wider). [m]
    turn_in_later_m, apex_later_m : float
        How much later the better line turns in and reaches its apex (+ later), along the
        driven line. [m]
    """

    name: str
    told: bool
    line_time_s: float | None
    widest_m: float
    turn_in_offset_m: float
    apex_offset_m: float
    exit_offset_m: float
    turn_in_later_m: float
    apex_later_m: float


def _apex_and_turn_in(kappa_s, lo, hi, ds):
    """Main apex and turn-in (stations) of a line in the stations lo..hi (wrapping): the middle of the smoothed curvature's top 3 % (as :mod:`limitlap.corners`), and where it first reaches :data:`TURN_IN_SHARE` of that peak going back. [-]."""
    n = kappa_s.shape[0]
    idx = np.mod(np.arange(lo, hi + 1), n)
    k = np.abs(kappa_s[idx])
    peak = int(np.argmax(k))
    apex = plateau_middle(k, peak, 0.03 * k[peak])
    j = apex
    while j > 0 and k[j - 1] >= TURN_IN_SHARE * k[peak]:
        j -= 1
    return (lo + apex) * ds, (lo + j) * ds


def _corner_line(frame, corner: Corner, n, kappa_b, widths, saved):
    """:class:`CornerLine` of one corner: offsets at the driven turn-in, apex and exit, and the two lines' apexes and turn-ins compared."""
    ds, length = frame.step_m, frame.length_m
    smooth = 8.0 / ds  # as limitlap.corners.SMOOTHING_M
    lo = math.floor((corner.turn_in_m - TOLD_REACH_M) / ds)
    hi = math.ceil(
        (corner.exit_m + (length if corner.exit_m < corner.turn_in_m else 0.0) + TOLD_REACH_M) / ds
    )
    idx = np.mod(np.arange(lo, hi + 1), frame.n)
    widest = float(np.max(widths[idx]))
    told = widest >= TOLD_WIDTH_M
    sign = 1.0 if corner.direction == "left" else -1.0

    def outward(at_m):
        return float(-sign * np.interp(at_m, frame.distance_m, n, period=length))

    ks_d = gaussian_filter1d(frame.curvature_1_m, smooth, mode="wrap")
    ks_b = gaussian_filter1d(kappa_b, smooth, mode="wrap")
    apex_d, turn_d = _apex_and_turn_in(ks_d, lo, hi, ds)
    apex_b, turn_b = _apex_and_turn_in(ks_b, lo, hi, ds)
    return CornerLine(
        name=corner.name,
        told=told,
        line_time_s=max(saved, 0.0) if told else None,
        widest_m=widest,
        turn_in_offset_m=outward(corner.turn_in_m),
        apex_offset_m=outward(corner.apex_m),
        exit_offset_m=outward(corner.exit_m),
        turn_in_later_m=float(turn_b - turn_d),
        apex_later_m=float(apex_b - apex_d),
    )


@dataclass(frozen=True, eq=False)
class LineOpportunity:
    """The better line and the time it would bring (SI).

    Attributes
    ----------
    corridor : Corridor
        Where it was looked for. [-]
    offset_m : numpy.ndarray
        The better line's offset from the driven line at the driven line's stations,
        + left. [m]
    x_m, y_m : numpy.ndarray
        Its position there (east, north). [m]
    curvature_1_m : numpy.ndarray
        Its curvature there, + left. [1/m]
    driven_time_s, min_curvature_time_s, better_time_s : float
        QSS lap times on the session's envelope: the driven line (the ideal lap), the
        minimum-curvature line, the better line. [s]
    line_time_s : float or None
        ``driven_time_s - better_time_s``, 0 or more; None when no corner is told. [s]
    corners : tuple of CornerLine
        In the order of the corners given. [-]
    rate_bound_1_m2, rate_max_1_m2 : float
        The curvature rate allowed (the driver's own) and the better line's largest. [1/m²]
    profile : solve.Profile
        The QSS profile on the better line (its stations: the driven line's). [-]
    """

    corridor: Corridor
    offset_m: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    curvature_1_m: np.ndarray
    driven_time_s: float
    min_curvature_time_s: float
    better_time_s: float
    line_time_s: float | None
    corners: tuple[CornerLine, ...]
    rate_bound_1_m2: float
    rate_max_1_m2: float
    profile: solve.Profile | None = None


def _fine_times(frame, basis, coefficient_sets, vehicle, grip_scale):
    """Lap time of each coefficient vector's line on the frame's own stations. [s]."""
    rows = [
        offset_geometry(frame, basis.b0 @ c, basis.b1 @ c, basis.b2 @ c) for c in coefficient_sets
    ]
    curv = np.array([r[0] for r in rows])
    steps = np.array([r[1] for r in rows])
    return _lap_times(frame, curv, steps, vehicle, grip_scale)


def _better_coefficients(frame, corridor, basis, vehicle, grip_scale):
    """(minimum-curvature coefficients, better coefficients, their lap times and the driven line's). [m], [s]."""
    c_mc = min_curvature(frame, corridor, basis)
    bounds = coefficient_bounds(basis, corridor.low_m, corridor.high_m)
    coarse = coarse_frame(frame)
    basis_c = spline_basis(coarse.distance_m, coarse.length_m, basis.knot_m)
    zero = np.zeros(basis.size)
    c_best = faster_line(coarse, basis_c, bounds, c_mc, vehicle, grip_scale)
    t_drv, t_mc, t_best = _fine_times(frame, basis, (zero, c_mc, c_best), vehicle, grip_scale)
    if t_best > t_drv:  # the descent from the driven line instead; never worse than it
        c_best = faster_line(coarse, basis_c, bounds, zero, vehicle, grip_scale)
        t_best = float(_fine_times(frame, basis, (c_best,), vehicle, grip_scale)[0])
        if t_best > t_drv:
            c_best, t_best = zero, t_drv
    return c_mc, c_best, (float(t_drv), float(t_mc), float(t_best))


def line_opportunity(frame: Frame, corridor: Corridor, corners, vehicle: Vehicle, grip_scale=1.0):
    """The better line inside ``corridor`` and the time it brings in total and per corner.

    Parameters
    ----------
    frame : Frame
        The driven line as the reference (:func:`limitlap.corridor.reference_frame`). [-]
    corridor : Corridor
        Where the better line may run. [-]
    corners : sequence of Corner
        The driven line's corners (their segments tile the lap). [-]
    vehicle : Vehicle
        The session's envelope (complete). [-]
    grip_scale : float
        Grip scale of the ideal lap. [-]

    Returns
    -------
    LineOpportunity
    """
    basis = spline_basis(frame.distance_m, frame.length_m)
    _c_mc, c, (_t_drv, t_mc, _) = _better_coefficients(frame, corridor, basis, vehicle, grip_scale)
    n, n1, n2 = basis.b0 @ c, basis.b1 @ c, basis.b2 @ c
    line = line_of(frame, n, n1, n2)
    better = solve.solve_profile(line, vehicle, grip_scale)
    driven = solve.solve_profile(line_of(frame, 0.0 * n, 0.0 * n, 0.0 * n), vehicle, grip_scale)
    saved = segment_times(frame, driven.time_s, driven.lap_time_s, corners) - segment_times(
        frame, better.time_s, better.lap_time_s, corners
    )
    kappa, steps = line.curvature_1_m, line.ds_m
    records = tuple(
        _corner_line(frame, cn, n, kappa, corridor.width_m, float(t))
        for cn, t in zip(corners, saved, strict=True)
    )
    x, y = positions(frame, n)
    rate = np.abs(np.roll(kappa, -1) - kappa) / steps
    return LineOpportunity(
        corridor=corridor,
        offset_m=n,
        x_m=x,
        y_m=y,
        curvature_1_m=kappa,
        driven_time_s=driven.lap_time_s,
        min_curvature_time_s=t_mc,
        better_time_s=better.lap_time_s,
        line_time_s=max(driven.lap_time_s - better.lap_time_s, 0.0)
        if any(r.told for r in records)
        else None,
        profile=better,
        corners=records,
        rate_bound_1_m2=rate_bound(frame),
        rate_max_1_m2=float(np.max(gaussian_filter1d(rate, 5.0 / frame.step_m, mode="wrap"))),
    )
