"""A session generated without limitlap: a circuit of straights and circular arcs driven
at the limit of the published point-mass model, integrated with SciPy.

Nothing here imports limitlap, so the analysis can be checked against a truth it did not
make. The model is the point mass of docs/formats.md (Vehicle files), with its sources
in docs/methods.md (Vehicle model): q = ½ρv², N = m g + q·ClA, resistance
q·CdA + Crr·m·g, lateral limit μ_y N, braking μ_b N + resistance, driving
min(μ_t N, P/v) − resistance, friction ellipse (exponent 2) on the tyre forces.

The circuit is a belt round three circles of different radii (a rounded triangle): every
turn is a constant-radius left-hand arc joined to the next by a common tangent. On an
arc the speed is the steady cornering speed; on a straight the car accelerates at full
drive out of one arc and brakes at full braking into the next, the brake point being
where the two curves v(s) cross (found as a solve_ivp event). Each straight's curves are
integrated along distance, dv/ds = a(v)/v and dt/ds = 1/v, with DOP853 at tolerances
of 1e-12 (Hairer, Nørsett & Wanner, *Solving Ordinary Differential Equations I*, 2nd
edition, Springer, 1993, §II.10).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

#: Standard gravity (3rd CGPM, 1901). [m/s²]
G = 9.80665
#: Integration tolerances (relative and absolute) of every solve_ivp call. [-]
TOL = 1e-12


@dataclass(frozen=True)
class Car:
    """The true car (SI): mass [kg], power [W], CdA, ClA [m²], Crr, ρ [kg/m³], μ's [-]."""

    mass_kg: float = 1200.0
    power_w: float = 400e3
    drag_area_m2: float = 0.72
    downforce_area_m2: float = 0.90
    rolling_coeff: float = 0.013
    air_density_kg_m3: float = 1.225
    mu_lat: float = 1.40
    mu_brk: float = 1.50
    mu_trac: float = 1.25

    def normal_n(self, v):
        return self.mass_kg * G + 0.5 * self.air_density_kg_m3 * v * v * self.downforce_area_m2

    def resistance_n(self, v):
        q = 0.5 * self.air_density_kg_m3 * v * v
        return q * self.drag_area_m2 + self.rolling_coeff * self.mass_kg * G

    def drive_m_s2(self, v):
        """Full-drive acceleration on a straight. [m/s²]"""
        force = min(self.mu_trac * self.normal_n(v), self.power_w / v)
        return (force - self.resistance_n(v)) / self.mass_kg

    def power_limited(self, v) -> bool:
        return self.power_w / v < self.mu_trac * self.normal_n(v)

    def brake_m_s2(self, v):
        """Full-braking deceleration on a straight (positive). [m/s²]"""
        return (self.mu_brk * self.normal_n(v) + self.resistance_n(v)) / self.mass_kg

    def closed_form_corner_speed(self, radius_m):
        """v² = μ g / (1/R − μ ρ ClA / (2 m)) (pure cornering, aero load). [m/s]"""
        k = 0.5 * self.air_density_kg_m3 * self.downforce_area_m2 / self.mass_kg
        return math.sqrt(self.mu_lat * G / (1.0 / radius_m - self.mu_lat * k))

    def steady_corner_speed(self, radius_m):
        """Highest speed held on the arc: the friction ellipse carries the cornering force
        and the force that balances drag and rolling, (F_x/μ_t N)² + (F_y/μ_y N)² = 1,
        solved by Brent's method. [m/s]"""

        def excess(v):
            n = self.normal_n(v)
            fx = self.resistance_n(v) / (self.mu_trac * n)
            fy = self.mass_kg * v * v / radius_m / (self.mu_lat * n)
            return fx * fx + fy * fy - 1.0

        top = self.closed_form_corner_speed(radius_m)
        v = brentq(excess, 1.0, top, xtol=1e-13, rtol=1e-15)
        assert self.resistance_n(v) * v < self.power_w  # power holds it too
        return v


@dataclass
class Straight:
    start_xy: np.ndarray
    heading_rad: float
    length_m: float
    fwd: object = None  # solve_ivp solution from the arc before: [v, t]
    brk: object = None  # solve_ivp solution back from the arc after: [v, time left]
    brake_point_m: float = 0.0
    t_drive_s: float = 0.0
    time_s: float = 0.0


@dataclass
class Arc:
    centre_xy: np.ndarray
    radius_m: float
    heading_in_rad: float
    angle_rad: float
    speed_m_s: float = 0.0
    closed_form_m_s: float = 0.0

    @property
    def length_m(self) -> float:
        return self.radius_m * self.angle_rad

    @property
    def time_s(self) -> float:
        return self.length_m / self.speed_m_s


def belt_pieces(centres, radii):
    """Straights and arcs of the belt round circles listed anticlockwise. The common
    tangent from circle i to j has heading ψ = φ − asin((r_j − r_i)/D) and length
    √(D² − (r_j − r_i)²), with D, φ the distance and bearing of j's centre from i's."""
    c = [np.asarray(x, dtype=float) for x in centres]
    n = len(c)
    tangents = []
    for i in range(n):
        j = (i + 1) % n
        d = c[j] - c[i]
        dist = math.hypot(*d)
        dr = radii[j] - radii[i]
        psi = math.atan2(d[1], d[0]) - math.asin(dr / dist)
        start = c[i] + radii[i] * np.array([math.sin(psi), -math.cos(psi)])
        tangents.append(Straight(start, psi, math.sqrt(dist * dist - dr * dr)))
    pieces = []
    for i in range(n):
        j = (i + 1) % n
        turn = (tangents[j].heading_rad - tangents[i].heading_rad) % (2 * math.pi)
        pieces += [tangents[i], Arc(c[j], radii[j], tangents[i].heading_rad, turn)]
    assert abs(sum(p.angle_rad for p in pieces if isinstance(p, Arc)) - 2 * math.pi) < 1e-12
    return pieces


def _drive_straight(st: Straight, car: Car, v_in, v_out):
    """Full drive from v_in, full braking into v_out, switching where they cross."""
    brk = solve_ivp(
        lambda s, y: [-car.brake_m_s2(y[0]) / y[0], -1.0 / y[0]],
        (st.length_m, 0.0),
        [v_out, 0.0],
        method="DOP853",
        rtol=TOL,
        atol=TOL,
        dense_output=True,
    )

    def meets_braking(s, y):
        return y[0] - brk.sol(s)[0]

    meets_braking.terminal = True
    meets_braking.direction = 1.0
    fwd = solve_ivp(
        lambda s, y: [car.drive_m_s2(y[0]) / y[0], 1.0 / y[0]],
        (0.0, st.length_m),
        [v_in, 0.0],
        method="DOP853",
        rtol=TOL,
        atol=TOL,
        dense_output=True,
        events=meets_braking,
    )
    assert brk.success and fwd.success and fwd.t_events[0].size == 1, "no brake point"
    st.fwd, st.brk = fwd, brk
    st.brake_point_m = float(fwd.t_events[0][0])
    st.t_drive_s = float(fwd.y_events[0][0][1])
    st.time_s = st.t_drive_s + float(brk.sol(st.brake_point_m)[1])


@dataclass
class Circuit:
    pieces: list
    car: Car

    @property
    def length_m(self) -> float:
        return sum(p.length_m for p in self.pieces)

    @property
    def lap_time_s(self) -> float:
        return sum(p.time_s for p in self.pieces)

    @property
    def arcs(self) -> list:
        return [p for p in self.pieces if isinstance(p, Arc)]

    def starts_m(self) -> np.ndarray:
        """Distance of each piece's start from the start of the first straight. [m]"""
        return np.concatenate([[0.0], np.cumsum([p.length_m for p in self.pieces])[:-1]])


def rounded_triangle(car: Car | None = None) -> Circuit:
    """The invented test circuit: a belt round circles of radius 30, 55 and 95 m (about
    1.9 km), driven anticlockwise at the limit of ``car``."""
    car = car or Car()
    pieces = belt_pieces([(0.0, 0.0), (600.0, 0.0), (250.0, 380.0)], [30.0, 55.0, 95.0])
    for arc in (p for p in pieces if isinstance(p, Arc)):
        arc.speed_m_s = car.steady_corner_speed(arc.radius_m)
        arc.closed_form_m_s = car.closed_form_corner_speed(arc.radius_m)
    for i in range(0, len(pieces), 2):
        _drive_straight(pieces[i], car, pieces[i - 1].speed_m_s, pieces[i + 1].speed_m_s)
    return Circuit(pieces, car)


def _invert_time(sol, index, target, sign, s0):
    """Distance where solution component ``index`` (time, or time left when sign = -1)
    equals ``target``: Newton steps on dt/ds = sign / v from a first guess s0."""
    s = s0.copy()
    if s.size == 0:
        return s
    for _ in range(8):
        y = sol.sol(s)
        s = s - (y[index] - target) * y[0] * sign
    return s


def _straight_channels(st: Straight, car: Car, tau):
    """Channels at times ``tau`` from the start of a straight."""
    driving = tau < st.t_drive_s
    s = np.empty_like(tau)
    grid = np.linspace(0.0, st.brake_point_m, 400)
    t_grid = st.fwd.sol(grid)[1]
    s[driving] = _invert_time(st.fwd, 1, tau[driving], 1.0, np.interp(tau[driving], t_grid, grid))
    left = st.time_s - tau[~driving]  # time still to run to the arc
    grid_b = np.linspace(st.brake_point_m, st.length_m, 400)
    left_grid = st.brk.sol(grid_b)[1]
    guess = np.interp(-left, -left_grid, grid_b)
    s[~driving] = _invert_time(st.brk, 1, left, -1.0, guess)
    v = np.empty_like(tau)
    if driving.any():
        v[driving] = st.fwd.sol(s[driving])[0]
    if not driving.all():
        v[~driving] = st.brk.sol(s[~driving])[0]
    a_lon = np.array(
        [car.drive_m_s2(x) if d else -car.brake_m_s2(x) for x, d in zip(v, driving, strict=True)]
    )
    xy = st.start_xy[:, None] + s * np.array(
        [[math.cos(st.heading_rad)], [math.sin(st.heading_rad)]]
    )
    zero = np.zeros_like(tau)
    return xy, v, a_lon, zero, zero, np.where(driving, 100.0, 0.0)


def _arc_channels(arc: Arc, car: Car, tau):
    """Channels at times ``tau`` from the start of an arc (left-hand: a_y, r > 0)."""
    v = np.full_like(tau, arc.speed_m_s)
    psi = arc.heading_in_rad + v * tau / arc.radius_m
    xy = arc.centre_xy[:, None] + arc.radius_m * np.vstack([np.sin(psi), -np.cos(psi)])
    # Part throttle: the share of the power that holds the speed against the resistance.
    thr = 100.0 * car.resistance_n(arc.speed_m_s) * arc.speed_m_s / car.power_w
    return xy, v, np.zeros_like(tau), v * v / arc.radius_m, v / arc.radius_m, np.full_like(tau, thr)


def sample(circuit: Circuit, t_s, t_offset_s=0.0) -> dict:
    """Noise-free channels at log times ``t_s``; log time 0 is circuit time
    ``t_offset_s`` from the start of the first straight (the motion repeats each lap)."""
    piece_t = np.concatenate([[0.0], np.cumsum([p.time_s for p in circuit.pieces])])
    tau = np.mod(np.asarray(t_s, dtype=float) + t_offset_s, circuit.lap_time_s)
    which = np.clip(np.searchsorted(piece_t, tau, side="right") - 1, 0, len(circuit.pieces) - 1)
    out = {k: np.empty_like(tau) for k in ("x", "y", "v", "ax", "ay", "r", "thr")}
    for i, piece in enumerate(circuit.pieces):
        rows = which == i
        if not rows.any():
            continue
        local = tau[rows] - piece_t[i]
        part = _arc_channels if isinstance(piece, Arc) else _straight_channels
        xy, *rest = part(piece, circuit.car, local)
        out["x"][rows], out["y"][rows] = xy
        for key, val in zip(("v", "ax", "ay", "r", "thr"), rest, strict=True):
            out[key][rows] = val
    return out


def session_csv(
    circuit: Circuit,
    *,
    laps_before_s,
    n_laps,
    laps_after_s,
    seed,
    rate_hz=100,
    gnss_every=10,
    accel_noise_g=0.025,
    gnss_noise_m=0.3,
    yaw_noise_rad_s=0.005,
):
    """Log text (docs/formats.md, Log files) of ``n_laps`` laps at the limit, with
    ``laps_before_s``/``laps_after_s`` of driving either side. Log time 0 is that long
    before the middle of the first straight (the gate). Seeded Gaussian noise: on the
    accelerations [g], the positions of the GNSS fixes (every ``gnss_every``-th row,
    blank cells between) [m] and the yaw rate [rad/s]."""
    first = circuit.pieces[0]
    gate_s = 0.5 * first.length_m
    t_gate = float(first.fwd.sol(gate_s)[1]) if gate_s <= first.brake_point_m else None
    assert t_gate is not None, "gate inside the braking zone"
    duration = laps_before_s + n_laps * circuit.lap_time_s + laps_after_s
    n = int(duration * rate_hz) + 1
    t = np.arange(n) / rate_hz
    ch = sample(circuit, t, t_gate - laps_before_s)
    rng = np.random.default_rng(seed)
    ax = ch["ax"] + rng.normal(0.0, accel_noise_g * G, n)
    ay = ch["ay"] + rng.normal(0.0, accel_noise_g * G, n)
    yaw = ch["r"] + rng.normal(0.0, yaw_noise_rad_s, n)
    fix = np.arange(n) % gnss_every == 0
    x = ch["x"] + rng.normal(0.0, gnss_noise_m, n)
    y = ch["y"] + rng.normal(0.0, gnss_noise_m, n)
    lines = [
        "time [s],x [m],y [m],speed [km/h],accel_lon [m/s^2],accel_lat [m/s^2],"
        "yaw_rate [rad/s],throttle [%]"
    ]
    kmh = ch["v"] * 3.6
    for i in range(n):
        pos = f"{x[i]:.3f},{y[i]:.3f}" if fix[i] else ","
        lines.append(
            f"{t[i]:.2f},{pos},{kmh[i]:.4f},{ax[i]:.4f},{ay[i]:.4f},{yaw[i]:.5f},{ch['thr'][i]:.2f}"
        )
    gate_xy = first.start_xy + gate_s * np.array(
        [math.cos(first.heading_rad), math.sin(first.heading_rad)]
    )
    return "\n".join(lines) + "\n", gate_xy
