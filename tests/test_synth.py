"""Synthetic session generator: circuit geometry, consistency of the log with its truth."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pymap3d
import pytest

from limitlap import circuits, synth
from limitlap.line import self_intersects
from limitlap.solve import solve_profile
from limitlap.units import DEG_TO_RAD, G0_M_S2


@pytest.fixture(scope="module")
def circuit():
    return circuits.demo_circuit()


@pytest.fixture(scope="module")
def session(circuit):
    # Two flying laps, lap 2 at the limit; noise-free speed so the integral is exact.
    return synth.generate_session(circuit, n_laps=2, limit_laps=(2,), speed_noise_m_s=0.0, seed=7)


def test_circuit_closes_in_heading_and_position(circuit):
    line = circuit.line
    # Clockwise loop: total heading change -2π. The closure solves it exactly; the sum
    # of κ·ds on 1 m stations of a piecewise-linear κ is exact up to the station
    # sampling of the knots (< 1e-3 rad over 3.8 km, grid step).
    assert np.sum(line.curvature_1_m * line.ds_m) == pytest.approx(-2 * math.pi, abs=1e-3)
    # Last station back to the first is one station step (positions close to the
    # 0.05 m integration grid's O(h²) error).
    gap = math.hypot(line.x_m[0] - line.x_m[-1], line.y_m[0] - line.y_m[-1])
    assert gap == pytest.approx(line.length_m / line.n, abs=1e-3)
    steps = np.hypot(np.diff(line.x_m), np.diff(line.y_m))
    assert np.allclose(steps, line.length_m / line.n, atol=1e-3)  # uniform spacing
    assert not self_intersects(line.x_m, line.y_m)


def test_circuit_has_the_designed_variety(circuit):
    line = circuit.line
    assert 3000.0 < line.length_m < 4000.0
    radii = [abs(c.radius_m) for c in circuit.corners]
    assert min(radii) < 20.0  # a hairpin
    assert max(radii) > 200.0  # fast sweeper / kink
    signs = {np.sign(c.radius_m) for c in circuit.corners}
    assert signs == {-1.0, 1.0}  # left and right bends
    # Clothoid transitions: curvature is continuous, so it changes by at most the
    # steepest designed ramp per metre (1/16 m⁻¹ over 20 m = 3.1e-3 per m).
    assert np.max(np.abs(np.diff(line.curvature_1_m))) < 3.2e-3
    # Gentle height profile: grades under 3 %.
    assert np.max(np.abs(line.gradient)) < 0.03
    # gradient is dz/ds of the stored heights (central differences, 1 m step, O(h²))
    dz = np.gradient(line.z_m, line.distance_m)
    assert np.allclose(dz[1:-1], line.gradient[1:-1], atol=1e-5)


def test_lap_times_from_time_stamps_equal_the_solver(session):
    tr = session.truth
    # Gate crossings are stations of the session's solve; the closed-lap solves of each
    # lap's own speed cap must give the same times (rounding only).
    assert tr.lap_times_s == pytest.approx(tr.solver_lap_times_s, abs=1e-9)
    # The limit lap is the ideal lap.
    assert tr.lap_times_s[1] == pytest.approx(tr.ideal_lap_time_s, abs=1e-9)
    assert tr.ideal_lap_time_s == pytest.approx(
        solve_profile(tr.line, tr.vehicle).lap_time_s, rel=1e-12
    )


def test_integrated_speed_over_a_lap_is_the_line_length(session):
    tr = session.truth
    t, v = session.time_s, session.channels["speed"]
    for k in range(tr.lap_times_s.shape[0]):
        sel = (t >= tr.gate_times_s[k]) & (t <= tr.gate_times_s[k + 1])
        dist = np.trapezoid(v[sel], t[sel])
        # 0.5 %: tolerance of the issue; the only errors are the 10 ms row grid at the
        # lap ends (< 0.8 m) and linear interpolation of speed between stations.
        assert dist == pytest.approx(tr.line.length_m, rel=5e-3)


def test_mistakes_cost_time_and_add_up(circuit):
    s = synth.generate_session(circuit, n_laps=1, lap_variation=0.0, seed=3)
    tr = s.truth
    costs = [m.time_cost_s for m in tr.mistakes]
    assert all(c > 0.03 for c in costs)
    # Separate corners: costs nearly add (each mistake's effect ends before the next
    # corner's braking); 5 % allows the small carry-over on a straight.
    assert tr.lap_times_s[0] - tr.ideal_lap_time_s == pytest.approx(sum(costs), rel=0.05)
    for m in tr.mistakes:
        assert m.speed_cap_m_s < m.ideal_min_speed_m_s
        # the lap with mistakes really is slower at the capped apex
        i = round(m.apex_m / (tr.line.length_m / tr.line.n))
        assert tr.mistake_profile.speed_m_s[i] <= m.speed_cap_m_s + 1e-9


def test_gps_cells_blank_between_fixes_and_dropout():
    c = circuits.circle_circuit(80.0)
    s = synth.generate_session(
        c, n_laps=2, mistakes=(), gps_rate_hz=20.0, gps_dropouts=((12.0, 3.0),), seed=5
    )
    lat = s.channels["latitude"]
    has = np.isfinite(lat)
    rows = np.flatnonzero(has)
    steps = np.diff(rows)
    assert set(steps.tolist()) <= {5, 305}  # every 5th row at 20 Hz, one 3 s gap
    assert not has[(s.time_s >= 12.0) & (s.time_s < 15.0)].any()
    assert np.isfinite(s.channels["speed"]).all()
    text = synth.session_csv_text(s)
    header, first, second = text.splitlines()[:3]
    assert header.split(",")[:5] == [
        "time [s]",
        "latitude [deg]",
        "longitude [deg]",
        "altitude [m]",
        "speed [km/h]",
    ]
    assert first.split(",")[1] != "" and second.split(",")[1:4] == ["", "", ""]


def test_enu_geodetic_round_trip():
    c = circuits.circle_circuit(150.0)
    s = synth.generate_session(c, n_laps=1, mistakes=(), seed=11)
    tr = s.truth
    f = np.isfinite(s.channels["latitude"])
    e, n, u = pymap3d.geodetic2enu(
        s.channels["latitude"][f],
        s.channels["longitude"][f],
        s.channels["altitude"][f],
        *c.origin,
    )
    # pymap3d round trip is exact to < 1e-8 m (M. Hirsch, PyMap3D, Journal of Open Source
    # Software 3(23), 580, 2018); 1e-6 m allows for the
    # iterative geodetic inversion.
    assert e == pytest.approx(tr.x_m[f] + tr.gps_error_m[f, 0], abs=1e-6)
    assert n == pytest.approx(tr.y_m[f] + tr.gps_error_m[f, 1], abs=1e-6)
    assert u == pytest.approx(tr.z_m[f] + tr.gps_error_m[f, 2], abs=1e-6)


def test_gps_error_is_metre_level_and_correlated():
    c = circuits.circle_circuit(100.0)
    s = synth.generate_session(c, n_laps=30, mistakes=(), gps_tau_s=20.0, seed=2)
    err = s.truth.gps_error_m[np.isfinite(s.truth.gps_error_m[:, 0]), 0]
    # Gauss-Markov σ 0.7 m plus white 0.1 m: total σ = sqrt(0.49 + 0.01) = 0.707 m; a
    # sample of ~ T/τ = 30·20/20 ≈ 40 correlation times gives about ±25 % on σ.
    assert 0.45 < np.std(err) < 1.0
    # Lag-1 correlation at 10 Hz of GM + white noise: φ·(1 - σ_w²/σ²) with
    # φ = exp(-0.1/20) = 0.995 (first-order Gauss-Markov, Gelb 1974 [M]); σ² taken from
    # the sample, as a finite record under-samples the slow part. ±0.01: sampling error.
    r1 = np.corrcoef(err[1:], err[:-1])[0, 1]
    assert r1 == pytest.approx(math.exp(-0.1 / 20.0) * (1 - 0.1**2 / np.var(err)), abs=0.01)


def test_signs_on_a_counter_clockwise_circle():
    # ISO 8855:2011 axes (y left, z up): a left-hand (CCW) circle gives κ > 0, r > 0, a_y > 0.
    c = circuits.circle_circuit(100.0)
    s = synth.generate_session(c, n_laps=1, mistakes=(), seed=1)
    assert (c.line.curvature_1_m > 0).all()
    moving = s.truth.lap_number == 1
    v = s.channels["speed"][moving]
    assert np.median(s.channels["yaw_rate"][moving]) > 0
    assert np.median(s.channels["accel_lat"][moving]) > 0
    # steady state at the limit: a_y = v²/R to the noise (0.03 g per sample; median)
    ay = np.median(s.channels["accel_lat"][moving])
    assert ay == pytest.approx(np.median(v) ** 2 / 100.0, abs=0.01 * G0_M_S2)
    r = np.median(s.channels["yaw_rate"][moving])
    assert r == pytest.approx(np.median(v) / 100.0 + 0.2 * DEG_TO_RAD, abs=0.002)  # + bias


def test_seeded_and_deterministic():
    c = circuits.circle_circuit(60.0)
    a = synth.generate_session(c, n_laps=1, seed=4, mistakes=())
    b = synth.generate_session(c, n_laps=1, seed=4, mistakes=())
    d = synth.generate_session(c, n_laps=1, seed=5, mistakes=())
    assert synth.session_csv_text(a) == synth.session_csv_text(b)
    assert synth.session_csv_text(a) != synth.session_csv_text(d)


def test_wet_session_is_the_scaled_vehicle(circuit):
    s = synth.generate_session(circuit, n_laps=1, grip_scale=0.75, mistakes=(), seed=9)
    tr = s.truth
    wet = solve_profile(tr.line, tr.vehicle.scaled(0.75)).lap_time_s
    assert tr.ideal_lap_time_s == pytest.approx(wet, rel=1e-12)
    assert tr.ideal_lap_time_s > solve_profile(tr.line, tr.vehicle).lap_time_s


@pytest.mark.slow
def test_one_hour_session_is_fast_enough():
    import time

    start = time.perf_counter()
    s = synth.generate_session(duration_s=3600.0, seed=1)
    elapsed = time.perf_counter() - start
    assert s.time_s[-1] == pytest.approx(3600.0, rel=0.05)  # whole laps: within a lap
    assert s.time_s.shape[0] > 330_000
    # "a few seconds" (benchmark issue); 2-core CI machine, measured about 1.7 s here
    assert elapsed < 8.0


def _make_demo():
    import importlib.util

    from limitlap.resources import bundled_path

    spec = importlib.util.spec_from_file_location(
        "make_demo", bundled_path("demo_tracks", "make_demo.py")
    )
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_bundled_track_files_are_the_generator_output():
    from limitlap.driven import line_csv_text
    from limitlap.resources import bundled_path

    make_demo = _make_demo()
    circuit = circuits.demo_circuit()
    assert bundled_path("demo_tracks", "tarrowby_heath.toml").read_text() == (
        make_demo.track_toml(circuit)
    )
    assert bundled_path("demo_tracks", "tarrowby_heath_line.csv").read_text() == (
        line_csv_text(circuit.line)
    )


@pytest.mark.parametrize("name", ["dry", "wet"])
def test_bundled_session_agrees_with_its_truth(name):
    import json

    import polars as pl

    from limitlap.resources import bundled_path

    truth = json.loads(bundled_path("demo_tracks", "tarrowby_truth.json").read_text())[name]
    df = pl.read_csv(bundled_path("demo_tracks", f"tarrowby_{name}.csv.gz"))
    t = df["time [s]"].to_numpy()
    v = df["speed [km/h]"].to_numpy() / 3.6
    gates = np.array(truth["gate_times_s"])
    assert np.diff(gates) == pytest.approx(np.array(truth["lap_times_s"]), abs=1e-9)
    length = circuits.demo_circuit().line.length_m
    for a, b in itertools.pairwise(gates):
        sel = (t >= a) & (t <= b)
        # 0.5 % (issue tolerance); speed noise 0.05 m/s averages out over 8000 rows
        assert np.trapezoid(v[sel], t[sel]) == pytest.approx(length, rel=5e-3)
    assert len(truth["mistakes"]) == 3
