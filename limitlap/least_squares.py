r"""Least squares for the envelope fit: the soft-L1 problem and its standard errors.

:func:`soft_l1_least_squares` solves the robust (soft-L1) least-squares problem within
bounds, by MINPACK's Levenberg-Marquardt on transformed residuals where the bounds are
not active (the same cost, so the same minimum) and SciPy's bounded trust-region method
otherwise; :func:`standard_errors` gives the Gauss-Newton standard errors at the solution.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize


def soft_l1_least_squares(fun, jac, start, lo, hi, f_scale):
    r"""Soft-L1 least squares within bounds: MINPACK's Levenberg-Marquardt on transformed residuals, SciPy's bounded trust-region method where that leaves the bounds.

    The soft-L1 cost :math:`\tfrac12\sum f^2\rho(r_i^2/f^2)`, :math:`\rho(z) =
    2(\sqrt{1+z}-1)`, is the plain sum of squares of :math:`\tilde r_i = f\,
    \mathrm{sign}(r_i)\sqrt{\rho(r_i^2/f^2)}`, so an unbounded least-squares method
    finds the same minimum (Hampel et al., *Robust Statistics*, Wiley, 1986, §6.3;
    Triggs et al., *Bundle Adjustment — A Modern Synthesis*, 2000, §4.3), with the
    Jacobian's rows scaled by :math:`d\tilde r/dr = \rho'(z)\,|r| / (f\sqrt{\rho(z)})`
    (1 at r = 0). ``scipy.optimize.least_squares(method="lm")`` (MINPACK) does this in
    compiled code, several times faster here than the bounded "trf" method; when its
    solution is not strictly inside the bounds (a bound is active) or it fails, "trf"
    with ``loss="soft_l1"`` is run as before. The result carries ``fun`` (the untransformed
    residuals) and ``jac`` scaled as "trf" reports it, :math:`\sqrt{\rho' + 2\rho'' r^2}`
    per row, so the standard errors do not depend on the method.
    """
    memo = {}

    def residuals(x):
        key = x.tobytes()
        if key not in memo:
            memo.clear()
            memo[key] = fun(x)
        return memo[key]

    def t_fun(x):
        r = residuals(x)
        z = (r / f_scale) ** 2
        return f_scale * np.sign(r) * np.sqrt(2.0 * (np.sqrt(1.0 + z) - 1.0))

    def t_jac(x):
        r = residuals(x)
        z = (r / f_scale) ** 2
        root = np.sqrt(2.0 * (np.sqrt(1.0 + z) - 1.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.where(root > 0.0, np.abs(r) / (f_scale * root) / np.sqrt(1.0 + z), 1.0)
        return d[:, None] * jac(x)

    sol = None
    try:
        sol = optimize.least_squares(t_fun, start, jac=t_jac, method="lm", x_scale="jac")
    except (ValueError, np.linalg.LinAlgError):
        sol = None
    if sol is None or sol.status <= 0 or not np.all((sol.x > lo) & (sol.x < hi)):
        return optimize.least_squares(
            fun,
            start,
            jac=jac,
            bounds=(lo, hi),
            loss="soft_l1",
            f_scale=f_scale,
            x_scale="jac",
        )
    r = fun(sol.x)
    z = (r / f_scale) ** 2
    weight = (1.0 + z) ** -0.5 - (1.0 + z) ** -1.5 * z  # rho' + 2 rho'' r^2 (rho'' per f^2)
    sol.fun = r
    sol.jac = np.sqrt(np.maximum(weight, np.finfo(np.float64).eps))[:, None] * jac(sol.x)
    return sol


def standard_errors(sol, n_points):
    r"""Gauss-Newton standard errors of a least-squares solution (internal units).

    :math:`\sqrt{\mathrm{diag}(s^2 (J^T J)^{-1})}` with :math:`s^2` the mean square of the
    first ``n_points`` residuals (the boundary points; the prior terms are not data).
    """
    res = sol.fun[:n_points]
    s2 = float(np.sum(res**2) / max(res.size - sol.x.size, 1))
    cov = np.linalg.pinv(sol.jac.T @ sol.jac) * s2
    return np.sqrt(np.clip(np.diag(cov), 0.0, None))
