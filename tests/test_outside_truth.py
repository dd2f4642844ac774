"""The analysis against a truth limitlap did not make.

The session comes from tests/arc_circuit.py, which imports no limitlap code: a rounded
triangle of straights and three constant-radius arcs (30, 55, 95 m; 1.94 km), driven at
the limit of the point-mass model of docs/formats.md (Vehicle files), its straights
integrated with SciPy's DOP853 (solve_ivp, tolerance 1e-12, the brake points as events),
its arcs at the steady cornering speed (Brent's method on the friction ellipse). The log
is sampled from that motion at 100 Hz, GNSS x/y at 10 Hz with 0.3 m noise, 0.025 g noise
on the accelerations, and read through ``pipeline.analyse`` like any log.

Known departure of the generator from the exact optimum of the model: it brakes to the
steady arc speed, where the optimum enters the arc at the closed-form speed (pure
cornering) and drag slows it to the steady speed within a metre. The lap time gap is at
most Σ t_arc (1 − v_steady / v_closed) = 4.9 ms (1.2e-4 of the lap); see
:func:`_arc_gap_s`.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from limitlap import laps, pipeline, solve
from limitlap.line import line_from_curvature
from limitlap.vehicle import Vehicle
from tests import arc_circuit

SEED = 1
N_LAPS = 5


@pytest.fixture(scope="module")
def circuit():
    return arc_circuit.rounded_triangle()


def _true_vehicle(car: arc_circuit.Car) -> Vehicle:
    return Vehicle(
        "true",
        car.mass_kg,
        car.power_w,
        car.drag_area_m2,
        car.downforce_area_m2,
        car.rolling_coeff,
        car.air_density_kg_m3,
        mu_lat=car.mu_lat,
        mu_brk=car.mu_brk,
        mu_trac=car.mu_trac,
        exponent=2.0,
    )


def _arc_gap_s(circuit) -> float:
    """Upper bound of the generator's lap time above the model's optimum. [s]"""
    return sum(a.time_s * (1.0 - a.speed_m_s / a.closed_form_m_s) for a in circuit.arcs)


def test_generator_is_self_consistent(circuit):
    # The sampled channels must obey their own kinematics: dv/dt = a_x and
    # |dp|/dt = v (away from the steps of a_x at the brake points and arc ends), and the
    # lap closes with one whole turn. Tolerances: 1 ms central differences of smooth
    # DOP853 dense output (error of order a'' dt² ≈ 1e-3 m/s² at most), and float
    # rounding of positions of about 1e3 m (1e-5 m over a 1 ms step).
    t = np.arange(0.0, circuit.lap_time_s, 1e-3)
    ch = arc_circuit.sample(circuit, t)
    smooth = np.abs(np.diff(ch["ax"])) < 0.5
    dv_dt = np.diff(ch["v"]) / 1e-3
    a_mid = 0.5 * (ch["ax"][1:] + ch["ax"][:-1])
    assert np.max(np.abs(dv_dt - a_mid)[smooth]) < 2e-3
    step = np.hypot(np.diff(ch["x"]), np.diff(ch["y"]))
    v_mid = 0.5 * (ch["v"][1:] + ch["v"][:-1])
    assert np.max(np.abs(step - v_mid * 1e-3)) < 1e-5
    end = arc_circuit.sample(circuit, [circuit.lap_time_s])
    assert math.hypot(end["x"][0] - ch["x"][0], end["y"][0] - ch["y"][0]) < 1e-6
    # Every arc is entered from braking and the closed form is only a hair above the
    # steady speed (drag needs a few % of the traction ellipse).
    for arc in circuit.arcs:
        assert 0.0 < arc.closed_form_m_s / arc.speed_m_s - 1.0 < 1e-3


def test_solver_reproduces_the_integrated_lap(circuit):
    # limitlap's solver on the true line (distance/curvature, a station at every piece
    # end, about 0.5 m apart) with the true car, against the solve_ivp lap.
    # Tolerance: the generator's known gap to the optimum (module docstring, 4.9 ms)
    # plus 1e-4 of the lap for the solver's grid: its Heun step is second order, and
    # the curvature steps, falling on stations, cost at most one step each; halving the
    # spacing from 1 m to 0.5 m moves the lap by 5e-5 (measured).
    s_parts, k_parts, start = [], [], 0.0
    for piece in circuit.pieces:
        n = math.ceil(piece.length_m / 0.5)
        s_parts.append(start + np.arange(n) * piece.length_m / n)
        curv = 1.0 / piece.radius_m if isinstance(piece, arc_circuit.Arc) else 0.0
        k_parts.append(np.full(n, curv))
        start += piece.length_m
    line = line_from_curvature(
        np.concatenate(s_parts), np.concatenate(k_parts), length_m=circuit.length_m
    )
    profile = solve.solve_profile(line, _true_vehicle(circuit.car))
    tol = _arc_gap_s(circuit) + 1e-4 * circuit.lap_time_s
    assert profile.lap_time_s == pytest.approx(circuit.lap_time_s, abs=tol)
    # On each arc the solver settles at the steady speed of the friction ellipse
    # (brentq in the generator). 1e-4: near the cornering limit the drive force the
    # ellipse leaves grows like a square root (infinite slope), and the solver's
    # predictor-evaluate-corrector step settles in a two-step cycle of its carried
    # acceleration (about ±0.3 m/s² at 0.5 m spacing) a little below the steady speed:
    # measured 2e-5 to 5.6e-5 (R = 30 m), about 0.2 ms of lap time.
    starts = circuit.starts_m()
    for st, piece in zip(starts, circuit.pieces, strict=True):
        if isinstance(piece, arc_circuit.Arc):
            on_arc = (line.distance_m > st + 0.25 * piece.length_m) & (
                line.distance_m < st + 0.75 * piece.length_m
            )
            v_mid = profile.speed_m_s[on_arc]
            assert np.abs(v_mid / piece.speed_m_s - 1.0).max() < 1e-4


@pytest.fixture(scope="module")
def analysed(circuit, tmp_path_factory):
    folder = tmp_path_factory.mktemp("outside")
    text, gate_xy = arc_circuit.session_csv(
        circuit, laps_before_s=10.0, n_laps=N_LAPS, laps_after_s=15.0, seed=SEED
    )
    log = folder / "arcs.csv"
    log.write_text(text, encoding="utf-8")
    # Mass and rolling resistance only: docs/formats.md (Vehicle files) says the samples
    # cannot tell C_rr from grip, and mass sets the scale of power and aero areas; all
    # the rest is fitted from the log.
    car = folder / "car.toml"
    car.write_text(
        f'name = "arc test car"\nmass_kg = {circuit.car.mass_kg}\n'
        f"rolling_coeff = {circuit.car.rolling_coeff}\n",
        encoding="utf-8",
    )
    return pipeline.analyse(log, vehicle=car, gate=laps.Gate.planar(*gate_xy))


def _arc_ranges(circuit, a):
    """Each arc's stretch of the analysed line, mapped by distance fraction from the
    gate (the middle of the first straight). [m]"""
    scale = a.driven.line.length_m / circuit.length_m
    gate = 0.5 * circuit.pieces[0].length_m
    for st, piece in zip(circuit.starts_m(), circuit.pieces, strict=True):
        if isinstance(piece, arc_circuit.Arc):
            yield piece, (st - gate) * scale, (st - gate + piece.length_m) * scale


@pytest.mark.slow
def test_lap_time_from_the_gate(circuit, analysed):
    # The motion repeats each lap, so every lap lasts the integrated lap time.
    # 0.05 s: the gate crossing from 10 Hz fixes with 0.3 m noise at 60 m/s, fitted by a
    # quadratic (docs/formats.md, Laps), is good to a few ms; 0.05 s, five rows of the
    # 100 Hz log, is common practice for lap timing from a logger (no published
    # source). Measured over seeds 1-6: -1.8 to -4.9 ms.
    assert analysed.lap.complete
    assert analysed.lap.time_s == pytest.approx(circuit.lap_time_s, abs=0.05)
    complete = [lp for lp in analysed.laps if lp.complete]
    assert len(complete) == N_LAPS


@pytest.mark.slow
def test_fitted_lateral_friction(circuit, analysed):
    # 2 %: the 99 % quantile of samples on the limit sits 2.33 σ above it; the
    # accelerometer noise (0.025 g) after the 3 Hz Gaussian low-pass
    # (docs/methods.md, Envelope fit) keeps a fraction √(3.19 Hz / 50 Hz) ≈ 0.25, so
    # 2.33 σ ≈ 0.015 g, 1 % of the 1.45 g limit, if the noise correction took none of
    # it out; doubled for the split between friction and downforce from three corner
    # speeds. Measured over seeds 1-6: -1.6 % to +0.4 % (seed 1: +0.4 %).
    # Friction coefficients do not depend on the mass given.
    assert analysed.fit is not None
    assert analysed.vehicle.mu_lat == pytest.approx(circuit.car.mu_lat, rel=0.02)


@pytest.mark.slow
def test_ideal_minimum_speed_on_each_arc(circuit, analysed):
    # Closed form v² = μ g / (1/R − μ ρ ClA / (2 m)) (docs/formats.md, Vehicle files;
    # Milliken & Milliken, Race Car Vehicle Dynamics, 1995). 2.5 %: v ∝ (μ/κ)^½, so the
    # 2 % of the μ fit (above) gives 1 %, and the rebuilt line's curvature scatters
    # about 1/R by about 1 % (from GNSS 0.3 m at 10 Hz and gyro noise; its largest value
    # over an arc of 60-190 m, about 2-3 σ, is what sets the minimum) giving 1.5 %.
    # Measured over seeds 1-6: -0.04 % to -1.5 % (seed 1: -0.2, -0.5, -0.04 %).
    ideal = analysed.ideal
    for arc, lo, hi in _arc_ranges(circuit, analysed):
        on_arc = (ideal.distance_m >= lo) & (ideal.distance_m <= hi)
        v_min = float(ideal.speed_m_s[on_arc].min())
        assert v_min == pytest.approx(arc.closed_form_m_s, rel=0.025), arc.radius_m


@pytest.mark.slow
def test_ideal_lap_on_the_rebuilt_line_with_the_true_car(circuit, analysed):
    # The line rebuild alone: the true car on the analysed lap's line. The rebuilt line
    # smooths each of the six curvature steps over a few metres (docs/methods.md,
    # Driven line), so the ideal brakes into and accelerates out of every arc 1-2 m
    # sooner than the step allows: a real, small optimism on a circuit with steps
    # (a real car's path has none). 0.5 %: common practice for a lap-time model's
    # agreement (no published source). Measured over seeds 1-6:
    # -0.26 % to -0.30 % (seed 1: -0.28 %).
    lap = solve.solve_profile(analysed.driven.line, _true_vehicle(circuit.car)).lap_time_s
    assert lap == pytest.approx(circuit.lap_time_s, rel=0.005)


@pytest.mark.slow
def test_ideal_lap_within_1_percent(circuit, analysed):
    # 1 %: the project's acceptance figure for the ideal lap (as in test_acceptance.py).
    # Measured over seeds 1-6: -0.19 % to -0.69 % (seed 1: -0.69 %): always faster.
    assert analysed.ideal.lap_time_s == pytest.approx(circuit.lap_time_s, rel=0.01)
    assert analysed.ideal.lap_time_s < circuit.lap_time_s  # optimistic, never pessimistic


@pytest.mark.slow
@pytest.mark.xfail(
    strict=True,
    reason=(
        "the log never shows combined braking and cornering, so the fitted exponent runs "
        "to its bound (8-10 for seeds 1-6, truth 2) and the ideal claims trail-braking "
        "grip never demonstrated: ideal -0.69 % for seed 1 (-0.91 % before the rates' "
        "changes; -0.44 % with n held at 2 then)"
    ),
)
def test_ideal_lap_within_half_a_percent(circuit, analysed):
    # 0.5 % (common practice, no published source) for the whole chain, fitted envelope
    # included: what the chain should reach once an envelope the log cannot shape in
    # the combined region stays at what was demonstrated.
    assert analysed.ideal.lap_time_s == pytest.approx(circuit.lap_time_s, rel=0.005)
