"""Laps of a session: from the log's ``lap`` column or from crossings of a start/finish gate.

Numbering follows docs/formats.md, Lap numbering: lap 0 runs from the start of the log to
the first gate crossing, laps 1, 2, ... between crossings, and the stretch after the last
crossing comes last. Each lap has a kind (out, flying, in, pit, partial); only flying
laps are complete, the fastest lap or the envelope's. The crossings are placed on the
path fused from speed, yaw rate and the GNSS fixes around them; without a gate, one is
put on the main straight (:func:`auto_gate`). Times and distances are SI (s, m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from limitlap import _kernels
from limitlap.errors import ArgumentError, InputError, LimitlapError
from limitlap.gnss import fill_position, gps_dropouts, travelled_m
from limitlap.logfile import Log
from limitlap.units import KMH_TO_M_S

#: Half-width of the gate either side of its point: a crossing further off is another
#: road (pit lane, a parallel straight). Common practice, no published source. [m]
GATE_HALF_WIDTH_M = 30.0
#: Least distance between two counted crossings, so GPS jitter of a car standing on the
#: line is not a lap. Common practice, no published source. [m]
MIN_LAP_DISTANCE_M = 100.0
#: Travelled distance either side of a crossing whose GPS fixes refine its time. [m]
FIT_SPAN_M = 30.0
#: Span of positions either side of the gate point used for the direction of travel. [m]
_DIRECTION_SPAN_M = 5.0
#: Most rounds of turning the gate line square to the mean direction of travel at its
#: crossings (each round stops early once the line turns by less than 0.1 mrad). [-]
_DIRECTION_ROUNDS = 8


@dataclass(frozen=True)
class Lap:
    """One lap of a log.

    Attributes
    ----------
    number : int
        0 for the out-lap, 1 for the first complete lap (docs/formats.md, Log files).
    start_time_s, end_time_s : float
        Gate crossing (or log start/end) times, interpolated between rows. [s]
    time_s : float
        ``end_time_s - start_time_s``. [s]
    distance_m : float
        Distance travelled, integral of ``speed`` over the lap. [m]
    complete : bool
        True for a full lap from gate to gate with usable position throughout.
    reason : str
        Why the lap is not complete; ``''`` when it is.
    start_index, end_index : int
        Rows of the log in the lap (end exclusive).
    kind : str
        One of :data:`LAP_KINDS`: ``out`` (from rest or the pit lane), ``flying``,
        ``in`` (into the pits or to the end of the log at rest), ``pit`` (a stop of
        :data:`STOP_MIN_S` or more inside it), ``partial`` (the log starts or ends mid-lap).
    """

    number: int
    start_time_s: float
    end_time_s: float
    time_s: float
    distance_m: float
    complete: bool
    reason: str
    start_index: int
    end_index: int
    kind: str = "flying"


@dataclass(frozen=True)
class Gate:
    """A start/finish gate: a point on the track; the gate is the line through it square to the direction of travel there.

    Give either ``latitude_deg`` and ``longitude_deg`` (WGS84) or ``x_m`` and ``y_m``
    (the log's planar east/north frame); use :meth:`geodetic` or :meth:`planar`.

    Attributes
    ----------
    latitude_deg, longitude_deg : float or None
        WGS84 position. [deg]
    x_m, y_m : float or None
        Planar position in the log's frame. [m]
    half_width_m : float
        Crossings further than this from the point along the gate line do not count. [m]
    """

    latitude_deg: float | None = None
    longitude_deg: float | None = None
    x_m: float | None = None
    y_m: float | None = None
    half_width_m: float = GATE_HALF_WIDTH_M

    def __post_init__(self):
        """Check that the gate is given one way: geodetic or planar."""
        geo = self.latitude_deg is not None and self.longitude_deg is not None
        flat = self.x_m is not None and self.y_m is not None
        if geo == flat:
            raise LimitlapError("a gate needs latitude and longitude, or x and y (not both)")
        if geo and not (abs(self.latitude_deg) <= 90 and abs(self.longitude_deg) <= 180):
            raise LimitlapError(f"gate {self.latitude_deg},{self.longitude_deg} is out of range")
        if not self.half_width_m > 0:
            raise LimitlapError("gate half-width must be positive")

    @classmethod
    def geodetic(cls, latitude_deg: float, longitude_deg: float, **kw) -> Gate:
        """A gate at a WGS84 point. [deg]."""
        return cls(latitude_deg=float(latitude_deg), longitude_deg=float(longitude_deg), **kw)

    @classmethod
    def planar(cls, x_m: float, y_m: float, **kw) -> Gate:
        """A gate at a point of the log's planar frame. [m]."""
        return cls(x_m=float(x_m), y_m=float(y_m), **kw)

    @property
    def is_geodetic(self) -> bool:
        """True for a WGS84 gate."""
        return self.latitude_deg is not None

    def __str__(self) -> str:
        """The gate as a user would type it."""
        if self.is_geodetic:
            return f"{self.latitude_deg:.6f},{self.longitude_deg:.6f}"
        return f"x={self.x_m:.1f} m, y={self.y_m:.1f} m"

    def position_m(self, log: Log) -> tuple[float, float]:
        """The gate point in the log's planar frame. [m]."""
        if not self.is_geodetic:
            return self.x_m, self.y_m
        if log.origin is None:
            raise InputError(
                log.path,
                f"gate {self} is given as latitude,longitude but the log has planar x/y positions",
            )
        import pymap3d

        east, north, _ = pymap3d.geodetic2enu(
            self.latitude_deg, self.longitude_deg, log.origin[2], *log.origin
        )
        return float(east), float(north)


def parse_gate(text: str) -> Gate:
    """Parse a gate given as text, ``"LAT,LON"`` (decimal degrees, WGS84).

    Raises
    ------
    ArgumentError
        For the parameter ``gate``: not two numbers, or not a position on Earth.

    Examples
    --------
    >>> parse_gate("-31.41780,148.61724")
    Gate(latitude_deg=-31.4178, longitude_deg=148.61724, x_m=None, y_m=None, half_width_m=30.0)
    """
    bad_text = f"'{text}' is not LAT,LON (two numbers separated by a comma)"
    parts = [p.strip() for p in str(text).split(",")]
    if len(parts) != 2:
        raise ArgumentError("gate", bad_text)
    try:
        lat, lon = (float(p) for p in parts)
    except ValueError:
        raise ArgumentError("gate", bad_text) from None
    if not (math.isfinite(lat) and math.isfinite(lon)):
        raise ArgumentError("gate", f"'{text}' is not a finite position")
    if abs(lat) > 90:
        raise ArgumentError("gate", f"latitude {lat:g} is out of range -90..90 degrees")
    if abs(lon) > 180:
        raise ArgumentError("gate", f"longitude {lon:g} is out of range -180..180 degrees")
    return Gate.geodetic(lat, lon)


#: Spacing of the travelled-distance grid the automatic gate is looked for on. [m]
_AUTO_STEP_M = 2.0
#: Chord either side of a point whose turn gives the path's curvature there: long
#: enough that GNSS noise of a few decimetres turns it by well under a degree. [m]
_AUTO_CHORD_M = 50.0
#: A stretch counts as straight where its curvature stays below this (radius above
#: 500 m: a flat-out kink at most). Common practice, no published source. [1/m]
STRAIGHT_CURVATURE_1_M = 1.0 / 500.0
#: A break in the positions (an unbridged GNSS dropout) longer than this ends a stretch. [m]
_AUTO_GAP_M = 20.0


def _path_grid(log: Log):
    """The log's fused path every _AUTO_STEP_M of travelled distance: (x, y, speed, valid)."""
    x, y = fill_position(log)
    s = travelled_m(log)
    p = s + 1e-9 * (log.time_s - log.time_s[0])  # strictly increasing
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        raise InputError(log.path, "cannot place a gate: no position fix")
    v = log.channels["speed"]
    vok = np.isfinite(v)
    grid = np.arange(s[ok][0], s[ok][-1], _AUTO_STEP_M)
    pos = np.flatnonzero(ok)
    j = np.clip(np.searchsorted(s[pos], grid), 1, pos.size - 1)
    valid = s[pos[j]] - s[pos[j - 1]] <= _AUTO_GAP_M
    gx = np.interp(grid, p[ok], x[ok])
    gy = np.interp(grid, p[ok], y[ok])
    gv = np.interp(grid, p[vok], v[vok]) if vok.any() else np.zeros_like(grid)
    return gx, gy, gv, valid


def _runs(mask):
    """(start, end) index pairs (end exclusive) of the runs of True in ``mask``."""
    edges = np.diff(np.concatenate(([0], mask.view(np.int8), [0])))
    return np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)


def auto_gate(log: Log, speed_share: float = 0.6) -> Gate:
    """Propose a gate: the middle of the longest fast, straight stretch (the main straight).

    A convenience for logs without a ``lap`` column or a known start/finish point. The
    fused path (:func:`limitlap.gnss.fill_position`) is taken every 2 m of travelled
    distance; its curvature is the turn between the chords 50 m either side of each
    point. A point is fast when its speed reaches ``speed_share`` of the session's
    95th-percentile speed (over distance), straight when its curvature is below
    :data:`STRAIGHT_CURVATURE_1_M` (or, on a circuit with no such stretch, within 25 %
    of the least curvature the fast points have). The gate goes at the middle of the
    longest run of fast, straight points: start/finish lines are put on the main
    straight, and a pit lane (slow) or the log's start does not draw it away. Laps are
    then timed from there; it is not the circuit's own line. Common practice, no
    published source.

    Parameters
    ----------
    log : Log
        The session.
    speed_share : float
        Share of the 95th-percentile speed that counts as fast. [-]

    Returns
    -------
    Gate
        WGS84 when the log has an origin, else planar.

    Raises
    ------
    InputError
        The car never reaches speed with a position fix.
    """
    gx, gy, gv, valid = _path_grid(log)
    k = max(1, round(_AUTO_CHORD_M / _AUTO_STEP_M))
    curv = np.full(gx.size, np.inf)
    if gx.size > 2 * k:
        back = np.arctan2(gy[k:-k] - gy[: -2 * k], gx[k:-k] - gx[: -2 * k])
        ahead = np.arctan2(gy[2 * k :] - gy[k:-k], gx[2 * k :] - gx[k:-k])
        turn = np.angle(np.exp(1j * (ahead - back)))  # wrapped to ±pi
        curv[k:-k] = np.abs(turn) / _AUTO_CHORD_M
    fast = valid & (gv >= speed_share * np.percentile(gv, 95.0)) & (gv > 0) & np.isfinite(curv)
    if not fast.any():
        raise InputError(
            log.path, "cannot place a gate: the car never reaches speed with a position fix"
        )
    limit = max(STRAIGHT_CURVATURE_1_M, 1.25 * float(np.percentile(curv[fast], 10.0)))
    starts, ends = _runs(fast & (curv <= limit))
    longest = int(np.argmax(ends - starts))
    i = (starts[longest] + ends[longest] - 1) // 2
    if log.origin is None:
        return Gate.planar(gx[i], gy[i])
    import pymap3d

    lat, lon, _ = pymap3d.enu2geodetic(gx[i], gy[i], 0.0, *log.origin)
    return Gate.geodetic(float(lat), float(lon))


def _direction_at(x, y, s, i):
    """Unit direction of travel at row ``i`` from the positions ±5 m of path around it.

    At least the nearest position on either side is taken, so the direction is defined
    at any rate.
    """
    ok = np.isfinite(x) & np.isfinite(y)
    lo = int(np.searchsorted(s, s[i] - _DIRECTION_SPAN_M))
    hi = int(np.searchsorted(s, s[i] + _DIRECTION_SPAN_M, side="right")) - 1
    while lo < i and not ok[lo]:
        lo += 1
    while hi > i and not ok[hi]:
        hi -= 1
    # At a low rate one step is longer than the span (10 Hz at 220 km/h: 6 m): take the
    # nearest positions either side, whatever the rate.
    if lo == i:
        earlier = np.flatnonzero(ok[:i])
        lo = int(earlier[-1]) if earlier.size else i
    if hi == i:
        later = np.flatnonzero(ok[i + 1 :])
        hi = i + 1 + int(later[0]) if later.size else i
    dx, dy = x[hi] - x[lo], y[hi] - y[lo]
    norm = math.hypot(dx, dy)
    return (dx / norm, dy / norm) if norm > 0 else None


#: A gate given beside a track file's own gate must lie within this distance of it along
#: the direction of travel: the track's corner positions (``apex_m``) are measured from
#: its gate, and its corners are matched to the ones found within 10 m
#: (docs/formats.md, Track file). [m]
GATE_AGREE_ALONG_M = 10.0


def check_gates_agree(log: Log, gate: Gate, track_gate: Gate, track_path) -> None:
    """Refuse a gate that contradicts a track file's own gate.

    The two agree when their points are within :data:`GATE_AGREE_ALONG_M` of each other
    along the direction of travel at the track's gate and within the gate's half width
    of each other across it (two people's points on one start/finish line).

    Raises
    ------
    ArgumentError
        For the parameter ``gate``, naming both gates and the track file.
    """
    gx, gy = gate.position_m(log)
    tx, ty = track_gate.position_m(log)
    dist = math.hypot(gx - tx, gy - ty)
    x, y = fill_position(log)
    near, closest, _ = _kernels.gate_approaches(
        np.ascontiguousarray(x), np.ascontiguousarray(y), float(tx), float(ty), 0.0
    )
    direction = None
    if near >= 0 and closest <= track_gate.half_width_m:
        direction = _direction_at(x, y, travelled_m(log), near)
    along = dist if direction is None else abs((gx - tx) * direction[0] + (gy - ty) * direction[1])
    if along <= GATE_AGREE_ALONG_M and dist <= track_gate.half_width_m:
        return
    raise ArgumentError(
        "gate",
        f"{gate} is {dist:.0f} m ({along:.0f} m along the track) from the gate of track file "
        f"{track_path} ({track_gate}), from which its corners are placed: give one gate, or "
        f"two within {GATE_AGREE_ALONG_M:.0f} m along the track",
    )


def _refine_crossings(log, gx, gy, nx, ny, s, at):
    """Distance along the path where each crossing happens, from all fixes near the gate.

    The signed distance of each GPS fix past the gate line is fitted with a quadratic
    in travelled distance over ``FIT_SPAN_M`` either side, and its root taken: a least
    squares fit averages white GPS noise over the fixes instead of trusting the two
    either side (Gauss-Markov; e.g. Strang, *Introduction to Linear Algebra*, 5th ed.,
    §4.3). Travelled distance comes from the speed channel, which is far less noisy
    than GPS over a few tens of metres. Falls back to the two-fix value when fewer than
    six fixes are in the window or the fit has no root inside it.
    """
    from limitlap.gnss import fix_rows

    rows = fix_rows(log)
    s_fix = s[rows]
    along = (log.channels["x"][rows] - gx) * nx + (log.channels["y"][rows] - gy) * ny
    out = np.asarray(at, dtype=np.float64).copy()
    lo = np.searchsorted(s_fix, out - FIT_SPAN_M)
    hi = np.searchsorted(s_fix, out + FIT_SPAN_M)
    ok = hi - lo >= 6
    ok[ok] = s_fix[hi[ok] - 1] - s_fix[lo[ok]] >= FIT_SPAN_M  # fixes on both sides
    k = np.flatnonzero(ok)
    if k.size == 0:
        return out
    # All windows' fixes in one array, each centred on its own crossing (u = s - s0), the
    # normal equations of every window's quadratic summed at once (np.add.reduceat).
    count = hi[k] - lo[k]
    first = np.concatenate(([0], np.cumsum(count)[:-1]))
    member = np.arange(count.sum()) - np.repeat(first - lo[k], count)
    u = s_fix[member] - np.repeat(out[k], count)
    y = along[member]
    powers = np.stack([u**4, u**3, u * u, u, np.ones_like(u), u * u * y, u * y, y], axis=1)
    m = np.add.reduceat(powers, first, axis=0)
    normal = m[:, [[0, 1, 2], [1, 2, 3], [2, 3, 4]]]
    rhs = m[:, 5:8]
    solvable = np.abs(np.linalg.det(normal)) > 0.0
    k, normal, rhs = k[solvable], normal[solvable], rhs[solvable]
    c2, c1, c0 = np.linalg.solve(normal, rhs[..., None])[..., 0].T
    quad = np.abs(c2) > 1e-12
    with np.errstate(invalid="ignore", divide="ignore"):
        disc = np.where(quad, c1 * c1 - 4.0 * c2 * c0, np.nan)
        r1 = np.where(quad, (-c1 + np.sqrt(disc)) / (2.0 * c2), -c0 / c1)
        r2 = np.where(quad, (-c1 - np.sqrt(disc)) / (2.0 * c2), np.nan)
    r1 = np.where(np.abs(r1) <= FIT_SPAN_M, r1, np.nan)  # NaN (complex, none) never passes
    r2 = np.where(np.abs(r2) <= FIT_SPAN_M, r2, np.nan)
    best = np.where(np.isnan(r2) | (np.abs(r1) <= np.abs(r2)), r1, r2)
    found = np.isfinite(best)
    out[k[found]] += best[found]
    return out


def _yaw_rate_rad_s(log: Log) -> np.ndarray | None:
    """Yaw rate at every row, None without a yaw-rate or lateral-acceleration channel. [rad/s].

    The ``yaw_rate`` channel, else a_y / v above 3 m/s (steady turning, Milliken &
    Milliken 1995, §5.3); blanks filled linearly.
    """
    t = log.time_s
    if log.measured("yaw_rate"):
        r = log.channels["yaw_rate"]
        ok = np.isfinite(r)
    elif log.measured("accel_lat"):
        v = log.channels["speed"]
        with np.errstate(invalid="ignore", divide="ignore"):
            r = log.channels["accel_lat"] / v
        ok = np.isfinite(r) & (v > 3.0)
    else:
        return None
    if not ok.any():
        return None
    return r if ok.all() else np.interp(t, t[ok], r[ok])


#: The dead-reckoned path around a crossing is used only when it lies this close to the
#: fixes (root mean square): GNSS noise is a few decimetres; a yaw rate in the wrong unit
#: or sign bends the path by metres within the window. Common practice, no published
#: source. [m]
_FUSED_MAX_RMS_M = 1.5


class _FusedPath:
    """The path around a crossing from speed and yaw rate, placed on the GNSS fixes.

    Between fixes the car's path is dead reckoned: heading the integral of the yaw rate,
    position the integral of the travelled distance (speed) along it (trapezoid, mid-step
    heading). Over a window of travelled distance around a crossing that shape is laid on
    the window's fixes by the rotation and shift that fit them best in least squares (the
    orthogonal Procrustes solution: Schönemann, Psychometrika 31(1), 1966), so the
    fixes' white noise averages out and the shape between them is the inertial one, not
    the chords. The GNSS error that is the same over the window (a slowly wandering
    offset) stays: no processing of one log can tell it from the car's position.
    """

    def __init__(self, log: Log, yaw):
        from limitlap.gnss import fix_rows

        self.t = log.time_s
        self.s = travelled_m(log)
        self.yaw = yaw
        self.fixes = fix_rows(log)
        self.fx = log.channels["x"][self.fixes]
        self.fy = log.channels["y"][self.fixes]
        self.s_fix = self.s[self.fixes]

    def cross(self, s_c, gate_xy, normal):
        """(time [s], travelled distance [m], unit tangent) of the crossing near ``s_c``, or None."""
        s, t = self.s, self.t
        # FIT_SPAN_M either side, and at least two fixes either side at any GNSS rate
        k = int(np.searchsorted(self.s_fix, s_c))
        if k < 2 or k + 1 >= self.s_fix.size:
            return None
        lo = int(np.searchsorted(s, min(s_c - FIT_SPAN_M, self.s_fix[k - 2])))
        hi = int(np.searchsorted(s, max(s_c + FIT_SPAN_M, self.s_fix[k + 1]), side="right"))
        k0, k1 = np.searchsorted(self.fixes, [lo, hi])
        f = self.fixes[k0:k1] - lo
        if f.size < 3 or s[lo + f[0]] > s_c or s[lo + f[-1]] < s_c:
            return None
        if s[lo + f[-1]] - s[lo + f[0]] < 10.0:
            return None
        ss, tt, rr = s[lo:hi], t[lo:hi], self.yaw[lo:hi]
        psi = np.concatenate(([0.0], np.cumsum(0.5 * (rr[1:] + rr[:-1]) * np.diff(tt))))
        mid = 0.5 * (psi[1:] + psi[:-1])
        ds = np.diff(ss)
        q = np.stack(
            [
                np.concatenate(([0.0], np.cumsum(ds * np.cos(mid)))),
                np.concatenate(([0.0], np.cumsum(ds * np.sin(mid)))),
            ],
            axis=1,
        )
        fixes = np.stack([self.fx[k0:k1], self.fy[k0:k1]], axis=1)
        qc, pc = q[f].mean(axis=0), fixes.mean(axis=0)
        a, b = q[f] - qc, fixes - pc
        theta = math.atan2(
            float(np.sum(a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0])), float(np.sum(a * b))
        )
        c, sn = math.cos(theta), math.sin(theta)
        res_x = b[:, 0] - (c * a[:, 0] - sn * a[:, 1])
        res_y = b[:, 1] - (sn * a[:, 0] + c * a[:, 1])
        if math.sqrt(float(np.mean(res_x * res_x + res_y * res_y))) > _FUSED_MAX_RMS_M:
            return None  # the shape does not fit the fixes: a yaw rate that is not the car's
        px = c * (q[:, 0] - qc[0]) - sn * (q[:, 1] - qc[1]) + pc[0]
        py = sn * (q[:, 0] - qc[0]) + c * (q[:, 1] - qc[1]) + pc[1]
        past = (px - gate_xy[0]) * normal[0] + (py - gate_xy[1]) * normal[1]
        j = np.flatnonzero((past[:-1] < 0) & (past[1:] >= 0))
        if j.size == 0:
            return None
        j = int(j[np.argmin(np.abs(ss[j] - s_c))])
        frac = -past[j] / (past[j + 1] - past[j])
        heading = theta + psi[j] + frac * (psi[j + 1] - psi[j])
        return (
            float(tt[j] + frac * (tt[j + 1] - tt[j])),
            float(ss[j] + frac * (ss[j + 1] - ss[j])),
            (math.cos(heading), math.sin(heading)),
        )


def _row_crossings(x, y, s, pairs, gate_xy, direction, half_width_m):
    """Travelled distance of each crossing of the gate line between rows (linear), in the direction of travel and within the half width. [m]."""
    nx, ny = direction

    def signed(rows):  # distance past the gate line, and offset along it
        dx, dy = x[rows] - gate_xy[0], y[rows] - gate_xy[1]
        return dx * nx + dy * ny, -dx * ny + dy * nx

    a0, c0 = signed(pairs)
    a1, c1 = signed(pairs + 1)
    cross = (a0 < 0) & (a1 >= 0)
    i = pairs[cross]
    a0, a1, c0, c1 = a0[cross], a1[cross], c0[cross], c1[cross]
    frac = -a0 / (a1 - a0)
    keep = np.abs(c0 + frac * (c1 - c0)) <= half_width_m
    i, frac = i[keep], frac[keep]
    return s[i] + frac * (s[i + 1] - s[i])


def _fused_crossings(log, fused, at, gate_xy, direction):
    """Times [s], distances [m] and unit tangents of the crossings on the fused path.

    A crossing whose window lacks fixes keeps the fit of :func:`_refine_crossings`.
    """
    at = np.array(at, dtype=np.float64)
    times = np.full(at.size, np.nan)
    tangents = []
    for k, s_c in enumerate(at.tolist()):
        found = fused.cross(s_c, gate_xy, direction)
        if found is not None:
            times[k], at[k], tangent = found
            tangents.append(tangent)
    left = np.isnan(times)
    if left.any():
        at[left] = _refine_crossings(log, *gate_xy, *direction, fused.s, at[left])
        times[left] = np.interp(at[left], fused.s, fused.t)
    return times, at, tangents


def _mean_direction(tangents):
    """The unit mean of the crossings' directions of travel; None when they disagree (mean shorter than half). [-]."""
    if not tangents:
        return None
    mean = np.sum(tangents, axis=0)
    norm = math.hypot(*mean)
    return (mean[0] / norm, mean[1] / norm) if norm > 0.5 * len(tangents) else None


def gate_crossings(log: Log, gate: Gate) -> np.ndarray:
    """Times the car crosses the gate line in its direction of travel. [s].

    Positions are first filled at every row (:func:`limitlap.gnss.fill_position`) and
    the crossings found between rows. With a yaw rate (or lateral acceleration) each
    crossing is then placed on the path dead reckoned from speed and yaw rate and laid on
    the fixes around it (:class:`_FusedPath`), and the gate line turned square to the
    mean direction of travel over all crossings (one pass, not the nearest alone), then
    the crossings found again; without one, by the least-squares fit of
    :func:`_refine_crossings`.
    """
    gate_xy = gate.position_m(log)
    x, y = fill_position(log)
    s = travelled_m(log)
    t = log.time_s
    # Only row pairs near the gate can cross it within its half width (a row's step is a
    # metre or so; 100 m of margin): the signed distances are taken there alone.
    near, closest, pairs = _kernels.gate_approaches(
        np.ascontiguousarray(x),
        np.ascontiguousarray(y),
        float(gate_xy[0]),
        float(gate_xy[1]),
        gate.half_width_m + 100.0,
    )
    if near < 0:
        raise InputError(log.path, "no position to place the gate on")
    if closest > gate.half_width_m:
        raise InputError(
            log.path,
            f"the car never crosses the gate at {gate} (closest pass {closest:.0f} m away)",
        )
    direction = _direction_at(x, y, s, near)
    if direction is None:
        raise InputError(log.path, f"the car does not move at the gate at {gate}")
    found = _row_crossings(x, y, s, pairs, gate_xy, direction, gate.half_width_m)
    yaw = _yaw_rate_rad_s(log)
    if yaw is None:
        at = _refine_crossings(log, *gate_xy, *direction, s, found)
        times = np.interp(at, s, t)
    else:
        fused = _FusedPath(log, yaw)
        times, at, tangents = _fused_crossings(log, fused, found, gate_xy, direction)
        # Turning the line moves the crossings along the path, which turns the direction
        # there by (offset of the gate point from the path) / radius per radian: a few
        # rounds settle it wherever the point is closer to the path than its radius.
        for _ in range(_DIRECTION_ROUNDS):
            mean = _mean_direction(tangents)
            if mean is None:
                break
            turn = math.atan2(
                direction[0] * mean[1] - direction[1] * mean[0],
                direction[0] * mean[0] + direction[1] * mean[1],
            )
            direction = mean
            found = _row_crossings(x, y, s, pairs, gate_xy, direction, gate.half_width_m)
            times, at, tangents = _fused_crossings(log, fused, found, gate_xy, direction)
            if abs(turn) < 1e-4:
                break
    counted = []
    last = -np.inf
    for k in range(times.size):  # a handful of crossings, not samples
        if at[k] - last >= MIN_LAP_DISTANCE_M:
            counted.append(times[k])
            last = at[k]
    if not counted:
        raise InputError(
            log.path, f"the car never crosses the gate at {gate} in its direction of travel"
        )
    return np.asarray(counted)


#: Slower than this, the car counts as stopped (common practice, no published source). [m/s]
STOP_SPEED_M_S = 2.0
#: A stop this long inside a lap (a pit stop, a stop on track) makes it a ``pit`` lap: its
#: time is not a lap time (common practice, no published source). [s]
STOP_MIN_S = 5.0
#: Travelled distance after (before) a lap's start (end) whose mean speed tells whether
#: the lap starts (ends) slowly: a pit lane is driven at its speed limit for a few hundred
#: metres, a slow corner lasts a few seconds (common practice, no published source). [m]
PACE_SPAN_M = 100.0
#: A lap starts or ends slowly when its mean speed over PACE_SPAN_M is below this share of
#: the usual speed at the same place (the 75th percentile over the session's gate
#: passes; pit lanes are limited to about a third of the speed on the straight beside
#: them). Common practice, no published source. [-]
SLOW_SHARE = 0.6

#: The kinds of lap (docs/formats.md, Lap numbering), as summary.json and ``laps --json``
#: write them. Only ``flying`` laps are lap times: the fastest lap and the envelope's
#: laps are taken from them.
LAP_KINDS = ("out", "flying", "in", "pit", "partial")


def _longest_stop(t, v):
    """(duration [s], start time [s]) of the longest stretch slower than STOP_SPEED_M_S."""
    slow = np.isfinite(v) & (v < STOP_SPEED_M_S)
    if not slow.any():
        return 0.0, math.nan
    edges = np.diff(np.concatenate(([0], slow.view(np.int8), [0])))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1) - 1
    spans = t[ends] - t[starts]
    j = int(np.argmax(spans))
    return float(spans[j]), float(t[starts[j]])


class _Pace:
    """Mean speeds over stretches of travelled distance: distance over the time taken.

    A stop inside the stretch counts with its time, so a lap that starts with a stop
    starts slowly.
    """

    def __init__(self, log: Log):
        t = log.time_s
        self.t = t
        self.s = travelled_m(log)
        self._p = self.s + 1e-9 * (t - t[0])  # strictly increasing for time at distance
        v = log.channels["speed"]
        finite = np.flatnonzero(np.isfinite(v))
        self.first_v = float(v[finite[0]]) if finite.size else math.nan
        self.last_v = float(v[finite[-1]]) if finite.size else math.nan

    def mean(self, s_from, s_to):
        """Mean speed between travelled distances ``s_from`` < ``s_to`` (clipped to the log). [m/s]."""
        a = np.clip(np.asarray(s_from, dtype=np.float64), self.s[0], self.s[-1])
        b = np.clip(np.asarray(s_to, dtype=np.float64), self.s[0], self.s[-1])
        dt = np.interp(b, self._p, self.t) - np.interp(a, self._p, self.t)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(dt > 0, (b - a) / dt, np.nan)


def _kmh(v_m_s: float) -> str:
    return f"{v_m_s / KMH_TO_M_S:.0f} km/h"


def _usual(values) -> float:
    """The usual pace among the session's gate passes: their 75th percentile. [m/s]."""
    values = np.asarray(values, dtype=np.float64)
    values = values[np.isfinite(values)]
    return float(np.percentile(values, 75.0)) if values.size else math.nan


def _same_place_pace(pace: _Pace, s_b, whole, offset_m, span_m) -> float:
    """The usual mean speed ``offset_m``..``offset_m + span_m`` after the gate on the whole laps. [m/s]."""
    if not whole:
        return math.nan
    starts = s_b[whole]
    lengths = s_b[np.asarray(whole) + 1] - starts
    at = starts + (offset_m % np.median(lengths)) * lengths / np.median(lengths)
    return _usual(pace.mean(at, at + span_m))


def _log_end_kind(pace: _Pace, s_b, whole, first: bool):
    """Kind and reason of the stretch before the first (after the last) boundary."""
    span = min(PACE_SPAN_M, float(s_b[1] - s_b[0] if first else s_b[-1] - s_b[-2]))
    if first:
        v0 = pace.first_v
        own = float(pace.mean(s_b[0], s_b[0] + span)) if span > 0 else math.nan
        length = float(np.median(s_b[np.asarray(whole) + 1] - s_b[whole])) if whole else 0.0
        usual = _same_place_pace(pace, s_b, whole, length - (s_b[1] - s_b[0]), span)
    else:
        v0 = pace.last_v
        own = float(pace.mean(s_b[-1] - span, s_b[-1])) if span > 0 else math.nan
        usual = _same_place_pace(pace, s_b, whole, s_b[-1] - s_b[-2] - span, span)
    where = "starts" if first else "ends"
    stretch = (
        "start of log to the first crossing" if first else "last crossing to the end of the log"
    )
    word = "out-lap" if first else "in-lap"
    if v0 < STOP_SPEED_M_S:
        return ("out" if first else "in"), f"{word}: the log {where} at rest ({stretch})"
    if own < SLOW_SHARE * usual:
        return (
            ("out" if first else "in"),
            f"{word}: the log {where} slowly, {_kmh(own)} where laps pass at {_kmh(usual)} "
            f"(pit lane; {stretch})",
        )
    return "partial", f"partial lap: the log {where} on the move ({stretch})"


def _whole_lap_kind(stop, starts, ends, usual_leave, usual_reach) -> tuple[str, str]:
    """Kind and reason of a lap between two boundaries: pit, else out, else in, else flying.

    ``stop`` is its longest stop (duration [s], start [s]); ``starts`` and ``ends`` its
    mean speeds over its first and last PACE_SPAN_M, ``usual_*`` the session's. [m/s]
    """
    stop_s, stop_at = stop
    span = f"{PACE_SPAN_M:.0f} m"
    if stop_s >= STOP_MIN_S:
        return "pit", f"stopped for {stop_s:.0f} s at {stop_at:.1f} s (pit stop or stop on track)"
    if starts < SLOW_SHARE * usual_leave:
        return "out", (
            f"out-lap: starts slowly, {_kmh(starts)} over its first {span} where laps "
            f"leave the gate at {_kmh(usual_leave)}"
        )
    if ends < SLOW_SHARE * usual_reach:
        return "in", (
            f"in-lap: ends slowly, {_kmh(ends)} over its last {span} where laps reach "
            f"the gate at {_kmh(usual_reach)}"
        )
    return "flying", ""


def _lap_kinds(log: Log, bounds, s_b, first_open: bool) -> list[tuple[str, str]]:
    """(kind, reason) of each lap between consecutive ``bounds``, docs/formats.md, Lap numbering.

    The first lap runs from the log's start and, when ``first_open``, is the stretch
    before the first boundary (lap 0); the last lap always runs to the log's end.
    """
    t, v = log.time_s, log.channels["speed"]
    pace = _Pace(log)
    n = len(bounds) - 1
    inner = list(range(1 if first_open else 0, n - 1))  # between two boundaries
    cross = np.asarray(s_b[1:-1], dtype=np.float64)
    leave = pace.mean(cross, cross + PACE_SPAN_M)  # leaving each boundary
    reach = pace.mean(cross - PACE_SPAN_M, cross)  # reaching it
    usual_leave, usual_reach = _usual(leave), _usual(reach)
    kinds: list[tuple[str, str]] = []
    stops = {}
    for k in inner:
        i0, i1 = np.searchsorted(t, [bounds[k], bounds[k + 1]])
        stops[k] = _longest_stop(t[i0:i1], v[i0:i1])
    whole = [k for k in inner if k > 0 and stops[k][0] < STOP_MIN_S]
    for k in range(n):
        if k not in stops:
            kinds.append(_log_end_kind(pace, s_b, whole, first=(k == 0 and first_open)))
            continue
        starts = leave[k - 1] if k > 0 else math.nan  # a boundary's pace, none at log start
        if k == 0 and pace.first_v < STOP_SPEED_M_S:
            starts = 0.0
        kinds.append(_whole_lap_kind(stops[k], starts, reach[k], usual_leave, usual_reach))
    return kinds


def _make_laps(log: Log, bounds, numbers, first_open: bool) -> list[Lap]:
    """Laps between consecutive ``bounds`` (times [s]) with their kinds; see :func:`split_laps`."""
    t = log.time_s
    s = travelled_m(log)
    long_gaps = [d for d in gps_dropouts(log) if not d.bridged]
    s_b = np.interp(np.asarray(bounds, dtype=np.float64), t, s)  # one call for all bounds
    kinds = _lap_kinds(log, bounds, s_b, first_open)
    laps = []
    for k, number in enumerate(numbers):
        t0, t1 = float(bounds[k]), float(bounds[k + 1])
        i0 = int(np.searchsorted(t, t0, side="left"))
        i1 = len(t) if k == len(numbers) - 1 else int(np.searchsorted(t, t1, side="left"))
        if i1 <= i0:
            continue
        kind, reason = kinds[k]
        why = [reason] if reason else []
        for d in long_gaps:
            if d.start_time_s < t1 and d.end_time_s > t0:
                why.append(f"GPS dropout of {d.duration_s:.1f} s at {d.start_time_s:.1f} s")
        laps.append(
            Lap(
                number=int(number),
                start_time_s=t0,
                end_time_s=t1,
                time_s=t1 - t0,
                distance_m=float(s_b[k + 1] - s_b[k]),
                complete=kind == "flying" and not why,
                reason="; ".join(why),
                start_index=i0,
                end_index=i1,
                kind=kind,
            )
        )
    return laps


def split_laps(log: Log, gate: Gate | tuple[float, float] | None = None) -> list[Lap]:
    """Split a log into laps and say what kind each is (docs/formats.md, Lap numbering).

    Parameters
    ----------
    log : Log
        The session.
    gate : Gate, (latitude, longitude) or None
        Start/finish gate; None uses the log's ``lap`` column, taken as it is (a lap
        starts at the first row with its number; lap 0 is the stretch before the first
        lap line). A tuple is WGS84 degrees.

    Returns
    -------
    list of Lap
        In time order. With a gate: lap 0 from the log start to the first crossing,
        laps 1..N-1 between crossings, the stretch after the last crossing last. Each
        has its kind (``out``, ``flying``, ``in``, ``pit``, ``partial``); only flying
        laps without a GPS dropout too long to bridge are complete.

    Raises
    ------
    InputError
        No gate and no ``lap`` column; the car never crosses the gate.
    """
    t = log.time_s
    if gate is None:
        if not log.has("lap"):
            raise InputError(log.path, "no 'lap' column: give the start/finish gate")
        lap = log.channels["lap"].copy()
        ok = np.isfinite(lap)
        lap = lap[ok][np.clip(np.cumsum(ok) - 1, 0, None)]  # fill blanks with the lap before
        starts = np.flatnonzero(np.concatenate(([True], np.diff(lap) != 0)))
        numbers = lap[starts].astype(int)
        bounds = np.append(t[starts], t[-1])
        return _make_laps(log, bounds, numbers, first_open=bool(numbers[0] == 0))
    if not isinstance(gate, Gate):
        gate = Gate.geodetic(*gate)
    crossings = gate_crossings(log, gate)
    bounds = np.concatenate(([t[0]], crossings, [t[-1]]))
    return _make_laps(log, bounds, list(range(crossings.size + 1)), first_open=True)


def fastest_lap(laps: list[Lap]) -> Lap:
    """The complete flying lap with the shortest time.

    Raises
    ------
    LimitlapError
        No lap is complete.
    """
    complete = [lap for lap in laps if lap.complete and lap.kind == "flying"]
    if not complete:
        why = "; ".join(f"lap {lap.number}: {lap.reason}" for lap in laps) or "no laps"
        raise LimitlapError(f"no complete lap ({why})")
    return min(complete, key=lambda lap: (lap.time_s, lap.number))


#: A complete lap slower than this multiple of the fastest is not a flying lap (out-lap
#: on cold tyres, cool-down lap, a lap behind traffic or under a caution). 107 % is the
#: cut-off qualifying rules commonly use; its use here is common practice, no published
#: source. [-]
FLYING_LAP_RATIO = 1.07


def flying_laps(laps: list[Lap], ratio: float = FLYING_LAP_RATIO) -> list[Lap]:
    """The complete flying laps within ``ratio`` of the fastest, in log order.

    Out-, in- and pit laps are never among them (:data:`LAP_KINDS`). A grip envelope is fitted to these: each direction bin's boundary is a high quantile
    of its samples, and the many samples of a lap driven well inside the limit (an
    out-lap from the pits) would pull it inwards, most of all in the slow bands that only
    such a lap fills.

    Examples
    --------
    >>> fast = Lap(1, 0.0, 84.0, 84.0, 3760.0, True, "", 0, 10)
    >>> slow = Lap(2, 84.0, 197.0, 113.0, 3760.0, True, "", 10, 20)
    >>> [lap.number for lap in flying_laps([fast, slow])]
    [1]
    """
    complete = [lap for lap in laps if lap.complete and lap.kind == "flying"]
    if not complete:
        return []
    best = min(lap.time_s for lap in complete)
    return [lap for lap in complete if lap.time_s <= ratio * best]


def laps_table(laps: list[Lap]) -> list[dict]:
    """One record per lap: number, kind, time_s, distance_m, complete, reason, fastest, start_time_s."""
    try:
        best = fastest_lap(laps).number
    except LimitlapError:
        best = None
    return [
        {
            "number": lap.number,
            "kind": lap.kind,
            "time_s": lap.time_s,
            "distance_m": lap.distance_m,
            "complete": lap.complete,
            "reason": lap.reason,
            "fastest": lap.number == best,
            "start_time_s": lap.start_time_s,
        }
        for lap in laps
    ]


def laps_json(laps: list[Lap]) -> dict:
    """docs/outputs.md, Command output: ``{"laps": [{"number", "time_s", "distance_m", "complete"}, ...]}`` plus ``reason``, ``fastest`` and ``kind``; times to 1 ms, distances to 1 cm."""
    return {
        "laps": [
            {
                "number": rec["number"],
                "time_s": round(rec["time_s"], 3),
                "distance_m": round(rec["distance_m"], 2),
                "complete": rec["complete"],
                "reason": rec["reason"],
                "fastest": rec["fastest"],
                "kind": rec["kind"],
            }
            for rec in laps_table(laps)
        ]
    }
