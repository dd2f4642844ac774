r"""Quasi-steady-state (QSS) speed profile and lap time on a given line.

The car is a point mass in steady state at every station except for its speed. The
classic scheme (Lenzo & Rossi 2020, §1; Siegler, Deakin & Crolla, SAE 2000-01-3563):

1. the cornering speed limit at every station from the lateral limit, with downforce;
2. a forward pass, accelerating as hard as the combined-slip law leaves after the
   lateral demand, a backward pass braking likewise, and the minimum of the two;
3. closed laps are periodic: both passes start at the global minimum of the cornering
   limit (a valid state of any lap) and run once round the loop.

Both passes integrate :math:`db/ds = 2 a_x(b)` in :math:`b = v^2` (the variable of
Lipp & Boyd 2014) with an explicit trapezoidal (Heun) step, second order in the station
spacing, so halving the spacing barely moves the lap time.

References
----------
.. [1] B. Lenzo and V. Rossi, "A Simple Mono-Dimensional Approach for Lap Time
   Optimisation", Applied Sciences 10(4):1498, 2020, doi:10.3390/app10041498.
.. [2] T. Lipp and S. Boyd, "Minimum-time speed optimisation over a fixed path",
   International Journal of Control, 2014, doi:10.1080/00207179.2013.875224.
.. [3] W. F. Milliken and D. L. Milliken, *Race Car Vehicle Dynamics*, SAE R-146, 1995.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass

import numpy as np

from limitlap import _kernels
from limitlap.errors import LimitlapError
from limitlap.line import Line
from limitlap.units import G0_M_S2, V_CAP_M_S
from limitlap.vehicle import Vehicle, check_grip_scale


@dataclass(frozen=True, eq=False)
class Profile:
    r"""A solved speed profile on a line (all SI).

    Attributes
    ----------
    distance_m : numpy.ndarray
        Station distance. [m]
    speed_m_s : numpy.ndarray
        Speed at each station. [m/s]
    accel_lon_m_s2 : numpy.ndarray
        Longitudinal acceleration of the step leaving each station,
        :math:`(v_{i+1}^2 - v_i^2) / (2 \Delta s_i)`; the last station of an open line
        repeats the one before. [m/s²]
    accel_lat_m_s2 : numpy.ndarray
        Lateral acceleration :math:`\kappa v^2`, + left. [m/s²]
    time_s : numpy.ndarray
        Elapsed time at each station from the first. [s]
    lap_time_s : float
        Time for the whole line (closed: back to the first station). [s]
    speed_limit_m_s : numpy.ndarray
        Cornering speed limit from lateral grip alone. [m/s]
    grip_scale : float
        Grip scale the profile was solved at. [-]
    """

    distance_m: np.ndarray
    speed_m_s: np.ndarray
    accel_lon_m_s2: np.ndarray
    accel_lat_m_s2: np.ndarray
    time_s: np.ndarray
    lap_time_s: float
    speed_limit_m_s: np.ndarray
    grip_scale: float = 1.0


def vehicle_array(vehicle: Vehicle, grip_scale: float = 1.0) -> np.ndarray:
    """Pack a complete vehicle into the kernels' parameter array (see :mod:`_kernels`)."""
    vehicle.require_complete()
    k = check_grip_scale(grip_scale)
    veh = np.empty(_kernels.N_VEH)
    veh[_kernels.I_MASS] = vehicle.mass_kg
    veh[_kernels.I_POWER] = vehicle.power_w
    veh[_kernels.I_DRAG_AREA] = vehicle.drag_area_m2
    veh[_kernels.I_LIFT_AREA] = vehicle.downforce_area_m2
    veh[_kernels.I_CRR] = vehicle.rolling_coeff
    veh[_kernels.I_RHO] = vehicle.air_density_kg_m3
    veh[_kernels.I_MU_LAT] = vehicle.mu_lat * k
    veh[_kernels.I_MU_BRK] = vehicle.mu_brk * k
    veh[_kernels.I_MU_TRAC] = vehicle.mu_trac * k
    veh[_kernels.I_EXPONENT] = vehicle.exponent
    veh[_kernels.I_G] = G0_M_S2
    veh[_kernels.I_V_CAP] = V_CAP_M_S
    veh[_kernels.I_INV_MASS] = 1.0 / vehicle.mass_kg
    veh[_kernels.I_TRAC_RATIO] = vehicle.mu_trac / vehicle.mu_lat
    veh[_kernels.I_BRK_RATIO] = vehicle.mu_brk / vehicle.mu_lat
    return veh


def cornering_speed_limit(curvature_1_m, vehicle: Vehicle, grip_scale: float = 1.0):
    r"""Highest steady speed the tyres allow at each point of the line.

    Parameters
    ----------
    curvature_1_m : array-like
        Path curvature, + for left-hand bends. [1/m]
    vehicle : Vehicle
        Complete vehicle. Mass [kg], lift area [m²], air density [kg/m³], mu_lat [-].
    grip_scale : float
        Grip scale k on the friction coefficients. [-]

    Returns
    -------
    numpy.ndarray
        Speed limit; ``V_CAP_M_S`` where grip never runs out. [m/s]

    Notes
    -----
    Solves :math:`m v^2 |\kappa| = \mu (m g + \tfrac12 \rho C_L A v^2)` for :math:`v`
    (Milliken & Milliken 1995, steady-state cornering, with aero load):
    :math:`v^2 = \mu g / (|\kappa| - \mu k_z / m)`, :math:`k_z = \tfrac12\rho C_L A`.
    Above the critical radius :math:`R_c = m / (\mu k_z)` (Lenzo & Rossi 2020) the
    denominator is not positive: the corner is flat out as far as grip goes.

    Examples
    --------
    >>> from limitlap.vehicle import Vehicle
    >>> car = Vehicle("dot", 1000.0, math.inf, 0.0, 0.0, 0.0, mu_lat=1.0, mu_brk=1.0,
    ...               mu_trac=1.0, exponent=2.0)
    >>> round(float(cornering_speed_limit([0.01], car)[0]), 4)  # sqrt(1 * 9.80665 * 100)
    31.3156
    """
    curvature = np.ascontiguousarray(curvature_1_m, dtype=np.float64)
    if curvature.ndim != 1 or not np.isfinite(curvature).all():
        raise LimitlapError("curvature must be a 1-D array of finite values")
    veh = vehicle_array(vehicle, grip_scale)
    return np.sqrt(_kernels.cornering_speed_limit(curvature, veh))


class _Scratch(threading.local):
    """Per-thread scratch kept between solves: steps, sines and the passes' work rows.

    A solve's temporaries are about ten arrays of n floats. Allocated fresh, arrays over
    glibc's mmap threshold (128 kB, 16,000 stations) come as new pages each call and are
    handed back to the system on release: at 20,000 stations their page faults cost more
    than the passes (benchmarks/bench_solver.py). Kept here, they are faulted in once.
    """

    def __init__(self):
        self.buffer = np.empty(0)

    def arrays(self, n: int):
        """(ds, sin_grad, work) for n stations; ``work`` is C-contiguous (N_WORK, n)."""
        rows = _kernels.N_WORK + 2
        if self.buffer.shape[0] < rows * n:
            self.buffer = np.empty(rows * n)
        block = self.buffer[: rows * n].reshape(rows, n)
        return block[0], block[1], block[2:]


_SCRATCH = _Scratch()


def _line_arrays(line: Line):
    curvature = np.ascontiguousarray(line.curvature_1_m, dtype=np.float64)
    s = np.ascontiguousarray(line.distance_m, dtype=np.float64)
    grad = np.ascontiguousarray(line.gradient, dtype=np.float64)
    if curvature.ndim != 1 or curvature.shape[0] < 3 or s.shape != curvature.shape:
        raise LimitlapError("a line needs at least 3 stations of distance and curvature")
    if grad.shape != curvature.shape:
        raise LimitlapError("line gradient must have one value per station")
    ds, sin_grad, work = _SCRATCH.arrays(curvature.shape[0])
    ok = _kernels.line_steps(
        s, grad, curvature, float(line.length_m), bool(line.closed), ds, sin_grad
    )
    if ok == 1:
        raise LimitlapError("line curvature and gradient must be finite")
    if ok == 2:
        raise LimitlapError("line stations must be at increasing distance")
    return curvature, sin_grad, ds, work


def _split(n: int) -> bool:
    """Whether the passes run as two chains each (the same result, sooner on long lines)."""
    return n >= _kernels.SPLIT_MIN_STATIONS


def _cannot_complete(distance_m, sin_grad, veh, grip_scale) -> str:
    r"""Why a profile's speed fell to zero, in one line.

    At walking pace (no aero, no cornering force) the car can drive up a slope only while
    :math:`\mu_t k > C_{rr} + \sin\theta` and hold itself on a descent only while
    :math:`\mu_b k + C_{rr} > -\sin\theta` (the longitudinal balance of the Notes of
    :func:`solve_profile` at v = 0). The steepest grade that breaks either is named;
    otherwise the message stays general.
    """
    base = "the car cannot complete this line"
    if sin_grad.size:
        crr = veh[_kernels.I_CRR]
        for i, limit, what, verb in (
            (
                int(np.argmax(sin_grad)),
                veh[_kernels.I_MU_TRAC] - crr,
                "climb",
                "driving grip can take",
            ),
            (
                int(np.argmin(sin_grad)),
                veh[_kernels.I_MU_BRK] + crr,
                "descent",
                "brakes can hold the car on",
            ),
        ):
            sine = abs(float(sin_grad[i]))
            if (sin_grad[i] > 0.0) == (what == "climb") and sine > limit:
                grade = 100.0 * sine / math.sqrt(max(1.0 - sine * sine, 1e-12))
                steepest = 100.0 * limit / math.sqrt(max(1.0 - limit * limit, 1e-12))
                return (
                    f"{base}: the {grade:.1f} % {what} at {float(distance_m[i]):.0f} m is steeper "
                    f"than its {verb} at grip scale {grip_scale:g} (at most {steepest:.1f} %)"
                )
    return f"{base} (speed falls to zero)"


def solve_profile(
    line: Line,
    vehicle: Vehicle,
    grip_scale: float = 1.0,
    *,
    entry_speed_m_s: float | None = None,
    exit_speed_m_s: float | None = None,
    speed_cap_m_s=None,
) -> Profile:
    r"""Fastest speed profile a point mass can follow on ``line`` within its envelope.

    Parameters
    ----------
    line : Line
        Closed lap or open stretch.
    vehicle : Vehicle
        Complete vehicle (docs/formats.md, Vehicle files).
    grip_scale : float
        Grip scale k, 0.2-2.0: multiplies the three friction coefficients only. [-]
    entry_speed_m_s, exit_speed_m_s : float, optional
        Open lines only: speed at the first station (default: the cornering limit
        there) and the highest speed allowed at the last (default: free). [m/s]
    speed_cap_m_s : array-like, optional
        Extra speed ceiling per station, on top of grip (a slower driver, a speed
        limit); ``inf`` where none. [m/s]

    Returns
    -------
    Profile

    Notes
    -----
    Envelope of docs/formats.md, Vehicle files, with :math:`q = \tfrac12\rho v^2`,
    :math:`N = m g + q C_L A`: lateral :math:`\mu_y N`, braking
    :math:`\mu_b N + q C_D A + C_{rr} m g`, driving :math:`\min(\mu_t N, P/v) - q C_D A -
    C_{rr} m g`, combined on the tyre forces
    :math:`(|F_x|/F_{x,max})^n + (|F_y|/F_{y,max})^n \le 1`. Gradient adds
    :math:`-g\sin\theta` to the longitudinal balance; its (second-order) effect on the
    normal load is left out, as in docs/formats.md, Vehicle files.
    """
    curvature, sin_grad, ds, work = _line_arrays(line)
    veh = vehicle_array(vehicle, grip_scale)
    b_entry, b_exit, b_max = _speed_bounds(
        curvature.shape[0], entry_speed_m_s, exit_speed_m_s, speed_cap_m_s
    )
    closed = bool(line.closed)
    _kernels.solve_speed_squared(
        curvature,
        sin_grad,
        ds,
        veh,
        closed,
        b_entry,
        b_exit,
        b_max,
        work,
        _split(curvature.shape[0]),
    )
    # One block for the profile's arrays: its pages are reused from call to call.
    out = np.empty((_kernels.N_OUT, curvature.shape[0]))
    total = _kernels.profile_outputs(
        work[_kernels.W_FWD], work[_kernels.W_GRIP], curvature, ds, closed, out
    )
    if not math.isfinite(total):
        raise LimitlapError(_cannot_complete(line.distance_m, sin_grad, veh, grip_scale))
    out[_kernels.OUT_DISTANCE] = line.distance_m
    return Profile(
        distance_m=out[_kernels.OUT_DISTANCE],
        speed_m_s=out[_kernels.OUT_SPEED],
        accel_lon_m_s2=out[_kernels.OUT_AX],
        accel_lat_m_s2=out[_kernels.OUT_AY],
        time_s=out[_kernels.OUT_TIME],
        lap_time_s=float(total),
        speed_limit_m_s=out[_kernels.OUT_LIMIT],
        grip_scale=float(grip_scale),
    )


def _speed_bounds(n, entry_speed_m_s, exit_speed_m_s, speed_cap_m_s):
    """(b_entry, b_exit, b_max) for the kernel: squared speeds; b_max empty when no cap."""
    b_cap = V_CAP_M_S**2
    b_entry = b_cap if entry_speed_m_s is None else float(entry_speed_m_s) ** 2
    b_exit = b_cap if exit_speed_m_s is None else float(exit_speed_m_s) ** 2
    if speed_cap_m_s is None:
        return b_entry, b_exit, np.empty(0)
    cap = np.asarray(speed_cap_m_s, dtype=np.float64)
    if cap.shape != (n,) or np.any(~(cap > 0)):
        raise LimitlapError("speed cap must be positive, one value per station")
    return b_entry, b_exit, np.minimum(cap * cap, b_cap)


def lap_times_for_scales(line: Line, vehicle: Vehicle, grip_scales) -> np.ndarray:
    """Lap time for each grip scale, in one compiled loop (for sweeps).

    Parameters
    ----------
    line : Line
    vehicle : Vehicle
    grip_scales : array-like
        Grip scales, each 0.2-2.0. [-]

    Returns
    -------
    numpy.ndarray
        Lap time per scale. [s]
    """
    scales = np.ascontiguousarray(grip_scales, dtype=np.float64)
    for k in scales:
        check_grip_scale(k)
    curvature, sin_grad, ds, work = _line_arrays(line)
    veh = vehicle_array(vehicle, 1.0)
    b_cap = V_CAP_M_S**2
    return _kernels.lap_times_for_scales(
        curvature,
        sin_grad,
        ds,
        veh,
        bool(line.closed),
        b_cap,
        b_cap,
        np.empty(0),
        scales,
        work,
        _split(curvature.shape[0]),
    )
