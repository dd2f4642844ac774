"""The racing line: distance along it, curvature, gradient, resampling.

A :class:`Line` is what the solver drives on. It is built from x/y points (curvature from
the heading against distance, smoothed by a width chosen from the points' own scatter:
docs/methods.md, Line geometry), or taken as given from a distance/curvature table.
"""

from __future__ import annotations

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


#: Points closer together than this are one point (their mean): a repeated closing point,
#: a doubled survey point. [m]
MERGE_M = 0.05
#: Points are also merged within this many times the noise found, so that each chord is
#: long against the scatter and its direction means something. [-]
MERGE_NOISE_FACTOR = 10.0
#: The smoothing is set so that the scatter of the points leaves at most this standard
#: deviation in the curvature on straights (a radius of 10 km: even four times that, a
#: car at 1 g could take at over 500 km/h). [1/m]
CURVATURE_NOISE_1_M = 1.0e-4
#: ... or at most this share of the curvature found, whichever is larger (corners are
#: smoothed less than straights): the minimum speed then scatters by half as much. Our
#: choice, checked on generated noisy lines (tests/test_line_geometry.py). [-]
CURVATURE_NOISE_SHARE = 0.01
#: Narrowest smoothing: a finer grid only costs time. [m]
MIN_WIDTH_M = 0.04
#: Likewise for the gradient from heights. [-]
GRADIENT_NOISE = 1.0e-3
#: Smallest height difference between the two passes at a crossing for it to count as a
#: bridge (road clearances are 4-5 m). Common practice, no published source. [m]
BRIDGE_CLEARANCE_M = 2.0
#: A corner whose peak curvature the smoothing lowers by more than this share gets a
#: warning (its minimum speed about half that share too high). [-]
ROUNDING_WARN = 0.02
#: Corners checked for rounding: radius at most this. [m]
ROUNDING_RADIUS_M = 150.0
#: Smallest jump of curvature made a step again by the sharpening (a straight meeting a
#: 1 km radius). [1/m]
JUMP_MIN_1_M = 1.0e-3
#: Points that turn more than this between neighbours describe the corner too coarsely
#: to know its shape between them. [rad]
TURN_PER_POINT_WARN_RAD = 0.25


def line_from_xy(x_m, y_m, z_m=None, *, spacing_m=1.0, level=None, smoothing_m=None) -> Line:
    r"""Closed line through x/y points: curvature from the heading against distance.

    Curvature is the derivative of the heading, taken from the points without fitting a
    curve through them, so that it is exact where the points lie on arcs and steps where
    the line steps (docs/methods.md, Line geometry):

    1. Points closer than :data:`MERGE_M`, or than :data:`MERGE_NOISE_FACTOR` times the
       noise found (:func:`point_noise_m`), are merged into their mean.
    2. Each chord's direction is the heading at its middle (exact for an arc), so each
       point's stretch, from one chord middle to the next, turns by the angle between
       the chords: its mean curvature. Inside the stretch the curvature is that mean plus
       a minmod-limited slope (van Leer 1979): a clothoid is reproduced, and no value
       lies beyond its neighbours' (no overshoot).
    3. That curvature is smoothed by periodic Gaussians (positive kernels: an arc keeps
       its curvature exactly, a step cannot overshoot) of widths from a quarter of the
       point spacing up to the width at which the noise found leaves
       :data:`CURVATURE_NOISE_1_M` of scatter; each place takes the narrowest whose
       scatter is within that or :data:`CURVATURE_NOISE_SHARE` of its curvature (a tight
       corner is smoothed least). A transition that a step between two flat stretches
       explains is made a step again (:func:`_sharpened`).
    4. Distances are the chords projected on the smoothed heading (scatter does not
       lengthen the lap) and lengthened to the arc, :math:`a = c\,(\phi/2)/\sin(\phi/2)`.

    Parameters
    ----------
    x_m, y_m : array-like
        Points of a closed loop in driving order, either direction; a repeated closing
        point is dropped. [m]
    z_m : array-like, optional
        Height; gradient dz/ds from the same distances, smoothed likewise. A crossing of
        the loop with itself is accepted where the heights differ by at least
        :data:`BRIDGE_CLEARANCE_M`. [m]
    spacing_m : float
        Station spacing of the result (rounded so the loop holds a whole number). [m]
    level : array-like, optional
        Declared deck of each point (0 on the ground, 1 on a bridge, ...): a crossing is
        accepted where the two passes are on different levels. [-]
    smoothing_m : float, optional
        One width for the whole loop instead of the widths chosen from the points. [m]

    Returns
    -------
    Line
        ``meta`` holds ``noise_m`` (the scatter found, per axis), ``smoothing_m`` (the
        narrowest and widest widths used), ``point_spacing_m`` (mean chord) and
        ``warnings`` (points too noisy or too sparse for the corners they describe).
    """
    pts = _points(x_m, y_m, z_m, level)
    noise = point_noise_m(pts[0], pts[1])
    chord = np.hypot(np.diff(pts[0], append=pts[0][0]), np.diff(pts[1], append=pts[1][0]))
    mean_chord = float(np.mean(chord))
    pts = _merged(pts, max(MERGE_M, MERGE_NOISE_FACTOR * noise))
    if pts[0].shape[0] < 4:
        raise LimitlapError("a closed line needs at least 4 distinct points")
    _check_crossings(*pts)
    x, y = pts[0], pts[1]
    d_x = np.roll(x, -1) - x
    d_y = np.roll(y, -1) - y
    c = np.hypot(d_x, d_y)
    smoothing = _Smoothing.chosen(noise, mean_chord, float(np.median(c)), smoothing_m)
    heading = _chord_headings(d_x, d_y)
    arc = c.copy()
    for _ in range(2):  # chords, then chords projected and lengthened to the arc
        grid = _HeadingGrid(heading, arc, smoothing, spacing_m)
        arc = grid.arc_lengths(heading, c)
    grid = _HeadingGrid(heading, arc, smoothing, spacing_m)
    return _resampled(grid, pts, noise, mean_chord, spacing_m)


def _points(x_m, y_m, z_m, level):
    """(x, y, z or None, level or None) as float arrays, checked, repeated points dropped."""
    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    if x.ndim != 1 or x.shape != y.shape:
        raise LimitlapError("x and y must be 1-D arrays of equal length")
    if x.shape[0] < 4:
        raise LimitlapError(f"a closed line needs at least 4 points, got {x.shape[0]}")
    extra = [None if a is None else np.asarray(a, dtype=np.float64) for a in (z_m, level)]
    for a in [x, y] + [a for a in extra if a is not None]:
        if a.shape != x.shape:
            raise LimitlapError("z and level must have one value per point")
        if not np.isfinite(a).all():
            raise LimitlapError("line points must be finite")
    keep = np.hypot(np.diff(x, append=x[0]), np.diff(y, append=y[0])) > 1e-9
    if np.count_nonzero(keep) < 4:
        raise LimitlapError("a closed line needs at least 4 distinct points")
    return tuple(None if a is None else a[keep] for a in [x, y, *extra])


def point_noise_m(x_m, y_m) -> float:
    r"""Scatter of closed-loop points about a smooth line, per axis (standard deviation). [m].

    Each point is compared with the cubic through its two neighbours either side
    (Lagrange interpolation in distance along the chords), across the line: a pseudo-
    residual in the manner of Gasser, Sroka & Jennen-Steinmetz (1986), whose variance is
    :math:`\sigma^2 (1 + \sum_j w_j^2)` for interpolation weights :math:`w_j` whatever
    the spacing, while a smooth line leaves a residual of order :math:`h^4/R^3` only. The
    median absolute residual (times 1.4826, the normal distribution's factor) keeps the
    few points at a curvature step from counting as noise.
    """
    x = np.asarray(x_m, dtype=np.float64)
    y = np.asarray(y_m, dtype=np.float64)
    if x.shape[0] < 5:
        return 0.0
    c = np.hypot(np.roll(x, -1) - x, np.roll(y, -1) - y)
    rx, ry = _pseudo_residuals(c, x), _pseudo_residuals(c, y)
    tx, ty = np.roll(x, -1) - np.roll(x, 1), np.roll(y, -1) - np.roll(y, 1)
    across = (rx * ty - ry * tx) / np.maximum(np.hypot(tx, ty), 1e-12)
    return float(1.4826 * np.median(np.abs(across[np.isfinite(across)])))


def _pseudo_residuals(chord, values):
    """Each value less the cubic through the two values either side, per unit noise.

    Lagrange interpolation in distance, chords ``chord`` apart, periodic; divided by the
    standard deviation that unit independent noise leaves in the difference.
    """
    back = np.roll(chord, 1)
    nodes = np.stack([-(back + np.roll(chord, 2)), -back, chord, chord + np.roll(chord, -1)])
    total = values.copy()
    norm = np.ones_like(chord)
    for j, shift in enumerate((2, 1, -1, -2)):
        w = np.ones_like(chord)
        for k in range(4):
            if k != j:
                w *= -nodes[k] / (nodes[j] - nodes[k])
        total -= w * np.roll(values, shift)
        norm += w * w
    return total / np.sqrt(norm)


def _merged(pts, reach):
    """Points within ``reach`` of the first of their run merged into the run's mean.

    The last run joins the first when it lies within reach of it (a repeated closing
    point).
    """
    from limitlap import _kernels  # deferred: numba is not needed to read a curvature line

    x, y = pts[0], pts[1]
    group = _kernels.close_point_groups(np.ascontiguousarray(x), np.ascontiguousarray(y), reach)
    if group[-1] > 0 and np.hypot(x[-1] - x[0], y[-1] - y[0]) < reach:
        group[group == group[-1]] = 0
    count = np.bincount(group)
    if count.shape[0] == x.shape[0]:
        return pts
    return tuple(None if a is None else np.bincount(group, a) / count for a in pts)


def _curvature_scatter(noise_m, mean_chord_m, width_m):
    r"""Standard deviation of the curvature that point noise leaves after smoothing. [1/m].

    Curvature smoothed by a Gaussian of width w is the second derivative of the positions
    smoothed likewise; for independent noise σ (per axis) on points a chord c apart its
    variance is :math:`\sigma^2 c \int G''^2 = \sigma^2 c \, 3/(8\sqrt\pi\, w^5)`.
    Merging k points divides σ² by k and multiplies c by k, so the raw points' figures
    are used.
    """
    return noise_m * np.sqrt(mean_chord_m * 3.0 / (8.0 * np.sqrt(np.pi))) * width_m**-2.5


@dataclass(frozen=True)
class _Smoothing:
    """The Gaussian widths tried, narrowest first, and the curvature scatter each leaves.

    The narrowest is a quarter of the point spacing (finer detail the points do not
    carry), the widest the one whose scatter is :data:`CURVATURE_NOISE_1_M`; steps of
    √2 between. Each grid point takes the narrowest width whose scatter is within
    :data:`CURVATURE_NOISE_1_M` or :data:`CURVATURE_NOISE_SHARE` of the curvature found
    there at that width: a tight corner is resolved with little smoothing, a straight is
    smoothed until its noise cannot slow a car.
    """

    widths: np.ndarray  # [m]
    scatter: np.ndarray  # [1/m]
    chord: float  # median chord [m]

    @classmethod
    def chosen(cls, noise_m, mean_chord_m, median_chord_m, smoothing_m=None):
        """From the noise found and the point spacing, or one width given. [m]."""
        if smoothing_m is not None:
            if not (isinstance(smoothing_m, int | float) and smoothing_m > 0):
                raise LimitlapError(f"smoothing must be a positive width, got {smoothing_m!r}")
            widths = np.array([float(smoothing_m)])
        else:
            lo = max(0.25 * median_chord_m, MIN_WIDTH_M)
            need = (_curvature_scatter(noise_m, mean_chord_m, 1.0) / CURVATURE_NOISE_1_M) ** 0.4
            k = int(np.ceil(2.0 * np.log2(max(need / lo, 1.0))))
            widths = lo * max(need / lo, 1.0) ** (np.arange(k + 1) / max(k, 1))
        return cls(widths, _curvature_scatter(noise_m, mean_chord_m, widths), median_chord_m)


def _chord_headings(d_x, d_y):
    """Heading of each chord, continuous along the loop (turns between chords within ±π). [rad]."""
    turn = np.arctan2(
        np.roll(d_x, 1) * d_y - np.roll(d_y, 1) * d_x, np.roll(d_x, 1) * d_x + np.roll(d_y, 1) * d_y
    )
    heading = np.arctan2(d_y[0], d_x[0]) + np.cumsum(turn) - turn[0]
    return heading, float(np.sum(turn))


def _gaussian_periodic(values, step_m, width_m):
    """Periodic Gaussian smoothing (standard deviation ``width_m``) of samples ``step_m`` apart."""
    n = values.shape[0]
    f = np.fft.rfftfreq(n, d=step_m)
    return np.fft.irfft(np.fft.rfft(values) * np.exp(-2.0 * (np.pi * f * width_m) ** 2), n)


class _HeadingGrid:
    """Curvature and heading of the loop on a fine uniform grid of distance.

    Each point's stretch, from the middle of the chord before it to the middle of the
    chord after it, turns by the angle between the chords (exact for an arc, whose chord
    directions are its headings at the chords' middles). Inside each stretch the
    curvature is its mean plus a slope limited by minmod (van Leer 1979): linear
    curvature (a clothoid) is reproduced, and no value lies outside its neighbours' (no
    overshoot). The grid steps' mean curvatures, integrated exactly, are smoothed by
    periodic Gaussians of the widths of ``smoothing`` (:class:`_Smoothing`), steps made
    steps again (:func:`_sharpened`), and each grid point takes its width. The heading
    is smoothed at the widest width (for the distances only).
    """

    def __init__(self, heading_total, arc, smoothing, spacing_m):
        heading, total = heading_total
        self.length = float(np.sum(arc))
        self.start = np.concatenate([[0.0], np.cumsum(arc)[:-1]])  # points' distance
        self.mid = self.start + arc / 2.0  # chord middles
        self.smoothing = smoothing
        # Finer than the chords: the heading between chords carries their noise, which a
        # coarser grid would fold into the curvature it keeps.
        fine = min(smoothing.widths[0], spacing_m, smoothing.chord)
        n = max(64, int(np.ceil(2.0 * self.length / fine)))
        self.step = self.length / n
        self.nodes = np.arange(n) * self.step
        self.trend = total / self.length  # mean curvature: whole turns over the length
        turn = np.diff(heading, prepend=heading[-1] - total)  # at each point
        cells = {}
        for sloped in (False, True):
            integral = _turning_integral(turn, self.mid, self.length, self.nodes, sloped)
            cells[sloped] = np.diff(integral, append=integral[0] + total) / self.step
        phi = heading[-1] - total + integral - self.trend * self.nodes  # heading less trend
        self.phi = _gaussian_periodic(phi, self.step, smoothing.widths[-1])
        # Slopes inside the stretches matter only for widths under about two stretches;
        # at wider smoothing, on scattered points, they would only add noise.
        self.levels = np.array(
            [
                _gaussian_periodic(cells[bool(w < 2.0 * smoothing.chord)], self.step, w)
                for w in smoothing.widths
            ]
        )
        self.share = self._chosen_level()
        self.width = np.interp(self.share, np.arange(smoothing.widths.shape[0]), smoothing.widths)
        sharp, self.stepped = [], np.zeros(n, dtype=bool)
        for k, s, w in zip(self.levels, smoothing.scatter, smoothing.widths, strict=True):
            kappa, stepped = _sharpened(k, self.step, s, smoothing.chord, w)
            sharp.append(kappa)
            self.stepped |= stepped
        self.kappa = _blend(np.array(sharp), self.share)

    def _chosen_level(self):
        """Fractional index of the width each grid point takes (:class:`_Smoothing`): the narrowest allowed, spread 2 widest widths round corners and blended. [-]."""
        from scipy.ndimage import minimum_filter1d

        sm = self.smoothing
        last = sm.widths.shape[0] - 1
        allowed = np.maximum(CURVATURE_NOISE_1_M, CURVATURE_NOISE_SHARE * np.abs(self.levels))
        ok = sm.scatter[:, None] <= allowed
        ok[last] = True
        index = np.argmax(ok, axis=0).astype(np.float64)
        reach = int(np.ceil(2.0 * sm.widths[-1] / self.step))
        index = minimum_filter1d(index, 2 * reach + 1, mode="wrap")
        return np.clip(_gaussian_periodic(index, self.step, sm.widths[-1]), 0.0, last)

    def curvature_at(self, s):
        """Curvature at distances ``s``. [1/m]."""
        return np.interp(s, self.nodes + self.step / 2.0, self.kappa, period=self.length)

    def arc_lengths(self, heading_total, chord):
        """Each chord projected on the smoothed heading at its middle and lengthened to the arc through its ends at the smoothed curvature. [m]."""
        heading = heading_total[0]
        smooth = np.interp(self.mid, self.nodes, self.phi, period=self.length)
        off = np.angle(np.exp(1j * (heading - self.trend * self.mid - smooth)))
        along = chord * np.maximum(np.cos(off), 0.1)
        turn = self.curvature_at(self.mid) * along
        return along / np.sinc(turn / (2.0 * np.pi))

    def rounding(self):
        """Share by which the smoothing lowers the curvature at each grid point, about.

        For a Gaussian of width w the bias is w²κ''/2, four times as much at 2w: the
        difference between the two is three biases. [-]
        """
        widths = self.smoothing.widths
        again = [
            _gaussian_periodic(k, self.step, np.sqrt(3.0) * w)
            for k, w in zip(self.levels, widths, strict=True)
        ]
        kappa = _blend(self.levels, self.share)
        lowered = kappa - _blend(np.array(again), self.share)
        safe = np.where(kappa != 0.0, kappa, 1.0)
        return np.where(kappa != 0.0, lowered / (3.0 * safe), 0.0)


def _blend(levels, share):
    """Per grid point, the levels interpolated at the fractional level index ``share``."""
    low = np.floor(share).astype(np.int64)
    high = np.minimum(low + 1, levels.shape[0] - 1)
    t = share - low
    cols = np.arange(share.shape[0])
    return (1.0 - t) * levels[low, cols] + t * levels[high, cols]


def _turning_integral(turn, mid, length, nodes, sloped=True):
    """Heading change from the middle of the last chord (one lap back) to each node, of the piecewise-linear curvature with limited slopes (:class:`_HeadingGrid`), or piecewise-constant when not ``sloped``. [rad]."""
    left = np.roll(mid, 1)
    left[0] -= length  # stretch j runs from the middle of chord j-1 to that of chord j
    size = mid - left
    mean = turn / size
    centre = 0.5 * (left + mid)
    rise = np.diff(mean, append=mean[0]) / np.diff(centre, append=centre[0] + length)
    back = np.roll(rise, 1)
    slope = np.where(rise * back > 0.0, np.sign(rise) * np.minimum(abs(rise), abs(back)), 0.0)
    if not sloped:
        slope[:] = 0.0
    before = np.concatenate([[0.0], np.cumsum(turn)[:-1]])
    j = np.searchsorted(left, nodes, side="right") - 1
    u, v = nodes - centre[j], left[j] - centre[j]
    return before[j] + mean[j] * (nodes - left[j]) + 0.5 * slope[j] * (u * u - v * v)


def _sharpened(kappa, step, scatter, chord, width):
    """Curvature with each transition that a step explains made a step again, and where.

    A step of curvature (a straight meeting an arc) reaches the grid spread over the two
    points' stretches it falls between and then by the smoothing: from 10 % to 90 % of
    the jump over at most ``2 chord + 2.56 width`` (2.56 widths: a Gaussian's). A
    transition that narrow, between two stretches that stay flat (within a tenth of the
    jump plus four times the noise ``scatter``) over as far again either side, with its
    values between the two levels, is replaced by the step, placed so that the turning
    across it is kept. A wider transition (a clothoid the points resolve) keeps its
    shape.
    """
    from scipy.ndimage import maximum_filter1d, minimum_filter1d

    n = kappa.shape[0]
    spread = 2.0 * chord + 2.56 * width  # widest 10-90 % rise of a step [m]
    h = max(2, int(np.ceil((2.0 * chord + 4.0 * width) / step)))
    if 4 * h >= n:
        return kappa, np.zeros(n, dtype=bool)
    ext = np.concatenate([kappa[-2 * h :], kappa, kappa[: 2 * h]])  # periodic
    csum = np.concatenate([[0.0], np.cumsum(ext)])
    i = np.arange(n) + 2 * h  # sample i of kappa in ext
    left = (csum[i - h] - csum[i - 2 * h]) / h
    right = (csum[i + 2 * h] - csum[i + h]) / h
    jump = right - left
    hi = maximum_filter1d(ext, h)
    lo = minimum_filter1d(ext, h)
    flank = np.maximum(
        hi[i - h - h // 2 - 1] - lo[i - h - h // 2 - 1], hi[i + h + h // 2] - lo[i + h + h // 2]
    )
    win_hi = maximum_filter1d(ext, 2 * h)[i]
    win_lo = minimum_filter1d(ext, 2 * h)[i]
    tol = 0.05 * np.abs(jump) + 4.0 * scatter
    ok = (
        (np.abs(jump) >= max(JUMP_MIN_1_M, 10.0 * scatter))
        & (flank <= 0.1 * np.abs(jump) + 4.0 * scatter)
        & (win_hi <= np.maximum(left, right) + tol)
        & (win_lo >= np.minimum(left, right) - tol)
    )
    out = kappa.copy()
    near = np.zeros(n, dtype=bool)  # within a window of a step made again
    for centre in _run_middles(ok):
        idx = (np.arange(centre - h, centre + h)) % n
        lv, rv = left[centre], right[centre]
        rise = (kappa[idx] - lv) / (rv - lv)
        if np.count_nonzero((rise > 0.1) & (rise < 0.9)) * step > spread + 2.0 * step:
            continue  # wider than a step: a transition the points resolve
        x_step = (rv * 2 * h - np.sum(kappa[idx])) / (rv - lv)  # in samples from the start
        k = np.clip(x_step - np.arange(2 * h), 0.0, 1.0)  # share of each sample on the left
        out[idx] = lv * k + rv * (1.0 - k)
        near[np.arange(centre - 2 * h, centre + 2 * h) % n] = True
    return out, near


def _run_middles(flags):
    """Middle index of each run of True in a periodic boolean array."""
    n = flags.shape[0]
    if flags.all() or not flags.any():
        return []
    shift = int(np.argmin(flags))  # start the scan on a False
    f = np.roll(flags, -shift)
    edges = np.flatnonzero(np.diff(np.concatenate([[0], f.astype(np.int8), [0]])))
    return [(shift + (a + b - 1) // 2) % n for a, b in zip(edges[::2], edges[1::2], strict=True)]


def _resampled(grid, pts, noise, mean_chord, spacing_m):
    """The Line at stations ``spacing_m`` apart from the smoothed grid."""
    length = grid.length
    n_st = max(4, round(length / spacing_m))
    s_st = np.arange(n_st) * (length / n_st)
    x, y, z = (
        None if a is None else np.interp(s_st, grid.start, a, period=length) for a in pts[:3]
    )
    gradient = np.zeros(n_st)
    if pts[2] is not None:
        z, gradient = _height(grid, pts[2], mean_chord, s_st)
    meta = {
        "noise_m": noise,
        "smoothing_m": (float(grid.width.min()), float(grid.width.max())),
        "point_spacing_m": mean_chord,
        "warnings": _warnings(grid, noise, mean_chord),
    }
    return Line(s_st, grid.curvature_at(s_st), gradient, length, True, x, y, z, meta)


def _height(grid, z_pts, mean_chord, s_st):
    r"""Height and gradient at the stations.

    Heights are smoothed like the curvature, over at least the width that leaves
    :data:`GRADIENT_NOISE` of gradient scatter from the heights' own noise (variance
    :math:`\sigma_z^2 c/(4\sqrt\pi\,w^3)`).
    """
    c = np.diff(grid.start, append=grid.length)
    sigma = 1.4826 * float(np.median(np.abs(_pseudo_residuals(c, z_pts))))
    need = (sigma * np.sqrt(mean_chord / (4.0 * np.sqrt(np.pi))) / GRADIENT_NOISE) ** (2.0 / 3.0)
    width = max(float(grid.width.max()), need)
    z_nodes = np.interp(grid.nodes, grid.start, z_pts, period=grid.length)
    n = z_nodes.shape[0]
    f = np.fft.rfftfreq(n, d=grid.step)
    spectrum = np.fft.rfft(z_nodes) * np.exp(-2.0 * (np.pi * f * width) ** 2)
    z_smooth = np.fft.irfft(spectrum, n)
    slope = np.fft.irfft(spectrum * (2j * np.pi * f), n)
    return (
        np.interp(s_st, grid.nodes, z_smooth, period=grid.length),
        np.interp(s_st, grid.nodes, slope, period=grid.length),
    )


def _warnings(grid, noise, mean_chord):
    """Where the points are too noisy or too sparse for the corners they describe."""
    from scipy.ndimage import maximum_filter1d

    out = []
    size = np.abs(grid.kappa)
    reach = int(np.ceil(2.0 * grid.width.max() / grid.step))
    apex = (
        (size >= 1.0 / ROUNDING_RADIUS_M)
        & (size >= maximum_filter1d(size, 2 * reach + 1, mode="wrap"))
        & ~grid.stepped  # an arc's end at a step made again is not rounded
    )
    loss = np.where(apex, grid.rounding(), 0.0)
    found = f"they scatter about {100.0 * noise:.1f} cm and lie {mean_chord:.1f} m apart"
    if loss.max() > ROUNDING_WARN:
        i = int(np.argmax(loss))
        cause = "noisy" if grid.width[i] > 1.01 * grid.smoothing.widths[0] else "sparse"
        out.append(
            f"points too {cause} for the corner at {grid.nodes[i]:.0f} m "
            f"(radius {1.0 / size[i]:.0f} m): {found}; smoothing them over "
            f"{grid.width[i]:.1f} m lowers its curvature by about {100.0 * loss[i]:.0f} %, "
            f"so its minimum speed may come out about {50.0 * loss[i]:.0f} % too high"
        )
    chord = np.diff(grid.start, append=grid.length)
    turn = np.abs(grid.curvature_at(grid.mid)) * chord
    if turn.max() > TURN_PER_POINT_WARN_RAD:
        i = int(np.argmax(turn))
        radius = chord[i] / turn[i]
        out.append(
            f"points too sparse for the corner at {grid.mid[i]:.0f} m (radius {radius:.0f} m): "
            f"{found}, and turn {np.degrees(turn[i]):.0f}° from one to the next there; "
            f"its shape between them is a guess (give points at most "
            f"{TURN_PER_POINT_WARN_RAD * radius:.1f} m apart)"
        )
    return out


def _check_crossings(x, y, z, level):
    """LimitlapError where the loop crosses itself, unless it passes over itself there (heights at least :data:`BRIDGE_CLEARANCE_M` apart, or different levels)."""
    from limitlap import _kernels  # deferred: numba is not needed to read a curvature line

    pairs = np.empty((64, 2), dtype=np.int64)
    count = _kernels.polygon_crossings(np.ascontiguousarray(x), np.ascontiguousarray(y), pairs)
    n = x.shape[0]
    for i, j in pairs[:count]:
        t, u, px, py = _crossing_point(x, y, i, j)
        at = [
            (a[i] + t * (a[(i + 1) % n] - a[i]), a[j] + u * (a[(j + 1) % n] - a[j]))
            for a in (z, level)
            if a is not None
        ]
        if z is not None and abs(at[0][0] - at[0][1]) >= BRIDGE_CLEARANCE_M:
            continue
        if level is not None and abs(at[-1][0] - at[-1][1]) >= 0.5:
            continue
        same = " at the same height" if z is not None else ""
        raise LimitlapError(
            f"the line crosses itself{same} at x {px:.1f} m, y {py:.1f} m; points must follow "
            "the driven loop in order (where it passes over itself, give heights z or a "
            "level column)"
        )


def _crossing_point(x, y, i, j):
    """(t, u, x, y): where segment i (point i to i+1) meets segment j, as fractions along each."""
    n = x.shape[0]
    ax, ay = x[i], y[i]
    dx, dy = x[(i + 1) % n] - ax, y[(i + 1) % n] - ay
    ex, ey = x[(j + 1) % n] - x[j], y[(j + 1) % n] - y[j]
    det = dx * ey - dy * ex
    if det == 0.0:  # collinear touch: take the start of j on i
        t = ((x[j] - ax) * dx + (y[j] - ay) * dy) / max(dx * dx + dy * dy, 1e-300)
        return min(max(t, 0.0), 1.0), 0.0, x[j], y[j]
    t = ((x[j] - ax) * ey - (y[j] - ay) * ex) / det
    u = ((x[j] - ax) * dy - (y[j] - ay) * dx) / det
    return t, u, ax + t * dx, ay + t * dy


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
