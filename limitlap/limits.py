r"""The envelope of INTERFACE §3 as plain functions of speed (numpy, all SI).

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
    """Normal load N = m g + ½ρv²·ClA. [N]"""
    v = np.asarray(speed_m_s, dtype=np.float64)
    q = 0.5 * vehicle.air_density_kg_m3 * v * v
    return vehicle.mass_kg * G0_M_S2 + q * vehicle.downforce_area_m2


def resistance_n(speed_m_s, vehicle: Vehicle):
    """Drag plus rolling resistance, q·CdA + Crr·m·g. [N]"""
    v = np.asarray(speed_m_s, dtype=np.float64)
    q = 0.5 * vehicle.air_density_kg_m3 * v * v
    return q * vehicle.drag_area_m2 + vehicle.rolling_coeff * vehicle.mass_kg * G0_M_S2


def lateral_limit_m_s2(speed_m_s, vehicle: Vehicle):
    """Lateral acceleration limit μ_y N / m. [m/s²]"""
    return vehicle.mu_lat * normal_load_n(speed_m_s, vehicle) / vehicle.mass_kg


def braking_limit_m_s2(speed_m_s, vehicle: Vehicle):
    """Deceleration limit (positive) μ_b N/m + resistance/m. [m/s²]"""
    m = vehicle.mass_kg
    return (vehicle.mu_brk * normal_load_n(speed_m_s, vehicle) + resistance_n(speed_m_s, vehicle)) / m


def drive_force_max_n(speed_m_s, vehicle: Vehicle):
    """Largest tyre driving force min(μ_t N, P/v). [N]"""
    v = np.asarray(speed_m_s, dtype=np.float64)
    traction = vehicle.mu_trac * normal_load_n(v, vehicle)
    with np.errstate(divide="ignore"):
        power = np.where(v > 0, vehicle.power_w / np.where(v > 0, v, 1.0), np.inf)
    return np.minimum(traction, power)


def driving_limit_m_s2(speed_m_s, vehicle: Vehicle):
    """Forward acceleration limit min(μ_t N/m, P/(m v)) - resistance/m. [m/s²]"""
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
    fx = m * np.asarray(accel_lon_m_s2) + resistance_n(v, vehicle) + m * G0_M_S2 * np.asarray(sin_grad)
    fy = m * np.abs(np.asarray(accel_lat_m_s2))
    normal = normal_load_n(v, vehicle)
    fx_max = np.where(fx >= 0, vehicle.mu_trac * normal, vehicle.mu_brk * normal)
    n = vehicle.exponent
    tyre = ((np.abs(fx) / fx_max) ** n + (fy / (vehicle.mu_lat * normal)) ** n) ** (1.0 / n)
    with np.errstate(divide="ignore", invalid="ignore"):
        power = np.where(fx > 0, fx * v / vehicle.power_w, 0.0)
    return np.maximum(tyre, power)
