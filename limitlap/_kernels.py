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


@njit(cache=True)
def _both_passes(k, sg, ds, veh, b_lim, fwd, bwd, fa, bd, f0, b0, steps):
    """Forward pass from station f0 and backward pass from b0, ``steps`` each, in one loop: the two dependency chains are independent, so the processor overlaps them.

    Indices wrap round the arrays (closed laps). ``fa``/``bd`` receive the acceleration
    and deceleration carried at each station.
    """
    n = k.shape[0]
    i = f0
    j = b0
    a = drive_accel(k[i], fwd[i], sg[i], veh)
    d = brake_decel(k[j], bwd[j], sg[j], veh)
    fa[i] = a
    bd[j] = d
    for _ in range(steps):
        i1 = i + 1 if i + 1 < n else 0
        fwd[i1], a = _forward_step(fwd[i], a, k[i1], sg[i1], ds[i], b_lim[i1], veh)
        fa[i1] = a
        i = i1
        j1 = j - 1 if j > 0 else n - 1
        bwd[j1], d = _backward_step(bwd[j], d, k[j1], sg[j1], ds[j1], b_lim[j1], veh)
        bd[j1] = d
        j = j1


@njit(cache=True)
def _repeat_forward(k, sg, ds, veh, b_lim, fwd, fa, i0):
    """Forward lap from i0 (start speed already lowered) until the trace rejoins the previous lap's; returns the speed² it arrives back at i0 with."""
    n = k.shape[0]
    i = i0
    a = drive_accel(k[i0], fwd[i0], sg[i0], veh)
    fa[i0] = a
    for _ in range(n):
        i1 = i + 1 if i + 1 < n else 0
        b_new, a = _forward_step(fwd[i], a, k[i1], sg[i1], ds[i], b_lim[i1], veh)
        if i1 == i0:
            return b_new
        if b_new == fwd[i1] and a == fa[i1]:
            return fwd[i0]  # same state as last lap: the rest repeats
        fwd[i1] = b_new
        fa[i1] = a
        i = i1
    return fwd[i0]


@njit(cache=True)
def _repeat_backward(k, sg, ds, veh, b_lim, bwd, bd, i0):
    """Backward twin of :func:`_repeat_forward`."""
    n = k.shape[0]
    j = i0
    d = brake_decel(k[i0], bwd[i0], sg[i0], veh)
    bd[i0] = d
    for _ in range(n):
        j1 = j - 1 if j > 0 else n - 1
        b_new, d = _backward_step(bwd[j], d, k[j1], sg[j1], ds[j1], b_lim[j1], veh)
        if j1 == i0:
            return b_new
        if b_new == bwd[j1] and d == bd[j1]:
            return bwd[i0]
        bwd[j1] = b_new
        bd[j1] = d
        j = j1
    return bwd[i0]


@njit(cache=True)
def solve_speed_squared(curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max):
    """Kernel of :func:`limitlap.solve.solve_profile`: the QSS speed² profile.

    ``ds_m[i]`` is the length of the step from station i to i+1; for a closed lap the
    last one runs back to station 0. Open lines start at ``b_entry`` and end no faster
    than ``b_exit``. ``b_max`` caps v² per station on top of the grip limit (a slower
    driver, a pit-lane limit). Returns (b, b_grip) with b_grip the grip-only limit.
    """
    n = curvature_1_m.shape[0]
    k = curvature_1_m
    sg = sin_grad
    b_grip = cornering_speed_limit(k, veh)
    b_lim = np.minimum(b_grip, b_max)
    fwd = np.empty(n)
    bwd = np.empty(n)
    fa = np.empty(n)
    bd = np.empty(n)
    if closed:
        i0 = 0
        for i in range(1, n):
            if b_lim[i] < b_lim[i0]:
                i0 = i
        # Periodic lap: both passes start at the slowest cornering limit. Where the car
        # cannot actually hold that speed there (drag at full lateral grip, power, a
        # downhill brake zone), the lap arrives back slower: restart from the arrival
        # until it repeats.
        fwd[i0] = b_lim[i0]
        bwd[i0] = b_lim[i0]
        _both_passes(k, sg, ds_m, veh, b_lim, fwd, bwd, fa, bd, i0, i0, n - 1)
        i_last = i0 - 1 if i0 > 0 else n - 1
        arrival, _ = _forward_step(
            fwd[i_last], fa[i_last], k[i0], sg[i0], ds_m[i_last], b_lim[i0], veh
        )
        for _ in range(200):
            if arrival >= fwd[i0] * (1.0 - 1e-13):
                break
            fwd[i0] = arrival
            arrival = _repeat_forward(k, sg, ds_m, veh, b_lim, fwd, fa, i0)
        j_last = i0 + 1 if i0 + 1 < n else 0
        arrival, _ = _backward_step(
            bwd[j_last], bd[j_last], k[i0], sg[i0], ds_m[i0], b_lim[i0], veh
        )
        for _ in range(200):
            if arrival >= bwd[i0] * (1.0 - 1e-13):
                break
            bwd[i0] = arrival
            arrival = _repeat_backward(k, sg, ds_m, veh, b_lim, bwd, bd, i0)
    else:
        fwd[0] = min(b_entry, b_lim[0])
        bwd[n - 1] = min(b_exit, b_lim[n - 1])
        _both_passes(k, sg, ds_m, veh, b_lim, fwd, bwd, fa, bd, 0, n - 1, n - 1)
    b = np.empty(n)
    for i in range(n):
        b[i] = min(fwd[i], bwd[i])
    return b, b_grip


@njit(cache=True)
def _step_time(ds, v_sum):
    """2 ds / (v_i + v_j); inf when the car stands at both ends (no division by zero)."""
    return 2.0 * ds / v_sum if v_sum > 0.0 else np.inf


@njit(cache=True)
def elapsed_time(speed_m_s, ds_m, closed):
    """Kernel of :func:`limitlap.solve.elapsed_time`: time at each station and lap time."""
    n = speed_m_s.shape[0]
    t = np.empty(n)
    t[0] = 0.0
    for i in range(n - 1):
        t[i + 1] = t[i] + _step_time(ds_m[i], speed_m_s[i] + speed_m_s[i + 1])
    total = t[n - 1]
    if closed:
        total += _step_time(ds_m[n - 1], speed_m_s[n - 1] + speed_m_s[0])
    return t, total


@njit(cache=True)
def line_steps(distance_m, gradient, curvature_1_m, length_m, closed):
    """Steps between stations, sin(theta) from dz/ds = tan(theta), and a check flag: 0 fine, 1 a non-finite curvature or gradient, 2 a step that is not positive."""
    n = distance_m.shape[0]
    ds = np.empty(n)
    sin_grad = np.empty(n)
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
    return ds, sin_grad, ok


@njit(cache=True)
def profile_outputs(b, curvature_1_m, ds_m, closed):
    """Speed, step acceleration, lateral acceleration, elapsed time and lap time from v².

    a_x[i] = (b[i+1] - b[i]) / (2 ds[i]) on the step leaving station i; the last station
    of an open line repeats the one before. Step times 2 ds / (v_i + v_{i+1}).
    """
    n = b.shape[0]
    v = np.empty(n)
    ax = np.empty(n)
    ay = np.empty(n)
    dt = np.empty(n)
    for i in range(n):
        v[i] = np.sqrt(b[i])
        ay[i] = curvature_1_m[i] * b[i]
    for i in range(n - 1):
        ax[i] = (b[i + 1] - b[i]) / (2.0 * ds_m[i])
        dt[i] = _step_time(ds_m[i], v[i] + v[i + 1])
    if closed:
        ax[n - 1] = (b[0] - b[n - 1]) / (2.0 * ds_m[n - 1])
        dt[n - 1] = _step_time(ds_m[n - 1], v[n - 1] + v[0])
    else:
        ax[n - 1] = ax[n - 2]
        dt[n - 1] = 0.0
    t = np.empty(n)
    acc = 0.0
    for i in range(n):
        t[i] = acc
        acc += dt[i]
    return v, ax, ay, t, acc


@njit(cache=True)
def lap_times_for_scales(
    curvature_1_m, sin_grad, ds_m, veh, closed, b_entry, b_exit, b_max, scales
):
    """Lap time for each grip scale in ``scales`` (a sweep), same line and car."""
    out = np.empty(scales.shape[0])
    v2 = veh.copy()
    for k in range(scales.shape[0]):
        v2[I_MU_LAT] = veh[I_MU_LAT] * scales[k]
        v2[I_MU_BRK] = veh[I_MU_BRK] * scales[k]
        v2[I_MU_TRAC] = veh[I_MU_TRAC] * scales[k]
        b, _ = solve_speed_squared(
            curvature_1_m, sin_grad, ds_m, v2, closed, b_entry, b_exit, b_max
        )
        v = np.sqrt(b)
        _, total = elapsed_time(v, ds_m, closed)
        out[k] = total
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
def polygon_self_crosses(x, y):
    """Kernel of ``limitlap.line.self_intersects`` (closed polygon through x, y).

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
            if o1 * o2 < 0 and o3 * o4 < 0:
                return True
            if _touches(x[j], y[j], x[i], y[i], bx[i], by[i]):
                return True
            if _touches(x[i], y[i], x[j], y[j], bx[j], by[j]):
                return True
    return False


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
