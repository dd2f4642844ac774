"""Plain-Python twin of the QSS kernels, written independently of ``_kernels`` from the
vehicle model's formulas (docs/formats.md, Vehicle files), used to check the numba
kernels and as the benchmark yardstick."""

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
    """Speed profile on a closed lap (level): trapezoidal predictor-corrector in b = v²
    carrying each station's evaluated acceleration (PEC), periodic start at the slowest
    cornering limit, repeated until the lap arrives back at its own start speed."""
    m, _, _, cla, _, rho, mu_y, _, _, _, g = p  # the rest is read by _limits
    N = len(curvature)
    kz = 0.5 * rho * cla / m
    blim = []
    for k in curvature:
        d = abs(k) - mu_y * kz
        blim.append(v_cap * v_cap if d <= 0 else min(v_cap * v_cap, mu_y * g / d))
    i0 = min(range(N), key=lambda i: blim[i])

    def lap(trace, direction, which):
        """One lap from i0 in ``direction``; returns the arrival back at i0."""
        i = i0
        a = _limits(curvature[i], trace[i], p)[which]
        for step in range(N):
            j = (i + direction) % N
            h = ds[i] if direction > 0 else ds[j]
            bp = min(blim[j], max(0.0, trace[i] + 2 * h * a))
            a_j = _limits(curvature[j], bp, p)[which]
            nxt = min(blim[j], max(0.0, trace[i] + h * (a + a_j)))
            if step == N - 1:
                return nxt
            trace[j] = nxt
            a, i = a_j, j
        return trace[i0]

    out = []
    for which, direction in ((0, 1), (1, -1)):
        trace = [0.0] * N
        trace[i0] = blim[i0]
        arrival = lap(trace, direction, which)
        while arrival < trace[i0] * (1 - 1e-13):
            trace[i0] = arrival
            arrival = lap(trace, direction, which)
        out.append(trace)
    fwd, bwd = out
    v = [math.sqrt(min(a, b)) for a, b in zip(fwd, bwd, strict=True)]
    t = 0.0
    for i in range(N):
        t += 2 * ds[i] / (v[i] + v[(i + 1) % N])
    return v, t
