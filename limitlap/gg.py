"""The lap's samples against the envelope in the g-g diagram, speed band by speed band.

For each speed band: the envelope's boundary at the band's middle speed and at its
edges, the lap's samples in the band, their convex hull, and how far the samples, the
envelope and the ideal lap reach in every direction. The grip the lap left unused is
counted only where the ideal lap on the same line asks for it: in the directions and at
the speeds of the ideal's own samples (their convex hull, within the envelope), the
share of that area the lap's samples never reached (polar area on equal angle steps).
A fast circuit with no fast right-hand bend asks for no right-hand grip at 250 km/h, so
none is counted there. All in m/s², + forward, + left (ISO 8855).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from limitlap import limits
from limitlap.units import KMH_TO_M_S
from limitlap.vehicle import Vehicle

#: Ray directions of the reach, -pi to pi inclusive (0.5 degree steps). [rad]
REACH_ANGLES_RAD = np.linspace(-np.pi, np.pi, 721)


@dataclass(frozen=True, eq=False)
class GGBand:
    """One speed band of the g-g diagram (accelerations in m/s², + forward, + left).

    Attributes
    ----------
    speed_lo_m_s, speed_hi_m_s : float
        The band's speeds. [m/s]
    envelope_lon_m_s2, envelope_lat_m_s2 : numpy.ndarray
        The envelope's boundary at the band's middle speed. [m/s²]
    edge_boundaries : tuple of (lon, lat) arrays
        The boundary at the band's edge speeds (those above 0). [m/s²]
    sample_lon_m_s2, sample_lat_m_s2 : numpy.ndarray
        The lap's samples in the band. [m/s²]
    hull_lon_m_s2, hull_lat_m_s2 : numpy.ndarray or None
        Their convex hull, closed (first point repeated); None for fewer than 3. [m/s²]
    envelope_reach_m_s2, sample_reach_m_s2 : numpy.ndarray or None
        How far the envelope and the samples (never beyond the envelope) reach along
        each of :data:`REACH_ANGLES_RAD`, angles measured in the diagram's plane from
        + lateral (left) towards + longitudinal (forward). [m/s²]
    unused_share : float
        Of the area the ideal asks for (``asked_reach_m_s2``), the share beyond the
        samples' reach; NaN without a hull of the samples or of the ideal's. [-]
    asked_reach_m_s2 : numpy.ndarray or None
        How far the ideal lap's samples in the band reach (their hull, never beyond the
        envelope) along each angle; None when the ideal was not given or has fewer than
        3 samples in the band. [m/s²]
    beyond_share : float
        Share of the directions (of :data:`REACH_ANGLES_RAD`) in which the samples' hull
        reaches beyond the envelope at the band's middle speed; NaN without a hull. [-]
    """

    speed_lo_m_s: float
    speed_hi_m_s: float
    envelope_lon_m_s2: np.ndarray
    envelope_lat_m_s2: np.ndarray
    edge_boundaries: tuple
    sample_lon_m_s2: np.ndarray
    sample_lat_m_s2: np.ndarray
    hull_lon_m_s2: np.ndarray | None
    hull_lat_m_s2: np.ndarray | None
    envelope_reach_m_s2: np.ndarray | None
    sample_reach_m_s2: np.ndarray | None
    unused_share: float
    asked_reach_m_s2: np.ndarray | None = None
    beyond_share: float = math.nan


def gg_bands(
    speed_m_s,
    accel_lon_m_s2,
    accel_lat_m_s2,
    vehicle: Vehicle,
    grip_scale=1.0,
    bands=None,
    asked=None,
):
    """The lap's samples against the envelope in each speed band.

    Parameters
    ----------
    speed_m_s, accel_lon_m_s2, accel_lat_m_s2 : array-like
        The lap's samples. [m/s], [m/s²]
    vehicle : Vehicle
        Complete envelope at grip scale 1.
    grip_scale : float
        Grip scale of the comparison. [-]
    bands : list of tuple, optional
        (low, high) speed bands [m/s]; by default four from :func:`speed_bands_m_s`.
    asked : tuple of array-like, optional
        The ideal lap's (speed [m/s], a_x [m/s²], a_y [m/s²]) on the same line: the
        directions and speeds the lap asks for. Without it nothing is counted unused.

    Returns
    -------
    list of GGBand
    """
    env = vehicle.scaled(grip_scale) if grip_scale != 1.0 else vehicle
    v = np.asarray(speed_m_s, dtype=np.float64)
    ax = np.asarray(accel_lon_m_s2, dtype=np.float64)
    ay = np.asarray(accel_lat_m_s2, dtype=np.float64)
    if bands is None:
        bands = speed_bands_m_s(v, n_bands=4)
    bands = list(bands)[:4] or [(0.0, 1.0)]
    if asked is not None:
        asked = tuple(np.asarray(a, dtype=np.float64) for a in asked)
    return [_band(v, ax, ay, env, lo, hi, asked) for lo, hi in bands]


def _band(v, ax, ay, env, lo, hi, asked=None) -> GGBand:
    ex, ey = limits.envelope_boundary(0.5 * (lo + hi), env)
    edges = tuple(limits.envelope_boundary(edge, env) for edge in (lo, hi) if edge > 0)
    inband = (v >= lo) & (v < hi) & np.isfinite(ax) & np.isfinite(ay)
    sx, sy = ax[inband], ay[inband]
    hull = convex_hull(sy, sx)  # in the (lateral, longitudinal) plane of the diagram
    if hull is None:
        return GGBand(lo, hi, ex, ey, edges, sx, sy, None, None, None, None, math.nan)
    r_env = ray_reach(ey, ex, REACH_ANGLES_RAD)
    r_raw = ray_reach(hull[0], hull[1], REACH_ANGLES_RAD)
    beyond = float(np.mean(r_raw[:-1] > r_env[:-1]))
    r_in = np.minimum(r_raw, r_env)
    r_ask = _asked_reach(asked, lo, hi, r_env)
    unused = math.nan
    if r_ask is not None and np.any(r_ask > 0):
        # Polar area 1/2 sum r^2 dtheta on equal steps (the last angle repeats the first):
        # the part of the asked area the samples did not reach.
        short = np.maximum(r_ask[:-1] ** 2 - r_in[:-1] ** 2, 0.0)
        unused = float(np.sum(short) / np.sum(r_ask[:-1] ** 2))
    hy, hx = np.append(hull[0], hull[0][0]), np.append(hull[1], hull[1][0])
    return GGBand(lo, hi, ex, ey, edges, sx, sy, hx, hy, r_env, r_in, unused, r_ask, beyond)


def _asked_reach(asked, lo, hi, r_env):
    """How far the ideal's samples in the band reach per angle (within the envelope)."""
    if asked is None:
        return None
    v, ax, ay = asked
    inband = (v >= lo) & (v < hi) & np.isfinite(ax) & np.isfinite(ay)
    hull = convex_hull(ay[inband], ax[inband])
    if hull is None:
        return None
    return np.minimum(ray_reach(hull[0], hull[1], REACH_ANGLES_RAD), r_env)


def ray_reach(poly_x, poly_y, angles):
    """Farthest crossing of rays from the origin with a closed polygon, per angle.

    Parameters
    ----------
    poly_x, poly_y : array-like
        The polygon's vertices (closed implicitly: the last joins the first). [any unit]
    angles : array-like
        Ray directions, ascending within [-pi, pi]. [rad]

    Returns
    -------
    numpy.ndarray
        Distance from the origin to the farthest crossing of each ray with an edge; 0 where
        a ray crosses none. [unit of the vertices]

    Notes
    -----
    An edge that does not pass through the origin subtends less than half a turn as seen
    from it, and only rays within that arc can cross it, so only those (edge, ray) pairs
    are tested -- each with the full crossing test (ray distance t >= 0, edge parameter
    0 <= w <= 1, not parallel), as if every pair were.
    """
    ax_ = np.asarray(poly_x, dtype=np.float64)
    ay_ = np.asarray(poly_y, dtype=np.float64)
    th = np.asarray(angles, dtype=np.float64)
    bx, by = np.roll(ax_, -1), np.roll(ay_, -1)
    start = np.arctan2(ay_, ax_)
    turn = np.arctan2(ax_ * by - ay_ * bx, ax_ * bx + ay_ * by)  # signed angle a -> b
    lo = np.where(turn >= 0, start, start + turn)  # the arc [lo, lo + |turn|]
    hi = lo + np.abs(turn)
    edges, rays = [], []
    margin = 1e-9  # [rad] rays through a vertex belong to both its edges
    for shift in (-2.0 * np.pi, 0.0, 2.0 * np.pi):  # arcs across the -pi/pi seam
        i0 = np.searchsorted(th, lo + shift - margin, side="left")
        i1 = np.searchsorted(th, hi + shift + margin, side="right")
        n = np.maximum(i1 - i0, 0)
        first = np.cumsum(n) - n
        edges.append(np.repeat(np.arange(lo.size), n))
        rays.append(np.repeat(i0, n) + np.arange(int(n.sum())) - np.repeat(first, n))
    e = np.concatenate(edges)
    i = np.concatenate(rays)
    dx, dy = np.cos(th[i]), np.sin(th[i])
    ex, ey = bx[e] - ax_[e], by[e] - ay_[e]
    denom = dx * ey - dy * ex
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (ax_[e] * ey - ay_[e] * ex) / denom  # distance along the ray
        w = (ax_[e] * dy - ay_[e] * dx) / denom  # position along the edge
    ok = (np.abs(denom) > 1e-15) & (t >= 0) & (w >= 0) & (w <= 1)
    out = np.zeros(th.size)
    np.maximum.at(out, i[ok], t[ok])
    return out


def convex_hull(points_x, points_y):
    """Convex hull polygon of the points, or None for fewer than 3 non-collinear points."""
    pts = np.column_stack([points_x, points_y])
    pts = pts[np.all(np.isfinite(pts), axis=1)]
    if pts.shape[0] < 3:
        return None
    from scipy.spatial import ConvexHull, QhullError

    try:
        hull = ConvexHull(pts)
    except (QhullError, ValueError):
        return None
    v = pts[hull.vertices]
    return v[:, 0], v[:, 1]


def speed_bands_m_s(speed_m_s, n_bands: int = 3):
    """Speed band edges for the g-g panels: equal sample counts, rounded to 10 km/h.

    Parameters
    ----------
    speed_m_s : array-like
        Sample speeds. [m/s]
    n_bands : int
        Number of bands. [-]

    Returns
    -------
    list of tuple
        (low, high) edges of each band. [m/s]
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    v = v[np.isfinite(v)]
    step = 10.0 * KMH_TO_M_S
    if v.size == 0:
        return []
    q = np.quantile(v, np.linspace(0.0, 1.0, n_bands + 1))
    edges = np.unique(
        np.concatenate(
            [
                [np.floor(q[0] / step) * step],
                np.round(q[1:-1] / step) * step,
                [np.ceil(q[-1] / step) * step],
            ]
        )
    )
    if edges.size < 2:
        edges = np.array([edges[0] - step, edges[0] + step])
    return [(float(a), float(b)) for a, b in itertools.pairwise(edges)]
