r"""The vehicle model's envelope as plain functions of speed (numpy, all SI).

The model is the one of docs/formats.md (Vehicle files) and docs/methods.md (Vehicle
model); the solver's compiled kernels implement the same formulas.

With :math:`q = \tfrac12\rho v^2` and :math:`N = m g + q C_L A`:

- lateral limit :math:`a_{y,max} = \mu_y N / m`
- braking limit :math:`a_{x,brk} = \mu_b N/m + (q C_D A + C_{rr} m g)/m`
- driving limit :math:`a_{x,drv} = \min(\mu_t N/m, P/(m v)) - (q C_D A + C_{rr} m g)/m`
- combined: :math:`(|F_{x}|/F_{x,max})^n + (|F_y|/F_{y,max})^n \le 1` on tyre forces.

The grip scale is applied beforehand with :meth:`Vehicle.scaled`.
"""

from __future__ import annotations

import numpy as np

from limitlap.units import G0_M_S2
from limitlap.vehicle import Vehicle


def normal_load_n(speed_m_s, vehicle: Vehicle):
    """Normal load N = m g + ½ρv²·ClA. [N]."""
    v = np.asarray(speed_m_s, dtype=np.float64)
    q = 0.5 * vehicle.air_density_kg_m3 * v * v
    return vehicle.mass_kg * G0_M_S2 + q * vehicle.downforce_area_m2


def resistance_n(speed_m_s, vehicle: Vehicle):
    """Drag plus rolling resistance, q·CdA + Crr·m·g. [N]."""
    v = np.asarray(speed_m_s, dtype=np.float64)
    q = 0.5 * vehicle.air_density_kg_m3 * v * v
    return q * vehicle.drag_area_m2 + vehicle.rolling_coeff * vehicle.mass_kg * G0_M_S2


def lateral_limit_m_s2(speed_m_s, vehicle: Vehicle):
    """Lateral acceleration limit μ_y N / m. [m/s²]."""
    return vehicle.mu_lat * normal_load_n(speed_m_s, vehicle) / vehicle.mass_kg


def braking_limit_m_s2(speed_m_s, vehicle: Vehicle):
    """Deceleration limit (positive) μ_b N/m + resistance/m. [m/s²]."""
    m = vehicle.mass_kg
    return (
        vehicle.mu_brk * normal_load_n(speed_m_s, vehicle) + resistance_n(speed_m_s, vehicle)
    ) / m


def power_force_n(speed_m_s, vehicle: Vehicle):
    """Driving force the power allows, P/v; infinite at standstill. [N]."""
    v = np.asarray(speed_m_s, dtype=np.float64)
    return np.where(v > 0, vehicle.power_w / np.where(v > 0, v, 1.0), np.inf)


def drive_force_max_n(speed_m_s, vehicle: Vehicle):
    """Largest tyre driving force min(μ_t N, P/v). [N]."""
    v = np.asarray(speed_m_s, dtype=np.float64)
    traction = vehicle.mu_trac * normal_load_n(v, vehicle)
    return np.minimum(traction, power_force_n(v, vehicle))


def driving_limit_m_s2(speed_m_s, vehicle: Vehicle):
    """Forward acceleration limit min(μ_t N/m, P/(m v)) - resistance/m. [m/s²]."""
    m = vehicle.mass_kg
    return (drive_force_max_n(speed_m_s, vehicle) - resistance_n(speed_m_s, vehicle)) / m


def available_share(lateral_share, exponent):
    r"""Share of the longitudinal limit left at a lateral share u: :math:`(1-u^n)^{1/n}`.

    Superellipse (Lamé curve); n = 2 is the friction ellipse.

    Examples
    --------
    >>> float(available_share(0.6, 2.0))
    0.8
    """
    u = np.clip(np.abs(np.asarray(lateral_share, dtype=np.float64)), 0.0, 1.0)
    return (1.0 - u**exponent) ** (1.0 / exponent)


def combined_usage(speed_m_s, accel_lon_m_s2, accel_lat_m_s2, vehicle: Vehicle, sin_grad=0.0):
    r"""Combined share of grip used, :math:`((|F_x|/F_{x,max})^n + (|F_y|/F_{y,max})^n)^{1/n}`.

    Tyre forces are what the accelerations need: :math:`F_y = m a_y`,
    :math:`F_x = m a_x + \text{resistance} + m g \sin\theta`; a driving force is measured
    against :math:`\mu_t N`, a braking force against :math:`\mu_b N`. Power is a separate
    limit, not part of the tyre law: when driving, the result is the larger of the tyre
    share and :math:`F_x / (P/v)`.

    Returns
    -------
    numpy.ndarray
        1 on the envelope, below 1 inside it. [-]
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    m = vehicle.mass_kg
    fx = (
        m * np.asarray(accel_lon_m_s2)
        + resistance_n(v, vehicle)
        + m * G0_M_S2 * np.asarray(sin_grad)
    )
    fy = m * np.abs(np.asarray(accel_lat_m_s2))
    normal = normal_load_n(v, vehicle)
    fx_max = np.where(fx >= 0, vehicle.mu_trac * normal, vehicle.mu_brk * normal)
    n = vehicle.exponent
    tyre = ((np.abs(fx) / fx_max) ** n + (fy / (vehicle.mu_lat * normal)) ** n) ** (1.0 / n)
    with np.errstate(divide="ignore", invalid="ignore"):
        power = np.where(fx > 0, fx * v / vehicle.power_w, 0.0)
    return np.maximum(tyre, power)


def longitudinal_shares(speed_m_s, accel_lon_m_s2, vehicle: Vehicle):
    r"""Shares of the braking and driving limits a longitudinal acceleration needs.

    The tyre force :math:`F_x = m a_x + R` against :math:`\mu_b N` when braking and
    against :math:`\min(\mu_t N, P/v)` when driving, on a level road.

    Returns
    -------
    brake, drive : numpy.ndarray
        Each 0 on the other side; NaN where the force is unknown. [-]
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    fx = vehicle.mass_kg * np.asarray(accel_lon_m_s2, dtype=np.float64) + resistance_n(v, vehicle)
    normal = normal_load_n(v, vehicle)
    with np.errstate(invalid="ignore", divide="ignore"):
        brake = np.where(fx < 0, -fx / (vehicle.mu_brk * normal), 0.0)
        drive = np.where(fx > 0, fx / drive_force_max_n(v, vehicle), 0.0)
    bad = ~np.isfinite(fx)
    brake[bad] = np.nan
    drive[bad] = np.nan
    return brake, drive


def drive_accel_available_m_s2(speed_m_s, accel_lat_m_s2, vehicle: Vehicle, sin_grad=0.0):
    r"""Forward acceleration the envelope leaves beside a lateral demand, as the solver.

    :math:`a = (\min(\mu_t N (1-u^n)^{1/n}, P/v) - R)/m - g\sin\theta` with
    :math:`u = m|a_y|/(\mu_y N)`, the combined law of docs/formats.md (Vehicle files).

    Returns
    -------
    numpy.ndarray
        Forward acceleration available. [m/s²]
    """
    v = np.asarray(speed_m_s, dtype=np.float64)
    m = vehicle.mass_kg
    normal = np.maximum(normal_load_n(v, vehicle), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        usage = np.where(normal > 0, m * np.abs(accel_lat_m_s2) / (vehicle.mu_lat * normal), 1.0)
        fx = vehicle.mu_trac * normal * available_share(usage, vehicle.exponent)
    fx = np.minimum(fx, power_force_n(v, vehicle))
    return (fx - resistance_n(v, vehicle)) / m - G0_M_S2 * np.asarray(sin_grad)


def envelope_boundary(speed_m_s: float, vehicle: Vehicle, n_points: int = 181):
    r"""Closed boundary of the g-g envelope at one speed.

    Parameters
    ----------
    speed_m_s : float
        Speed. [m/s]
    vehicle : Vehicle
        Complete vehicle, grip scale already applied (:meth:`Vehicle.scaled`).
    n_points : int
        Points per half (driving and braking side). [-]

    Returns
    -------
    accel_lon_m_s2, accel_lat_m_s2 : numpy.ndarray
        Longitudinal (+ forward) and lateral (+ left) acceleration along the boundary,
        driving half from right to left, then braking half back. [m/s²]

    Notes
    -----
    At lateral share :math:`u = F_y/F_{y,max}` the tyres leave :math:`(1-|u|^n)^{1/n}`
    of the longitudinal limit (superellipse, parametrised as
    :math:`u = \mathrm{sgn}\sin t |\sin t|^{2/n}`, share :math:`|\cos t|^{2/n}`); the
    driving side is also capped at :math:`P/v`, as in the solver; drag and rolling
    resistance shift both sides rearwards.

    Examples
    --------
    >>> car = Vehicle("dot", 1000.0, float("inf"), 0.0, 0.0, 0.0, mu_lat=1.0, mu_brk=1.0,
    ...               mu_trac=1.0, exponent=2.0)
    >>> ax, ay = envelope_boundary(20.0, car)
    >>> bool(np.allclose(np.hypot(ay, ax), 9.80665))  # the friction circle of radius g
    True
    """
    vehicle.require_complete()
    v = float(speed_m_s)
    m = vehicle.mass_kg
    normal = float(normal_load_n(v, vehicle))
    resist = float(resistance_n(v, vehicle))
    n = vehicle.exponent
    theta = np.linspace(-0.5 * np.pi, 0.5 * np.pi, n_points)
    u = np.sign(np.sin(theta)) * np.abs(np.sin(theta)) ** (2.0 / n)
    share = np.abs(np.cos(theta)) ** (2.0 / n)
    fx_drive = np.minimum(vehicle.mu_trac * normal * share, float(power_force_n(v, vehicle)))
    fx_brake = vehicle.mu_brk * normal * share
    fy_max = vehicle.mu_lat * normal
    ay = u * fy_max / m
    ax_drive = (fx_drive - resist) / m
    ax_brake = (-fx_brake - resist) / m
    return np.concatenate([ax_drive, ax_brake[::-1]]), np.concatenate([ay, ay[::-1]])
