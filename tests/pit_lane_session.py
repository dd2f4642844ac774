"""A session with a pit lane, generated without limitlap: closed-form geometry, constant
accelerations, a plan of pit visits whose lap kinds are known by construction.

Nothing here imports limitlap. The circuit is a rounded rectangle driven counter-clockwise
(left-hand corners, ISO 8855 + curvature): four straights joined by quarter circles of
different radii, so the home straight (800 m) is the longest and the back straight
(660 m) the next. The pit lane runs beside the home straight, 15 m into the infield,
joined to it by cosine blends.

The driver is a kinematic model: the speed is the least of a top speed, the steady
cornering speed sqrt(a_y,max / |curvature|), the pit lane's speed limit, and what
constant acceleration out of (braking into) every slower point allows:
v(s)² = min_j (v_j² + 2 a |s − s_j|) over the points j before (after) s, evaluated with a
running minimum. Time runs as dt = 2 ds / (v0 + v1) along each 0.1 m step (exact for
constant acceleration). Stops are points of zero speed held for their dwell time.

Truth: the times the path crosses the gate line x = GATE_X heading east within 30 m of
the home straight (the pit lane's passes included), interpolated on the 0.1 m path.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pymap3d

#: An invented spot in open country (no circuit there). [deg, deg, m]
ORIGIN = (-34.61, 141.92, 60.0)
#: Rectangle the corners sit in, and the corners' radii (home-straight end first). [m]
WIDTH_M, HEIGHT_M = 900.0, 300.0
RADII_M = (60.0, 100.0, 140.0, 40.0)
#: Pit lane: 15 m into the infield beside the home straight, entered at PIT_IN_X and
#: left at PIT_OUT_X, with 80 m blends to and from the home straight. [m]
PIT_OFFSET_M, PIT_IN_X, PIT_OUT_X, PIT_BLEND_M = 15.0, 100.0, 800.0, 80.0
#: Start/finish gate: a point on the home straight. [m]
GATE_X = 450.0
#: Top speed, pit-lane speed limit [m/s]; cornering, driving and braking limits [m/s²].
V_TOP, V_PIT, A_LAT, A_DRIVE, A_BRAKE = 70.0, 16.7, 12.0, 4.0, 10.0
STEP_M = 0.1


def _track(u):
    """Position, heading and curvature at distance ``u`` along the track from the home
    straight's start (x = r4, y = 0, heading east). [m, m, rad, 1/m]"""
    r1, r2, r3, r4 = RADII_M
    w, h = WIDTH_M, HEIGHT_M
    pieces = [  # (length, kind, start point or centre, heading or start angle, radius)
        (w - r4 - r1, "line", (r4, 0.0), 0.0, 0.0),
        (0.5 * math.pi * r1, "arc", (w - r1, r1), -0.5 * math.pi, r1),
        (h - r1 - r2, "line", (w, r1), 0.5 * math.pi, 0.0),
        (0.5 * math.pi * r2, "arc", (w - r2, h - r2), 0.0, r2),
        (w - r2 - r3, "line", (w - r2, h), math.pi, 0.0),
        (0.5 * math.pi * r3, "arc", (r3, h - r3), 0.5 * math.pi, r3),
        (h - r3 - r4, "line", (0.0, h - r3), 1.5 * math.pi, 0.0),
        (0.5 * math.pi * r4, "arc", (r4, r4), math.pi, r4),
    ]
    length = sum(p[0] for p in pieces)
    u = np.mod(u, length)
    x, y, psi, kappa = (np.zeros_like(u) for _ in range(4))
    start = 0.0
    for span, kind, (px, py), angle, radius in pieces:
        on = (u >= start) & (u < start + span)
        d = u[on] - start
        if kind == "line":
            x[on], y[on] = px + d * math.cos(angle), py + d * math.sin(angle)
            psi[on] = angle
        else:
            a = angle + d / radius
            x[on], y[on] = px + radius * np.cos(a), py + radius * np.sin(a)
            psi[on], kappa[on] = a + 0.5 * math.pi, 1.0 / radius
        start += span
    return x, y, psi, kappa, length


def track_length_m() -> float:
    return float(_track(np.zeros(1))[4])


def _pit(x_from, x_to):
    """The pit lane from ``x_from`` to ``x_to`` (east), every STEP_M of its length."""
    xs = np.arange(x_from, x_to + 1e-9, 0.01)

    def blend(z):  # 0 -> 1 with zero slope at both ends
        z = np.clip(z, 0.0, 1.0)
        return 0.5 * (1 - np.cos(math.pi * z))

    def slope(z, sign):
        inside = (z > 0) & (z < 1)
        return np.where(inside, sign * 0.5 * math.pi * np.sin(math.pi * z), 0.0)

    z_in = (xs - PIT_IN_X) / PIT_BLEND_M
    z_out = (xs - (PIT_OUT_X - PIT_BLEND_M)) / PIT_BLEND_M
    y = PIT_OFFSET_M * (blend(z_in) - blend(z_out))
    dy = PIT_OFFSET_M / PIT_BLEND_M * (slope(z_in, 1) + slope(z_out, -1))
    ddy = PIT_OFFSET_M / PIT_BLEND_M**2 * 0.5 * math.pi**2
    ddy = ddy * (
        np.where((z_in > 0) & (z_in < 1), np.cos(math.pi * z_in), 0.0)
        - np.where((z_out > 0) & (z_out < 1), np.cos(math.pi * z_out), 0.0)
    )
    s = np.concatenate(([0.0], np.cumsum(np.hypot(np.diff(xs), np.diff(y)))))
    grid = np.arange(0.0, s[-1], STEP_M)
    kappa = ddy / (1 + dy * dy) ** 1.5
    return (
        np.interp(grid, s, xs),
        np.interp(grid, s, y),
        np.interp(grid, s, np.arctan2(dy, 1.0)),
        np.interp(grid, s, kappa),
    )


@dataclass
class PitLaneSession:
    """The session on its rows (SI) and its truth."""

    time_s: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    speed_m_s: np.ndarray
    accel_lon_m_s2: np.ndarray
    accel_lat_m_s2: np.ndarray
    yaw_rate_rad_s: np.ndarray
    fix: np.ndarray
    crossings_s: np.ndarray
    flying_lap_s: float

    def columns(self, noise_m=0.3, seed=3, start_s=0.0):
        """Log columns (docs/formats.md names and units); GPS fixes with white noise.

        ``start_s`` drops the rows before it (a log that starts there), times kept.
        """
        rng = np.random.default_rng(seed)
        keep = self.time_s >= start_s
        n = self.time_s.size
        ex, ey = noise_m * rng.standard_normal(n), noise_m * rng.standard_normal(n)
        lat, lon, _ = pymap3d.enu2geodetic(self.x_m + ex, self.y_m + ey, 0.0, *ORIGIN)
        cols = {
            "time [s]": self.time_s - start_s,
            "latitude [deg]": np.where(self.fix, lat, np.nan),
            "longitude [deg]": np.where(self.fix, lon, np.nan),
            "speed [m/s]": self.speed_m_s,
            "accel_lon [m/s^2]": self.accel_lon_m_s2,
            "accel_lat [m/s^2]": self.accel_lat_m_s2,
            "yaw_rate [rad/s]": self.yaw_rate_rad_s,
        }
        return {k: v[keep] for k, v in cols.items()}


def gate_latlon(x=GATE_X, y=0.0):
    lat, lon, _ = pymap3d.enu2geodetic(x, y, 0.0, *ORIGIN)
    return float(lat), float(lon)


def generate(plan, rate_hz=50, gps_hz=10):
    """Drive ``plan``: a list of legs, each

    - ``("box", x, dwell_s)``: stand in the pit box at x for dwell_s (first leg: the log
      starts there; last leg: it ends there),
    - ``("pit", x_to)``: drive the pit lane from where the car is to x (PIT_OUT_X: back
      onto the track),
    - ``("track", laps, x_to)``: drive round the track ``laps`` times and on to x on the
      home straight (the pit entry PIT_IN_X, or anywhere).
    """
    track_len = track_length_m()
    r4 = RADII_M[3]
    parts, limits, stops = [], [], {}
    x_now = None
    for leg in plan:
        if leg[0] == "box":
            x_now = leg[1]
            stops[sum(len(p[0]) for p in parts)] = leg[2]
            continue
        if leg[0] == "pit":
            px, py, ppsi, pk = _pit(x_now, leg[1])
            parts.append((px, py, ppsi, pk))
            limits.append(np.full(px.size, V_PIT))
            x_now = leg[1]
            continue
        u0 = x_now - r4
        u1 = leg[1] * track_len + (leg[2] - r4)
        if u1 <= u0:
            u1 += track_len
        tx, ty, tpsi, tk, _ = _track(np.arange(u0, u1, STEP_M))
        parts.append((tx, ty, tpsi, tk))
        with np.errstate(divide="ignore"):
            limits.append(np.minimum(V_TOP, np.sqrt(A_LAT / np.abs(tk))))
        x_now = leg[2]
    x, y, psi, kappa = (np.concatenate([p[i] for p in parts]) for i in range(4))
    v_lim = np.concatenate(limits)
    for i in stops:
        v_lim[min(i, v_lim.size - 1)] = 0.0
    v_lim[0] = v_lim[-1] = 0.0
    s = np.arange(x.size) * STEP_M
    # v² = min_j (v_j² ± 2 a (s - s_j)): running minima forwards (driving) and backwards
    fwd = np.minimum.accumulate(v_lim**2 - 2 * A_DRIVE * s) + 2 * A_DRIVE * s
    bwd = (np.minimum.accumulate((v_lim**2 + 2 * A_BRAKE * s)[::-1]))[::-1] - 2 * A_BRAKE * s
    v = np.sqrt(np.maximum(np.minimum(v_lim**2, np.minimum(fwd, bwd)), 0.0))
    dt = 2 * STEP_M / (v[1:] + v[:-1])
    t = np.concatenate(([0.0], np.cumsum(dt)))
    a = np.concatenate(((v[1:] ** 2 - v[:-1] ** 2) / (2 * STEP_M), [0.0]))
    # each stop: the point held for its dwell (a second sample at the same place)
    for at in sorted(stops, reverse=True):
        i, dwell = min(at, x.size - 1), stops[at]
        t = np.concatenate((t[: i + 1], [t[i] + dwell], t[i + 1 :] + dwell))
        x, y, psi, kappa, v, s = (np.insert(arr, i + 1, arr[i]) for arr in (x, y, psi, kappa, v, s))
        a = np.insert(a, i, 0.0)  # the held sample's step: standing
    rows = np.arange(0.0, t[-1], 1.0 / rate_hz)
    v_row = np.interp(rows, t, v)
    k_row = np.interp(rows, t, kappa)
    fix = np.zeros(rows.size, dtype=bool)
    fix[:: round(rate_hz / gps_hz)] = True
    east = (x[:-1] < GATE_X) & (x[1:] >= GATE_X) & (np.cos(psi[:-1]) > 0.5)
    east &= np.abs(y[:-1]) < 30.0
    i = np.flatnonzero(east)
    crossings = t[i] + (GATE_X - x[i]) / (x[i + 1] - x[i]) * (t[i + 1] - t[i])
    one_lap = np.diff(crossings)
    return PitLaneSession(
        time_s=rows,
        x_m=np.interp(rows, t, x),
        y_m=np.interp(rows, t, y),
        speed_m_s=v_row,
        accel_lon_m_s2=np.interp(rows, t, a),
        accel_lat_m_s2=k_row * v_row**2,
        yaw_rate_rad_s=k_row * v_row,
        fix=fix,
        crossings_s=crossings,
        flying_lap_s=float(np.min(one_lap)) if one_lap.size else math.nan,
    )
