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
I_INV_MASS = 12  # 1/m [1/kg], so the passes multiply instead of divide
I_TRAC_RATIO = 13  # mu_trac / mu_lat [-]
I_BRK_RATIO = 14  # mu_brk / mu_lat [-]
N_VEH = 15

# Rows of a solved profile's block (``profile_outputs``'s ``out``).
OUT_DISTANCE = 0  # [m]
OUT_SPEED = 1  # [m/s]
OUT_AX = 2  # [m/s²]
OUT_AY = 3  # [m/s²]
OUT_TIME = 4  # [s]
OUT_LIMIT = 5  # grip-only cornering speed limit [m/s]
N_OUT = 6


@njit(cache=True, inline="always")
def _tyre_share_force(mu_x, ratio, normal, fy, veh):
    """Longitudinal tyre force left by the combined law at lateral tyre force fy (>= 0).

    (Fx / mu_x N)^n + (Fy / mu_y N)^n = 1; for n = 2 written without a division,
    Fx = (mu_x / mu_y) sqrt((mu_y N)² - Fy²) with ``ratio`` = mu_x / mu_y, which keeps
    the pass's dependency chain short.
    """
    fy_max = veh[I_MU_LAT] * normal
    if fy >= fy_max:
        return 0.0
    if veh[I_EXPONENT] == 2.0:
        return ratio * np.sqrt(fy_max * fy_max - fy * fy)
    n = veh[I_EXPONENT]
    return mu_x * normal * (1.0 - (fy / fy_max) ** n) ** (1.0 / n)


@njit(cache=True, inline="always")
def drive_accel(kappa, b, sin_grad, veh):
    """Largest forward acceleration at curvature kappa and v² = b (all SI)."""
    m = veh[I_MASS]
    g = veh[I_G]
    q = 0.5 * veh[I_RHO] * b
    normal = m * g + q * veh[I_LIFT_AREA]
    if normal < 0.0:
        normal = 0.0
    fx_tyre = _tyre_share_force(veh[I_MU_TRAC], veh[I_TRAC_RATIO], normal, m * abs(kappa) * b, veh)
    fx_power = veh[I_POWER] / np.sqrt(b) if b > 0.0 else np.inf
    if fx_power < fx_tyre:
        fx_tyre = fx_power
    resist = q * veh[I_DRAG_AREA] + veh[I_CRR] * m * g
    return (fx_tyre - resist) * veh[I_INV_MASS] - g * sin_grad


@njit(cache=True, inline="always")
def brake_decel(kappa, b, sin_grad, veh):
    """Largest deceleration (positive number) at curvature kappa and v² = b (all SI)."""
    m = veh[I_MASS]
    g = veh[I_G]
    q = 0.5 * veh[I_RHO] * b
    normal = m * g + q * veh[I_LIFT_AREA]
    if normal < 0.0:
        normal = 0.0
    fx_tyre = _tyre_share_force(veh[I_MU_BRK], veh[I_BRK_RATIO], normal, m * abs(kappa) * b, veh)
    resist = q * veh[I_DRAG_AREA] + veh[I_CRR] * m * g
    return (fx_tyre + resist) * veh[I_INV_MASS] + g * sin_grad


@njit(cache=True, inline="always")
def _cornering_limit(kappa, veh):
    """v_lim² at curvature kappa: m v² |κ| = μ_y (m g + ½ρ C_L A v²), capped. [m²/s²]."""
    aero_gain_1_m = 0.5 * veh[I_RHO] * veh[I_LIFT_AREA] / veh[I_MASS]
    mu = veh[I_MU_LAT]
    b_cap = veh[I_V_CAP] * veh[I_V_CAP]
    denom = abs(kappa) - mu * aero_gain_1_m
    if denom <= 0.0:  # straight, or downforce grows faster than the corner needs
        return b_cap
    return min(b_cap, mu * veh[I_G] / denom)


@njit(cache=True)
def _cornering_limit_into(curvature_1_m, veh, out):
    """v_lim² per point into ``out`` (:func:`cornering_speed_limit`)."""
    for i in range(curvature_1_m.shape[0]):
        out[i] = _cornering_limit(curvature_1_m[i], veh)


@njit(cache=True)
def cornering_speed_limit(curvature_1_m, veh):
    """Kernel of :func:`limitlap.solve.cornering_speed_limit`: v_lim² per point."""
    out = np.empty_like(curvature_1_m)
    _cornering_limit_into(curvature_1_m, veh, out)
    return out


@njit(cache=True, inline="always")
def _forward_step(b_i, a_i, k_j, s_j, h, b_lim_j, veh):
    """Trapezoidal predictor-corrector step of db/ds = 2 a_x to the next station j.

    ``a_i`` is the acceleration the previous step evaluated at station i (at its
    predicted speed); the step evaluates the limits once, at j, and hands that value on
    (PEC mode). Second order in the spacing like Heun's method, one evaluation per
    step. Clipped to j's limit. Returns (b_j, a_j).
    """
    bp = b_i + 2.0 * h * a_i
    if bp > b_lim_j:
        bp = b_lim_j
    elif bp < 0.0:
        bp = 0.0
    a_j = drive_accel(k_j, bp, s_j, veh)
    b_j = b_i + h * (a_i + a_j)
    if b_j > b_lim_j:
        b_j = b_lim_j
    elif b_j < 0.0:
        b_j = 0.0
    return b_j, a_j


@njit(cache=True, inline="always")
def _backward_step(b_j, d_j, k_i, s_i, h, b_lim_i, veh):
    """Braking twin of :func:`_forward_step`, from station j back to i. Returns (b_i, d_i)."""
    bp = b_j + 2.0 * h * d_j
    if bp > b_lim_i:
        bp = b_lim_i
    elif bp < 0.0:
        bp = 0.0
    d_i = brake_decel(k_i, bp, s_i, veh)
    b_i = b_j + h * (d_j + d_i)
    if b_i > b_lim_i:
        b_i = b_lim_i
    elif b_i < 0.0:
        b_i = 0.0
    return b_i, d_i


#: Rows of the solver's scratch (``solve_speed_squared``'s ``work``): forward trace (v²
#: on return), backward trace, the acceleration and deceleration each carries, the speed²
#: limit of the passes (grip and cap), the grip-only limit.
W_FWD = 0
W_BWD = 1
W_FA = 2
W_BD = 3
W_LIM = 4
W_GRIP = 5
N_WORK = 6

#: Below this many stations each pass runs as one chain: the second chain and its
#: fix-up cost more than they save.
SPLIT_MIN_STATIONS = 2000


@njit(cache=True)
def _run_chains(k, sg, ds, veh, b_lim, work, f_start, f_steps, b_start, b_steps):
    """Two forward and two backward passes, each from its own start station, in one loop.

    Forward chain c starts at ``f_start[c]`` (its trace value there already set) and takes
    ``f_steps[c]`` steps; backward chain c likewise from ``b_start[c]``. Indices wrap
    round the arrays (closed laps). The four dependency chains are independent, so the
    processor overlaps them; each pass step is a long chain of dependent floating-point
    operations (a square root and a division among them), which one chain alone leaves
    mostly idle. ``work[W_FA]``/``work[W_BD]`` receive the acceleration carried at each
    station.
    """
    n = k.shape[0]
    fwd, bwd, fa, bd = work[W_FWD], work[W_BWD], work[W_FA], work[W_BD]
    # Chain states in locals (held in registers) and the step counts too: read back
    # from the arrays, every step would wait for the store before it.
    i0, i1, j0, j1 = f_start[0], f_start[1], b_start[0], b_start[1]
    nf0, nf1, nb0, nb1 = f_steps[0], f_steps[1], b_steps[0], b_steps[1]
    f0, f1, g0, g1 = fwd[i0], fwd[i1], bwd[j0], bwd[j1]
    a0 = drive_accel(k[i0], f0, sg[i0], veh)
    a1 = drive_accel(k[i1], f1, sg[i1], veh)
    d0 = brake_decel(k[j0], g0, sg[j0], veh)
    d1 = brake_decel(k[j1], g1, sg[j1], veh)
    fa[i0], fa[i1], bd[j0], bd[j1] = a0, a1, d0, d1
    for t in range(max(max(nf0, nf1), max(nb0, nb1))):
        if t < nf0:
            i = i0 + 1 if i0 + 1 < n else 0
            f0, a0 = _forward_step(f0, a0, k[i], sg[i], ds[i0], b_lim[i], veh)
            fwd[i] = f0
            fa[i] = a0
            i0 = i
        if t < nf1:
            i = i1 + 1 if i1 + 1 < n else 0
            f1, a1 = _forward_step(f1, a1, k[i], sg[i], ds[i1], b_lim[i], veh)
            fwd[i] = f1
            fa[i] = a1
            i1 = i
        if t < nb0:
            j = j0 - 1 if j0 > 0 else n - 1
            g0, d0 = _backward_step(g0, d0, k[j], sg[j], ds[j], b_lim[j], veh)
            bwd[j] = g0
            bd[j] = d0
            j0 = j
        if t < nb1:
            j = j1 - 1 if j1 > 0 else n - 1
            g1, d1 = _backward_step(g1, d1, k[j], sg[j], ds[j], b_lim[j], veh)
            bwd[j] = g1
            bd[j] = d1
            j1 = j


@njit(cache=True)
def _forward_rejoin(k, sg, ds, veh, b_lim, fwd, fa, i, steps):
    """Forward steps from station i (its stored state taken as right), overwriting the trace, until a step lands on the stored state (the rest already follows from it) or ``steps`` steps are done. Returns the steps taken."""
    n = k.shape[0]
    b = fwd[i]
    a = fa[i]
    for m in range(steps):
        i1 = i + 1 if i + 1 < n else 0
        b, a = _forward_step(b, a, k[i1], sg[i1], ds[i], b_lim[i1], veh)
        if b == fwd[i1] and a == fa[i1]:
            return m + 1
        fwd[i1] = b
        fa[i1] = a
        i = i1
    return steps


@njit(cache=True)
def _backward_rejoin(k, sg, ds, veh, b_lim, bwd, bd, j, steps):
    """Backward twin of :func:`_forward_rejoin`."""
    n = k.shape[0]
    b = bwd[j]
    d = bd[j]
    for m in range(steps):
        j1 = j - 1 if j > 0 else n - 1
        b, d = _backward_step(b, d, k[j1], sg[j1], ds[j1], b_lim[j1], veh)
        if b == bwd[j1] and d == bd[j1]:
            return m + 1
        bwd[j1] = b
        bd[j1] = d
        j = j1
    return steps


@njit(cache=True)
def _steepest_drop(b_lim, first, offset_lo, offset_hi, direction):
    """Offset (from station ``first``, counted in the pass's direction) in [lo, hi) of the station whose cornering limit lies furthest below the one before it in that direction: a corner entry for the forward pass, a corner exit for the backward one."""
    n = b_lim.shape[0]
    best = offset_lo
    drop_best = -np.inf
    s = (first + direction * offset_lo) % n
    prev = (s - direction) % n
    for off in range(offset_lo, offset_hi):
        drop = b_lim[prev] - b_lim[s]
        if drop > drop_best:
            drop_best = drop
            best = off
        prev = s
        s += direction  # stepped, not taken modulo n: a division per station is dear
        if s == n:
            s = 0
        elif s < 0:
            s = n - 1
    return best


@njit(cache=True)
def _split_passes(k, sg, ds, veh, b_lim, work, f0, b0, split):
    """Forward pass from station f0 and backward pass from b0, exactly as one sequential pass each.

    Each takes n - 1 steps round the line; the start values are already in ``work``.

    With ``split``, each pass runs as two chains (:func:`_run_chains`): the second starts
    mid-lap at the cornering limit of the station where the limit drops most steeply in
    the pass's direction (a corner entry forward, a corner exit backward), where the
    sequential trace is almost always held at the limit in both the predictor and the
    corrector, i.e. in the very state the chain starts from. The first chain's end is then
    stepped on into the second's stretch until it lands on the stored state; from there on
    the stored trace is what one sequential pass computes, value for value.
    """
    n = k.shape[0]
    lo, hi = (n // 3, (2 * n) // 3) if split else (n, n)
    f_off = _steepest_drop(b_lim, f0, lo, hi, 1) if split else n
    b_off = _steepest_drop(b_lim, b0, lo, hi, -1) if split else n
    f_start = np.array([f0, (f0 + f_off) % n])
    b_start = np.array([b0, (b0 - b_off) % n])
    f_steps = np.array([f_off - 1, n - 1 - f_off])
    b_steps = np.array([b_off - 1, n - 1 - b_off])
    if split:
        work[W_FWD, f_start[1]] = b_lim[f_start[1]]
        work[W_BWD, b_start[1]] = b_lim[b_start[1]]
    else:
        f_steps[:] = (n - 1, 0)
        b_steps[:] = (n - 1, 0)
    _run_chains(k, sg, ds, veh, b_lim, work, f_start, f_steps, b_start, b_steps)
    if split:
        last = (f_start[1] - 1) % n
        _forward_rejoin(k, sg, ds, veh, b_lim, work[W_FWD], work[W_FA], last, n - f_off)
        last = (b_start[1] + 1) % n
        _backward_rejoin(k, sg, ds, veh, b_lim, work[W_BWD], work[W_BD], last, n - b_off)


@njit(cache=True)
def _close_forward(k, sg, ds, veh, b_lim, fwd, fa, i0):
    """Periodic forward pass: where the lap arrives back at i0 slower than it started, restart from the arrival until it repeats."""
    n = k.shape[0]
    i_last = i0 - 1 if i0 > 0 else n - 1
    for _ in range(200):
        arrival, _ = _forward_step(
            fwd[i_last], fa[i_last], k[i0], sg[i0], ds[i_last], b_lim[i0], veh
        )
        if arrival >= fwd[i0] * (1.0 - 1e-13):
            return
        fwd[i0] = arrival
        fa[i0] = drive_accel(k[i0], arrival, sg[i0], veh)
        if _forward_rejoin(k, sg, ds, veh, b_lim, fwd, fa, i0, n - 1) < n - 1:
            return  # the lap rejoined its previous trace: the rest repeats


@njit(cache=True)
def _close_backward(k, sg, ds, veh, b_lim, bwd, bd, i0):
    """Backward twin of :func:`_close_forward`."""
    n = k.shape[0]
    j_last = i0 + 1 if i0 + 1 < n else 0
    for _ in range(200):
        arrival, _ = _backward_step(bwd[j_last], bd[j_last], k[i0], sg[i0], ds[i0], b_lim[i0], veh)
        if arrival >= bwd[i0] * (1.0 - 1e-13):
            return
        bwd[i0] = arrival
        bd[i0] = brake_decel(k[i0], arrival, sg[i0], veh)
        if _backward_rejoin(k, sg, ds, veh, b_lim, bwd, bd, i0, n - 1) < n - 1:
            return


@njit(cache=True)
def solve_speed_squared(
    curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max, work, split
):
    """Kernel of :func:`limitlap.solve.solve_profile`: the QSS speed² profile.

    ``ds_m[i]`` is the length of the step from station i to i+1; for a closed lap the
    last one runs back to station 0. Open lines start at ``b_entry`` and end no faster
    than ``b_exit``. ``b_max`` caps v² per station on top of the grip limit (a slower
    driver, a pit-lane limit); empty for none. ``work`` is scratch of shape (N_WORK, n)
    that the caller keeps between calls (fresh arrays of this size cost more in page
    faults than the passes take). ``split`` runs each pass as two chains
    (:func:`_split_passes`; the same result). On return ``work[W_FWD]`` holds v² and
    ``work[W_GRIP]`` the grip-only limit.
    """
    pass_traces(curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max, work, split)
    fwd = work[W_FWD]
    bwd = work[W_BWD]
    for i in range(curvature_1_m.shape[0]):
        fwd[i] = min(fwd[i], bwd[i])


@njit(cache=True)
def pass_traces(curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max, work, split):
    """The forward and backward traces of :func:`solve_speed_squared`, not yet combined.

    On return ``work[W_FWD]``/``work[W_BWD]`` hold the passes' v², ``work[W_FA]``/
    ``work[W_BD]`` the accelerations they carried, ``work[W_LIM]`` their limit, and for a
    closed lap the index of the station both passes started from is returned (-1 open).
    """
    n = curvature_1_m.shape[0]
    b_grip = work[W_GRIP]
    b_lim = work[W_LIM]
    _cornering_limit_into(curvature_1_m, veh, b_grip)
    for i in range(n):
        b_lim[i] = min(b_grip[i], b_max[i]) if b_max.shape[0] else b_grip[i]
    fwd = work[W_FWD]
    bwd = work[W_BWD]
    if closed:
        # Periodic lap: both passes start at the slowest cornering limit. Where the car
        # cannot actually hold that speed there (drag at full lateral grip, power, a
        # downhill brake zone), the lap arrives back slower: restart from the arrival
        # until it repeats.
        i0 = 0
        for i in range(1, n):
            if b_lim[i] < b_lim[i0]:
                i0 = i
        fwd[i0] = b_lim[i0]
        bwd[i0] = b_lim[i0]
        _split_passes(curvature_1_m, sin_grad, ds_m, veh, b_lim, work, i0, i0, split)
        _close_forward(curvature_1_m, sin_grad, ds_m, veh, b_lim, fwd, work[W_FA], i0)
        _close_backward(curvature_1_m, sin_grad, ds_m, veh, b_lim, bwd, work[W_BD], i0)
        return i0
    fwd[0] = min(b_entry, b_lim[0])
    bwd[n - 1] = min(b_exit, b_lim[n - 1])
    _split_passes(curvature_1_m, sin_grad, ds_m, veh, b_lim, work, 0, n - 1, split)
    return -1


@njit(cache=True, error_model="numpy")
def _step_time(ds, v_sum):
    """2 ds / (v_i + v_j); inf when the car stands at both ends (no division by zero)."""
    return 2.0 * ds / v_sum if v_sum > 0.0 else np.inf


@njit(cache=True)
def line_steps(distance_m, gradient, curvature_1_m, length_m, closed, ds, sin_grad):
    """Steps between stations into ``ds``, sin(theta) from dz/ds = tan(theta) into ``sin_grad``; returns a check flag: 0 fine, 1 a non-finite curvature or gradient, 2 a step that is not positive."""
    n = distance_m.shape[0]
    ok = 0
    for i in range(n):
        g = gradient[i]
        if not (np.isfinite(g) and np.isfinite(curvature_1_m[i])):
            ok = 1
        sin_grad[i] = g / np.sqrt(1.0 + g * g) if g != 0.0 else 0.0
    for i in range(n - 1):
        ds[i] = distance_m[i + 1] - distance_m[i]
    ds[n - 1] = length_m - distance_m[n - 1] if closed else 1.0
    if ok == 0:
        for i in range(n):
            if not ds[i] > 0.0:
                ok = 2
    return ok


@njit(cache=True, error_model="numpy")  # no zero-division test per element: loops vectorise
def profile_outputs(b, b_grip, curvature_1_m, ds_m, closed, out):
    """Speed, step acceleration, lateral acceleration, elapsed time and the grip-only speed limit from v² into rows 1-5 of ``out`` (``OUT_*``); returns the lap time.

    a_x[i] = (b[i+1] - b[i]) / (2 ds[i]) on the step leaving station i; the last station
    of an open line repeats the one before. Step times 2 ds / (v_i + v_{i+1}).
    """
    n = b.shape[0]
    v, ax, ay, t, v_lim = out[OUT_SPEED], out[OUT_AX], out[OUT_AY], out[OUT_TIME], out[OUT_LIMIT]
    for i in range(n):
        v[i] = np.sqrt(b[i])
        ay[i] = curvature_1_m[i] * b[i]
        v_lim[i] = np.sqrt(b_grip[i])
    for i in range(n - 1):
        ax[i] = (b[i + 1] - b[i]) / (2.0 * ds_m[i])
    acc = 0.0
    for i in range(n - 1):
        t[i] = acc
        acc += _step_time(ds_m[i], v[i] + v[i + 1])
    t[n - 1] = acc
    if closed:
        ax[n - 1] = (b[0] - b[n - 1]) / (2.0 * ds_m[n - 1])
        acc += _step_time(ds_m[n - 1], v[n - 1] + v[0])
    else:
        ax[n - 1] = ax[n - 2]
    return acc


@njit(cache=True)
def lap_times_for_scales(
    curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max, scales, work, split
):
    """Lap time for each grip scale in ``scales`` (a sweep), same line and car."""
    out = np.empty(scales.shape[0])
    v2 = veh.copy()
    n = curvature_1_m.shape[0]
    for s in range(scales.shape[0]):
        v2[I_MU_LAT] = veh[I_MU_LAT] * scales[s]
        v2[I_MU_BRK] = veh[I_MU_BRK] * scales[s]
        v2[I_MU_TRAC] = veh[I_MU_TRAC] * scales[s]
        solve_speed_squared(
            curvature_1_m, sin_grad, ds_m, v2, closed, b_entry, b_exit, b_max, work, split
        )
        b = work[W_FWD]
        total = 0.0
        for i in range(n - 1):
            total += _step_time(ds_m[i], np.sqrt(b[i]) + np.sqrt(b[i + 1]))
        if closed:
            total += _step_time(ds_m[n - 1], np.sqrt(b[n - 1]) + np.sqrt(b[0]))
        out[s] = total
    return out


@njit(cache=True)
def gate_approaches(x, y, gx, gy, reach):
    """Kernel of ``limitlap.laps.gate_crossings``' search: the row nearest the gate point (the first of equals; -1 when no row has a position), its distance, and the rows i whose step to i + 1 stays within ``reach`` of the point at both ends.

    Two passes over the positions, no full-length temporaries. [-], [m], [-].
    """
    n = x.shape[0]
    reach2 = reach * reach
    best = np.inf
    near = -1
    count = 0
    prev = False
    for i in range(n):
        dx = x[i] - gx
        dy = y[i] - gy
        d2 = dx * dx + dy * dy
        if d2 < best:  # NaN (no position) never is
            best = d2
            near = i
        close = d2 < reach2
        if close and prev:
            count += 1
        prev = close
    pairs = np.empty(count, np.int64)
    k = 0
    prev = False
    for i in range(n):
        dx = x[i] - gx
        dy = y[i] - gy
        close = dx * dx + dy * dy < reach2
        if close and prev:
            pairs[k] = i - 1
            k += 1
        prev = close
    return near, np.sqrt(best) if near >= 0 else np.nan, pairs


@njit(cache=True, inline="always")
def _nearer_root(va, ia, vb, ib, top):
    """Heap order of (value, index) pairs: smaller first in the heap of a group's largest pairs (``top``), larger first in the heap of its smallest."""
    if top:
        return va < vb or (va == vb and ia < ib)
    return va > vb or (va == vb and ia > ib)


@njit(cache=True, inline="always")
def _sift_down(hv, hi, s, k, top):
    p = 0
    while True:
        c = 2 * p + 1
        if c >= k:
            break
        if c + 1 < k and _nearer_root(hv[s + c + 1], hi[s + c + 1], hv[s + c], hi[s + c], top):
            c += 1
        if not _nearer_root(hv[s + c], hi[s + c], hv[s + p], hi[s + p], top):
            break
        hv[s + p], hv[s + c] = hv[s + c], hv[s + p]
        hi[s + p], hi[s + c] = hi[s + c], hi[s + p]
        p = c


@njit(cache=True)
def boundary_points(key, rho, rank):
    """Kernel of ``limitlap.envelope._boundary_points``: one sample per group of ``key``.

    For each group g (0 <= key < rank.shape[0]) with ``rank[g] >= 0``: the index of the
    sample of rank ``rank[g]`` when the group's samples are ordered by ``rho``, ties by
    index (a stable order, as ``numpy.lexsort((rho, key))``); -1 for the other groups.

    One pass over the samples keeps, per group, a binary heap of whichever is shorter:
    its ``count - rank`` largest (value, index) pairs, whose smallest is the answer, or its
    ``rank + 1`` smallest, whose largest is (selection by a bounded heap; Knuth, *TAOCP*
    vol. 3, §5.2.3 and §5.3.3). For the envelope's 99 % quantile that is a handful of
    pairs a bin, and most samples are turned away by one comparison with the heap's root.
    """
    n_keys = rank.shape[0]
    n = key.shape[0]
    count = np.zeros(n_keys, np.int64)
    for i in range(n):
        count[key[i]] += 1
    size = np.zeros(n_keys, np.int64)
    top = np.zeros(n_keys, np.bool_)
    start = np.zeros(n_keys + 1, np.int64)
    for g in range(n_keys):
        r = rank[g]
        if r >= 0 and r < count[g]:
            largest = count[g] - r
            top[g] = largest <= r + 1
            size[g] = largest if top[g] else r + 1
        start[g + 1] = start[g] + size[g]
    hv = np.empty(start[n_keys])
    hi = np.empty(start[n_keys], np.int64)
    fill = np.zeros(n_keys, np.int64)
    for i in range(n):
        g = key[i]
        k = size[g]
        if k == 0:
            continue
        s = start[g]
        v = rho[i]
        t = top[g]
        f = fill[g]
        if f < k:  # not full yet: add at the end and sift up
            c = f
            hv[s + c] = v
            hi[s + c] = i
            while c > 0:
                p = (c - 1) // 2
                if not _nearer_root(hv[s + c], hi[s + c], hv[s + p], hi[s + p], t):
                    break
                hv[s + p], hv[s + c] = hv[s + c], hv[s + p]
                hi[s + p], hi[s + c] = hi[s + c], hi[s + p]
                c = p
            fill[g] = f + 1
        elif _nearer_root(hv[s], hi[s], v, i, t):  # beats the root: it takes its place
            hv[s] = v
            hi[s] = i
            _sift_down(hv, hi, s, k, t)
    out = np.full(n_keys, -1, np.int64)
    for g in range(n_keys):
        if size[g] > 0:
            out[g] = hi[start[g]]
    return out


@njit(cache=True, nogil=True)
def tyre_plane_parts(v, ax, ay, veh, tyre_x, tyre_y, sx, sy, power):
    """Kernel of ``limitlap.envelope._usage_and_direction``: per sample, into the arrays given, the tyre shares |F_x| / (μ N) and |s_y|, the direction shares s_x (against the drive limit min(μ_t N, P / v) or μ_b N) and s_y = m a_y / (μ_l N), and the power share F_x v / P (0 unless driving), with the operations in numpy's order (the same bits).

    The powers and the arctangent are left to numpy's vectorised functions. [-].
    """
    m = veh[I_MASS]
    weight = m * veh[I_G]
    half_rho = 0.5 * veh[I_RHO]
    resist = veh[I_CRR] * m * veh[I_G]
    for i in range(v.shape[0]):
        vi = v[i]
        q = half_rho * vi * vi
        normal = weight + q * veh[I_LIFT_AREA]
        fx = m * ax[i] + (q * veh[I_DRAG_AREA] + resist)
        s_y = m * ay[i] / (veh[I_MU_LAT] * normal)
        sy[i] = s_y
        tyre_y[i] = abs(s_y)
        if fx >= 0.0:
            traction = veh[I_MU_TRAC] * normal
            tyre_x[i] = abs(fx) / traction
            drive = veh[I_POWER] / vi if vi > 0.0 else np.inf
            sx[i] = fx / min(traction, drive)
            power[i] = fx * vi / veh[I_POWER] if fx > 0.0 else 0.0
        else:
            braking = veh[I_MU_BRK] * normal
            tyre_x[i] = abs(fx) / braking
            sx[i] = fx / braking
            power[i] = 0.0


@njit(cache=True, inline="always")
def _plane_point(v, ax, ay, veh):
    """One sample's combined usage and tyre-force radius, as ``limitlap.limits``.

    With F_x = m a_x + drag + rolling and N = m g + q ClA: ``rho`` is
    ``limits.combined_usage`` (the tyre share against μ_t N or μ_b N, or the power share
    F_x v / P when larger), ``r = hypot(F_x / m, a_y)``. [-], [m/s²]
    """
    m = veh[I_MASS]
    e = veh[I_EXPONENT]
    weight = m * veh[I_G]
    q = 0.5 * veh[I_RHO] * v * v
    normal = weight + q * veh[I_LIFT_AREA]
    fx = m * ax + (q * veh[I_DRAG_AREA] + veh[I_CRR] * weight)
    sy = m * ay / (veh[I_MU_LAT] * normal)
    if fx >= 0.0:
        tyre_x = fx / (veh[I_MU_TRAC] * normal)
    else:
        tyre_x = -fx / (veh[I_MU_BRK] * normal)
    tyre = (tyre_x**e + abs(sy) ** e) ** (1.0 / e)
    power = fx * v / veh[I_POWER] if fx > 0.0 else 0.0
    return max(tyre, power), np.hypot(fx / m, ay)


@njit(cache=True, inline="always")
def _plane_residuals_into(v, ax, ay, veh, out):
    for i in range(v.shape[0]):
        rho, r = _plane_point(v[i], ax[i], ay[i], veh)
        out[i] = r * (1.0 - 1.0 / max(rho, 1e-9))


@njit(cache=True)
def envelope_residuals(v, ax, ay, base, where, scale, x):
    """Kernel of ``limitlap.envelope._plane_residuals``: radial distance of each point from the envelope, r (1 - 1/max(rho, 1e-9)), with ``base[where] = x * scale``.

    [m/s²].
    """
    veh = base.copy()
    for k in range(x.shape[0]):
        veh[where[k]] = x[k] * scale[k]
    out = np.empty(v.shape[0])
    _plane_residuals_into(v, ax, ay, veh, out)
    return out


@njit(cache=True)
def envelope_residuals_jacobian(v, ax, ay, base, where, scale, x, h):
    """Forward-difference Jacobian of ``envelope_residuals`` in x: column k is (f(x + h_k e_k) - f(x)) / h_k, every evaluation in this one call.

    [m/s² per unit x].
    """
    veh = base.copy()
    for k in range(x.shape[0]):
        veh[where[k]] = x[k] * scale[k]
    n = v.shape[0]
    f0 = np.empty(n)
    f1 = np.empty(n)
    _plane_residuals_into(v, ax, ay, veh, f0)
    jac = np.empty((n, x.shape[0]))
    for k in range(x.shape[0]):
        moved = veh.copy()
        moved[where[k]] = (x[k] + h[k]) * scale[k]
        _plane_residuals_into(v, ax, ay, moved, f1)
        for i in range(n):
            jac[i, k] = (f1[i] - f0[i]) / h[k]
    return jac


@njit(cache=True, inline="always")
def _orient(px, py, qx, qy, rx, ry):
    d = (qx - px) * (ry - py) - (qy - py) * (rx - px)
    return 1 if d > 0.0 else (-1 if d < 0.0 else 0)


@njit(cache=True, inline="always")
def _touches(px, py, ax, ay, bx, by):
    """Point p collinear with segment a-b and inside its bounding box."""
    return (
        _orient(ax, ay, bx, by, px, py) == 0
        and min(ax, bx) <= px <= max(ax, bx)
        and min(ay, by) <= py <= max(ay, by)
    )


@njit(cache=True)
def polygon_crossings(x, y, pairs):
    """Segment pairs (i < j) of the closed polygon through x, y that meet, into ``pairs`` (at least one row); returns how many, the search stopping when ``pairs`` is full.

    Segment i runs from point i to point i+1 (the last back to the first). Two segments
    that are not neighbours count when they cross properly (orientation signs differ on
    both) or when the start point of one lies on the other. Candidate pairs come from a
    sort-and-sweep on x: segments ordered by their smallest x, each tested only against
    those whose x-range starts inside its own (others cannot meet it).
    """
    n = x.shape[0]
    bx = np.empty(n)
    by = np.empty(n)
    lo = np.empty(n)
    for i in range(n):
        k = i + 1 if i + 1 < n else 0
        bx[i] = x[k]
        by[i] = y[k]
        lo[i] = min(x[i], bx[i])
    order = np.argsort(lo, kind="mergesort")
    found = 0
    for oi in range(n):
        i = order[oi]
        hi_i = max(x[i], bx[i])
        ylo_i = min(y[i], by[i])
        yhi_i = max(y[i], by[i])
        for oj in range(oi + 1, n):
            j = order[oj]
            if lo[j] > hi_i:
                break
            d = abs(i - j)
            if d <= 1 or d == n - 1:
                continue
            if max(y[j], by[j]) < ylo_i or min(y[j], by[j]) > yhi_i:
                continue
            o1 = _orient(x[i], y[i], bx[i], by[i], x[j], y[j])
            o2 = _orient(x[i], y[i], bx[i], by[i], bx[j], by[j])
            o3 = _orient(x[j], y[j], bx[j], by[j], x[i], y[i])
            o4 = _orient(x[j], y[j], bx[j], by[j], bx[i], by[i])
            if (
                (o1 * o2 < 0 and o3 * o4 < 0)
                or _touches(x[j], y[j], x[i], y[i], bx[i], by[i])
                or _touches(x[i], y[i], x[j], y[j], bx[j], by[j])
            ):
                pairs[found, 0] = min(i, j)
                pairs[found, 1] = max(i, j)
                found += 1
                if found == pairs.shape[0]:
                    return found
    return found


@njit(cache=True)
def polygon_self_crosses(x, y):
    """Kernel of ``limitlap.line.self_intersects``: whether any two segments of the closed polygon meet (:func:`polygon_crossings`)."""
    return polygon_crossings(x, y, np.empty((1, 2), dtype=np.int64)) > 0


@njit(cache=True)
def close_point_groups(x, y, reach):
    """Group number of each point: consecutive points join the group of the first point of that group while they lie within ``reach`` of it (greedy, in order). [-]."""
    n = x.shape[0]
    group = np.empty(n, dtype=np.int64)
    g = 0
    first = 0
    group[0] = 0
    for i in range(1, n):
        dx = x[i] - x[first]
        dy = y[i] - y[first]
        if dx * dx + dy * dy >= reach * reach:
            g += 1
            first = i
        group[i] = g
    return group


@njit(cache=True, nogil=True)
def trapezoid_running(t, v):
    """Kernel of ``limitlap.gnss.travelled_m``: the running trapezoidal integral of v over t from 0, as ``concatenate(([0], cumsum(0.5 * (v[1:] + v[:-1]) * diff(t))))`` computes it, operation for operation.

    [m].
    """
    n = t.shape[0]
    out = np.empty(n)
    if n == 0:
        return out
    out[0] = 0.0
    acc = 0.0
    for i in range(n - 1):
        acc += 0.5 * (v[i + 1] + v[i]) * (t[i + 1] - t[i])
        out[i + 1] = acc
    return out


@njit(cache=True, nogil=True)
def held_at_least(x, rows, reach, level):
    """Kernel of ``limitlap.power_line.full_throttle_held``: for ascending ``rows``, True where every x within ``reach`` rows either side is >= ``level`` (NaN is not).

    One scan of x up to the last row's window, remembering the last row below the level.
    """
    n = x.shape[0]
    out = np.empty(rows.shape[0], dtype=np.bool_)
    last_low = -reach - 1  # no row below the level seen yet
    scanned = -1
    for i in range(rows.shape[0]):
        r = rows[i]
        top = min(r + reach, n - 1)
        while scanned < top:
            scanned += 1
            if not (x[scanned] >= level):
                last_low = scanned
        out[i] = last_low < r - reach
    return out


@njit(cache=True, inline="always")
def _block_extremes(x, block):
    """Largest and smallest value of each run of ``block`` samples (the last one shorter)."""
    n = x.shape[0]
    nb = (n + block - 1) // block
    bmax = np.empty(nb)
    bmin = np.empty(nb)
    for b in range(nb):
        hi = x[b * block]
        lo = hi
        for j in range(b * block + 1, min(b * block + block, n)):
            v = x[j]
            if v > hi:
                hi = v
            elif v < lo:
                lo = v
        bmax[b] = hi
        bmin[b] = lo
    return bmax, bmin


@njit(cache=True, nogil=True)
def despike(x, width, threshold):
    """Kernel of ``limitlap.samples.select_samples``' spike test, in place.

    A sample further than ``threshold`` from the running median of ``width`` samples
    (odd; centred, edges repeating the end values: ``scipy.ndimage.median_filter``'s
    ``mode="nearest"``) is a spike and is replaced by that median; returns the spike mask.

    The test needs no median: with ``width = 2h + 1`` the median is the (h+1)-th smallest
    and the (h+1)-th largest value of the window, so it lies more than ``threshold`` below
    x exactly when more than h values of the window do, and more than ``threshold`` above
    x exactly when more than h values do (order statistics; e.g. David & Nagaraja, *Order
    Statistics*, 3rd ed., 2003, §2.1). Those two counts are taken only where the window
    reaches further than ``threshold`` from x at all (bounded from above by the extremes
    of the blocks of 16 samples covering it); the median itself is found by sorting only
    at the spikes, from the unreplaced values. Runs without the GIL.
    """
    n = x.shape[0]
    bad = np.zeros(n, np.bool_)
    if n == 0:
        return bad
    h = width // 2
    bmax, bmin = _block_extremes(x, 16)
    n_bad = 0
    for i in range(n):
        b0 = max(i - h, 0) // 16
        b1 = min(i + h, n - 1) // 16
        hi = bmax[b0]
        lo = bmin[b0]
        for b in range(b0 + 1, b1 + 1):
            hi = max(hi, bmax[b])
            lo = min(lo, bmin[b])
        xi = x[i]
        if xi - lo <= threshold and hi - xi <= threshold:
            continue  # every value of the window, so the median too, is within reach
        lo = xi - threshold
        hi = xi + threshold
        below = 0
        above = 0
        if i >= h and i + h < n:
            for j in range(i - h, i + h + 1):
                w = x[j]
                below += w < lo
                above += w > hi
        else:
            for j in range(i - h, i + h + 1):
                w = x[min(max(j, 0), n - 1)]
                below += w < lo
                above += w > hi
        if below > h or above > h:
            bad[i] = True
            n_bad += 1
    at = np.empty(n_bad, np.int64)
    med = np.empty(n_bad)
    buf = np.empty(width)
    k = 0
    for i in range(n):
        if bad[i]:
            for j in range(width):
                buf[j] = x[min(max(i - h + j, 0), n - 1)]
            buf.sort()
            at[k] = i
            med[k] = buf[h]
            k += 1
    for k in range(n_bad):  # replaced after the test: every window reads unreplaced values
        x[at[k]] = med[k]
    return bad


@njit(cache=True)
def lap_times_for_lines(curvatures, steps, sin_grad, veh, work, split):
    """Closed-lap time of each line given as a row of curvatures and steps, same car.

    ``curvatures[r, i]`` is line r's curvature at station i, ``steps[r, i]`` the length
    of its step from station i to i+1 (the last back to station 0); ``sin_grad`` is
    shared. The QSS profile of :func:`solve_speed_squared` on each row.
    """
    n_lines, n = curvatures.shape
    out = np.empty(n_lines)
    no_cap = np.empty(0)
    for r in range(n_lines):
        k = curvatures[r]
        ds = steps[r]
        solve_speed_squared(k, sin_grad, ds, veh, True, 0.0, 0.0, no_cap, work, split)
        b = work[W_FWD]
        total = 0.0
        for i in range(n - 1):
            total += _step_time(ds[i], np.sqrt(b[i]) + np.sqrt(b[i + 1]))
        total += _step_time(ds[n - 1], np.sqrt(b[n - 1]) + np.sqrt(b[0]))
        out[r] = total
    return out


#: Rows of :func:`lap_time_changes`'s float scratch: a row's curvature, step and limit in
#: its window; the forward and backward traces where they changed.
C_K, C_DS, C_LIM, C_F, C_FA, C_B, C_BD = 0, 1, 2, 3, 4, 5, 6
#: Rows of its mark scratch: station in the row's window; forward, backward trace changed.
M_WIN, M_F, M_B = 0, 1, 2


@njit(cache=True)
def _forward_change(k, sg, ds, veh, work, i0, start, width, r, mark, ch):
    """A row's forward trace from the station before its window (``start``) until it lands on the base trace again; returns the last station changed, or -1 when it reaches the passes' start i0 first."""
    n = k.shape[0]
    fwd, fa, b_lim = work[W_FWD], work[W_FA], work[W_LIM]
    i = start - 1 if start > 0 else n - 1
    b, acc = fwd[i], fa[i]
    last = i
    for m in range(n):
        j = i + 1 if i + 1 < n else 0
        inside = mark[M_WIN, j] == r
        h = ch[C_DS, i] if mark[M_WIN, i] == r else ds[i]
        kj = ch[C_K, j] if inside else k[j]
        lim = ch[C_LIM, j] if inside else b_lim[j]
        b, acc = _forward_step(b, acc, kj, sg[j], h, lim, veh)
        if m >= width and b == fwd[j] and acc == fa[j]:
            return last
        if j == i0:
            return -1
        ch[C_F, j], ch[C_FA, j] = b, acc
        mark[M_F, j] = r
        last = j
        i = j
    return -1


@njit(cache=True)
def _backward_change(k, sg, ds, veh, work, i0, end, width, r, mark, ch):
    """Backward twin of :func:`_forward_change` from the station after the window's ``end``; returns the first station changed, or -1."""
    n = k.shape[0]
    bwd, bd, b_lim = work[W_BWD], work[W_BD], work[W_LIM]
    j = end + 1 if end + 1 < n else 0
    b, dec = bwd[j], bd[j]
    first = j
    for m in range(n):
        i = j - 1 if j > 0 else n - 1
        inside = mark[M_WIN, i] == r
        h = ch[C_DS, i] if inside else ds[i]
        ki = ch[C_K, i] if inside else k[i]
        lim = ch[C_LIM, i] if inside else b_lim[i]
        b, dec = _backward_step(b, dec, ki, sg[i], h, lim, veh)
        if m >= width and b == bwd[i] and dec == bd[i]:
            return first
        if i == i0:
            return -1
        ch[C_B, i], ch[C_BD, i] = b, dec
        mark[M_B, i] = r
        first = i
        j = i
    return -1


@njit(cache=True, error_model="numpy")
def _time_change(ds, work, first, last, r, mark, ch):
    """New minus base time over the steps from the one before ``first`` to the one leaving ``last``. [s]."""
    n = ds.shape[0]
    fwd, bwd = work[W_FWD], work[W_BWD]
    i = first - 1 if first > 0 else n - 1
    v_old = np.sqrt(min(fwd[i], bwd[i]))
    v_new = v_old
    total = 0.0
    for _ in range((last - first) % n + 2):
        j = i + 1 if i + 1 < n else 0
        f = ch[C_F, j] if mark[M_F, j] == r else fwd[j]
        b = ch[C_B, j] if mark[M_B, j] == r else bwd[j]
        w_old = np.sqrt(min(fwd[j], bwd[j]))
        w_new = np.sqrt(min(f, b))
        h = ch[C_DS, i] if mark[M_WIN, i] == r else ds[i]
        total += _step_time(h, v_new + w_new) - _step_time(ds[i], v_old + w_old)
        v_old, v_new, i = w_old, w_new, j
    return total


@njit(cache=True)
def lap_time_changes(k, sg, ds, veh, work, i0, windows, k_rows, ds_rows):
    """Change of a closed lap's time when each row's window takes the row's curvature and steps.

    ``work`` holds the base line's traces (:func:`pass_traces`, which returned ``i0``);
    ``windows[r]`` are consecutive stations (wrapping), ``k_rows[r]``/``ds_rows[r]`` their
    new curvature and step. Only the stretch where a trace differs from the base is
    stepped again: from the window back to where the braking trace lands on the base's,
    and on to where the driving trace does. NaN for a row whose change reaches the
    passes' start (solve that line whole). [s]
    """
    n = k.shape[0]
    n_rows, width = windows.shape
    mark = np.full((3, n), -1, np.int64)
    ch = np.empty((7, n))
    out = np.empty(n_rows)
    for r in range(n_rows):
        for m in range(width):
            i = windows[r, m]
            mark[M_WIN, i] = r
            ch[C_K, i], ch[C_DS, i] = k_rows[r, m], ds_rows[r, m]
            ch[C_LIM, i] = _cornering_limit(k_rows[r, m], veh)
        start, end = windows[r, 0], windows[r, width - 1]
        if mark[M_WIN, i0] == r:
            out[r] = np.nan
            continue
        last = _forward_change(k, sg, ds, veh, work, i0, start, width, r, mark, ch)
        first = _backward_change(k, sg, ds, veh, work, i0, end, width, r, mark, ch)
        if last < 0 or first < 0:
            out[r] = np.nan
            continue
        out[r] = _time_change(ds, work, first, last, r, mark, ch)
    return out
