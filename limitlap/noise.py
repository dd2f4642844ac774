r"""Sensor noise and sample rates measured from a log's own samples.

A logger's channels come at their own rates (blank cells between samples) and with
their own noise. The stages that weigh one source against another or filter a channel
(:mod:`limitlap.driven`, :mod:`limitlap.samples`) take both from the data through the
functions here, not from constants that assume one logger:

- :func:`mad_scale`: a robust standard deviation (1.4826 times the median absolute
  deviation);
- :func:`own_interval`: the time between a channel's own samples (its rate's inverse);
- :func:`difference_noise`: the white noise of one sample from the channel's differences
  of order ``k``: for white noise of standard deviation :math:`\sigma` the k-th
  difference has variance :math:`\binom{2k}{k}\sigma^2` (2, 6, 20 for k = 1, 2, 3),
  while a smooth signal's k-th difference shrinks as :math:`\Delta t^k`, so at a rate
  well above the signal's bandwidth the differences are noise; where the signal shows
  through (transients at a low rate), the median keeps them out as long as they are
  fewer than half the samples.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation", J. Amer.
   Statist. Assoc. 69(346):383-393, 1974 (the median absolute deviation as a scale
   estimate; the consistency factor 1/Phi^-1(3/4) = 1.4826 from memory [M]).
.. [2] J. von Neumann, R. H. Kent, H. R. Bellinson, B. I. Hart, "The mean square
   successive difference", Ann. Math. Statist. 12(2):153-162, 1941 (variance from
   successive differences, which a slow trend does not inflate; from memory [M]).
"""

from __future__ import annotations

import math

import numpy as np

#: Fewest differences a noise estimate is made from (below: NaN). [-]
MIN_DIFFERENCES = 20


def mad_scale(r) -> float:
    """1.4826 times the median absolute deviation: the standard deviation of normal data, robust to a few outliers (the factor is 1 / Phi^-1(3/4); from memory).

    [same as r].
    """
    return 1.4826 * float(np.median(np.abs(r - np.median(r))))


def own_interval(t_s, values) -> float:
    """Median time between a channel's own samples (its finite cells). [s].

    NaN with fewer than two samples.

    Examples
    --------
    >>> t = np.arange(10) * 0.01
    >>> v = np.where(np.arange(10) % 4 == 0, 1.0, np.nan)  # every 4th row carries a value
    >>> round(own_interval(t, v), 6)
    0.04
    """
    t = np.asarray(t_s, dtype=np.float64)
    ok = np.isfinite(np.asarray(values, dtype=np.float64))
    if ok.sum() < 2:
        return math.nan
    return float(np.median(np.diff(t[ok])))


def difference_noise(values, order: int = 2) -> float:
    r"""White noise of one sample from the channel's k-th differences (its own samples).

    Parameters
    ----------
    values : array-like
        The channel's samples in time order; blanks (NaN) are skipped, so a channel at a
        lower rate than the rows is measured on its own samples. [any unit]
    order : int
        Order k of the differences (1-3): 2 leaves a linear trend out, 3 a quadratic. [-]

    Returns
    -------
    float
        :math:`1.4826\,\mathrm{MAD}(\Delta^k x) / \sqrt{\binom{2k}{k}}`; NaN with fewer
        than :data:`MIN_DIFFERENCES` differences. [same as values]

    Examples
    --------
    >>> rng = np.random.default_rng(2)
    >>> x = np.linspace(0.0, 50.0, 100_000) + 0.3 * rng.standard_normal(100_000)
    >>> round(difference_noise(x), 2)
    0.3
    """
    v = np.asarray(values, dtype=np.float64)
    v = v[np.isfinite(v)]
    if v.size < MIN_DIFFERENCES + order:
        return math.nan
    d = np.diff(v, n=order)
    return mad_scale(d) / math.sqrt(math.comb(2 * order, order))
