r"""How sure: intervals on the ideal lap time and on each corner's time left.

Two things move the ideal a lap is measured against, and both are measured from the
session's own laps (docs/methods.md, How sure):

- **The line.** The ideal is solved on the analysed lap's rebuilt line; the rebuild
  carries the GNSS and gyro noise of that one lap. Every flying lap's own line
  (:mod:`limitlap.session`) gives an ideal of its own; their scatter about their mean is
  what the choice of one lap's line, and its noise, does to the ideal.
- **The envelope.** The envelope is a high quantile of the flying laps' samples; other
  laps (other noise, another lap's traffic) would have given another one. Its three
  friction levels (braking, cornering, traction) are each the 0.99 quantile of the
  grip scale the samples of that direction required (:func:`limitlap.grip.required_grip_scale`,
  power-limited samples left out); their relative change under resampling moves the
  friction coefficients by the same factor, and the ideal by the solver's sensitivity
  to each (one solve per coefficient, a finite difference).

Both are resampled together by the bootstrap over laps (B. Efron and R. J. Tibshirani,
*An Introduction to the Bootstrap*, Chapman & Hall, 1993: resampling the independent
units, here laps, with replacement; percentile interval, ch. 13): each of
:data:`N_RESAMPLES` resamples draws the flying laps with replacement for the envelope's
levels and one lap's line, giving a draw of the ideal lap time and of every corner's
ideal time at once. The band is the central :data:`COVERAGE` of the draws; the draws
also tell, for corners next to one another in the ranking, how often their order holds
(:attr:`Bands.rank_group`). Sensor noise enters through both: the laps' samples and
lines carry it.

Left out: the power line (a central fit of many full-throttle samples, whose scatter is
small beside the friction levels'), the timing of the analysed lap itself (100 Hz rows:
a few milliseconds), and any bias common to every lap (a rebuild that smooths every
corner alike); the coverage found on generated sessions is in docs/methods.md.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import numpy as np

from limitlap import solve
from limitlap.best_laps import segment_times
from limitlap.formatting import with_band
from limitlap.grip import POWER_LIMIT_MARGIN
from limitlap.limits import normal_load_n, power_force_n, resistance_n
from limitlap.vehicle import Vehicle

#: Stated coverage of the bands. [-]
COVERAGE = 0.9
#: Bootstrap resamples. A percentile interval needs its tail quantiles well determined:
#: with 1000 draws the 5 % quantile rests on 50 of them, and its Monte Carlo error is
#: about sqrt(0.05 * 0.95 / 1000) = 0.7 points of coverage (Efron & Tibshirani 1993,
#: ch. 19, recommend 1000 or more for percentile intervals; from memory). [-]
N_RESAMPLES = 1000
#: Flying laps besides the analysed one whose lines are rebuilt for the line's share of
#: the band: the table's lines of the other laps share the analysed lap's shape
#: (:mod:`limitlap.session`) and scatter half as much as rebuilt ones (measured on
#: generated sessions: 0.003-0.005 s against 0.006-0.012 s a corner), so the rebuild's
#: own scatter is measured on rebuilt lines; five more lines take about 85 ms. [-]
LINE_LAPS = 3
#: Fewest flying laps for a band: with two, the bootstrap has three different resamples. [-]
MIN_LAPS = 3
#: Relative step of the friction coefficients for the solver's sensitivity. [-]
_STEP = 1e-3
#: Seed of the resampling, so the same session gives the same bands. [-]
SEED = 20240611

#: The envelope's friction levels resampled, with the vehicle field each scales.
LEVELS = ("mu_brk", "mu_lat", "mu_trac")


@dataclass(frozen=True, eq=False)
class Bands:
    """Intervals of the ideal lap time and each corner's time left (SI).

    Attributes
    ----------
    coverage : float
        Share of the draws inside each band. [-]
    n_resamples : int
        Bootstrap resamples. [-]
    n_laps : int
        Flying laps resampled. [-]
    ideal_time_band_s : tuple of float
        (low, high) of the ideal lap time. [s]
    time_left_band_s : tuple of float
        (low, high) of the lap's time left. [s]
    corner_bands_s : tuple of tuple of float
        (low, high) of each corner's time left, in corner order. [s]
    rank_group : tuple of int
        Per corner (corner order): corners ranked next to one another share a group when
        their order holds in fewer than ``coverage`` of the draws; group 1 holds the
        corner with most time left. [-]
    envelope_sd_s, line_sd_s : float
        Standard deviation of the ideal lap time's draws from each source alone. [s]
    """

    coverage: float
    n_resamples: int
    n_laps: int
    ideal_time_band_s: tuple[float, float]
    time_left_band_s: tuple[float, float]
    corner_bands_s: tuple[tuple[float, float], ...]
    rank_group: tuple[int, ...]
    envelope_sd_s: float
    line_sd_s: float

    def includes_zero(self, i: int) -> bool:
        """True when corner ``i``'s time-left band includes zero (no advice for it)."""
        lo, hi = self.corner_bands_s[i]
        return lo <= 0.0 <= hi

    def separable(self, i: int) -> bool:
        """True when corner ``i`` is in a rank group of its own."""
        return self.rank_group.count(self.rank_group[i]) == 1


def _tyre_shares(v, ax, ay, veh: Vehicle):
    """Tyre-force shares s_x, s_y of each sample (docs/formats.md, Vehicle files) and the samples off the power limit. [-]."""
    fx = veh.mass_kg * ax + resistance_n(v, veh)
    normal = normal_load_n(v, veh)
    fx_max = np.where(fx >= 0.0, veh.mu_trac, veh.mu_brk) * normal  # the tyres' own limits
    off_power = fx <= (1.0 - POWER_LIMIT_MARGIN) * power_force_n(v, veh)
    return fx / fx_max, veh.mass_kg * ay / (veh.mu_lat * normal), off_power


def level_samples(v, ax, ay, lap_index, veh: Vehicle):
    """Each sample's required grip scale, its direction group and its lap, off the power limit.

    Parameters
    ----------
    v, ax, ay : numpy.ndarray
        Filtered samples: speed [m/s], accelerations + forward, + left [m/s²].
    lap_index : numpy.ndarray
        Index 0..L-1 of each sample's lap. [-]
    veh : Vehicle
        The fitted envelope at grip scale 1.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray, numpy.ndarray)
        Required grip scale [-], group index into :data:`LEVELS` (braking, cornering,
        traction: the larger tyre share decides) [-], lap index [-].
    """
    sx, sy, off_power = _tyre_shares(v, ax, ay, veh)
    n = veh.exponent
    k = (np.abs(sx) ** n + np.abs(sy) ** n) ** (1.0 / n)
    group = np.where(np.abs(sy) >= np.abs(sx), 1, np.where(sx < 0.0, 0, 2))
    keep = off_power & np.isfinite(k)
    return k[keep], group[keep], np.asarray(lap_index)[keep]


def _level_draws(k, group, lap, n_laps, weights, quantile):
    """Relative change of each friction level under the lap weights: (resamples, levels). [-].

    A resample's level is the sample at the quantile's rank from the top of its group,
    each lap's samples counted as often as the lap was drawn. Only the group's highest
    samples, twice as many as the rank, are kept: a resample reaches further down only
    when the laps holding them were drawn less than half as often as on average, and
    then takes the last kept (a level a little high; the draw is one of a thousand).
    """
    out = np.ones((weights.shape[0], len(LEVELS)))
    for g in range(len(LEVELS)):
        sel = group == g
        kg, lg = k[sel], lap[sel]
        per_lap = np.bincount(lg, minlength=n_laps)
        if per_lap.sum() < 20:
            continue
        order = np.argsort(-kg)
        top = max(int(2 * (1.0 - quantile) * kg.size) + 20, 50)  # twice the rank: see Notes
        kt, lt = kg[order][:top], lg[order][:top]
        full = kt[round((1.0 - quantile) * (kg.size - 1))]
        counts = weights @ per_lap  # samples of the group in each resample
        rank = np.rint((1.0 - quantile) * (counts - 1.0))  # from the top, as the fit's rank
        cum = np.cumsum(weights[:, lt], axis=1, dtype=np.int32)
        at = np.minimum(np.argmax(cum > rank[:, None], axis=1), kt.size - 1)
        out[:, g] = kt[at] / full
    return out


def _sensitivities(line, ideal, vehicle: Vehicle, grip_scale, corners):
    """d(ideal time)/d ln(mu) for each level: lap [s] and each corner [s], shape (levels, 1 + corners)."""
    base = np.append(corner_ideal(line, ideal, corners), ideal.lap_time_s)
    rows = []
    for name in LEVELS:
        car = replace(vehicle, **{name: getattr(vehicle, name) * (1.0 + _STEP)})
        prof = solve.solve_profile(line, car, grip_scale)
        rows.append((np.append(corner_ideal(line, prof, corners), prof.lap_time_s) - base) / _STEP)
    return np.array(rows)


def corner_ideal(line, prof, corners, scale: float = 1.0):
    """The ideal's time in each corner's segment on ``line`` (corner bounds times ``scale``). [s]."""
    return segment_times(
        prof.distance_m, line.length_m, prof.time_s, prof.lap_time_s, corners, scale
    )


def session_bands(
    line,
    ideal,
    vehicle: Vehicle,
    corners,
    actual_corner_s,
    lap_time_s: float,
    line_draws,
    level_data=None,
    *,
    grip_scale: float = 1.0,
    quantile: float = 0.99,
    coverage: float = COVERAGE,
    n_resamples: int = N_RESAMPLES,
    seed: int = SEED,
    ranks=None,
) -> Bands | None:
    """The bootstrap bands of one analysed lap (see the module text).

    Parameters
    ----------
    line : line.Line
        The analysed lap's line. [-]
    ideal : solve.Profile
        The ideal on it. [-]
    vehicle : Vehicle
        The envelope at grip scale 1. [-]
    corners : sequence of corners.Corner
        The corners on ``line``. [-]
    actual_corner_s : array-like
        The analysed lap's time in each corner. [s]
    lap_time_s : float
        Its lap time. [s]
    line_draws : (numpy.ndarray, numpy.ndarray)
        Each flying lap's ideal lap time on its own line [s], shape (laps,), and its
        corner ideal times [s], shape (laps, corners).
    level_data : (numpy.ndarray, numpy.ndarray, numpy.ndarray, int), optional
        :func:`level_samples` of the envelope's samples and the number of laps they are
        indexed over; None when the envelope was given, not fitted (it is then taken as
        exact).
    grip_scale, quantile : float
        The ideal's grip scale; the envelope fit's quantile. [-]
    coverage : float
        Share of the draws inside each band. [-]
    n_resamples, seed : int
        Resamples and the generator's seed. [-]
    ranks : sequence of int, optional
        Each corner's rank by time left (1 = most), as the comparison ranks them; default
        from the point values. [-]

    Returns
    -------
    Bands or None
        None with fewer than :data:`MIN_LAPS` flying laps.
    """
    lap_ideal, corner_draws = (np.asarray(a, dtype=np.float64) for a in line_draws)
    n_lines = lap_ideal.shape[0]
    n_laps = n_lines if level_data is None else int(level_data[3])
    if min(n_lines, n_laps) < MIN_LAPS or not corners:
        return None
    rng = np.random.default_rng(seed)
    weights = rng.multinomial(n_laps, np.full(n_laps, 1.0 / n_laps), size=n_resamples)
    line_part = _line_predictive(np.column_stack((corner_draws, lap_ideal)), rng, n_resamples)
    env_part = np.zeros_like(line_part)
    if level_data is not None:
        levels = _level_draws(*level_data[:3], n_laps, weights.astype(np.int32), quantile)
        sens = _sensitivities(line, ideal, vehicle, grip_scale, corners)
        env_part = np.log(levels) @ sens
    base = np.append(corner_ideal(line, ideal, corners), ideal.lap_time_s)
    draws = base + line_part + env_part
    tail = 100.0 * (1.0 - coverage) / 2.0
    lo, hi = np.percentile(draws, [tail, 100.0 - tail], axis=0)
    left = np.asarray(actual_corner_s, dtype=np.float64) - draws[:, :-1]
    left_lo, left_hi = np.percentile(left, [tail, 100.0 - tail], axis=0)
    return Bands(
        coverage=float(coverage),
        n_resamples=int(n_resamples),
        n_laps=int(n_laps),
        ideal_time_band_s=(float(lo[-1]), float(hi[-1])),
        time_left_band_s=(float(lap_time_s - hi[-1]), float(lap_time_s - lo[-1])),
        corner_bands_s=tuple(zip(left_lo.tolist(), left_hi.tolist(), strict=True)),
        rank_group=_rank_groups(left, coverage, _order(ranks, actual_corner_s, base[:-1])),
        envelope_sd_s=float(np.std(env_part[:, -1])),
        line_sd_s=float(np.std(line_part[:, -1])),
    )


def _line_predictive(values, rng, n_draws):
    r"""Draws of a new lap's line against the laps' lines: multivariate Student t.

    ``values`` holds, per rebuilt line (rows), the ideal's corner and lap times. A new
    line's deviation from their mean, with mean and covariance unknown, follows the
    predictive multivariate t with :math:`n-1` degrees of freedom and scale
    :math:`(1 + 1/n) S` (:math:`S` the sample covariance; the prediction interval of a
    new observation, G. J. Hahn and W. Q. Meeker, *Statistical Intervals*, Wiley, 1991,
    ch. 4, from memory): drawn here as :math:`\sqrt{(1+1/n)/(n-1)}\, D^T z / \sqrt{u}`
    with :math:`D` the deviations from the mean, :math:`z \sim N(0, I_n)` and
    :math:`u \sim \chi^2_{n-1}/(n-1)`. Resampling the lines themselves would cover a new
    line only :math:`(n-1)/(n+1)` of the time with a handful of them (71 % with six).
    """
    n = values.shape[0]
    dev = values - values.mean(axis=0)
    z = rng.standard_normal((n_draws, n))
    u = rng.chisquare(n - 1, size=n_draws) / (n - 1)
    return (z @ dev) * math.sqrt((1.0 + 1.0 / n) / (n - 1)) / np.sqrt(u)[:, None]


def _order(ranks, actual, ideal) -> np.ndarray:
    """Corner indices from most to least time left."""
    if ranks is not None:
        return np.argsort(np.asarray(ranks), kind="stable")
    return np.argsort(-(np.asarray(actual, dtype=np.float64) - ideal), kind="stable")


def _rank_groups(left, coverage, order) -> tuple[int, ...]:
    """Rank groups from the draws of each corner's time left (draws, corners), corners taken in ``order``; see :class:`Bands`."""
    groups = np.zeros(left.shape[1], dtype=int)
    group = 1
    groups[order[0]] = group
    for a, b in itertools.pairwise(order):
        if np.mean(left[:, a] > left[:, b]) >= coverage:
            group += 1
        groups[b] = group
    return tuple(int(g) for g in groups)


def half_width(band) -> float:
    """Half the width of a band (the "± x" of its display). [s]."""
    lo, hi = band
    return 0.5 * (hi - lo) if math.isfinite(lo) and math.isfinite(hi) else math.nan


def advice_shown(name: str, time_left_s: float, band, advice: str) -> str:
    """The advice line to show for a corner: none when its band includes zero, a note instead.

    Parameters
    ----------
    name : str
        Corner name. [-]
    time_left_s : float
        Its time left. [s]
    band : tuple of float or None
        Its time-left band; None: no band, the advice as it is. [s]
    advice : str
        The comparison's advice line. [-]

    Returns
    -------
    str
        ``advice``, or ``"T10: 0.01 ± 0.02 s — within the uncertainty, no advice"``. [-]
    """
    if band is None or not (band[0] <= 0.0 <= band[1]):
        return advice
    return f"{name}: {with_band(time_left_s, band)} — within the uncertainty, no advice"
