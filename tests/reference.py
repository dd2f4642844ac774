"""Plain-Python twin of the QSS kernels, written independently of ``_kernels`` from the
INTERFACE §3 formulas, used to check the numba kernels and as the benchmark yardstick."""

from __future__ import annotations

import math


def _share(u, n):
    return 0.0 if u >= 1.0 else (1.0 - u**n) ** (1.0 / n)


def _limits(kappa, b, p):
    m, P, cda, cla, crr, rho, mu_y, mu_b, mu_t, n, g = p
    q = 0.5 * rho * b
    normal = max(0.0, m * g + q * cla)
    fy_max = mu_y * normal
    u = (m * abs(kappa) * b / fy_max) if fy_max > 0 else 1.0
    r = _share(u, n)
    resist = q * cda + crr * m * g
    v = math.sqrt(b)
    f_drive = mu_t * normal * r
    if v > 0 and P / v < f_drive:
        f_drive = P / v
    return (f_drive - resist) / m, (mu_b * normal * r + resist) / m


def solve_closed(curvature, ds, p, v_cap):
    """Speed profile on a closed lap (level), the same Heun scheme in b = v²."""
    m, P, cda, cla, crr, rho, mu_y, mu_b, mu_t, n, g = p
    N = len(curvature)
    kz = 0.5 * rho * cla / m
    blim = []
    for k in curvature:
        d = abs(k) - mu_y * kz
        blim.append(v_cap * v_cap if d <= 0 else min(v_cap * v_cap, mu_y * g / d))
    i0 = min(range(N), key=lambda i: blim[i])
    fwd = [0.0] * N
    bwd = [0.0] * N
    def fstep(i, j, b):
        a1 = _limits(curvature[i], b, p)[0]
        bp = min(blim[j], max(0.0, b + 2 * ds[i] * a1))
        a2 = _limits(curvature[j], bp, p)[0]
        return min(blim[j], max(0.0, b + ds[i] * (a1 + a2)))

    def bstep(j, i, b):
        d1 = _limits(curvature[j], b, p)[1]
        bp = min(blim[i], max(0.0, b + 2 * ds[i] * d1))
        d2 = _limits(curvature[i], bp, p)[1]
        return min(blim[i], max(0.0, b + ds[i] * (d1 + d2)))

    fwd[i0] = blim[i0]
    while True:  # periodic: repeat until the lap arrives back at its own start speed
        for step in range(N - 1):
            i, j = (i0 + step) % N, (i0 + step + 1) % N
            fwd[j] = fstep(i, j, fwd[i])
        arrival = fstep((i0 - 1) % N, i0, fwd[(i0 - 1) % N])
        if arrival >= fwd[i0] * (1 - 1e-13):
            break
        fwd[i0] = arrival
    bwd[i0] = blim[i0]
    while True:
        for step in range(N - 1):
            j, i = (i0 - step) % N, (i0 - step - 1) % N
            bwd[i] = bstep(j, i, bwd[j])
        arrival = bstep((i0 + 1) % N, i0, bwd[(i0 + 1) % N])
        if arrival >= bwd[i0] * (1 - 1e-13):
            break
        bwd[i0] = arrival
    v = [math.sqrt(min(a, b)) for a, b in zip(fwd, bwd)]
    t = 0.0
    for i in range(N):
        t += 2 * ds[i] / (v[i] + v[(i + 1) % N])
    return v, t
