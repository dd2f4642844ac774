"""Sessions on lines across a track, generated without limitlap: the truth for the line opportunity.

Nothing here imports limitlap. A track is a band of half-width W round the belt of
tests/arc_circuit.py (straights and constant-radius left-hand arcs); a line is an offset
n(s) from the band's centreline, a periodic uniform cubic B-spline (de Boor, *A Practical
Guide to Splines*, 1978: the cubic B-spline and its convex-hull property, so a spline
whose coefficients lie within ±(W - margin) keeps the car's centre inside the band).
Its path is the centreline moved n along the normal; its curvature is taken from the
path's own points (the chord headings' change over the chords' length).

Each line is driven at the limit of the point-mass model of docs/formats.md (Vehicle
files) by a speed profile written here afresh (quasi-steady state: explicit Euler in
v² forward at full drive and backward at full braking, each capped by the cornering
limit, the smaller taken; Lenzo & Rossi, *Applied Sciences* 10(4):1498, 2020, §1),
vectorised over many lines at once. The optimal line within the band is the one the
lap time of that model is smallest for, found by SciPy's L-BFGS-B (Byrd et al. 1995)
over the spline's coefficients with the gradient by forward differences, every
coefficient's line solved in one vectorised pass.

A session is laps on given lines, run one after another as one path and driven at the
limit as one open line (so speed is continuous from lap to lap), sampled at 100 Hz
with noise: planar x/y at 10 Hz, speed, accelerations and yaw rate. Every line
coincides with the optimal line near the gate (the middle of the longest straight).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy import optimize

from tests.arc_circuit import Arc, Car, G, belt_pieces

#: The invented track: a kite of four left-hand corners (82°, 108°, a 21° kink and a
#: 150° hairpin of radius 20 m), 1.87 km round its centreline.
CENTRES = [(0.0, 0.0), (650.0, -90.0), (720.0, 130.0), (480.0, 150.0)]
RADII = [30.0, 50.0, 55.0, 40.0]
#: Half-width of the band and the car centre's margin from its edges. [m]
HALF_WIDTH_M = 6.0
MARGIN_M = 1.0
#: Knot spacing of the lines' splines and the stations of the speed profile. [m]
KNOT_M = 10.0
STEP_M = 1.0


@dataclass(frozen=True, eq=False)
class Track:
    """The band's centreline at uniform stations: distance, position, unit normal (left), curvature, and the corners (arc middles). [m], [-], [1/m]."""

    s: np.ndarray
    x: np.ndarray
    y: np.ndarray
    nx: np.ndarray
    ny: np.ndarray
    kappa: np.ndarray
    length: float
    apexes: tuple
    gate_s: float

    @property
    def room(self) -> float:
        """Largest offset of the car's centre either side. [m]"""
        return HALF_WIDTH_M - MARGIN_M


def make_track(step_m: float = 0.25, smoothing_m: float = 15.0) -> Track:
    """The kite track, gate at the first straight's middle as s = 0.

    Its centreline's curvature is the belt's (:data:`CENTRES`, :data:`RADII`: 1/R on the
    arcs, 0 on the straights) smoothed by a Gaussian of ``smoothing_m`` (so that lines
    offset from it can be smooth), heading and position integrated (trapezoid), and the
    small position gap at the end spread linearly over the lap so that it closes.
    """
    from scipy.ndimage import gaussian_filter1d

    pieces = belt_pieces(CENTRES, RADII)
    length = sum(p.length_m for p in pieces)
    n = round(length / step_m)
    h = length / n
    gate = 0.5 * pieces[0].length_m
    along = np.mod(np.arange(n) * h + gate, length)  # from the first straight's start
    k = np.zeros(n)
    start, apexes = 0.0, []
    for p in pieces:
        if isinstance(p, Arc):
            k[(along >= start) & (along < start + p.length_m)] = 1.0 / p.radius_m
            apexes.append((start + p.length_m / 2 - gate) % length)
        start += p.length_m
    k = gaussian_filter1d(k, smoothing_m / h, mode="wrap")
    k *= 2 * math.pi / (k.sum() * h)  # one whole turn
    psi = pieces[0].heading_rad + np.concatenate([[0.0], np.cumsum(0.5 * (k[1:] + k[:-1])) * h])
    mid = 0.5 * (psi[1:] + psi[:-1])
    x = np.concatenate([[0.0], np.cumsum(np.cos(mid)) * h])
    y = np.concatenate([[0.0], np.cumsum(np.sin(mid)) * h])
    gap_x = x[-1] + h * math.cos(psi[-1]) - x[0]
    gap_y = y[-1] + h * math.sin(psi[-1]) - y[0]
    s = np.arange(n) * h
    x, y = x - gap_x * s / length, y - gap_y * s / length
    return Track(s, x, y, -np.sin(psi), np.cos(psi), k, length, tuple(apexes), 0.0)


def spline(coef, s, length):
    """Periodic uniform cubic B-spline with coefficients ``coef`` (rows: lines) at ``s``. [m]"""
    coef = np.atleast_2d(coef)
    k = coef.shape[1]
    h = length / k
    j = np.floor(s / h).astype(int)
    u = s / h - j
    w = [
        (1 - u) ** 3 / 6,
        (3 * u**3 - 6 * u**2 + 4) / 6,
        (-3 * u**3 + 3 * u**2 + 3 * u + 1) / 6,
        u**3 / 6,
    ]
    return sum(coef[:, np.mod(j - 1 + m, k)] * w[m] for m in range(4))


def path_of(track: Track, offsets):
    """Path of offsets (rows: lines, on the track's stations): x, y, step to the next point, curvature at each point. [m], [1/m]"""
    x = track.x + offsets * track.nx
    y = track.y + offsets * track.ny
    dx, dy = np.roll(x, -1, axis=-1) - x, np.roll(y, -1, axis=-1) - y
    chord = np.hypot(dx, dy)
    heading = np.arctan2(dy, dx)
    turn = np.angle(np.exp(1j * (heading - np.roll(heading, 1, axis=-1))))
    kappa = turn / (0.5 * (chord + np.roll(chord, 1, axis=-1)))
    return x, y, chord, kappa


def _car_array(car: Car) -> np.ndarray:
    """The car's parameters for the compiled passes."""
    return np.array(
        [
            car.mass_kg,
            car.power_w,
            car.drag_area_m2,
            car.downforce_area_m2,
            car.rolling_coeff,
            car.air_density_kg_m3,
            car.mu_lat,
            car.mu_brk,
            car.mu_trac,
        ]
    )


@njit(cache=True)
def _limit_b(p, kappa):
    """Cornering limit v² at curvature κ with downforce (docs/formats.md: μ_y N = m v² κ). [m²/s²]"""
    denom = abs(kappa) - p[6] * 0.5 * p[5] * p[3] / p[0]
    return p[6] * G / denom if denom > 0 else 1e6


@njit(cache=True)
def _accel(p, b, kappa, braking):
    """Full drive (or full braking, positive) the friction ellipse leaves beside the lateral demand m κ v². [m/s²]"""
    v = math.sqrt(max(b, 1e-6))
    q = 0.5 * p[5] * b
    normal = p[0] * G + q * p[3]
    resist = q * p[2] + p[4] * p[0] * G
    share = min(p[0] * abs(kappa) * b / (p[6] * normal), 1.0)
    left = math.sqrt(1.0 - share * share)
    if braking:
        return (p[7] * normal * left + resist) / p[0]
    return (min(p[8] * normal * left, p[1] / v) - resist) / p[0]


@njit(cache=True)
def _profile(p, chord, kappa, closed, b_start):
    """v² at each point of one line at the limit: a closed lap starts both passes at the slowest cornering limit, an open line at ``b_start`` (explicit Euler in v²)."""
    n = kappa.shape[0]
    lim = np.empty(n)
    for i in range(n):
        lim[i] = _limit_b(p, kappa[i])
    first = int(np.argmin(lim)) if closed else 0
    fwd = np.empty(n)
    b = lim[first] if closed else min(b_start, lim[0])
    fwd[first] = b
    for m in range(1, n):
        i, j = (first + m - 1) % n, (first + m) % n
        b = max(min(b + 2 * chord[i] * _accel(p, b, kappa[i], False), lim[j]), 0.0)
        fwd[j] = b
    last = first if closed else n - 1
    b = lim[last] if closed else fwd[last]
    out = np.minimum(fwd, lim)
    out[last] = min(out[last], b)
    for m in range(1, n):
        j, i = (last - m + 1) % n, (last - m) % n
        b = min(b + 2 * chord[i] * _accel(p, b, kappa[j], True), lim[i])
        out[i] = min(out[i], b)
    return out


@njit(cache=True)
def _lap_times(p, chord, kappa):
    """Closed-lap time of each row's line. [s]"""
    rows, n = kappa.shape
    out = np.empty(rows)
    for r in range(rows):
        v = np.sqrt(_profile(p, chord[r], kappa[r], True, 0.0))
        t = 0.0
        for i in range(n):
            t += 2 * chord[r, i] / (v[i] + v[(i + 1) % n])
        out[r] = t
    return out


def lap_time(car: Car, chord, kappa):
    """Closed-lap time of each row's line. [s]"""
    return _lap_times(_car_array(car), np.atleast_2d(chord), np.atleast_2d(kappa))


def _spline_matrices(track: Track, k: int):
    """Value and second derivative of each coefficient's B-spline at the track's stations (stations x coefficients). [-], [1/m²]"""
    eye = np.eye(k)
    value = spline(eye, track.s, track.length).T
    h = 0.5
    second = (
        spline(eye, np.mod(track.s + h, track.length), track.length)
        - 2 * spline(eye, track.s, track.length)
        + spline(eye, np.mod(track.s - h, track.length), track.length)
    ).T / h**2
    return value, second


def min_curvature_line(track: Track, k: int, rounds: int = 4):
    """Spline coefficients of the line of least Σκ²ds within ±room: κ linearised about the centreline (κ_c + n'' + κ_c² n), then about each result in turn with the Jacobian of the path's own curvature by forward differences; each a bounded linear least-squares problem (SciPy's lsq_linear). [m]"""
    value, second = _spline_matrices(track, k)
    room = track.room
    a = second + (track.kappa**2)[:, None] * value
    c = optimize.lsq_linear(a, -track.kappa, bounds=(-room, room), method="bvls").x
    step = 1e-4
    for _ in range(rounds):
        rows = np.vstack([c, c + step * np.eye(k)])
        _, _, chord, kappa = path_of(track, spline(rows, track.s, track.length))
        w = np.sqrt(chord[0])
        jac = ((kappa[1:] - kappa[0]) / step).T * w[:, None]
        c = optimize.lsq_linear(jac, jac @ c - kappa[0] * w, bounds=(-room, room), method="bvls").x
    return c


def _perturbed_paths(track: Track, c, step):
    """Chords and curvatures of the line of ``c`` (row 0) and of each line with one coefficient moved by ``step`` (rows 1..k): only the points near that coefficient's support change, so each row is the first patched there."""
    k = c.shape[0]
    n_st = track.s.shape[0]
    n = spline(c, track.s, track.length)[0]
    _, _, chord, kappa = path_of(track, n)
    h = track.length / k
    ds = track.length / n_st
    width = int(4 * h / ds) + 5
    first = np.floor(np.mod((np.arange(k) - 2) * h, track.length) / ds).astype(int) - 2
    idx = np.mod(first[:, None] + np.arange(width)[None, :], n_st)
    bump = spline(np.eye(k), track.s, track.length)  # (k, stations)
    moved = n[idx] + step * bump[np.arange(k)[:, None], idx]
    ext = np.mod(np.concatenate([idx[:, :1] - 1, idx, idx[:, -1:] + 1], axis=1), n_st)
    n_ext = np.concatenate([n[ext[:, :1]], moved, n[ext[:, -1:]]], axis=1)
    x = track.x[ext] + n_ext * track.nx[ext]
    y = track.y[ext] + n_ext * track.ny[ext]
    dx, dy = np.diff(x, axis=1), np.diff(y, axis=1)
    seg = np.hypot(dx, dy)
    turn = np.angle(np.exp(1j * np.diff(np.arctan2(dy, dx), axis=1)))
    chords = np.tile(chord, (k + 1, 1))
    kappas = np.tile(kappa, (k + 1, 1))
    rows = np.arange(1, k + 1)[:, None]
    chords[rows, ext[:, :-1]] = seg
    kappas[rows, ext[:, 1:-1]] = turn / (0.5 * (seg[:, 1:] + seg[:, :-1]))
    return chords, kappas


def optimal_line(car: Car, track: Track, iterations: int = 60):
    """Spline coefficients of the fastest line within ±room: from the least-curvature line, L-BFGS-B on :func:`lap_time` (forward differences). [m]"""
    coarse = _coarse(track)
    k = round(track.length / KNOT_M)
    step = 1e-3

    def fun(c):
        chord, kappa = _perturbed_paths(coarse, c, step)
        t = lap_time(car, chord, kappa)
        return t[0], (t[1:] - t[0]) / step

    room = track.room
    res = optimize.minimize(
        fun,
        min_curvature_line(coarse, k),
        jac=True,
        method="L-BFGS-B",
        bounds=[(-room, room)] * k,
        options={"maxiter": iterations},
    )
    return res.x


def _coarse(track: Track) -> Track:
    """The track at :data:`STEP_M` stations."""
    pick = np.arange(0, track.s.shape[0], round(STEP_M / (track.s[1] - track.s[0])))
    return Track(
        track.s[pick],
        track.x[pick],
        track.y[pick],
        track.nx[pick],
        track.ny[pick],
        track.kappa[pick],
        track.length,
        track.apexes,
        track.gate_s,
    )


def window(track: Track, centre_s: float, half_m: float):
    """Smooth bump along the track: 1 within ``half_m`` of ``centre_s``, falling to 0 over another ``half_m`` (cosine). [-]"""
    d = np.abs(np.mod(track.s - centre_s + track.length / 2, track.length) - track.length / 2)
    x = np.clip((d - half_m) / half_m, 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * x))


def early_apex(track: Track, n_opt, apex_s: float, shift_m: float = 8.0, half_m: float = 60.0):
    """The line ``n_opt`` with its pattern round one corner arriving ``shift_m`` early: turn-in, apex and exit all earlier (inside the band wherever ``n_opt`` is). [m]"""
    warp = track.s + shift_m * window(track, apex_s, half_m)
    return np.interp(warp, track.s, n_opt, period=track.length)


def tight_corner(track: Track, n_opt, apex_s: float, share: float = 0.4, half_m: float = 50.0):
    """The line ``n_opt`` moved ``share`` of the way towards the inside edge round one (left-hand) corner: a tighter line all through it. [m]"""
    return n_opt + share * window(track, apex_s, half_m) * (track.room - n_opt)


def scattered(track: Track, n_opt, rng, size: float = 0.03, knot_m: float = 40.0):
    """The line ``n_opt`` with a smooth random wander (about ``size`` of the room either way at the band's middle, none at its edges, none within 100 m of the gate). [m]"""
    k = round(track.length / knot_m)
    u = spline(rng.normal(0.0, size, k), track.s, track.length)[0]
    u *= 1.0 - window(track, 0.0, 100.0)
    return n_opt + u * (track.room**2 - n_opt**2) / track.room


@dataclass(frozen=True)
class Session:
    """A generated log and what it truly was: CSV text, the gate (x, y), each lap's own closed-lap time at the limit. [s]"""

    text: str
    gate_xy: tuple
    lap_times_s: tuple


def session_csv(car: Car, track: Track, lines, *, seed: int, rate_hz=100, gnss_every=10):
    """Log text (docs/formats.md) of one lap on each of ``lines`` (offsets on the track's stations), with half a lap on the first line before and after, all at the limit as one open line; seeded noise on the positions (0.03 m, at each 10th row), accelerations (0.02 g), yaw rate (0.005 rad/s) and speed (0.05 m/s)."""
    n_st = track.s.shape[0]
    half = n_st // 2
    offsets = np.concatenate([lines[0][half:], *lines, lines[0][:half]])
    x = np.tile(track.x, len(lines) + 2)[half : half + offsets.shape[0]]
    y = np.tile(track.y, len(lines) + 2)[half : half + offsets.shape[0]]
    nx = np.tile(track.nx, len(lines) + 2)[half : half + offsets.shape[0]]
    ny = np.tile(track.ny, len(lines) + 2)[half : half + offsets.shape[0]]
    px, py = x + offsets * nx, y + offsets * ny
    dx, dy = np.diff(px), np.diff(py)
    chord = np.hypot(dx, dy)
    heading = np.unwrap(np.arctan2(dy, dx))
    kappa = np.concatenate([[0.0], np.diff(heading) / (0.5 * (chord[1:] + chord[:-1])), [0.0]])
    p = _car_array(car)
    _, _, c0, k0 = path_of(track, lines[0])
    b_start = _profile(p, c0, k0, True, 0.0)[half]
    b = _profile(p, np.append(chord, 1.0), kappa, False, b_start)
    v = np.sqrt(b)
    t = np.concatenate([[0.0], np.cumsum(2 * chord / (v[1:] + v[:-1]))])
    a_lon = np.append((b[1:] - b[:-1]) / (2 * chord), 0.0)
    gates = t[half + np.arange(len(lines) + 1) * n_st]
    rows = np.arange(0.0, t[-1], 1.0 / rate_hz)
    rng = np.random.default_rng(seed)
    ch = {
        name: np.interp(rows, t, val)
        for name, val in (("x", px), ("y", py), ("v", v), ("ax", a_lon), ("k", kappa))
    }
    fix = np.arange(rows.shape[0]) % gnss_every == 0
    gx = ch["x"] + rng.normal(0.0, 0.03, rows.shape[0])
    gy = ch["y"] + rng.normal(0.0, 0.03, rows.shape[0])
    speed = ch["v"] + rng.normal(0.0, 0.05, rows.shape[0])
    ax = ch["ax"] + rng.normal(0.0, 0.02 * G, rows.shape[0])
    ay = ch["k"] * ch["v"] ** 2 + rng.normal(0.0, 0.02 * G, rows.shape[0])
    yaw = ch["k"] * ch["v"] + rng.normal(0.0, 0.005, rows.shape[0])
    out = ["time [s],x [m],y [m],speed [km/h],accel_lon [m/s^2],accel_lat [m/s^2],yaw_rate [rad/s]"]
    for i in range(rows.shape[0]):
        pos = f"{gx[i]:.3f},{gy[i]:.3f}" if fix[i] else ","
        out.append(f"{rows[i]:.2f},{pos},{speed[i] * 3.6:.3f},{ax[i]:.4f},{ay[i]:.4f},{yaw[i]:.5f}")
    own = tuple(float(lap_time(car, *path_of(track, n)[2:])[0]) for n in lines)
    return Session("\n".join(out) + "\n", (float(track.x[0]), float(track.y[0])), own), np.diff(
        gates
    )
