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
4. **Per corner**: each corner's share runs from the end of the acceleration before it
   (the fastest point of the ideal on the driven line since the corner before) to the
   same point before the next corner, so what a better exit carries down the straight
   counts for the corner it came from (:func:`line_segments`). The time through that
   stretch on the driven line (the ideal's) less that on the better line, both timed at
   the same cross-sections of the track (the reference's stations), is the corner's
   ``line_time_s``; they add up to the whole lap's, except that a stretch the better
   line is slower through shows 0. Where the corridor is narrower than
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

import clarabel
import numpy as np
from scipy import optimize, sparse
from scipy.ndimage import gaussian_filter1d
from scipy.sparse import linalg as sparse_linalg

from limitlap import _kernels, solve
from limitlap.corners import Corner, plateau_middle
from limitlap.corridor import Corridor, Frame
from limitlap.errors import LimitlapError
from limitlap.line import Line
from limitlap.vehicle import Vehicle

#: Candidate lines are joined over a Gaussian of this standard deviation at the corners'
#: shares' bounds (ends of straights' acceleration). [m]
BLEND_M = 10.0
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
#: Time a curvature rate twice the bound over 10 m costs in the descent (a soft wall). [s]
RATE_PENALTY_S = 0.2
#: A corner is told only where the corridor is at least this wide somewhere from
#: :data:`TOLD_REACH_M` before its turn-in to as far after its exit. [m]
TOLD_WIDTH_M = 0.5
TOLD_REACH_M = 30.0
#: Re-linearisations of the minimum-curvature problem about its own result. [-]
RELINEARISE = 1
#: Half-width a corridor closed on the driven line is given in the quadratic programmes
#: (so it keeps an interior). [m]
CLOSED_M = 0.005
#: Time a line outside the corridor costs in the descent, per m² of excess and per m of
#: line (a stiff wall: 1 cm outside over 10 m costs 0.01 s; the result is then held
#: inside exactly). [s/m³]
CORRIDOR_PENALTY = 10.0
#: The descent's walls lie this far inside the corridor, so the little it leans on them
#: mostly stays inside. [m]
WALL_MARGIN_M = 0.02
#: Weight of curvature against position when a line is moved back inside the corridor:
#: (1/m²)⁻² per m². [m⁴]
KEEP_CURVATURE = 1.0e5
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


def corridor_qp(basis: Basis, h, g, low_m, high_m) -> np.ndarray:
    r"""Minimiser of :math:`\tfrac12 c^T H c + g^T c` whose line keeps inside the corridor at every station. [m].

    A convex quadratic programme with two inequalities per station, solved by the
    interior-point method of Clarabel (Goulart & Chen 2024). A corridor closed on the
    driven line is opened to ±:data:`CLOSED_M` so the problem keeps an interior.
    """
    low = np.minimum(low_m, -CLOSED_M)
    high = np.maximum(high_m, CLOSED_M)
    a = sparse.vstack([basis.b0, -basis.b0]).tocsc()
    settings = clarabel.DefaultSettings()
    settings.verbose = False
    cones = [clarabel.NonnegativeConeT(a.shape[0])]
    solver = clarabel.DefaultSolver(
        sparse.triu(h).tocsc(),
        np.asarray(g, float),
        a,
        np.concatenate([high, -low]),
        cones,
        settings,
    )
    sol = solver.solve()
    if str(sol.status) not in ("Solved", "AlmostSolved"):
        raise LimitlapError(f"the line's quadratic programme did not solve ({sol.status})")
    return np.asarray(sol.x, float)


def curvature_jacobian(frame: Frame, basis: Basis, c):
    """Curvature of the line of ``c`` at the stations and its Jacobian in the coefficients (sparse). [1/m], [1/m²].

    Each station's curvature depends on n, n' and n'' there only (:func:`offset_geometry`),
    so its three partial derivatives are taken by forward differences at all stations at
    once.
    """
    n, n1, n2 = basis.b0 @ c, basis.b1 @ c, basis.b2 @ c
    k0, _ = offset_geometry(frame, n, n1, n2)
    d = 1e-6
    parts = [
        (offset_geometry(frame, n + d, n1, n2)[0] - k0) / d,
        (offset_geometry(frame, n, n1 + d, n2)[0] - k0) / d,
        (offset_geometry(frame, n, n1, n2 + d)[0] - k0) / d,
    ]
    jac = sum(
        sparse.diags(p) @ b for p, b in zip(parts, (basis.b0, basis.b1, basis.b2), strict=True)
    )
    return k0, jac.tocsc()


def min_curvature(frame: Frame, corridor: Corridor, basis: Basis) -> np.ndarray:
    r"""The minimum-curvature line's coefficients (Heilmeier et al. 2020). [m].

    Minimises :math:`\sum_i \kappa_i^2` with the line inside the corridor
    (:func:`corridor_qp`): first with the curvature linearised about the driven line,
    :math:`\kappa \approx \kappa_r + n'' + \kappa_r^2 n`, then :data:`RELINEARISE`
    times about the line found, with the exact curvature's Jacobian (the linearisation
    errs by about n κ_r: 20 % at 5 m from a 25 m hairpin). A tiny pull towards the
    driven line (:data:`STAY_WEIGHT`) settles what the curvature does not care about
    (how far across a straight the line runs).
    """
    kr = frame.curvature_1_m
    stay = STAY_WEIGHT * (basis.b0.T @ basis.b0)
    jac = (basis.b2 + sparse.diags(kr * kr) @ basis.b0).tocsc()
    c = corridor_qp(basis, jac.T @ jac + stay, jac.T @ kr, corridor.low_m, corridor.high_m)
    for _ in range(RELINEARISE):
        k0, jac = curvature_jacobian(frame, basis, c)
        g = jac.T @ (k0 - jac @ c)
        c = corridor_qp(basis, jac.T @ jac + stay, g, corridor.low_m, corridor.high_m)
    return c


def fitted(basis: Basis, offset_m) -> np.ndarray:
    """Coefficients of the spline nearest (least squares) to offsets at the stations; 0 (the driven line) where NaN. [m]."""
    b0 = basis.b0.tocsc()
    h = (b0.T @ b0 + 1e-9 * sparse.identity(basis.size)).tocsc()
    return sparse_linalg.spsolve(h, b0.T @ np.nan_to_num(offset_m))


def inside_corridor(basis: Basis, c, corridor: Corridor) -> np.ndarray:
    """The line of ``c`` where it keeps inside the corridor at every station; else the line inside nearest to it, nearness weighted towards its curvature (:data:`KEEP_CURVATURE`) (:func:`corridor_qp`). [m]."""
    n = basis.b0 @ c
    if np.all((n >= corridor.low_m - 1e-9) & (n <= corridor.high_m + 1e-9)):
        return c
    b0, b2 = basis.b0.tocsc(), basis.b2.tocsc()
    h = (b0.T @ b0 + KEEP_CURVATURE * (b2.T @ b2) + 1e-9 * sparse.identity(basis.size)).tocsc()
    return corridor_qp(basis, h, -(h @ c), corridor.low_m, corridor.high_m)


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


def curvature_rate(kappa, steps) -> np.ndarray:
    """Change of curvature from each station to the next over the step between them. [1/m²]."""
    return np.abs(np.roll(kappa, -1, axis=-1) - kappa) / steps


def rate_bound(frame: Frame) -> float:
    """Highest curvature rate a line may have: the driven line's own highest on the same stations (steering no quicker than the driver's quickest). [1/m²]."""
    return float(np.max(curvature_rate(frame.curvature_1_m, frame.step_m)))


def _rate_penalty(curv, steps, bound):
    """:data:`RATE_PENALTY_S` times the squared share of curvature rate beyond ``bound``, per 10 m, summed along each row. [s]."""
    rate = curvature_rate(curv, steps)
    excess = np.maximum(rate / bound - 1.0, 0.0)
    return RATE_PENALTY_S * np.sum(excess * excess * steps, axis=-1) / 10.0


class _LapTime:
    """Lap time plus penalties (curvature rate, leaving the corridor) of a line's coefficients, and its gradient by forward differences.

    Every coefficient's line is the base line with that coefficient moved by
    :data:`DIFFERENCE_M`; only the stations of its support (its window) change, and only
    the stretch of the speed traces that they reach is solved again
    (:func:`limitlap._kernels.lap_time_changes`). ``low_m``/``high_m`` are the corridor
    at ``frame``'s stations.
    """

    def __init__(self, frame: Frame, basis: Basis, vehicle: Vehicle, grip_scale, walls):
        self.frame, self.basis = frame, basis
        self.bound = rate_bound(frame)
        self.low, self.high = walls
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
        is_open = self.high - self.low > 2.0 * CLOSED_M
        self.free = is_open[self.rows].any(axis=1)

    def _wall(self, n, rows=None):
        """Penalty of offsets outside the corridor, per station. [s]."""
        low = self.low if rows is None else self.low[rows]
        high = self.high if rows is None else self.high[rows]
        out = np.maximum(np.maximum(low - n, n - high), 0.0)
        return CORRIDOR_PENALTY * out * out * self.frame.step_m

    def time(self, c) -> float:
        """Lap time plus penalties of one line. [s]."""
        b = self.basis
        n = b.b0 @ c
        curv, steps = offset_geometry(self.frame, n, b.b1 @ c, b.b2 @ c)
        lap = self._traces(curv, steps)[0]
        return lap + float(_rate_penalty(curv, steps, self.bound) + self._wall(n).sum())

    def with_gradient(self, c):
        """(time plus penalties, their gradient over the free coefficients) of the line of ``c``. [s], [s/m]."""
        b = self.basis
        n, n1, n2 = b.b0 @ c, b.b1 @ c, b.b2 @ c
        curv, steps = offset_geometry(self.frame, n, n1, n2)
        rows, e = self.rows[self.free], DIFFERENCE_M
        sh = [v[self.free] for v in self.shape]
        moved = n[rows] + e * sh[0]
        pk, ps = offset_geometry(
            self.frame, moved, n1[rows] + e * sh[1], n2[rows] + e * sh[2], rows
        )
        lap, i0 = self._traces(curv, steps)
        change = _kernels.lap_time_changes(
            curv, self.sin_grad, steps, self.veh, self.work, i0, rows, pk, ps
        )
        whole = np.flatnonzero(~np.isfinite(change))
        if whole.size:  # a change that reaches the passes' start: solve those lines whole
            change[whole] = self._whole(curv, steps, rows[whole], pk[whole], ps[whole]) - lap
        change += self._penalty_change(curv, steps, rows, pk, ps)
        change += (self._wall(moved, rows) - self._wall(n[rows], rows)).sum(axis=1)
        base = lap + float(_rate_penalty(curv, steps, self.bound) + self._wall(n).sum())
        return base, change / e

    def _whole(self, curv, steps, rows, pk, ps):
        """Lap times of the lines patched at ``rows``, each solved whole. [s]."""
        all_k = np.tile(curv, (rows.shape[0], 1))
        all_s = np.tile(steps, (rows.shape[0], 1))
        all_k[np.arange(rows.shape[0])[:, None], rows] = pk
        all_s[np.arange(rows.shape[0])[:, None], rows] = ps
        return _lap_times_of(self, all_k, all_s)

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
        """Change of the rate penalty of each row's line (its window and a station either side). [s]."""
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


def _lap_times_of(problem: _LapTime, curv, steps) -> np.ndarray:
    """Closed-lap QSS time of each row's line on the problem's stations. [s]."""
    return _kernels.lap_times_for_lines(
        np.ascontiguousarray(curv),
        np.ascontiguousarray(steps),
        problem.sin_grad,
        problem.veh,
        problem.work,
        problem.frame.n >= _kernels.SPLIT_MIN_STATIONS,
    )


def faster_line(problem: _LapTime, start, iterations=ITERATIONS):
    """Coefficients of a line faster than ``start``'s: L-BFGS-B on ``problem`` (:class:`_LapTime`, on the descent's stations) over the coefficients that reach an open corridor; the others hold the driven line (0). [m]."""
    c = np.where(problem.free, start, 0.0)

    def fun(x):
        c[problem.free] = x
        return problem.with_gradient(c)

    if problem.free.any():
        res = optimize.minimize(
            fun,
            c[problem.free].copy(),
            jac=True,
            method="L-BFGS-B",
            options={"maxiter": iterations},
        )
        c[problem.free] = res.x
    return c


def line_of(frame: Frame, n, n1, n2) -> Line:
    """The offset line as a :class:`limitlap.line.Line` on the reference's stations (its own distances)."""
    curv, steps = offset_geometry(frame, n, n1, n2)
    x, y = positions(frame, n)
    distance = np.concatenate([[0.0], np.cumsum(steps)[:-1]])
    return Line(distance, curv, frame.gradient, float(steps.sum()), True, x, y)


def line_segments(frame: Frame, speed_m_s, corners) -> np.ndarray:
    """Where each corner's share of the line's time begins: the fastest station of the ideal on the driven line between the previous corner's apex and this one's (the end of the straight's acceleration: what a better exit gains is carried to there). [m]."""
    ds, n = frame.step_m, frame.n
    apexes = np.array([round(c.apex_m / ds) for c in corners], np.int64)
    out = []
    for i, apex in enumerate(apexes):
        prev = apexes[i - 1] if len(apexes) > 1 else apex - n + 1
        idx = np.mod(np.arange(prev + 1 if prev < apex else prev + 1 - n, apex), n)
        out.append(frame.distance_m[idx[np.argmax(speed_m_s[idx])]] if idx.size else 0.0)
    return np.array(out)


def segment_times(frame: Frame, elapsed_s, lap_time_s: float, bounds_m) -> np.ndarray:
    """Time from each bound to the next (the last back round to the first) from a line's elapsed time at the reference's stations. [s]."""
    s_ring = np.append(frame.distance_m, frame.length_m)
    t_ring = np.append(elapsed_s, lap_time_s)
    t = np.interp(bounds_m, s_ring, t_ring)
    if t.size == 1:
        return np.array([lap_time_s])
    return np.mod(np.roll(t, -1) - t, lap_time_s)


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


def _reach(frame: Frame, corner: Corner) -> tuple[int, int]:
    """Stations from :data:`TOLD_REACH_M` before a corner's turn-in to as far after its exit (the upper one may pass the lap's end: take it modulo the stations). [-]."""
    ds = frame.step_m
    exit_m = corner.exit_m + (frame.length_m if corner.exit_m < corner.turn_in_m else 0.0)
    return math.floor((corner.turn_in_m - TOLD_REACH_M) / ds), math.ceil(
        (exit_m + TOLD_REACH_M) / ds
    )


def widest(frame: Frame, corner: Corner, widths) -> float:
    """The corridor's widest round one corner (:func:`_reach`). [m]."""
    lo, hi = _reach(frame, corner)
    return float(np.max(widths[np.mod(np.arange(lo, hi + 1), frame.n)]))


def _corner_line(frame, corner: Corner, n, kappa_b, widths, saved):
    """:class:`CornerLine` of one corner: offsets at the driven turn-in, apex and exit, and the two lines' apexes and turn-ins compared."""
    ds, length = frame.step_m, frame.length_m
    smooth = 8.0 / ds  # as limitlap.corners.SMOOTHING_M
    lo, hi = _reach(frame, corner)
    wide = widest(frame, corner, widths)
    told = wide >= TOLD_WIDTH_M
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
        widest_m=wide,
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
    corridor_xy : tuple of numpy.ndarray
        The corridor's left and right edges in the plane: (left x, left y, right x,
        right y) at the stations. [m]
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
    corridor_xy: tuple | None = None


def _fine_times(frame, basis, coefficient_sets, vehicle, grip_scale):
    """Lap time of each coefficient vector's line on the frame's own stations. [s]."""
    rows = [
        offset_geometry(frame, basis.b0 @ c, basis.b1 @ c, basis.b2 @ c) for c in coefficient_sets
    ]
    curv = np.array([r[0] for r in rows])
    steps = np.array([r[1] for r in rows])
    return _lap_times(frame, curv, steps, vehicle, grip_scale)


def _shares(frame, basis, c, vehicle, grip_scale, driven, bounds):
    """Each corner's share of the time the line of ``c`` saves against the driven line (:func:`line_segments`), and its lap time. [s]."""
    line = line_of(frame, basis.b0 @ c, basis.b1 @ c, basis.b2 @ c)
    prof = solve.solve_profile(line, vehicle, grip_scale)
    saved = segment_times(frame, driven.time_s, driven.lap_time_s, bounds) - segment_times(
        frame, prof.time_s, prof.lap_time_s, bounds
    )
    return saved, prof.lap_time_s


def _composite(frame, basis, corridor, candidates, shares, bounds):
    """Coefficients of the line that takes, through each corner's share of the lap, the candidate line that saves most there (the driven line where none saves), blended over :data:`BLEND_M` at the shares' bounds. [m]."""
    pick = np.argmax(np.vstack([np.zeros(len(bounds)), *shares]), axis=0)
    lines = [np.zeros(frame.n)] + [basis.b0 @ c for c in candidates]
    edges = np.round(np.asarray(bounds) / frame.step_m).astype(np.int64)
    n = np.zeros(frame.n)
    for j, choice in enumerate(pick):
        part = np.zeros(frame.n)
        stop = edges[(j + 1) % len(edges)] if len(edges) > 1 else edges[j] + frame.n
        part[np.mod(np.arange(edges[j], stop if stop > edges[j] else stop + frame.n), frame.n)] = 1
        part = gaussian_filter1d(part, BLEND_M / frame.step_m, mode="wrap")
        n += part * lines[choice]
    return fitted(basis, n)


def _better_coefficients(frame, corridor, basis, vehicle, grip_scale, driven, bounds):
    """(better coefficients, lap times of the minimum-curvature and better lines). [m], [s].

    Candidates: the minimum-curvature line and each lap's own line where the corridor is
    open (the driven line where it is closed). The descent starts from the faster of the
    minimum-curvature line and the line that takes each corner from the candidate that
    saves most there (:func:`_composite`), with its walls :data:`WALL_MARGIN_M` inside
    the corridor; its result is then held inside the corridor exactly
    (:func:`inside_corridor`). A line slower than the driven one is never given.
    """
    c_mc = min_curvature(frame, corridor, basis)
    opened = gaussian_filter1d(
        (corridor.width_m > 2.0 * CLOSED_M).astype(float), BLEND_M / frame.step_m, mode="wrap"
    )
    laps = [] if corridor.lap_offsets_m is None else corridor.lap_offsets_m
    candidates = [c_mc] + [fitted(basis, opened * np.nan_to_num(row)) for row in laps]
    shares = [_shares(frame, basis, c, vehicle, grip_scale, driven, bounds) for c in candidates]
    composite = _composite(frame, basis, corridor, candidates, [sh[0] for sh in shares], bounds)
    composite = inside_corridor(basis, composite, corridor)
    coarse = coarse_frame(frame)
    basis_c = spline_basis(coarse.distance_m, coarse.length_m, basis.knot_m)
    low, high = (
        np.interp(coarse.distance_m, frame.distance_m, v, period=frame.length_m)
        for v in (corridor.low_m, corridor.high_m)
    )
    walls = (np.minimum(low + WALL_MARGIN_M, 0.0), np.maximum(high - WALL_MARGIN_M, 0.0))
    problem = _LapTime(coarse, basis_c, vehicle, grip_scale, walls)
    times = _fine_times(frame, basis, (c_mc, composite), vehicle, grip_scale)
    start = (c_mc, composite)[int(np.argmin(times))]
    c_best = inside_corridor(basis, faster_line(problem, start), corridor)
    t_best = float(_fine_times(frame, basis, (c_best,), vehicle, grip_scale)[0])
    if t_best > driven.lap_time_s:
        c_best, t_best = np.zeros(basis.size), driven.lap_time_s
    return c_best, (float(shares[0][1]), t_best)


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
    zero = np.zeros(frame.n)
    driven = solve.solve_profile(line_of(frame, zero, zero, zero), vehicle, grip_scale)
    bounds = line_segments(frame, driven.speed_m_s, corners)
    if any(widest(frame, cn, corridor.width_m) >= TOLD_WIDTH_M for cn in corners):
        c, (t_mc, _) = _better_coefficients(
            frame, corridor, basis, vehicle, grip_scale, driven, bounds
        )
    else:  # no corner wide enough to tell: the driven line is the only one to show
        c, t_mc = np.zeros(basis.size), driven.lap_time_s
    n, n1, n2 = basis.b0 @ c, basis.b1 @ c, basis.b2 @ c
    line = line_of(frame, n, n1, n2)
    better = solve.solve_profile(line, vehicle, grip_scale)
    saved = segment_times(frame, driven.time_s, driven.lap_time_s, bounds) - segment_times(
        frame, better.time_s, better.lap_time_s, bounds
    )
    kappa, steps = line.curvature_1_m, line.ds_m
    records = tuple(
        _corner_line(frame, cn, n, kappa, corridor.width_m, float(t))
        for cn, t in zip(corners, saved, strict=True)
    )
    x, y = positions(frame, n)
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
        corridor_xy=(*positions(frame, corridor.high_m), *positions(frame, corridor.low_m)),
        corners=records,
        rate_bound_1_m2=rate_bound(frame),
        rate_max_1_m2=float(np.max(curvature_rate(kappa, steps))),
    )
