r"""Synthetic sessions with a known truth: an invented circuit, a simulated driver and logger.

The demo and the tests need logs whose answer is known. This module builds them from the
project's own physics:

1. **Circuit.** One of :mod:`limitlap.circuits` (invented).
2. **Driver.** The driver follows the reference line exactly (the true driven line *is*
   the circuit's line; no lateral wander), at the speed that
   :func:`limitlap.solve.solve_profile` gives with a per-station speed cap: the cap
   plants the mistakes (a lower minimum speed in a window around a chosen apex, so the
   solver brakes earlier and reaches full drive later) and a small lap-to-lap variation.
   The whole session (out-lap from the pit, flying laps, in-lap back to the pit) is one
   open line solved in one go, so speed is continuous from lap to lap.
3. **Logger.** The trajectory is sampled at 100 Hz: speed, IMU accelerations (specific
   force, so gradient leaks :math:`g\sin\theta` into the longitudinal channel), yaw rate,
   pedals, steering, gear; GNSS position at a lower rate with blank cells between fixes and
   a time-correlated error (first-order Gauss-Markov process plus white noise), converted
   east-north-up -> geodetic with :func:`pymap3d.enu2geodetic`.

The truth (:class:`SessionTruth`) keeps the true line and vehicle, the gate, the lap
times, each planted mistake with the time it costs on its own (lap time with the mistake
minus without it, both by the solver) and the ideal lap time on the true line.

Lap times from the session's time stamps equal the solver's closed-lap times because the
last corner before the gate is driven identically on every lap (no variation, no mistake
there) and the first braking zone after the gate starts well past it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pymap3d
from scipy import signal

from limitlap import limits
from limitlap.circuits import Circuit, demo_circuit
from limitlap.errors import LimitlapError
from limitlap.line import Line
from limitlap.solve import Profile, solve_profile
from limitlap.units import BAR_TO_PA, DEG_TO_RAD, G0_M_S2, KMH_TO_M_S
from limitlap.vehicle import Vehicle

# --------------------------------------------------------------------------- circuit


# --------------------------------------------------------------------------- session


@dataclass(frozen=True)
class Mistake:
    """A planted driver mistake: a lower minimum speed held over a window round an apex.

    Attributes
    ----------
    corner : str
        Corner name in the circuit (``apex_m`` is taken from it when not given).
    speed_drop : float
        Share by which the minimum speed falls, e.g. 0.08 = 8 % slower. [-]
    before_m, after_m : float
        Window before and after the apex where the speed is held down: a long
        ``before_m`` is an early brake, a long ``after_m`` a late throttle, a short
        symmetric window a mid-corner lift. [m]
    apex_m : float, optional
        Apex distance from the gate, overriding the corner's. [m]
    """

    corner: str
    speed_drop: float
    before_m: float = 15.0
    after_m: float = 15.0
    apex_m: float | None = None


#: The planted mistakes of the demo sessions (on Tarrowby Heath).
DEMO_MISTAKES = (
    Mistake("T1", 0.09, before_m=35.0, after_m=5.0),  # brakes early, too slow in
    Mistake("T7", 0.11, before_m=12.0, after_m=12.0),  # mid-corner lift
    Mistake("T9", 0.08, before_m=5.0, after_m=35.0),  # late on the throttle
)

#: A second invented driver's mistakes on Tarrowby Heath (the bundled second session):
#: other corners than :data:`DEMO_MISTAKES`.
SECOND_DRIVER_MISTAKES = (
    Mistake("T2", 0.10, before_m=12.0, after_m=12.0),  # mid-corner lift
    Mistake("T4", 0.05, before_m=30.0, after_m=5.0),  # brakes early into the hairpin
    Mistake("T11", 0.08, before_m=5.0, after_m=35.0),  # late on the throttle
)


@dataclass(frozen=True)
class PlantedMistake:
    """A mistake as planted, with its cost (SI).

    Attributes
    ----------
    corner : str
    apex_m : float
        Apex distance from the gate. [m]
    window_m : tuple of float
        (start, end) of the capped window, distance from the gate. [m]
    speed_cap_m_s : float
        The speed held in the window (the lowered minimum speed). [m/s]
    ideal_min_speed_m_s : float
        Minimum speed of the ideal lap in the window. [m/s]
    time_cost_s : float
        Lap time with only this mistake minus the ideal lap time (solver). [s]
    """

    corner: str
    apex_m: float
    window_m: tuple[float, float]
    speed_cap_m_s: float
    ideal_min_speed_m_s: float
    time_cost_s: float


@dataclass(frozen=True, eq=False)
class SessionTruth:
    """What the synthetic session really was.

    Attributes
    ----------
    circuit : Circuit
    line : Line
        The true driven line (the circuit's line: the driver follows it exactly).
    vehicle : Vehicle
        The true vehicle at grip scale 1.
    grip_scale : float
        Grip scale of the session's track. [-]
    gate_latlon : tuple of float
        Start/finish gate point (latitude, longitude), degrees.
    gate_times_s : numpy.ndarray
        Log time of each gate crossing. [s]
    lap_times_s : numpy.ndarray
        Time of each complete lap, from the crossings (laps 1, 2, ...). [s]
    solver_lap_times_s : numpy.ndarray
        The same laps solved as closed laps with their own speed caps. [s]
    ideal_lap_time_s : float
        Solver lap time on the true line with the true vehicle at ``grip_scale``. [s]
    ideal_profile : Profile
        That ideal lap.
    mistake_profile : Profile
        A flying lap with all planted mistakes and no lap-to-lap variation.
    mistakes : tuple of PlantedMistake
    mistake_laps : tuple of int
        Lap numbers (1 = first complete lap) that carry the mistakes.
    limit_laps : tuple of int
        Lap numbers driven exactly at the limit (no mistakes, no variation).
    distance_m : numpy.ndarray
        Per row: distance driven since the pit exit. [m]
    lap_distance_m : numpy.ndarray
        Per row: distance from the gate along the lap. [m]
    lap_number : numpy.ndarray
        Per row: lap number (0 = out-lap, last = in-lap), int.
    x_m, y_m, z_m : numpy.ndarray
        Per row: true ENU position. [m]
    gps_error_m : numpy.ndarray
        Per row (NaN between fixes): GNSS error east, north, up, shape (n, 3). [m]
    lap_grip_scales : tuple of float
        Grip scale of each flying lap (laps 1, 2, ...): all ``grip_scale`` unless a grip
        per lap was asked for (a drying track). [-]
    """

    circuit: Circuit
    line: Line
    vehicle: Vehicle
    grip_scale: float
    gate_latlon: tuple[float, float]
    gate_times_s: np.ndarray
    lap_times_s: np.ndarray
    solver_lap_times_s: np.ndarray
    ideal_lap_time_s: float
    ideal_profile: Profile
    mistake_profile: Profile
    mistakes: tuple[PlantedMistake, ...]
    mistake_laps: tuple[int, ...]
    limit_laps: tuple[int, ...]
    distance_m: np.ndarray
    lap_distance_m: np.ndarray
    lap_number: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    z_m: np.ndarray
    gps_error_m: np.ndarray
    lap_grip_scales: tuple[float, ...] = ()


@dataclass(frozen=True, eq=False)
class Session:
    """A synthetic log in SI on its own rows, with its truth.

    Attributes
    ----------
    time_s : numpy.ndarray
        Row times from 0 at the sample rate. [s]
    channels : dict of str to numpy.ndarray
        Log channel (docs/formats.md, Log files) -> SI values per row, NaN in blank
        cells: ``latitude``,
        ``longitude`` [deg], ``altitude`` [m], ``speed`` [m/s], ``accel_lon``,
        ``accel_lat`` [m/s²], ``yaw_rate`` [rad/s], ``throttle`` [0-1], ``brake`` [Pa],
        ``steer`` [rad], ``gear`` [-].
    truth : SessionTruth
    """

    time_s: np.ndarray
    channels: dict[str, np.ndarray]
    truth: SessionTruth


def _tile(line: Line, start_m: float, n_laps: int, end_m: float):
    """Open line over the session: from ``start_m`` round ``n_laps`` laps to ``end_m``."""
    n, ds = line.n, line.length_m / line.n
    i0 = round(start_m / ds) % n
    i1 = round(end_m / ds) % n
    idx = np.concatenate([np.arange(i0, n), np.tile(np.arange(n), n_laps), np.arange(i1 + 1)])
    lap = np.concatenate(
        [np.zeros(n - i0, int), np.repeat(np.arange(1, n_laps + 1), n), np.full(i1 + 1, n_laps + 1)]
    )
    dist = np.arange(idx.shape[0]) * ds
    return idx, lap, dist, ds, i0


def _window_cap(line: Line, v_ideal, apex_m, before_m, after_m, drop):
    """Station mask of the window round an apex, and the capped speed in it."""
    s = line.distance_m
    rel = (s - apex_m + line.length_m / 2) % line.length_m - line.length_m / 2
    mask = (rel >= -before_m) & (rel <= after_m)
    v_min = float(v_ideal[mask].min())
    return mask, v_min * (1.0 - drop), v_min


def _gauss_markov(rng, n, sigma, tau_samples):
    r"""First-order Gauss-Markov sequence, stationary from the first sample.

    :math:`e_k = \phi e_{k-1} + \sigma\sqrt{1-\phi^2}\, w_k`, :math:`\phi = e^{-1/\tau}`
    (A. Gelb, ed., *Applied Optimal Estimation*, MIT Press 1974, Table 3.8-1 [M]).
    """
    phi = math.exp(-1.0 / tau_samples)
    w = rng.standard_normal(n)
    e0 = sigma * rng.standard_normal()
    out, _ = signal.lfilter([sigma * math.sqrt(1 - phi * phi)], [1.0, -phi], w, zi=[phi * e0])
    return out


def default_vehicle() -> Vehicle:
    """The bundled invented GT coupe (vehicles/gt_coupe.toml), the demo's true car."""
    from limitlap.ingest import read_vehicle
    from limitlap.resources import bundled_path

    return read_vehicle(bundled_path("vehicles", "gt_coupe.toml"))


@dataclass(frozen=True)
class _Logger:
    """The simulated logger's settings (see :func:`generate_session`'s parameters)."""

    sample_rate_hz: float
    gps_rate_hz: float
    gps_sigma_m: float
    gps_tau_s: float
    gps_white_m: float
    gps_vertical_factor: float
    speed_noise_m_s: float
    accel_noise_g: float
    accel_bias_g: tuple[float, float]
    yaw_noise_deg_s: float
    yaw_bias_deg_s: float
    gps_dropouts: tuple


@dataclass(frozen=True)
class _LapPlan:
    """How many flying laps, and which carry the mistakes or are driven at the limit."""

    n_laps: int
    mistake_laps: tuple[int, ...]
    limit_laps: tuple[int, ...]


@dataclass(frozen=True, eq=False)
class _Caps:
    """Speed caps on the closed line's stations (inf where free). [m/s].

    ``planted`` holds, per mistake, (mistake, apex [m], window mask, cap [m/s], ideal
    minimum speed in the window [m/s]); ``mistake_cap`` all mistakes together;
    ``lap_caps`` one array per flying lap (mistakes and lap-to-lap variation).
    """

    planted: list
    mistake_cap: np.ndarray
    lap_caps: list


@dataclass(frozen=True, eq=False)
class _Drive:
    """The whole session solved as one open line (stations of the tiled circuit)."""

    idx: np.ndarray  # circuit station of each session station [-]
    lap_of: np.ndarray  # lap number of each session station [-]
    distance_m: np.ndarray  # distance from the pit exit [m]
    step_m: float  # station spacing [m]
    profile: Profile
    time_s: np.ndarray  # log time at each station (after the idle at the pit exit) [s]
    gate_times_s: np.ndarray  # log time of each gate crossing [s]


@dataclass(frozen=True, eq=False)
class _Rows:
    """The true motion on the log's rows (see :class:`SessionTruth` for the per-row truth)."""

    time_s: np.ndarray  # [s]
    distance_m: np.ndarray  # since the pit exit [m]
    speed_m_s: np.ndarray  # [m/s]
    accel_lon_m_s2: np.ndarray  # dv/dt, zero while standing [m/s²]
    lap_distance_m: np.ndarray  # from the gate [m]
    lap_number: np.ndarray  # [-]
    x_m: np.ndarray  # true ENU position [m]
    y_m: np.ndarray
    z_m: np.ndarray
    curvature_1_m: np.ndarray  # [1/m]
    sin_grade: np.ndarray  # sine of the road's grade [-]


def _rows_per_fix(logger: _Logger) -> int:
    """Log rows per GNSS fix; the rates must be positive and the fix rate divide the row rate."""
    if logger.sample_rate_hz <= 0 or logger.gps_rate_hz <= 0:
        raise LimitlapError("sample and GPS rates must be positive")
    step = logger.sample_rate_hz / logger.gps_rate_hz
    if abs(step - round(step)) > 1e-9:
        raise LimitlapError("gps_rate_hz must divide sample_rate_hz")
    return round(step)


def _lap_plan(
    n_laps, duration_s, ideal, idle_s, out_lap_pace, in_lap_pace, mistake_laps, limit_laps
):
    """The flying laps (from ``duration_s`` when given) and their roles."""
    if duration_s is not None:  # out-lap and in-lap take about a lap each at their pace
        overhead_s = 2 * idle_s + ideal.lap_time_s * (1 / out_lap_pace + 1 / in_lap_pace)
        n_laps = max(1, int((duration_s - overhead_s) / (1.02 * ideal.lap_time_s)))
    if n_laps < 1:
        raise LimitlapError("a session needs at least one complete lap")
    limit_laps = tuple(int(k) for k in limit_laps)
    if mistake_laps is None:
        mistake_laps = tuple(k for k in range(1, n_laps + 1) if k not in limit_laps)
    return _LapPlan(n_laps, tuple(int(k) for k in mistake_laps), limit_laps)


def _speed_caps(
    rng, circuit: Circuit, ideal: Profile, mistakes, plan: _LapPlan, lap_variation
) -> _Caps:
    """Per-lap speed caps on the closed line: the planted mistakes and the lap-to-lap variation (a random lift at every corner but the last and the flat-out kinks)."""
    line = circuit.line
    inf = np.full(line.n, np.inf)
    planted_masks = []
    mistake_cap = inf.copy()
    for m in mistakes:
        apex = circuit.corner(m.corner).apex_m if m.apex_m is None else m.apex_m
        mask, cap, v_min = _window_cap(
            line, ideal.speed_m_s, apex, m.before_m, m.after_m, m.speed_drop
        )
        planted_masks.append((m, apex, mask, cap, v_min))
        mistake_cap[mask] = np.minimum(mistake_cap[mask], cap)
    varied = [c for c in circuit.corners if c.apex_m < line.length_m - 1.0][:-1]  # not the last
    varied = [c for c in varied if abs(c.radius_m) < 400.0]  # flat-out kinks need no lift
    lap_caps = []
    for k in range(1, plan.n_laps + 1):
        cap = mistake_cap.copy() if k in plan.mistake_laps else inf.copy()
        if k not in plan.limit_laps and lap_variation > 0:
            for c in varied:
                mask, vcap, _ = _window_cap(
                    line,
                    ideal.speed_m_s,
                    c.apex_m,
                    10.0,
                    10.0,
                    abs(rng.normal(0.0, lap_variation)),
                )
                cap[mask] = np.minimum(cap[mask], vcap)
        lap_caps.append(cap)
    return _Caps(planted_masks, mistake_cap, lap_caps)


def _lap_grips(grip_scale, n_laps: int, duration_s) -> tuple[float, ...]:
    """One grip scale per flying lap: a single value for every lap, or one given per lap."""
    if np.ndim(grip_scale) == 0:
        return (float(grip_scale),) * n_laps
    grips = tuple(float(g) for g in grip_scale)
    if duration_s is not None or len(grips) != n_laps:
        raise LimitlapError("a grip scale per lap needs n_laps equal to the number of scales")
    return grips


def _caps_at_lap_grips(line: Line, vehicle: Vehicle, ideal: Profile, caps: _Caps, grips):
    """Each lap's caps held to the closed-lap profile at that lap's own grip.

    ``ideal`` is the profile at the highest of ``grips``, the car the session is solved
    with. A lap at a lower grip k is capped at its own ideal :math:`v_k(s)` (the solver's
    closed lap with the vehicle at k), and its planted mistakes and variation are scaled
    by :math:`v_k/v` so they take the same share off its speed: the capped profile is
    feasible for the weaker car, so the stronger one follows it exactly, braking and
    turning as the weaker car would (a drying track, lap by lap).
    """
    top = max(grips)
    lap_caps = []
    for cap, g in zip(caps.lap_caps, grips, strict=True):
        if g == top:
            lap_caps.append(cap)
            continue
        v_k = solve_profile(line, vehicle.scaled(g)).speed_m_s
        lap_caps.append(np.minimum(cap * (v_k / ideal.speed_m_s), v_k))
    return _Caps(caps.planted, caps.mistake_cap, lap_caps)


def _drive_session(
    circuit: Circuit, car, ideal, caps: _Caps, plan: _LapPlan, out_lap_pace, in_lap_pace, idle_s
) -> _Drive:
    """Out-lap, flying laps and in-lap as one open line from the pit exit to the pit entry, solved from and to standstill under each lap's caps (and the slow out- and in-lap)."""
    line, n_laps = circuit.line, plan.n_laps
    idx, lap_of, dist, ds, _i0 = _tile(line, circuit.pit_exit_m, n_laps, circuit.pit_entry_m)
    last_apex = circuit.corners[-1].apex_m
    first_apex = circuit.corners[0].apex_m
    s_lap = line.distance_m[idx]
    cap = np.full(idx.shape[0], np.inf)
    out = lap_of == 0
    slow_out = out & (s_lap < last_apex - 100.0)
    cap[slow_out] = out_lap_pace * ideal.speed_m_s[idx[slow_out]]
    for k in range(1, n_laps + 1):
        sel = lap_of == k
        cap[sel] = caps.lap_caps[k - 1][idx[sel]]
    inl = lap_of == n_laps + 1
    slow_in = inl & (s_lap > first_apex - 60.0)
    cap[inl] = caps.lap_caps[-1][idx[inl]]
    cap[slow_in] = np.minimum(cap[slow_in], in_lap_pace * ideal.speed_m_s[idx[slow_in]])
    cap = np.where(np.isfinite(cap), cap, 1e9)
    session_line = Line(dist, line.curvature_1_m[idx], line.gradient[idx], float(dist[-1]), False)
    prof = solve_profile(
        session_line, car, entry_speed_m_s=0.0, exit_speed_m_s=0.0, speed_cap_m_s=cap
    )
    t_st = prof.time_s + idle_s
    gate_rows = np.flatnonzero(idx == 0)
    return _Drive(idx, lap_of, dist, ds, prof, t_st, t_st[gate_rows])


def _planted_mistakes(line: Line, car, ideal: Profile, caps: _Caps):
    """Each planted mistake with its cost on its own (solver), and a flying lap with all of them: (tuple of PlantedMistake, Profile)."""
    inf = np.full(line.n, np.inf)
    planted = []
    for m, apex, mask, vcap, v_min in caps.planted:
        one = inf.copy()
        one[mask] = vcap
        cost = solve_profile(line, car, speed_cap_m_s=one).lap_time_s - ideal.lap_time_s
        window = ((apex - m.before_m) % line.length_m, (apex + m.after_m) % line.length_m)
        planted.append(
            PlantedMistake(m.corner, float(apex), window, float(vcap), v_min, float(cost))
        )
    mistake_profile = solve_profile(
        line, car, speed_cap_m_s=np.where(np.isfinite(caps.mistake_cap), caps.mistake_cap, 1e9)
    )
    return tuple(planted), mistake_profile


def _sample_rows(line: Line, drive: _Drive, n_laps: int, idle_s, sample_rate_hz) -> _Rows:
    """The solved drive sampled on the log's rows, standing still ``idle_s`` either side."""
    t_st, dist, ds, idx, prof = (
        drive.time_s,
        drive.distance_m,
        drive.step_m,
        drive.idx,
        drive.profile,
    )
    t_end = t_st[-1] + idle_s
    n_rows = math.floor(t_end * sample_rate_hz) + 1
    t = np.arange(n_rows) / sample_rate_hz
    d = np.interp(t, t_st, dist)  # standing still before and after: clamped
    v = np.interp(t, t_st, prof.speed_m_s)
    # a_x of the profile belongs to the step leaving each station: place it at the
    # step's middle in time, not at its start (half a station early otherwise).
    ax = np.interp(t, 0.5 * (t_st[:-1] + t_st[1:]), prof.accel_lon_m_s2[:-1])
    moving = (t > t_st[0]) & (t < t_st[-1])
    ax = np.where(moving, ax, 0.0)
    j = np.clip(np.searchsorted(dist, d, side="right") - 1, 0, dist.shape[0] - 2)
    frac = (d - dist[j]) / ds
    s_of_row = (line.distance_m[idx[j]] + frac * ds) % line.length_m
    # true position: interpolate on the closed line by distance (periodic)
    s_ring = np.append(line.distance_m, line.length_m)

    def ring(a):
        return np.interp(s_of_row, s_ring, np.append(a, a[0]))

    x, y, z = ring(line.x_m), ring(line.y_m), ring(line.z_m)
    kappa, grad = ring(line.curvature_1_m), ring(line.gradient)
    sin_th = grad / np.sqrt(1 + grad * grad)
    lap_row = drive.lap_of[j]
    lap_row = np.where(d >= dist[-1] - 1e-9, n_laps + 1, lap_row)
    return _Rows(
        time_s=t,
        distance_m=d,
        speed_m_s=v,
        accel_lon_m_s2=ax,
        lap_distance_m=s_of_row,
        lap_number=lap_row,
        x_m=x,
        y_m=y,
        z_m=z,
        curvature_1_m=kappa,
        sin_grade=sin_th,
    )


def _motion_channels(rng, car, vehicle, rows: _Rows, logger: _Logger) -> dict:
    """Speed, IMU, yaw rate (with their noise and bias), pedals, gear and steering, SI."""
    n_rows = rows.time_s.shape[0]
    v, ax, kappa, sin_th = rows.speed_m_s, rows.accel_lon_m_s2, rows.curvature_1_m, rows.sin_grade
    bias, noise = logger.accel_bias_g, logger.accel_noise_g
    g = G0_M_S2
    speed = v + logger.speed_noise_m_s * rng.standard_normal(n_rows)
    speed = np.where(v > 0, np.abs(speed), 0.0)  # a stationary car reads zero
    a_lon = ax + g * sin_th + bias[0] * g + noise * g * rng.standard_normal(n_rows)
    a_lat = kappa * v * v + bias[1] * g + noise * g * rng.standard_normal(n_rows)
    yaw = (
        kappa * v
        + (logger.yaw_bias_deg_s + logger.yaw_noise_deg_s * rng.standard_normal(n_rows))
        * DEG_TO_RAD
    )
    f_x = car.mass_kg * (ax + g * sin_th) + np.where(v > 0, limits.resistance_n(v, car), 0.0)
    f_drive = limits.drive_force_max_n(np.maximum(v, 0.1), car)
    throttle = np.clip(np.where(f_x > 0, f_x / f_drive, 0.0), 0.0, 1.0)
    brake_gain = 120.0 * BAR_TO_PA / (vehicle.mu_brk * vehicle.mass_kg * g)  # [Pa/N], invented
    brake = np.where(f_x < 0, -f_x * brake_gain, 0.0)
    shifts = np.array([72.0, 108.0, 145.0, 182.0, 220.0]) * KMH_TO_M_S  # invented gearbox
    gear = 1.0 + np.searchsorted(shifts, v).astype(np.float64)
    steer = 14.0 * 2.6 * kappa * (v > 0)
    return {
        "speed": speed,
        "accel_lon": a_lon,
        "accel_lat": a_lat,
        "yaw_rate": yaw,
        "throttle": throttle,
        "brake": brake,
        "steer": steer,
        "gear": gear,
    }


def _gnss_channels(rng, origin, rows: _Rows, logger: _Logger, fix_step: int):
    """GNSS fixes every ``fix_step`` rows with a correlated plus white error, blanks between and in the dropouts: (latitude/longitude/altitude channels, error per row east/north/up [m], NaN between fixes)."""
    t = rows.time_s
    n_rows = t.shape[0]
    fix = np.arange(0, n_rows, fix_step)
    keep = np.ones(fix.shape[0], bool)
    for start, length in logger.gps_dropouts:
        keep &= ~((t[fix] >= start) & (t[fix] < start + length))
    fix = fix[keep]
    tau = logger.gps_tau_s * logger.gps_rate_hz
    n_fix = fix.shape[0]
    err = np.empty((n_fix, 3))
    for axis, f in enumerate((1.0, 1.0, logger.gps_vertical_factor)):
        err[:, axis] = f * (
            _gauss_markov(rng, n_fix, logger.gps_sigma_m, tau)
            + logger.gps_white_m * rng.standard_normal(n_fix)
        )
    lat = np.full(n_rows, np.nan)
    lon = np.full(n_rows, np.nan)
    alt = np.full(n_rows, np.nan)
    la, lo, al = pymap3d.enu2geodetic(
        rows.x_m[fix] + err[:, 0], rows.y_m[fix] + err[:, 1], rows.z_m[fix] + err[:, 2], *origin
    )
    lat[fix], lon[fix], alt[fix] = la, lo, al
    gps_err = np.full((n_rows, 3), np.nan)
    gps_err[fix] = err
    return {"latitude": lat, "longitude": lon, "altitude": alt}, gps_err


def generate_session(
    circuit: Circuit | None = None,
    vehicle: Vehicle | None = None,
    *,
    n_laps: int = 6,
    duration_s: float | None = None,
    grip_scale=1.0,
    mistakes=DEMO_MISTAKES,
    mistake_laps=None,
    limit_laps=(),
    lap_variation: float = 0.002,
    out_lap_pace: float = 0.7,
    in_lap_pace: float = 0.6,
    idle_s: float = 5.0,
    sample_rate_hz: float = 100.0,
    gps_rate_hz: float = 10.0,
    gps_sigma_m: float = 0.7,
    gps_tau_s: float = 60.0,
    gps_white_m: float = 0.1,
    gps_vertical_factor: float = 2.0,
    speed_noise_m_s: float = 0.05,
    accel_noise_g: float = 0.03,
    accel_bias_g: tuple[float, float] = (0.0, 0.0),
    yaw_noise_deg_s: float = 0.5,
    yaw_bias_deg_s: float = 0.2,
    gps_dropouts=(),
    seed: int = 1,
) -> Session:
    r"""Simulate a session on ``circuit``: out-lap, ``n_laps`` flying laps, in-lap.

    Parameters
    ----------
    circuit : Circuit, optional
        Default :func:`demo_circuit`.
    vehicle : Vehicle, optional
        Complete true vehicle; default :func:`default_vehicle`.
    n_laps : int
        Flying (complete) laps.
    duration_s : float, optional
        Instead of ``n_laps``: as many flying laps as fill about this long a session
        (e.g. 3600 for the one-hour benchmark). [s]
    grip_scale : float or sequence of float
        Grip scale of the track (wet session < 1). [-] A sequence gives one scale per
        flying lap (``n_laps`` of them; a drying track): the session is solved with the
        vehicle at the highest and each lap held to its own closed-lap profile at its
        scale (:func:`_caps_at_lap_grips`); the out- and in-lap paces stay shares of the
        ideal at the highest. The throttle channel is then the share of the highest
        grip's drive limit.
    mistakes : sequence of Mistake
        Planted on every lap of ``mistake_laps``.
    mistake_laps : sequence of int, optional
        Laps (1 = first complete) that carry the mistakes; default all but ``limit_laps``.
    limit_laps : sequence of int
        Laps driven exactly at the limit: no mistakes, no variation.
    lap_variation : float
        Lap-to-lap variation: every corner but the last gets its minimum speed lowered by
        ``|N(0, lap_variation)|`` of the ideal. [-]
    out_lap_pace, in_lap_pace : float
        Speed of the out-lap and in-lap as a share of the ideal. [-]
    idle_s : float
        Standing still at the pit exit before and at the pit entry after. [s]
    sample_rate_hz : float
        Row rate (speed, IMU, pedals). [Hz]
    gps_rate_hz : float
        GNSS fix rate; must divide ``sample_rate_hz``. [Hz]
    gps_sigma_m, gps_tau_s : float
        Standard deviation [m] and correlation time [s] of the Gauss-Markov part of the
        GNSS error per horizontal axis.
    gps_white_m : float
        White part of the GNSS error per horizontal axis. [m]
    gps_vertical_factor : float
        Vertical error = this times the horizontal one. [-]
    speed_noise_m_s : float
        White noise on speed. [m/s]
    accel_noise_g, accel_bias_g : float, tuple
        White noise on both accelerations [g]; constant bias (longitudinal, lateral) [g].
    yaw_noise_deg_s, yaw_bias_deg_s : float
        White noise and constant bias of the yaw-rate gyro. [deg/s]
    gps_dropouts : sequence of (start_s, length_s)
        GNSS gaps: no fixes in ``[start, start + length)``. [s]
    seed : int
        Seed of :func:`numpy.random.default_rng`; the session is a function of it.

    Returns
    -------
    Session

    Notes
    -----
    Kinematics on a level road (ISO 8855, left = +): :math:`a_y = \kappa v^2`,
    :math:`r = \kappa v`; the accelerometer measures specific force, so
    :math:`a_{x,meas} = \dot v + g\sin\theta` on a grade θ. Pedals from the tyre force the
    motion needs, :math:`F_x = m\dot v + m g \sin\theta + q C_D A + C_{rr} m g`: throttle
    :math:`F_x / \min(\mu_t N, P/v)` when positive, brake pressure proportional to
    :math:`-F_x` otherwise (120 bar at :math:`F_x = -\mu_b m g`, an invented brake gain).
    Steering: kinematic (Ackermann) wheel angle :math:`\ell\kappa` times a steering ratio
    (Milliken & Milliken 1995, ch. 6), wheelbase 2.6 m and ratio 14 invented.
    """
    circuit = demo_circuit() if circuit is None else circuit
    vehicle = (default_vehicle() if vehicle is None else vehicle).require_complete()
    logger = _Logger(
        sample_rate_hz=sample_rate_hz,
        gps_rate_hz=gps_rate_hz,
        gps_sigma_m=gps_sigma_m,
        gps_tau_s=gps_tau_s,
        gps_white_m=gps_white_m,
        gps_vertical_factor=gps_vertical_factor,
        speed_noise_m_s=speed_noise_m_s,
        accel_noise_g=accel_noise_g,
        accel_bias_g=accel_bias_g,
        yaw_noise_deg_s=yaw_noise_deg_s,
        yaw_bias_deg_s=yaw_bias_deg_s,
        gps_dropouts=tuple(gps_dropouts),
    )
    fix_step = _rows_per_fix(logger)
    rng = np.random.default_rng(seed)
    top = float(grip_scale) if np.ndim(grip_scale) == 0 else max(float(g) for g in grip_scale)
    car = vehicle.scaled(top) if top != 1.0 else vehicle
    ideal = solve_profile(circuit.line, car)
    plan = _lap_plan(
        n_laps, duration_s, ideal, idle_s, out_lap_pace, in_lap_pace, mistake_laps, limit_laps
    )
    grips = _lap_grips(grip_scale, plan.n_laps, duration_s)
    caps = _speed_caps(rng, circuit, ideal, mistakes, plan, lap_variation)
    if min(grips) != top:
        caps = _caps_at_lap_grips(circuit.line, vehicle, ideal, caps, grips)
    drive = _drive_session(circuit, car, ideal, caps, plan, out_lap_pace, in_lap_pace, idle_s)
    planted, mistake_profile = _planted_mistakes(circuit.line, car, ideal, caps)
    rows = _sample_rows(circuit.line, drive, plan.n_laps, idle_s, sample_rate_hz)
    motion = _motion_channels(rng, car, vehicle, rows, logger)  # the noise draws in this order
    gnss, gps_err = _gnss_channels(rng, circuit.origin, rows, logger, fix_step)
    truth = SessionTruth(
        circuit=circuit,
        line=circuit.line,
        vehicle=vehicle,
        grip_scale=top,
        gate_latlon=circuit.gate_latlon,
        gate_times_s=drive.gate_times_s,
        lap_times_s=np.diff(drive.gate_times_s),
        solver_lap_times_s=np.array(
            [solve_profile(circuit.line, car, speed_cap_m_s=c).lap_time_s for c in caps.lap_caps]
        ),
        ideal_lap_time_s=ideal.lap_time_s,
        ideal_profile=ideal,
        mistake_profile=mistake_profile,
        mistakes=planted,
        mistake_laps=plan.mistake_laps,
        limit_laps=plan.limit_laps,
        distance_m=rows.distance_m,
        lap_distance_m=rows.lap_distance_m,
        lap_number=rows.lap_number,
        x_m=rows.x_m,
        y_m=rows.y_m,
        z_m=rows.z_m,
        gps_error_m=gps_err,
        lap_grip_scales=grips,
    )
    return Session(rows.time_s, {**gnss, **motion}, truth)


# --------------------------------------------------------------------------- CSV text

#: Columns of :func:`session_csv_text`: channel, header unit, factor SI -> that unit,
#: decimals. Units are spelled as docs/formats.md (Log files) gives them; factors come from
#: :mod:`limitlap.units`.
_CSV_COLUMNS = (
    ("latitude", "deg", 1.0, 8),
    ("longitude", "deg", 1.0, 8),
    ("altitude", "m", 1.0, 2),
    ("speed", "km/h", 1.0 / KMH_TO_M_S, 2),
    ("accel_lon", "g", 1.0 / G0_M_S2, 3),
    ("accel_lat", "g", 1.0 / G0_M_S2, 3),
    ("yaw_rate", "deg/s", 1.0 / DEG_TO_RAD, 2),
    ("throttle", "%", 100.0, 1),
    ("brake", "bar", 1.0 / BAR_TO_PA, 1),
    ("steer", "deg", 1.0 / DEG_TO_RAD, 1),
    ("gear", "", 1.0, 0),
)


def session_csv_text(session: Session, *, lap_column: bool = False, columns=None) -> str:
    r"""The session as log CSV text, e.g. ``time [s],latitude [deg],...``.

    Columns and units as docs/formats.md gives them (Log files); blank cells where a
    channel has no sample (GNSS between fixes).

    Parameters
    ----------
    session : Session
    lap_column : bool
        Add the true lap number as a ``lap`` column (0 = out-lap).
    columns : sequence of str, optional
        Channels to write (``time`` always comes first); default all.

    Returns
    -------
    str
        The CSV text, header row first, ``\n`` line ends.
    """
    import polars as pl

    data = {"time [s]": np.round(session.time_s, 3)}
    for name, unit, factor, decimals in _CSV_COLUMNS:
        if columns is not None and name not in columns:
            continue
        values = np.round(session.channels[name] * factor, decimals)
        header = f"{name} [{unit}]" if unit else name
        if decimals == 0:
            data[header] = pl.Series(header, values).cast(pl.Int64, strict=False)
        else:
            data[header] = pl.Series(header, values, nan_to_null=True)
    if lap_column:
        data["lap"] = session.truth.lap_number.astype(np.int64)
    return pl.DataFrame(data).write_csv(null_value="")
