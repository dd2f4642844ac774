"""Numba kernels: the only module that imports numba.

Plain data in (float64 arrays, floats, ints), arrays out; no raising, no Python objects.
Each kernel has the name of its wrapper in :mod:`limitlap.solve`; the wrapper checks the
inputs and carries the physics docstring with its sources.

Vehicle parameters travel as one float64 array ``veh`` (index constants below) so every
kernel has the same short signature and the numba cache never freezes a vehicle.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# Layout of the ``veh`` parameter array.
I_MASS = 0  # [kg]
I_POWER = 1  # [W], may be inf
I_DRAG_AREA = 2  # Cd·A [m²]
I_LIFT_AREA = 3  # Cl·A [m²], + = downforce
I_CRR = 4  # [-]
I_RHO = 5  # [kg/m³]
I_MU_LAT = 6  # [-]
I_MU_BRK = 7  # [-]
I_MU_TRAC = 8  # [-]
I_EXPONENT = 9  # [-]
I_G = 10  # [m/s²]
I_V_CAP = 11  # [m/s]
N_VEH = 12


@njit(cache=True)
def _tyre_share_force(mu_x, normal, fy, veh):
    """Longitudinal tyre force left by the combined law at lateral tyre force fy (>= 0).

    (Fx / mu_x N)^n + (Fy / mu_y N)^n = 1; for n = 2 written without a division,
    Fx = (mu_x / mu_y) sqrt((mu_y N)² - Fy²), which keeps the pass's dependency chain short.
    """
    fy_max = veh[I_MU_LAT] * normal
    if fy >= fy_max:
        return 0.0
    if veh[I_EXPONENT] == 2.0:
        return (mu_x / veh[I_MU_LAT]) * np.sqrt(fy_max * fy_max - fy * fy)
    n = veh[I_EXPONENT]
    return mu_x * normal * (1.0 - (fy / fy_max) ** n) ** (1.0 / n)


@njit(cache=True)
def drive_accel(kappa, b, sin_grad, veh):
    """Largest forward acceleration at curvature kappa and v² = b (all SI)."""
    m = veh[I_MASS]
    g = veh[I_G]
    q = 0.5 * veh[I_RHO] * b
    normal = m * g + q * veh[I_LIFT_AREA]
    if normal < 0.0:
        normal = 0.0
    fx_tyre = _tyre_share_force(veh[I_MU_TRAC], normal, m * abs(kappa) * b, veh)
    fx_power = veh[I_POWER] / np.sqrt(b) if b > 0.0 else np.inf
    if fx_power < fx_tyre:
        fx_tyre = fx_power
    resist = q * veh[I_DRAG_AREA] + veh[I_CRR] * m * g
    return (fx_tyre - resist) / m - g * sin_grad


@njit(cache=True)
def brake_decel(kappa, b, sin_grad, veh):
    """Largest deceleration (positive number) at curvature kappa and v² = b (all SI)."""
    m = veh[I_MASS]
    g = veh[I_G]
    q = 0.5 * veh[I_RHO] * b
    normal = m * g + q * veh[I_LIFT_AREA]
    if normal < 0.0:
        normal = 0.0
    fx_tyre = _tyre_share_force(veh[I_MU_BRK], normal, m * abs(kappa) * b, veh)
    resist = q * veh[I_DRAG_AREA] + veh[I_CRR] * m * g
    return (fx_tyre + resist) / m + g * sin_grad


@njit(cache=True)
def cornering_speed_limit(curvature_1_m, veh):
    """Kernel of :func:`limitlap.solve.cornering_speed_limit`: v_lim² per point."""
    m = veh[I_MASS]
    aero_gain_1_m = 0.5 * veh[I_RHO] * veh[I_LIFT_AREA] / m
    mu = veh[I_MU_LAT]
    g = veh[I_G]
    b_cap = veh[I_V_CAP] * veh[I_V_CAP]
    out = np.empty_like(curvature_1_m)
    for i in range(curvature_1_m.shape[0]):
        denom = abs(curvature_1_m[i]) - mu * aero_gain_1_m
        if denom <= 0.0:  # straight, or downforce grows faster than the corner needs
            out[i] = b_cap
        else:
            out[i] = min(b_cap, mu * g / denom)
    return out


@njit(cache=True)
def _forward_step(b_i, k_i, s_i, k_j, s_j, ds, b_lim_j, veh):
    """Explicit trapezoidal (Heun) step of db/ds = 2 a_x, clipped to the corner limit."""
    a1 = drive_accel(k_i, b_i, s_i, veh)
    bp = b_i + 2.0 * ds * a1
    if bp > b_lim_j:
        bp = b_lim_j
    if bp < 0.0:
        bp = 0.0
    a2 = drive_accel(k_j, bp, s_j, veh)
    b_j = b_i + ds * (a1 + a2)
    if b_j > b_lim_j:
        b_j = b_lim_j
    if b_j < 0.0:
        b_j = 0.0
    return b_j


@njit(cache=True)
def _backward_step(b_j, k_j, s_j, k_i, s_i, ds, b_lim_i, veh):
    """Heun step of the braking pass from station j back to station i."""
    d1 = brake_decel(k_j, b_j, s_j, veh)
    bp = b_j + 2.0 * ds * d1
    if bp > b_lim_i:
        bp = b_lim_i
    if bp < 0.0:
        bp = 0.0
    d2 = brake_decel(k_i, bp, s_i, veh)
    b_i = b_j + ds * (d1 + d2)
    if b_i > b_lim_i:
        b_i = b_lim_i
    if b_i < 0.0:
        b_i = 0.0
    return b_i


@njit(cache=True)
def solve_speed_squared(curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max):
    """Kernel of :func:`limitlap.solve.solve_profile`: the QSS speed² profile.

    ``ds_m[i]`` is the length of the step from station i to i+1; for a closed lap the
    last one runs back to station 0. Open lines start at ``b_entry`` and end no faster
    than ``b_exit``. ``b_max`` caps v² per station on top of the grip limit (a slower
    driver, a pit-lane limit). Returns (b, b_lim) with b_lim the grip-only limit.
    """
    n = curvature_1_m.shape[0]
    b_grip = cornering_speed_limit(curvature_1_m, veh)
    b_lim = np.minimum(b_grip, b_max)
    fwd = np.empty(n)
    bwd = np.empty(n)
    if closed:
        i0 = 0
        for i in range(1, n):
            if b_lim[i] < b_lim[i0]:
                i0 = i
        # Periodic lap: start both passes at the slowest cornering limit. Where the car
        # cannot actually reach that speed (power or drag limited, downhill braking), the
        # lap that arrives back is slower: restart from the arrival until it repeats.
        fwd[i0] = b_lim[i0]
        for lap in range(200):
            i = i0
            for _ in range(n - 1):
                j = i + 1 if i + 1 < n else 0
                b_new = _forward_step(
                    fwd[i], curvature_1_m[i], sin_grad[i], curvature_1_m[j], sin_grad[j],
                    ds_m[i], b_lim[j], veh,
                )
                if lap > 0 and b_new == fwd[j]:
                    break  # joined last lap's trace: the rest of the lap is unchanged
                fwd[j] = b_new
                i = j
            i = i0 - 1 if i0 > 0 else n - 1
            b_arr = _forward_step(
                fwd[i], curvature_1_m[i], sin_grad[i], curvature_1_m[i0], sin_grad[i0],
                ds_m[i], b_lim[i0], veh,
            )
            if b_arr >= fwd[i0] * (1.0 - 1e-13):
                break
            fwd[i0] = b_arr
        bwd[i0] = b_lim[i0]
        for lap in range(200):
            j = i0
            for _ in range(n - 1):
                i = j - 1 if j > 0 else n - 1
                b_new = _backward_step(
                    bwd[j], curvature_1_m[j], sin_grad[j], curvature_1_m[i], sin_grad[i],
                    ds_m[i], b_lim[i], veh,
                )
                if lap > 0 and b_new == bwd[i]:
                    break
                bwd[i] = b_new
                j = i
            j = i0 + 1 if i0 + 1 < n else 0
            b_arr = _backward_step(
                bwd[j], curvature_1_m[j], sin_grad[j], curvature_1_m[i0], sin_grad[i0],
                ds_m[i0], b_lim[i0], veh,
            )
            if b_arr >= bwd[i0] * (1.0 - 1e-13):
                break
            bwd[i0] = b_arr
    else:
        fwd[0] = min(b_entry, b_lim[0])
        for i in range(n - 1):
            fwd[i + 1] = _forward_step(
                fwd[i], curvature_1_m[i], sin_grad[i], curvature_1_m[i + 1], sin_grad[i + 1],
                ds_m[i], b_lim[i + 1], veh,
            )
        bwd[n - 1] = min(b_exit, b_lim[n - 1])
        for i in range(n - 2, -1, -1):
            bwd[i] = _backward_step(
                bwd[i + 1], curvature_1_m[i + 1], sin_grad[i + 1], curvature_1_m[i], sin_grad[i],
                ds_m[i], b_lim[i], veh,
            )
    b = np.empty(n)
    for i in range(n):
        b[i] = min(fwd[i], bwd[i])
    return b, b_grip


@njit(cache=True)
def elapsed_time(speed_m_s, ds_m, closed):
    """Kernel of :func:`limitlap.solve.elapsed_time`: time at each station and lap time."""
    n = speed_m_s.shape[0]
    t = np.empty(n)
    t[0] = 0.0
    for i in range(n - 1):
        t[i + 1] = t[i] + 2.0 * ds_m[i] / (speed_m_s[i] + speed_m_s[i + 1])
    total = t[n - 1]
    if closed:
        total += 2.0 * ds_m[n - 1] / (speed_m_s[n - 1] + speed_m_s[0])
    return t, total


@njit(cache=True)
def lap_times_for_scales(curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max, scales):
    """Lap time for each grip scale in ``scales`` (a sweep), same line and car."""
    out = np.empty(scales.shape[0])
    v2 = veh.copy()
    for k in range(scales.shape[0]):
        v2[I_MU_LAT] = veh[I_MU_LAT] * scales[k]
        v2[I_MU_BRK] = veh[I_MU_BRK] * scales[k]
        v2[I_MU_TRAC] = veh[I_MU_TRAC] * scales[k]
        b, _ = solve_speed_squared(curvature_1_m, sin_grad, ds_m, v2, closed, b_entry, b_exit, b_max)
        v = np.sqrt(b)
        _, total = elapsed_time(v, ds_m, closed)
        out[k] = total
    return out
