r"""The corridor: where the session's own laps show the car can go, along a reference line.

A better line (:mod:`limitlap.better_line`) may only be looked for where the car has
been. The corridor holds it: at each station of a reference line (the analysed lap's
rebuilt line), the band of lateral offsets the flying laps covered, shrunk by the
rebuild's own uncertainty, or the track's edges when a track file gives them
(docs/methods.md, Line opportunity; docs/formats.md, Track file).

1. **Frame.** Each station of the reference has its tangent and its normal (+ to the
   left, ISO 8855); a point is placed by the distance along the reference to the foot of
   its perpendicular and its signed offset along the normal (a Frenet frame of the
   reference curve).
2. **Laps.** Each lap's rebuilt path is put in that frame and read at the stations.
   What a lap shows only where its rebuild is sound: stations inside a GNSS dropout of
   that lap (dead-reckoned), stations within :data:`JUMP_REACH_M` of a jump (the offset
   changing faster than :data:`JUMP_SLOPE` per metre: no car moves sideways so fast),
   and stations further than :data:`OFF_M` from the laps' median (off the track, or
   another path) count for nothing.
3. **Uncertainty.** Two laps that drove the same line still differ by the rebuild's
   error. Its standard deviation σ is read from the laps themselves: the lower quartile,
   along the lap, of the laps' standard deviation at each station, divided by the same
   quartile of a sample standard deviation of normal values (the chi distribution): the
   laps' spread where they agree most, taken as all error (any real variation left in it
   makes σ larger, the corridor narrower: the safe side).
4. **Band.** At each station, the highest and lowest offset of the laps counted there,
   each moved inwards by as far as the largest of that many normal errors reaches at
   the 99 % level, σ Φ⁻¹(0.99^(1/n)) (the largest of n independent normal values is
   below a with probability Φ(a)ⁿ): laps that all drove one line leave no band at 99 %
   of the stations. The analysed lap's own line (offset 0) always
   lies in the corridor: it was driven.
5. **Edges.** With track edges the corridor runs from edge to edge, less the track
   file's margin for the car's half-width and σ on each side.

References
----------
.. [1] H. A. David and H. N. Nagaraja, *Order Statistics*, 3rd edition, Wiley, 2003
   (the distribution of the largest of n independent values, F(x)ⁿ) [M].
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats
from scipy.ndimage import gaussian_filter1d
from scipy.spatial import cKDTree

from limitlap.errors import LimitlapError
from limitlap.line import Line

#: A lap's offset that changes faster than this per metre along the line is a jump of
#: its rebuild: a car at 10 m/s moving sideways at 2.5 m/s is 14° off the line's heading
#: for the whole stretch. Our choice, no published source. [-]
JUMP_SLOPE = 0.25
#: Stations this far either side of a jump do not count. [m]
JUMP_REACH_M = 20.0
#: A lap further than this from the median of the laps at a station is off the track or
#: on another path (a pit lane): it does not widen the corridor. Track widths are
#: 10-15 m; lines differ by up to about half that. Our choice, no published source. [m]
OFF_M = 8.0
#: A station needs this many laps counted for a band of its own; with fewer the corridor
#: is the analysed lap's line there. [-]
MIN_LAPS = 2
#: Gaussian smoothing of the band's edges along the line (standard deviation): the
#: highest and lowest of a few laps step from lap to lap. [m]
EDGE_SMOOTHING_M = 2.0
#: Smallest σ taken (a noiseless generated log would otherwise give none). [m]
UNCERTAINTY_FLOOR_M = 0.01
#: The quantile of the laps' spread along the lap that σ is read from. [-]
SPREAD_QUANTILE = 0.25
#: The band of laps that all drove one line is shrunk so far that it closes at this
#: share of the stations (the largest of the laps' errors reaches no further). [-]
NOISE_QUANTILE = 0.99
#: Window searched either side of a point's expected station. [m]
SEARCH_M = 60.0
#: Gap between a lap's counted points beyond which the stations between count nothing. [m]
GAP_M = 4.0


@dataclass(frozen=True, eq=False)
class Frame:
    """The reference line as a frame: positions, unit tangents and curvature per station (SI).

    Attributes
    ----------
    distance_m : numpy.ndarray
        Station distance along the reference. [m]
    x_m, y_m : numpy.ndarray
        Station position (east, north). [m]
    tangent_x, tangent_y : numpy.ndarray
        Unit tangent; the normal (+ left) is (-tangent_y, tangent_x). [-]
    curvature_1_m : numpy.ndarray
        The reference's own curvature (the rebuild's), + left. [1/m]
    curvature_rate_1_m2 : numpy.ndarray
        Its derivative along the line. [1/m²]
    gradient : numpy.ndarray
        dz/ds of the reference. [-]
    length_m : float
        Lap length. [m]
    """

    distance_m: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    tangent_x: np.ndarray
    tangent_y: np.ndarray
    curvature_1_m: np.ndarray
    curvature_rate_1_m2: np.ndarray
    gradient: np.ndarray
    length_m: float

    @property
    def n(self) -> int:
        """Number of stations. [-]."""
        return int(self.distance_m.shape[0])

    @property
    def step_m(self) -> float:
        """Station spacing (uniform). [m]."""
        return self.length_m / self.n


def reference_frame(line: Line) -> Frame:
    """The frame of a closed line with x/y at uniform stations (a rebuilt lap's line).

    Tangents come from the positions (central differences, smoothed over 2 m); the
    curvature is the line's own (for a rebuilt lap, the fused one: docs/methods.md,
    Driven line), its derivative from central differences smoothed over 2 m.
    """
    if line.x_m is None or line.y_m is None or not line.closed:
        raise LimitlapError("a corridor needs a closed reference line with positions")
    x, y = np.asarray(line.x_m, float), np.asarray(line.y_m, float)
    ds = line.length_m / line.n
    dx = np.roll(x, -1) - np.roll(x, 1)
    dy = np.roll(y, -1) - np.roll(y, 1)
    width = 2.0 / ds
    dx, dy = (gaussian_filter1d(v, width, mode="wrap") for v in (dx, dy))
    norm = np.hypot(dx, dy)
    kappa = np.asarray(line.curvature_1_m, float)
    rate = (np.roll(kappa, -1) - np.roll(kappa, 1)) / (2.0 * ds)
    return Frame(
        distance_m=np.asarray(line.distance_m, float),
        x_m=x,
        y_m=y,
        tangent_x=dx / norm,
        tangent_y=dy / norm,
        curvature_1_m=kappa,
        curvature_rate_1_m2=gaussian_filter1d(rate, width, mode="wrap"),
        gradient=np.asarray(line.gradient, float),
        length_m=float(line.length_m),
    )


def _foot(frame: Frame, x, y, station):
    """Distance along and offset (+ left) of points from their nearest station. [m]."""
    ex, ey = x - frame.x_m[station], y - frame.y_m[station]
    tx, ty = frame.tangent_x[station], frame.tangent_y[station]
    along = frame.distance_m[station] + ex * tx + ey * ty
    return np.mod(along, frame.length_m), ex * -ty + ey * tx


def project_lap(frame: Frame, x_m, y_m):
    """A lap's path (gate to gate, in driving order) in the frame: distance along and offset per point. [m].

    Each point's nearest station is searched within :data:`SEARCH_M` of where its share
    of the path puts it, so a lap's points never jump to a part of the track that passes
    close by.
    """
    x, y = np.asarray(x_m, float), np.asarray(y_m, float)
    m, n = x.shape[0], frame.n
    guess = np.round(np.arange(m) * (n / m)).astype(np.int64)
    reach = max(1, round(SEARCH_M / frame.step_m))
    best = np.empty(m, np.int64)
    for start in range(0, m, 2048):  # blocks keep the distance table small
        g = guess[start : start + 2048]
        cand = np.mod(g[:, None] + np.arange(-reach, reach + 1)[None, :], n)
        d2 = (frame.x_m[cand] - x[start : start + 2048, None]) ** 2 + (
            frame.y_m[cand] - y[start : start + 2048, None]
        ) ** 2
        best[start : start + 2048] = cand[np.arange(g.shape[0]), np.argmin(d2, axis=1)]
    return _foot(frame, x, y, best)


def project_points(frame: Frame, x_m, y_m, heading_x=None, heading_y=None):
    """Points anywhere (an edge line) in the frame: distance along and offset. [m].

    The nearest station over the whole lap; with headings given, a station whose tangent
    points more than 60° away is not taken (the other side of a hairpin).
    """
    x, y = np.asarray(x_m, float), np.asarray(y_m, float)
    tree = cKDTree(np.column_stack([frame.x_m, frame.y_m]))
    k = min(8, frame.n)
    _, idx = tree.query(np.column_stack([x, y]), k=k)
    idx = idx.reshape(x.shape[0], k)
    pick = idx[:, 0].copy()
    if heading_x is not None:
        agree = (
            frame.tangent_x[idx] * heading_x[:, None] + frame.tangent_y[idx] * heading_y[:, None]
        )
        first = np.argmax(agree > 0.5, axis=1)
        found = (agree > 0.5).any(axis=1)
        pick = np.where(found, idx[np.arange(x.shape[0]), first], pick)
    return _foot(frame, x, y, pick)


def on_stations(frame: Frame, along_m, offset_m):
    """Offsets read at the frame's stations from points (along, offset); NaN beyond :data:`GAP_M` from any point. [m]."""
    s = np.asarray(along_m, float)
    v = np.asarray(offset_m, float)
    ok = np.isfinite(s) & np.isfinite(v)
    s, v = s[ok], v[ok]
    if s.shape[0] < 2:
        return np.full(frame.n, np.nan)
    order = np.argsort(s)
    s, v = s[order], v[order]
    out = np.interp(frame.distance_m, s, v, period=frame.length_m)
    ring = np.concatenate([s - frame.length_m, s, s + frame.length_m])
    j = np.searchsorted(ring, frame.distance_m)
    gap = np.minimum(frame.distance_m - ring[j - 1], ring[j] - frame.distance_m)
    return np.where(gap <= GAP_M, out, np.nan)


@dataclass(frozen=True, eq=False)
class LapPath:
    """One lap's rebuilt path for the corridor.

    Attributes
    ----------
    number : int
        Lap number. [-]
    x_m, y_m : numpy.ndarray
        Path positions from gate to gate in driving order (east, north). [m]
    unsound : numpy.ndarray of bool, optional
        Points the rebuild only dead-reckoned (inside a GNSS dropout). [-]
    """

    number: int
    x_m: np.ndarray
    y_m: np.ndarray
    unsound: np.ndarray | None = None


def lap_offsets(frame: Frame, paths) -> np.ndarray:
    """Each lap's offset at each station (rows: laps), NaN where it does not count. [m].

    Not counted: dropouts, :data:`JUMP_REACH_M` round a jump (:data:`JUMP_SLOPE`), and
    offsets further than :data:`OFF_M` from the laps' median.
    """
    rows = []
    reach = round(JUMP_REACH_M / frame.step_m)
    for p in paths:
        along, off = project_lap(frame, p.x_m, p.y_m)
        if p.unsound is not None:
            off = np.where(p.unsound, np.nan, off)
        n = on_stations(frame, along, off)
        slope = np.abs(np.roll(n, -1) - n) / frame.step_m
        jump = np.convolve(
            np.concatenate([slope[-reach:], slope, slope[:reach]]) > JUMP_SLOPE,
            np.ones(2 * reach + 1),
            "valid",
        )
        rows.append(np.where(jump[: frame.n] > 0, np.nan, n))
    offsets = np.array(rows).reshape(len(rows), frame.n)
    if len(rows) >= 2:
        with np.errstate(invalid="ignore"):
            med = _nanmedian(offsets)
            offsets = np.where(np.abs(offsets - med) > OFF_M, np.nan, offsets)
    return offsets


def _nanmedian(a: np.ndarray) -> np.ndarray:
    """Median over rows, NaN where a column has none (no warning)."""
    some = np.isfinite(a).any(axis=0)
    out = np.full(a.shape[1], np.nan)
    if some.any():
        out[some] = np.nanmedian(a[:, some], axis=0)
    return out


def noise_reach(n_laps) -> np.ndarray:
    """How far (in σ) the furthest of n laps' errors reaches on one side, at :data:`NOISE_QUANTILE`: Φ⁻¹(q^(1/n)); 0 for no lap. [-].

    The largest of n independent normal errors is below a·σ with probability Φ(a)ⁿ.
    """
    n = np.asarray(n_laps, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = stats.norm.ppf(NOISE_QUANTILE ** (1.0 / n))
    return np.where(n >= 1, out, 0.0)


def rebuild_uncertainty(offsets: np.ndarray) -> float:
    """σ of a lap's rebuilt offset: the laps' spread where they agree most. [m].

    The :data:`SPREAD_QUANTILE` of the laps' standard deviation along the lap (stations
    with three laps or more), over the same quantile of a sample standard deviation of
    normal values with as many laps (chi distribution); at least
    :data:`UNCERTAINTY_FLOOR_M`. NaN with fewer than three laps anywhere.
    """
    count = np.isfinite(offsets).sum(axis=0)
    ok = count >= 3
    if not ok.any():
        return math.nan
    sd = np.nanstd(offsets[:, ok], axis=0, ddof=1)
    n_typ = int(np.median(count[ok]))
    chi_q = math.sqrt(stats.chi2.ppf(SPREAD_QUANTILE, n_typ - 1) / (n_typ - 1))
    return max(float(np.quantile(sd, SPREAD_QUANTILE)) / chi_q, UNCERTAINTY_FLOOR_M)


@dataclass(frozen=True, eq=False)
class EdgeLines:
    """Track edges in the log's plane (east, north), each a polyline in driving order. [m].

    ``margin_m`` is how far the car's centre keeps from each edge. [m]
    """

    left_x_m: np.ndarray
    left_y_m: np.ndarray
    right_x_m: np.ndarray
    right_y_m: np.ndarray
    margin_m: float


def edges_from_widths(x_m, y_m, left_m, right_m, margin_m: float) -> EdgeLines:
    """Edge lines from points of a line along the track and the widths to its left and right, square to it (the line's direction from its neighbouring points). [m]."""
    x, y = np.asarray(x_m, float), np.asarray(y_m, float)
    tx, ty = np.gradient(x), np.gradient(y)
    norm = np.hypot(tx, ty)
    norm[norm == 0] = 1.0
    nx, ny = -ty / norm, tx / norm
    left, right = np.asarray(left_m, float), np.asarray(right_m, float)
    return EdgeLines(x + left * nx, y + left * ny, x - right * nx, y - right * ny, margin_m)


def edge_offsets(frame: Frame, edges: EdgeLines):
    """The left and right edges' offsets at the stations (NaN where no edge point is near). [m]."""
    out = []
    for x, y in ((edges.left_x_m, edges.left_y_m), (edges.right_x_m, edges.right_y_m)):
        x, y = np.asarray(x, float), np.asarray(y, float)
        hx, hy = np.gradient(x), np.gradient(y)
        norm = np.hypot(hx, hy)
        norm[norm == 0] = 1.0
        along, off = project_points(frame, x, y, hx / norm, hy / norm)
        out.append(on_stations(frame, along, off))
    return out[0], out[1]


@dataclass(frozen=True, eq=False)
class Corridor:
    """Where a better line may run, as offsets from the reference at its stations (SI).

    Attributes
    ----------
    distance_m : numpy.ndarray
        Station distance along the reference. [m]
    low_m, high_m : numpy.ndarray
        Lowest and highest offset allowed (+ left); ``low_m <= 0 <= high_m``. [m]
    covered_low_m, covered_high_m : numpy.ndarray
        The laps' band before it was shrunk (NaN where fewer than :data:`MIN_LAPS`). [m]
    laps_counted : numpy.ndarray
        Laps counted at each station. [-]
    uncertainty_m : float
        σ of a lap's rebuilt offset (NaN with fewer than three laps). [m]
    laps : tuple of int
        The laps whose paths made it. [-]
    source : str
        ``"laps"`` or ``"track edges"``.
    lap_offsets_m : numpy.ndarray
        Each lap's offset at each station (rows: ``laps``), NaN where it does not count. [m]
    """

    distance_m: np.ndarray
    low_m: np.ndarray
    high_m: np.ndarray
    covered_low_m: np.ndarray
    covered_high_m: np.ndarray
    laps_counted: np.ndarray
    uncertainty_m: float
    laps: tuple[int, ...]
    source: str
    lap_offsets_m: np.ndarray | None = None

    @property
    def width_m(self) -> np.ndarray:
        """Width of the corridor at each station. [m]."""
        return self.high_m - self.low_m


def _band(frame: Frame, offsets: np.ndarray, sigma: float):
    """The laps' band (smoothed), and it shrunk by the expected largest error: (covered low, covered high, low, high, count). [m]."""
    count = np.isfinite(offsets).sum(axis=0)
    some = count >= MIN_LAPS
    hi = np.full(frame.n, np.nan)
    lo = np.full(frame.n, np.nan)
    if some.any():
        hi[some] = np.nanmax(offsets[:, some], axis=0)
        lo[some] = np.nanmin(offsets[:, some], axis=0)
    width = EDGE_SMOOTHING_M / frame.step_m
    hi_s = gaussian_filter1d(np.where(some, hi, 0.0), width, mode="wrap")
    lo_s = gaussian_filter1d(np.where(some, lo, 0.0), width, mode="wrap")
    shrink = noise_reach(count) * (sigma if math.isfinite(sigma) else 0.0)
    low, high = lo_s + shrink, hi_s - shrink
    empty = ~some | (low > high)
    return lo, hi, np.where(empty, 0.0, low), np.where(empty, 0.0, high), count


def corridor(frame: Frame, paths, edges: EdgeLines | None = None) -> Corridor:
    """The corridor of :mod:`limitlap.corridor` from the laps' paths (and track edges).

    Parameters
    ----------
    frame : Frame
        The reference (the analysed lap's line). [-]
    paths : sequence of LapPath
        The flying laps' rebuilt paths (the analysed lap's among them). [-]
    edges : EdgeLines, optional
        Track edges in the same plane; then the corridor runs between them. [-]

    Returns
    -------
    Corridor
    """
    offsets = lap_offsets(frame, paths)
    sigma = rebuild_uncertainty(offsets)
    lo, hi, low, high, count = _band(frame, offsets, sigma)
    source = "laps"
    if edges is not None:
        left, right = edge_offsets(frame, edges)
        inset = edges.margin_m + (sigma if math.isfinite(sigma) else 0.0)
        known = np.isfinite(left) & np.isfinite(right)
        # the laps widen it only inside the edges (a lap off the track does not)
        low = np.where(known, np.minimum(right + inset, np.maximum(low, right)), low)
        high = np.where(known, np.maximum(left - inset, np.minimum(high, left)), high)
        source = "track edges"
    return Corridor(
        distance_m=frame.distance_m,
        low_m=np.minimum(low, 0.0),
        high_m=np.maximum(high, 0.0),
        covered_low_m=lo,
        covered_high_m=hi,
        laps_counted=count,
        uncertainty_m=sigma,
        laps=tuple(p.number for p in paths),
        source=source,
        lap_offsets_m=offsets,
    )
