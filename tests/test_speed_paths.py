"""Shortcuts taken for speed give the answers of the slower paths they replace.

- the boundary-point kernel (selection instead of a full sort per bin) picks exactly the
  sample ``numpy.lexsort`` ranks, ties included;
- the lap timelines (time against distance integrated from the logged speed) that
  best-of-laps uses for the laps whose line is not rebuilt reproduce the generator's
  true time at each distance fraction;
- the despike kernel marks and replaces what ``scipy.ndimage.median_filter`` would;
- the envelope fit's compiled residuals and shared-force usage give the numpy functions' values;
- thinning a long record before the envelope fit keeps the fitted envelope;
- the grip estimate of one lap, filtered on the lap's rows only, equals the one filtered
  on the whole log;
- quantities remembered on a log are recomputed when its arrays are replaced;
- the distance travelled by one compiled pass is numpy's trapezoid expression, bit for bit.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest

from limitlap import (
    _kernels,
    best_laps,
    envelope,
    gnss,
    grip,
    least_squares,
    logfile,
    pipeline,
    samples,
    synth,
)
from limitlap import corners as corners_mod
from limitlap.laps import Gate, split_laps
from limitlap.limits import combined_usage
from limitlap.solve import vehicle_array
from tests.cases import EXAMPLE_CAR, circling_record


def _lexsort_reference(key, rho, rank):
    """The sample of rank ``rank[g]`` in each group ordered by (rho, index): numpy only."""
    order = np.lexsort((rho, key))
    out = np.full(rank.shape[0], -1, np.int64)
    keys, start = np.unique(key[order], return_index=True)
    for k, s in zip(keys, start, strict=True):
        if rank[k] >= 0:
            out[k] = order[s + rank[k]]
    return out


@pytest.mark.parametrize("ties", [False, True])
def test_boundary_kernel_matches_lexsort(ties):
    # Exact equality: both pick one index by the same total order (rho, then index).
    rng = np.random.default_rng(7)
    for _ in range(40):
        n, groups = int(rng.integers(1, 3000)), int(rng.integers(1, 40))
        key = rng.integers(0, groups, n).astype(np.int64)
        rho = rng.random(n)
        if ties:  # only 11 distinct values: many equal radii in a bin
            rho = np.round(rho * 10.0) / 10.0
        count = np.bincount(key, minlength=groups)
        rank = np.where(count >= 2, np.rint(rng.random(groups) * (count - 1)), -1).astype(np.int64)
        got = _kernels.boundary_points(key, rho, rank)
        assert np.array_equal(got, _lexsort_reference(key, rho, rank))


@pytest.fixture(scope="module")
def session_and_log(tmp_path_factory):
    session = synth.generate_session(n_laps=3, seed=21)
    path = tmp_path_factory.mktemp("timeline") / "s.csv"
    path.write_text(synth.session_csv_text(session), encoding="utf-8")
    return session, logfile.read_log(path)


def test_lap_timelines_follow_true_time_against_distance(session_and_log):
    session, log = session_and_log
    truth = session.truth
    laps = [lp for lp in split_laps(log, Gate.geodetic(*truth.gate_latlon)) if lp.complete]
    timelines = pipeline.lap_timelines(log, laps)
    assert len(timelines) == len(laps) == len(truth.lap_times_s)
    t = session.time_s
    fractions = np.linspace(0.05, 0.95, 19)
    for lp in laps:
        tl = timelines[lp.number]
        assert np.all(np.diff(tl.distance_m) > 0) and tl.distance_m[0] == 0.0
        assert tl.lap_time_s == lp.time_s
        # the generator's truth: elapsed time when the car reached each fraction of the lap
        inside = (t > lp.start_time_s) & (t < lp.end_time_s)
        s0, s1 = np.interp([lp.start_time_s, lp.end_time_s], t, truth.distance_m)
        true_t = np.interp(fractions * (s1 - s0), truth.distance_m[inside] - s0, t[inside])
        got_t = np.interp(fractions * tl.length_m, tl.distance_m, tl.time_s) + lp.start_time_s
        # Speed noise 0.05 m/s (generator default) integrates to centimetres of distance
        # over a lap, about a millisecond at 30-80 m/s (1.5 ms at most measured here with
        # seed 21); 5 ms leaves room for other seeds. A timeline off by one 100 Hz row
        # (10 ms) fails.
        assert got_t == pytest.approx(true_t, abs=5e-3)


def test_best_of_laps_takes_timelines(session_and_log):
    # best_of_laps on timelines equals segment_times on the same arrays (its definition).
    session, log = session_and_log
    laps = [lp for lp in split_laps(log, Gate.geodetic(*session.truth.gate_latlon)) if lp.complete]
    timelines = list(pipeline.lap_timelines(log, laps).values())
    ref = timelines[0]
    seg = [(0.0, 0.3), (0.3, 0.7), (0.7, 1.0)]
    corners = [
        _Segment(a * ref.length_m, b * ref.length_m, f"S{i}") for i, (a, b) in enumerate(seg)
    ]
    best = best_laps.best_of_laps(timelines, corners, reference_length_m=ref.length_m)
    for row, tl in zip(best.segment_times_s, timelines, strict=True):
        expect = best_laps.segment_times(
            tl.distance_m,
            tl.length_m,
            tl.time_s,
            tl.lap_time_s,
            corners,
            tl.length_m / ref.length_m,
        )
        assert np.array_equal(row, expect)
        # three segments tile the lap: they add up to its time (rounding only)
        assert row.sum() == pytest.approx(tl.lap_time_s, abs=1e-9)


class _Segment:
    """Just the fields best_of_laps and segment_times read from a corner."""

    def __init__(self, start_m, end_m, name):
        self.start_m, self.end_m, self.name = start_m, end_m, name


@pytest.mark.parametrize("width", [3, 5, 31, 51])
def test_despike_kernel_matches_scipy_median_filter(width):
    # Exact equality with the spike test written on scipy.ndimage.median_filter (edges
    # repeating the end values, mode="nearest"): the same samples marked and the same
    # medians put in their place, although the kernel tests by counting and sorts only at
    # the spikes; quantised values make many ties, as a logger's.
    from scipy.ndimage import median_filter

    rng = np.random.default_rng(width)
    for n in (1, 2, width - 1, width, 1000):
        x = np.cumsum(rng.normal(size=n)) * 0.3 + rng.normal(size=n) * 0.5
        x[::17] += 6.0  # spikes, upwards and downwards
        x[5::23] -= 6.0
        for values in (x, np.round(x, 1)):
            med = median_filter(values, size=width, mode="nearest")
            want = np.abs(values - med) > 2.0
            got_values = np.ascontiguousarray(values).copy()
            got = _kernels.despike(got_values, width, 2.0)
            assert np.array_equal(got, want)
            assert np.array_equal(got_values, np.where(want, med, values))
        assert n < width + 1 or want.any()  # the cases do contain spikes


@pytest.mark.parametrize("power_w", [EXAMPLE_CAR.power_w, math.inf])
def test_tyre_plane_fast_paths_match_the_numpy_functions(power_w):
    # Braking, driving below and beyond the power limit, both turning directions, and
    # zero speed; the numpy functions (limits.combined_usage, envelope._tyre_plane,
    # envelope._residuals) are the reference. The compiled residual of the fit: 1e-12
    # relative (the same formulas, rounded in another order). The numpy pass of the
    # boundary points shares the forces between usage and direction: the same operations
    # in the same order, so the same bits.
    car = replace(EXAMPLE_CAR, power_w=power_w)
    rng = np.random.default_rng(11)
    n = 5000
    v = np.concatenate(([0.0, 1e-3], rng.uniform(0.0, 90.0, n)))
    ax = np.concatenate(([0.5, -0.5], rng.uniform(-40.0, 25.0, n)))
    ay = np.concatenate(([0.0, 1.0], rng.uniform(-40.0, 40.0, n)))
    sx, sy, _ = envelope._tyre_plane(v, ax, ay, car)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho_ref = combined_usage(v, ax, ay, car)
        res_ref = envelope._residuals(v, ax, ay, car)
    names = list(envelope._PARAMS)
    scale = np.array([envelope._SCALE.get(k, 1.0) for k in names])
    where = np.array([envelope._KERNEL_INDEX[k] for k in names], dtype=np.int64)
    x = np.array([getattr(car, k) for k in names]) / scale
    res = _kernels.envelope_residuals(v, ax, ay, vehicle_array(car), where, scale, x)
    np.testing.assert_allclose(res, res_ref, rtol=1e-12, atol=1e-12)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho_np, phi_np = envelope._usage_and_direction(v, ax, ay, car)
    assert np.array_equal(rho_np, rho_ref, equal_nan=True)
    assert np.array_equal(phi_np, np.arctan2(sy, sx), equal_nan=True)


@pytest.mark.slow
def test_thinned_fit_keeps_the_envelope():
    # A 30-minute 100 Hz record (the kerb-strike series of test_envelope, longer): more
    # than FIT_MIN_SAMPLES samples, so the fit thins to FIT_RATE_HZ. After the 3 Hz
    # low-pass the thinned samples trace the same curve (sampling theorem), so the fitted
    # friction values must agree with the unthinned fit's to 0.2 %, a fifteenth of issue
    # 4's 3 % accuracy requirement (project requirement, no published source; measured
    # 0.03-0.05 %), and the thinned fit must recover the true car within that 3 %.
    fs = 100.0
    _, v, ax, ay, _ = circling_record(1800.0, fs=fs, seed=8)
    m = EXAMPLE_CAR.mass_kg
    base = envelope.Vehicle("mass only", m, rolling_coeff=EXAMPLE_CAR.rolling_coeff)
    thin = envelope.fit_envelope(v, ax, ay, base, sample_rate_hz=fs)
    full = envelope.fit_envelope(v, ax, ay, base, sample_rate_hz=fs, fit_rate_hz=None)
    assert thin.quality["n_used"] < 0.4 * full.quality["n_used"]  # it did thin (3x here)
    for k in ("mu_lat", "mu_brk", "mu_trac"):
        assert getattr(thin.vehicle, k) == pytest.approx(getattr(full.vehicle, k), rel=2e-3), k
        assert getattr(thin.vehicle, k) == pytest.approx(getattr(EXAMPLE_CAR, k), rel=0.03), k


@pytest.mark.slow
def test_short_records_are_not_thinned(session_and_log):
    # A three-lap session has fewer than FIT_MIN_SAMPLES samples: the same fit either way.
    _, log = session_and_log
    ch = log.channels
    args = (ch["speed"], ch["accel_lon"], ch["accel_lat"], envelope.Vehicle("m", 1200.0))
    a = envelope.fit_envelope(*args, sample_rate_hz=100.0)
    b = envelope.fit_envelope(*args, sample_rate_hz=100.0, fit_rate_hz=None)
    assert a.quality["n_used"] == b.quality["n_used"]
    assert a.vehicle == b.vehicle


def test_one_lap_grip_estimate_on_its_own_rows(session_and_log):
    # The pipeline filters only a lap's rows (with 2 s either side) for its grip
    # estimate; the filters reach well under a second, so the estimate must equal the
    # one from the whole log's rows to rounding.
    session, log = session_and_log
    laps = [lp for lp in split_laps(log, Gate.geodetic(*session.truth.gate_latlon)) if lp.complete]
    lap = laps[1]
    car = session.truth.vehicle
    whole = pipeline._imu_samples(log, laps, [lap])
    own = pipeline._imu_samples(log, laps, [lap], pad_s=2.0)
    assert own[0].size < 0.5 * whole[0].size
    k_whole = grip.grip_estimate(*whole[:3], car, mask=whole[3], sample_rate_hz=whole[4])
    k_own = grip.grip_estimate(*own[:3], car, mask=own[3], sample_rate_hz=own[4])
    assert k_own == pytest.approx(k_whole, rel=1e-12)


def test_remembered_values_follow_the_arrays(session_and_log):
    _, log = session_and_log
    log = logfile.Log(log.path, log.time_s, dict(log.channels), log.origin, [])
    first = gnss.travelled_m(log)
    assert gnss.travelled_m(log) is first  # kept
    with pytest.raises(ValueError):
        first[0] = 1.0  # read-only: a caller cannot change what the next one gets
    log.channels["speed"] = 2.0 * log.channels["speed"]
    again = gnss.travelled_m(log)
    np.testing.assert_allclose(again, 2.0 * first, rtol=1e-12)


def test_select_samples_in_two_threads_equals_one(session_and_log, monkeypatch):
    # The two channels are despiked and filtered side by side on long records; the
    # result must be the single-thread one exactly (the same operations per channel).
    _, log = session_and_log
    ch = log.channels
    args = (ch["speed"], ch["accel_lon"], ch["accel_lat"])
    monkeypatch.setattr(samples, "_THREADED_SAMPLES", 10**12)
    one = samples.select_samples(*args, sample_rate_hz=100.0)
    monkeypatch.setattr(samples, "_THREADED_SAMPLES", 0)
    two = samples.select_samples(*args, sample_rate_hz=100.0)
    for name in ("speed_m_s", "accel_lon_m_s2", "accel_lat_m_s2", "used"):
        assert np.array_equal(getattr(one, name), getattr(two, name), equal_nan=name != "used")
    assert one.n_spikes == two.n_spikes


def _crosses_reference(x, y):
    """Every pair of segments of the closed polygon by orientation signs (numpy, O(n^2))."""
    n = x.shape[0]
    bx, by = np.roll(x, -1), np.roll(y, -1)
    i, j = np.meshgrid(np.arange(n), np.arange(n), indexing="ij")

    def orient(px, py, qx, qy, rx, ry):
        return np.sign((qx - px) * (ry - py) - (qy - py) * (rx - px))

    o1 = orient(x[i], y[i], bx[i], by[i], x[j], y[j])
    o2 = orient(x[i], y[i], bx[i], by[i], bx[j], by[j])
    o3 = orient(x[j], y[j], bx[j], by[j], x[i], y[i])
    o4 = orient(x[j], y[j], bx[j], by[j], bx[i], by[i])
    hit = (o1 * o2 < 0) & (o3 * o4 < 0)
    hit |= (
        (o1 == 0)
        & (np.minimum(x[i], bx[i]) <= x[j])
        & (x[j] <= np.maximum(x[i], bx[i]))
        & (np.minimum(y[i], by[i]) <= y[j])
        & (y[j] <= np.maximum(y[i], by[i]))
    )
    near = (np.abs(i - j) <= 1) | (np.abs(i - j) == n - 1)
    return bool(np.any(hit & ~near))


def test_self_crossing_sweep_matches_all_pairs():
    # Random star-shaped loops (never cross), the same with a few points swapped (often
    # cross), points on a coarse grid (collinear touches) and a figure eight through one
    # of its own points: the sweep must agree with testing every pair.
    rng = np.random.default_rng(5)
    cases = []
    for _ in range(150):
        n = int(rng.integers(4, 60))
        t = np.sort(rng.uniform(0, 2 * np.pi, n))
        r = rng.uniform(50, 100, n)
        x, y = r * np.cos(t), r * np.sin(t)
        cases.append((x, y))
        k = rng.integers(0, n, 2)
        x2, y2 = x.copy(), y.copy()
        x2[k], y2[k] = x[k[::-1]], y[k[::-1]]
        cases.append((x2, y2))
        cases.append((np.round(x / 25.0) * 25.0, np.round(y / 25.0) * 25.0))
    cases.append((np.array([0.0, 1, 2, 1, 0, -1, -2, -1]), np.array([0.0, 1, 0, -1, 0, 1, 0, -1])))
    seen = set()
    for x, y in cases:
        keep = np.hypot(np.diff(x, append=x[0]), np.diff(y, append=y[0])) > 1e-9
        x, y = np.ascontiguousarray(x[keep]), np.ascontiguousarray(y[keep])
        if x.size < 4:
            continue
        want = _crosses_reference(x, y)
        seen.add(want)
        assert _kernels.polygon_self_crosses(x, y) == want
    assert seen == {True, False}


def test_peak_prominences_match_scipy_find_peaks():
    # corners_mod.peak_prominences replaces scipy.signal.find_peaks(x, prominence=0) (whose
    # import costs the command line half a second): the same peaks, plateaus included, and
    # the same prominences, exactly, on random, quantised and stepped series.
    from scipy.signal import find_peaks

    rng = np.random.default_rng(0)
    for t in range(1500):
        n = int(rng.integers(1, 80))
        x = rng.random(n)
        if t % 3 == 0:
            x = np.round(x * 4) / 4
        elif t % 3 == 1:
            x = np.repeat(np.round(rng.random(max(n // 3, 1)) * 5), 3)
        peaks, prominences = corners_mod.peak_prominences(x)
        want, props = find_peaks(x, prominence=0.0)
        assert np.array_equal(peaks, want)
        assert np.array_equal(prominences, props["prominences"])


def test_commands_hand_frozen_objects_back(monkeypatch, capsys):
    # A command moves the imports' objects out of the collector's way (gc.freeze) and
    # main() hands them back when it ends: a process that runs commands in-process (these
    # tests, a notebook) must be left with nothing frozen, or its garbage would pile up.
    import gc
    import sys

    from limitlap import cli
    from limitlap.resources import bundled_path

    line = str(bundled_path("demo_tracks", "example_loop_line.csv"))
    car = str(bundled_path("vehicles", "gt_coupe.toml"))
    monkeypatch.setattr(sys, "argv", ["limitlap", "solve", line, "--vehicle", car, "--json"])
    frozen = []
    real_freeze = gc.freeze
    monkeypatch.setattr(gc, "freeze", lambda: (real_freeze(), frozen.append(gc.get_freeze_count())))
    try:
        cli.main()
    except SystemExit as stop:
        assert stop.code in (None, 0)
    assert frozen and frozen[0] > 0  # the command did freeze
    assert gc.get_freeze_count() == 0  # and main() handed everything back
    assert "lap_time_s" in capsys.readouterr().out


@pytest.mark.slow
def test_selection_made_beforehand_gives_the_same_fit(session_and_log):
    # The pipeline selects the envelope's samples (no mask) in a second thread while it
    # splits the laps, then fits with the laps' mask applied to that selection: the fit
    # must be the one made from the arrays and the mask directly.
    session, log = session_and_log
    laps = split_laps(log, Gate.geodetic(*session.truth.gate_latlon))
    v, ax, ay, mask, rate, thr = pipeline._imu_samples(
        log, laps, [lp for lp in laps if lp.complete]
    )
    base = envelope.Vehicle("m", 1200.0)
    direct = envelope.fit_envelope(v, ax, ay, base, mask=mask, sample_rate_hz=rate, throttle=thr)
    early = samples.select_samples(v, ax, ay, sample_rate_hz=rate)
    later = envelope.fit_envelope(
        v, ax, ay, base, mask=mask, sample_rate_hz=rate, throttle=thr, selection=early
    )
    assert later.vehicle == direct.vehicle
    assert np.array_equal(later.used, direct.used)
    restricted = early.within(mask)
    again = samples.select_samples(v, ax, ay, mask, sample_rate_hz=rate)
    assert np.array_equal(restricted.used, again.used)
    assert restricted.n_spikes == again.n_spikes


def test_compiled_residuals_and_jacobian_match_numpy_and_scipy():
    # The fit's residuals (kernel) against envelope._residuals on the numpy functions
    # (1e-12: the same formulas), and its forward-difference Jacobian against SciPy's own
    # "2-point" approx_derivative of the same residuals (same step rule: the columns agree
    # to rounding of the differences, 1e-6 of the column scale; measured ~1e-9).
    from scipy.optimize._numdiff import approx_derivative

    rng = np.random.default_rng(13)
    n = 400
    v = rng.uniform(10.0, 80.0, n)
    ax = rng.uniform(-30.0, 15.0, n)
    ay = rng.uniform(-30.0, 30.0, n)
    names = list(envelope._PARAMS)
    scale = np.array([envelope._SCALE.get(k, 1.0) for k in names])
    x = np.array([getattr(EXAMPLE_CAR, k) for k in names]) / scale
    lo = np.array([envelope._BOUNDS[k][0] for k in names]) / scale
    hi = np.array([envelope._BOUNDS[k][1] for k in names]) / scale
    fun, jac = envelope._plane_residuals(v, ax, ay, names, EXAMPLE_CAR, lo, hi)
    want = envelope._residuals(v, ax, ay, envelope._vehicle_from(x, names, EXAMPLE_CAR))
    np.testing.assert_allclose(fun(x), want, rtol=1e-12, atol=1e-12)
    got = jac(x)
    ref = approx_derivative(fun, x, method="2-point", bounds=(lo, hi))
    col_scale = np.maximum(np.abs(ref).max(axis=0), 1e-12)
    assert np.all(np.abs(got - ref).max(axis=0) <= 1e-6 * col_scale)


def test_reader_hands_over_the_final_channels_early(tmp_path):
    # read_log's on_channels hook (the pipeline starts the envelope samples there) must get
    # the very arrays the returned log holds, in SI, on the final time base.
    session = synth.generate_session(n_laps=1, seed=22)
    path = tmp_path / "s.csv"
    path.write_text(synth.session_csv_text(session), encoding="utf-8")
    seen = {}
    log = logfile.read_log(path, on_channels=lambda t, ch: seen.update(t=t, ch=dict(ch)))
    assert seen["t"] is log.time_s
    for name in ("speed", "accel_lon", "accel_lat"):
        assert seen["ch"][name] is log.channels[name]
    np.testing.assert_allclose(log.channels["speed"], session.channels["speed"], atol=0.01)


def _refine_reference(log, gx, gy, nx, ny, s, at, span=30.0):
    """One least-squares quadratic and np.roots per crossing (the loop laps.py replaced)."""
    from limitlap.gnss import fix_rows

    rows = fix_rows(log)
    s_fix = s[rows]
    along = (log.channels["x"][rows] - gx) * nx + (log.channels["y"][rows] - gy) * ny
    out = at.copy()
    for k, s0 in enumerate(at):
        lo, hi = np.searchsorted(s_fix, [s0 - span, s0 + span])
        if hi - lo < 6:
            continue
        u = s_fix[lo:hi] - s0
        if np.ptp(u) < span:
            continue
        design = np.column_stack((u * u, u, np.ones_like(u)))
        (c2, c1, c0), *_ = np.linalg.lstsq(design, along[lo:hi], rcond=None)
        roots = np.roots([c2, c1, c0]) if abs(c2) > 1e-12 else np.array([-c0 / c1])
        roots = roots[np.isreal(roots)].real
        roots = roots[np.abs(roots) <= span]
        if roots.size:
            out[k] = s0 + roots[np.argmin(np.abs(roots))]
    return out


def test_vectorised_crossing_refinement_matches_one_fit_per_crossing(session_and_log):
    # Every window's normal equations at once (laps._refine_crossings) against a fit and
    # np.roots per crossing: the same distances to rounding (1e-9 m, far below the 0.1 m
    # the crossing times need at racing speed: 1 ms).
    session, log = session_and_log
    from limitlap import laps as laps_mod
    from limitlap.gnss import fill_position, travelled_m

    gate = Gate.geodetic(*session.truth.gate_latlon)
    gx, gy = gate.position_m(log)
    x, y = fill_position(log)
    s = travelled_m(log)
    rng = np.random.default_rng(3)
    near = np.flatnonzero(np.hypot(x - gx, y - gy) < 5.0)
    at = np.sort(
        s[near][:: max(1, near.size // 40)]
        + rng.uniform(-3.0, 3.0, near[:: max(1, near.size // 40)].size)
    )
    for nx, ny in ((1.0, 0.0), (0.6, 0.8), (-0.28, 0.96)):
        got = laps_mod._refine_crossings(log, gx, gy, nx, ny, s, at)
        want = _refine_reference(log, gx, gy, nx, ny, s, at)
        np.testing.assert_allclose(got, want, rtol=0.0, atol=1e-9)
        assert np.any(got != at)  # some crossings were refined


def test_robust_least_squares_matches_scipy_soft_l1():
    # The fit's least squares (MINPACK's Levenberg-Marquardt on transformed residuals)
    # against the reference it replaces, scipy.optimize.least_squares(loss="soft_l1",
    # method="trf"): the same minimum of the same cost (to the solvers' own tolerances,
    # 1e-6 relative here), the same loss-scaled Jacobian at it, and with the minimum
    # beyond a bound, the bounded method's answer on that bound.
    from scipy.optimize import least_squares as scipy_least_squares

    rng = np.random.default_rng(5)
    t = np.linspace(0.0, 4.0, 120)
    y = 2.0 * np.exp(-0.7 * t) + 0.3 + rng.normal(0.0, 0.02, t.size)
    y[::9] += rng.normal(0.0, 0.5, y[::9].size)  # outliers: where soft-L1 differs from L2

    def fun(x):
        return x[0] * np.exp(-x[1] * t) + x[2] - y

    def jac(x):
        e = np.exp(-x[1] * t)
        return np.column_stack([e, -x[0] * t * e, np.ones_like(t)])

    start = np.array([1.0, 1.0, 0.0])
    for lo, hi, inside in (
        (np.array([0.0, 0.0, -1.0]), np.array([10.0, 10.0, 1.0]), True),
        (np.array([0.0, 0.0, -1.0]), np.array([10.0, 10.0, 0.1]), False),  # x[2] held at 0.1
    ):
        ref = scipy_least_squares(
            fun,
            start,
            jac=jac,
            bounds=(lo, hi),
            loss="soft_l1",
            f_scale=0.1,
            x_scale="jac",
            ftol=1e-12,
            xtol=1e-12,
            gtol=1e-12,
        )
        got = least_squares.soft_l1_least_squares(fun, jac, start, lo, hi, 0.1)
        np.testing.assert_allclose(got.x, ref.x, rtol=1e-6, atol=1e-9)
        np.testing.assert_allclose(got.fun, fun(got.x), rtol=0, atol=0)
        np.testing.assert_allclose(got.jac, ref.jac, rtol=1e-5, atol=1e-8)
        assert inside == bool(np.all(ref.active_mask == 0))  # the case is what it says


def test_travelled_distance_kernel_is_numpys_trapezoid_bit_for_bit():
    # The reader's distance travelled (one compiled pass) must be the numpy expression it
    # replaces, bit for bit, and scipy.integrate.cumulative_trapezoid's to rounding.
    from scipy.integrate import cumulative_trapezoid

    rng = np.random.default_rng(12)
    t = np.cumsum(rng.uniform(0.005, 0.015, 50_000))
    v = np.abs(rng.normal(40.0, 15.0, t.size))
    ref = np.concatenate(([0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * np.diff(t))))
    got = _kernels.trapezoid_running(t, v)
    assert np.array_equal(got, ref)
    np.testing.assert_allclose(got, cumulative_trapezoid(v, t, initial=0.0), rtol=1e-12, atol=1e-9)
    assert _kernels.trapezoid_running(t[:1], v[:1]).tolist() == [0.0]
