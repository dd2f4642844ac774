"""The QSS solver against closed forms, an ODE integrator and an independent optimiser."""

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from limitlap import limits, solve
from limitlap.errors import LimitlapError
from limitlap.line import line_from_curvature
from limitlap.units import G0_M_S2, RHO_ISA_KG_M3, V_CAP_M_S, isa_density_kg_m3
from limitlap.vehicle import Vehicle
from tests import reference
from tests.cases import (
    EXAMPLE_CAR,
    assert_inside_envelope,
    circle,
    friction_car,
    random_smooth_loop,
    stadium,
    straight,
)


def test_standard_constants():
    # Standard gravity: 980.665 cm/s², 3rd CGPM (1901), exact by definition.
    assert G0_M_S2 == 9.80665
    # ISA sea level: p0 = 101325 Pa, T0 = 288.15 K, R = 287.05287 J/(kg K) (ISO 2533:1975)
    # -> 1.2250 kg/m³; 1e-6 covers the rounding of the published 1.225.
    assert isa_density_kg_m3() == pytest.approx(1.225, rel=1e-6)
    assert RHO_ISA_KG_M3 == 1.225


@pytest.mark.parametrize(
    ("radius_m", "mu", "v_ref", "t_ref"),
    [(100.0, 1.0, 31.3156, 20.0641), (200.0, 1.0, 44.2869, 28.3749)],
)
def test_constant_radius_circle(radius_m, mu, v_ref, t_ref):
    # Steady-state cornering v = sqrt(mu g R) (Milliken & Milliken 1995, steady-state
    # cornering); lap 2 pi R / v. Closed forms: 1e-9 is rounding; the 4-5 digit reference
    # values (docs/checks.md, S-a) agree to their printed precision.
    p = solve.solve_profile(circle(radius_m), friction_car(mu))
    v = math.sqrt(mu * G0_M_S2 * radius_m)
    assert p.speed_m_s == pytest.approx(v, rel=1e-9)
    assert p.lap_time_s == pytest.approx(2 * math.pi * radius_m / v, rel=1e-9)
    assert v == pytest.approx(v_ref, abs=1e-4)
    assert p.lap_time_s == pytest.approx(t_ref, abs=1e-4)


def test_skidpad_formula_inverse_check():
    # Formula SAE skid-pad scoring a_y[g] = 2.012 D / t² with D = 17.10 m (2014 FSAE Rules
    # D6.8.1); 2.012 is 2 pi² / g0 rounded, so 0.1 % covers its rounding (2.0128 exact).
    mu, diameter_m = 1.3, 17.10
    t = solve.solve_profile(circle(diameter_m / 2), friction_car(mu)).lap_time_s
    assert 2.012 * diameter_m / t**2 == pytest.approx(mu, rel=1e-3)


@pytest.mark.parametrize("ds_m", [1.0, 0.5, 0.25])
def test_stadium_closed_form(ds_m):
    # Two straights L, two half circles R, friction circle mu, no power/aero/drag:
    # vc = sqrt(mu g R), vp² = vc² + mu g L, T = 2 pi R / vc + 4 (vp - vc) / (mu g)
    # (constant-acceleration kinematics). Issue tolerance 0.1 %; the only error is where
    # the curvature steps at a station, O(ds) of a metre in 630 m.
    mu, L, R = 1.0, 200.0, 50.0
    vc = math.sqrt(mu * G0_M_S2 * R)
    vp = math.sqrt(vc**2 + mu * G0_M_S2 * L)
    t_ref = 2 * math.pi * R / vc + 4 * (vp - vc) / (mu * G0_M_S2)
    assert t_ref == pytest.approx(25.3516, abs=1e-4)  # docs/checks.md, S-c
    p = solve.solve_profile(stadium(L, R, ds_m), friction_car(mu))
    assert p.lap_time_s == pytest.approx(t_ref, rel=1e-3)
    # The peak sits mid-straight; the corner exit is resolved to one station, which moves
    # the start of the full-grip run by up to ds: 2.5e-3 per metre of spacing.
    assert p.speed_m_s.max() == pytest.approx(vp, rel=2.5e-3 * ds_m)


def test_stadium_friction_ellipse_and_grip_scale_law():
    # docs/checks.md, S-c′: mu_lat 1.45 / mu_trac 1.30 / mu_brk 1.55 -> 21.1177 s [D].
    car = friction_car(1.45, mu_brk=1.55, mu_trac=1.30)
    line = stadium(200.0, 50.0, 0.25)
    t1 = solve.solve_profile(line, car).lap_time_s
    assert t1 == pytest.approx(21.1177, rel=1e-3)
    # Grip-scale law: friction only -> every v² scales by k, T sqrt(k) constant; exact in
    # the discrete equations (docs/checks.md, S-d), so 1e-9 is rounding.
    for k in (0.8, 0.7, 0.6):
        tk = solve.solve_profile(line, car, k).lap_time_s
        assert tk * math.sqrt(k) == pytest.approx(t1, rel=1e-9)
    sweep = solve.lap_times_for_scales(line, car, [1.0, 0.8, 0.6])
    assert sweep * np.sqrt([1.0, 0.8, 0.6]) == pytest.approx(np.full(3, t1), rel=1e-9)


def test_aero_corner_speed_and_critical_radius():
    # With downforce: v² = mu g R / (1 - mu R rho ClA / (2 m)) (Milliken & Milliken, aero
    # load on the steady-state corner); critical radius R_c = m / (mu k_z), k_z = rho ClA / 2
    # (Lenzo & Rossi 2020, Applied Sciences 10(4):1498). docs/methods.md, Ideal lap (QSS solver) [D]: example car
    # R = 100 m -> 39.2110 m/s, R_c = 1330.7 m. Closed forms: 1e-9 rounding.
    car = EXAMPLE_CAR
    k_z = 0.5 * car.air_density_kg_m3 * car.downforce_area_m2
    r_c = car.mass_kg / (car.mu_lat * k_z)
    assert r_c == pytest.approx(1330.7, abs=0.05)
    for radius, ref in ((50.0, 27.1798), (100.0, 39.2110), (500.0, 106.7206)):
        v = solve.cornering_speed_limit([1 / radius], car)[0]
        formula = math.sqrt(
            car.mu_lat * G0_M_S2 * radius / (1 - car.mu_lat * radius * k_z / car.mass_kg)
        )
        assert v == pytest.approx(formula, rel=1e-9)
        assert v == pytest.approx(ref, abs=1e-4)
    assert solve.cornering_speed_limit([1 / 2000.0], car)[0] == V_CAP_M_S


def test_aero_circle_solver_matches_formula():
    # docs/checks.md, C1.5: the example car's downforce, no drag or power limit: speed equals the
    # closed form at every station (1e-9: rounding).
    car = Vehicle(
        "aero",
        1300.0,
        math.inf,
        0.0,
        1.10,
        0.0,
        mu_lat=1.45,
        mu_brk=1.55,
        mu_trac=1.30,
        exponent=2.0,
    )
    p = solve.solve_profile(circle(100.0), car)
    assert p.speed_m_s == pytest.approx(39.2110, abs=1e-4)


def test_beyond_critical_radius_settles_at_power_drag_top_speed():
    # R = 2000 m > R_c: not grip-limited; with power and drag the car settles where
    # P = v (rho CdA v² / 2 + Crr m g): 91.849 m/s for the example car (docs/checks.md, S-f).
    car = EXAMPLE_CAR
    from scipy.optimize import brentq

    def excess(v):
        return car.power_w - v * (
            0.5 * car.air_density_kg_m3 * car.drag_area_m2 * v**2
            + car.rolling_coeff * car.mass_kg * G0_M_S2
        )

    v_top = brentq(excess, 10, 200)
    assert v_top == pytest.approx(91.849, abs=1e-3)
    p = solve.solve_profile(circle(2000.0, n=4000), car)
    assert np.isfinite(p.speed_m_s).all()
    # The periodic lap starts at the grip-limit minimum (V_CAP here) and must have come
    # down to the steady top speed: 1e-4 allows the residual of the Heun steps.
    assert p.speed_m_s == pytest.approx(v_top, rel=1e-4)


def test_power_limited_acceleration_closed_form():
    # No drag or rolling, traction never binds: P = m v dv/dt -> v³ = v0³ + 3 P s / m
    # (docs/checks.md, S-i). Heun steps at 0.1 m: 1e-6 relative measured margin class.
    car = Vehicle(
        "power", 1300.0, 370e3, 0.0, 0.0, 0.0, mu_lat=5.0, mu_brk=5.0, mu_trac=50.0, exponent=2.0
    )
    line = straight(500.0, 0.1)
    p = solve.solve_profile(line, car, entry_speed_m_s=20.0)
    expected = np.cbrt(20.0**3 + 3 * car.power_w * line.distance_m / car.mass_kg)
    assert p.speed_m_s == pytest.approx(expected, rel=1e-6)


def test_drive_with_drag_against_solve_ivp():
    # Example car from 20 m/s on a straight: forward pass against scipy.integrate.solve_ivp
    # (DOP853, rtol = atol = 1e-10) on dv/ds = a_x,drv(v) / v (docs/formats.md, Vehicle files). 1e-5: Heun
    # error at ds = 0.1 m is far below; measured max |rel| ~1e-7.
    car = EXAMPLE_CAR
    line = straight(800.0, 0.1)
    p = solve.solve_profile(line, car, entry_speed_m_s=20.0)

    def rhs(s, y):
        return [float(limits.driving_limit_m_s2(y[0], car)) / y[0]]

    sol = solve_ivp(
        rhs, (0, 800.0), [20.0], method="DOP853", rtol=1e-10, atol=1e-10, dense_output=True
    )
    assert p.speed_m_s == pytest.approx(sol.sol(line.distance_m)[0], rel=1e-5)


def test_braking_distance_with_drag_and_downforce():
    # d = ln(1 + B v0² / A) / (2 B), A = mu_b g + Crr g, B = (mu_b rho ClA / 2 + rho CdA / 2) / m
    # (derived from the docs/formats.md, Vehicle files braking limit). docs/checks.md, S-e′: 250 -> 0 km/h,
    # example car: 134.236 m. Also against solve_ivp on dv/ds = -a_brk(v) / v.
    car = EXAMPLE_CAR
    rho = car.air_density_kg_m3
    a = car.mu_brk * G0_M_S2 + car.rolling_coeff * G0_M_S2
    b = (
        car.mu_brk * 0.5 * rho * car.downforce_area_m2 + 0.5 * rho * car.drag_area_m2
    ) / car.mass_kg
    v0 = 250 / 3.6
    d = math.log(1 + b * v0**2 / a) / (2 * b)
    assert d == pytest.approx(134.236, abs=1e-3)
    line = straight(d, d / 2000)
    p = solve.solve_profile(line, car, entry_speed_m_s=100.0, exit_speed_m_s=0.0)
    # The backward pass from rest must reach v0 exactly at distance d: 1e-6 (Heun, 2000 steps).
    assert p.speed_m_s[0] == pytest.approx(v0, rel=1e-6)

    def rhs(s, y):
        return [-float(limits.braking_limit_m_s2(y[0], car)) / y[0]]

    hit = lambda s, y: y[0] - 0.5  # noqa: E731 - stop at 0.5 m/s: 1/v is singular at rest
    hit.terminal = True
    sol = solve_ivp(rhs, (0, 200.0), [v0], method="DOP853", rtol=1e-10, atol=1e-10, events=hit)
    # The last 0.5 m/s take a_brk(0) ~ 15.3 m/s²: 0.5²/(2·15.3) = 0.008 m (docs/checks.md, S-e′).
    assert sol.t_events[0][0] + 0.5**2 / (2 * a) == pytest.approx(d, abs=2e-3)


def test_mesh_independence_on_example_line():
    # Issue requirement: halving the spacing changes the lap time by less than 0.05 %.
    from limitlap.ingest import read_line, read_vehicle
    from limitlap.resources import bundled_path

    car = read_vehicle(bundled_path("vehicles", "gt_coupe.toml"))
    path = bundled_path("demo_tracks", "example_loop_line.csv")
    t1 = solve.solve_profile(read_line(path, spacing_m=1.0), car).lap_time_s
    t2 = solve.solve_profile(read_line(path, spacing_m=0.5), car).lap_time_s
    assert abs(t2 - t1) / t2 < 5e-4


def test_periodic_rotation_and_mirror():
    # docs/checks.md, C1.8/C1.12: rotating the start of a closed line leaves the lap time
    # unchanged; mirroring it (left <-> right) too. 1e-9: summation order only.
    line = random_smooth_loop(3)
    base = solve.solve_profile(line, EXAMPLE_CAR)
    shift = 377
    rolled = line_from_curvature(
        line.distance_m, np.roll(line.curvature_1_m, -shift), length_m=line.length_m
    )
    p = solve.solve_profile(rolled, EXAMPLE_CAR)
    assert p.lap_time_s == pytest.approx(base.lap_time_s, rel=1e-9)
    assert p.speed_m_s == pytest.approx(np.roll(base.speed_m_s, -shift), rel=1e-9)
    mirrored = line_from_curvature(line.distance_m, -line.curvature_1_m, length_m=line.length_m)
    assert solve.solve_profile(mirrored, EXAMPLE_CAR).lap_time_s == pytest.approx(
        base.lap_time_s, rel=1e-12
    )
    # T1.9: a periodic lap has no standing start: v(0) and v(L) join smoothly — the first
    # step's acceleration is within the envelope like any other.
    assert base.speed_m_s.min() > 20.0


def test_direction_reversal_depends_on_asymmetric_limits():
    # docs/checks.md, C1.12: reversing the direction gives the same time only when braking and
    # traction limits are equal.
    line = random_smooth_loop(5)
    rev = line_from_curvature(
        line.distance_m, -line.curvature_1_m[::-1].copy(), length_m=line.length_m
    )
    sym = friction_car(1.4)
    asym = friction_car(1.4, mu_brk=1.6, mu_trac=1.0)
    assert solve.solve_profile(rev, sym).lap_time_s == pytest.approx(
        solve.solve_profile(line, sym).lap_time_s, rel=1e-3
    )
    assert (
        abs(solve.solve_profile(rev, asym).lap_time_s - solve.solve_profile(line, asym).lap_time_s)
        > 1e-3
    )


def _fourier_loop(seed, n, ds_m=0.5):
    """A closed distance/curvature line of n stations: a few random Fourier terms."""
    rng = np.random.default_rng(seed)
    s = np.arange(n) * ds_m
    phase = 2 * math.pi * s / (n * ds_m)
    k = sum(rng.uniform(-0.02, 0.02) * np.sin(h * phase + rng.uniform(0, 6)) for h in range(2, 9))
    k += (2 * math.pi - np.sum(k) * ds_m) / (n * ds_m)  # whole turn
    return line_from_curvature(s, k, length_m=n * ds_m)


@pytest.mark.parametrize("long_line", [False, True])
def test_kernel_matches_plain_python_twin(long_line):
    # tests/reference.py implements the same scheme from the formulas as one sequential
    # loop per pass: 1e-10 is rounding. The long line (above SPLIT_MIN_STATIONS) runs each
    # pass as two chains that must rejoin into the sequential result.
    line = _fourier_loop(4, 2600) if long_line else random_smooth_loop(11, n=400)
    assert solve._split(line.n) == long_line
    car = EXAMPLE_CAR
    p = solve.solve_profile(line, car)
    params = (
        car.mass_kg,
        car.power_w,
        car.drag_area_m2,
        car.downforce_area_m2,
        car.rolling_coeff,
        car.air_density_kg_m3,
        car.mu_lat,
        car.mu_brk,
        car.mu_trac,
        car.exponent,
        G0_M_S2,
    )
    v, t = reference.solve_closed(list(line.curvature_1_m), list(line.ds_m), params, V_CAP_M_S)
    assert p.speed_m_s == pytest.approx(np.array(v), rel=1e-10)
    assert p.lap_time_s == pytest.approx(t, rel=1e-10)


@pytest.mark.parametrize("closed", [True, False])
def test_split_passes_equal_one_sequential_pass(closed):
    # Splitting each pass into two chains is a speed measure only: the profile must be
    # the sequential one value for value, on lines with grades, closed and open, at
    # several grip scales (some laps need the periodic restart, some not).
    from limitlap import _kernels

    for seed in range(4):
        base = _fourier_loop(seed, 3001)
        grade = 0.04 * np.sin(2 * math.pi * 3 * base.distance_m / base.length_m)
        line = line_from_curvature(
            base.distance_m, base.curvature_1_m, grade, closed=closed, length_m=base.length_m
        )
        curvature, sin_grad, ds, work = solve._line_arrays(line)
        b_cap = V_CAP_M_S**2
        got = []
        for split in (False, True):
            veh = solve.vehicle_array(EXAMPLE_CAR, 0.7 + 0.2 * seed)
            _kernels.solve_speed_squared(
                curvature, sin_grad, ds, veh, closed, b_cap, 400.0, np.empty(0), work, split
            )
            got.append(work[_kernels.W_FWD].copy())
        assert np.array_equal(got[0], got[1])


@pytest.mark.slow
def test_lipp_boyd_socp_optimum():
    # Lipp & Boyd (Int. J. Control 2014, doi:10.1080/00207179.2013.875224): the minimum-time
    # speed problem over a fixed path is convex in b = v². Friction ellipse with drag and
    # downforce, symmetric longitudinal limit, no power limit (not convex). Issue tolerance
    # 0.1 % between the two lap times (different discretisations of the same optimum).
    cp = pytest.importorskip("cvxpy")
    line = random_smooth_loop(7, n=800, base_radius_m=150.0)
    car = Vehicle(
        "socp",
        1300.0,
        math.inf,
        0.75,
        1.10,
        0.012,
        mu_lat=1.45,
        mu_brk=1.40,
        mu_trac=1.40,
        exponent=2.0,
    )
    p = solve.solve_profile(line, car)
    n, ds, kap = line.n, line.ds_m, line.curvature_1_m
    m, rho = car.mass_kg, car.air_density_kg_m3
    b = cp.Variable(n, nonneg=True)
    c = cp.Variable(n, nonneg=True)
    b_next = cp.hstack([b[1:], b[:1]])
    acc = cp.multiply(b_next - b, 1 / (2 * ds))  # a_i on the step i -> i+1
    q = 0.5 * rho * b
    # Forces per unit mass (m/s²): the conic solver needs well-scaled rows.
    fx = acc + q * car.drag_area_m2 / m + car.rolling_coeff * G0_M_S2
    fy = cp.multiply(kap, b)
    normal = G0_M_S2 + q * car.downforce_area_m2 / m
    cons = [c <= cp.sqrt(b), b <= V_CAP_M_S**2]
    cons += [cp.norm(cp.vstack([fx / car.mu_brk, fy / car.mu_lat]), 2, axis=0) <= normal]
    c_next = cp.hstack([c[1:], c[:1]])
    obj = cp.Minimize(cp.sum(cp.multiply(2 * ds, cp.inv_pos(c + c_next))))
    prob = cp.Problem(obj, cons)
    prob.solve(solver=cp.CLARABEL)
    assert prob.status == "optimal"
    assert p.lap_time_s == pytest.approx(prob.value, rel=1e-3)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10_000),
    mass=st.floats(500, 2500),
    power_kw=st.floats(50, 800),
    cda=st.floats(0.0, 1.5),
    cla=st.floats(0.0, 4.0),
    mu=st.floats(0.6, 2.0),
    brk=st.floats(0.8, 1.3),
    trac=st.floats(0.6, 1.1),
    n=st.floats(1.5, 3.0),
    k=st.floats(0.2, 2.0),
)
def test_property_profile_stays_inside_envelope(
    seed, mass, power_kw, cda, cla, mu, brk, trac, n, k
):
    # Random lines and cars: positive finite speed, increasing time, lateral demand within
    # the grip limit at every station, and the longitudinal acceleration of each step within
    # the combined limit at one of its two ends (the Heun step averages the two ends).
    line = random_smooth_loop(seed, n=300, base_radius_m=120.0)
    car = Vehicle(
        "h",
        mass,
        power_kw * 1e3,
        cda,
        cla,
        0.012,
        mu_lat=mu,
        mu_brk=mu * brk,
        mu_trac=mu * trac,
        exponent=n,
    )
    p = solve.solve_profile(line, car, k)
    assert np.all(np.diff(p.time_s) > 0)
    # finite, positive speeds within the cap; lateral within the limit to 1e-9; each
    # step's combined usage within 1 + 1e-2 at one of its ends (tests/cases.py)
    assert_inside_envelope(line, car, k, p, combined_tol=1e-2)


def test_line_file_points_reproduce_the_analytic_line():
    # A line file is points to the millimetre. Resampled through the periodic smoothing
    # spline, the ideal lap must match the one on the analytic line it was written from
    # (clothoid-and-arc circuit, curvature known in closed form): 0.1 %, the issue's
    # solver-vs-reference scale; measured 0.06 % when written.
    from limitlap import circuits
    from limitlap.line import line_from_xy

    circuit = circuits.demo_circuit()
    exact = circuit.line
    x, y, z = (np.round(a, 3) for a in (exact.x_m, exact.y_m, exact.z_m))
    rebuilt = line_from_xy(x, y, z, spacing_m=1.0)
    assert rebuilt.length_m == pytest.approx(exact.length_m, rel=1e-4)
    t_exact = solve.solve_profile(exact, EXAMPLE_CAR).lap_time_s
    t_file = solve.solve_profile(rebuilt, EXAMPLE_CAR).lap_time_s
    assert t_file == pytest.approx(t_exact, rel=1e-3)


@pytest.mark.parametrize("what", ["climb", "descent"])
def test_a_grade_the_car_cannot_take_is_named(what):
    # A closed 4 km loop of gentle bends with a long 60 % grade (sin 0.514): 1.5 km up
    # from 500 m, or 500 m down from 1000 m into a 15 m hairpin. At walking pace the car
    # climbs while mu_t k > Crr + sin(theta) and holds itself on a descent while
    # mu_b k + Crr > -sin(theta) (the Vehicle files format's longitudinal balance at v = 0). At grip
    # scale 0.3 both fail (0.288 and 0.312 against 0.514): the climb stops the car, the
    # descent cannot be slowed for the hairpin. The error must name the grade, where it
    # is and the steepest the car can take; with full grip the same line completes.
    s = np.arange(0.0, 4000.0, 1.0)
    k = np.full(s.size, 2.0 * math.pi / 4000.0)
    if what == "climb":
        grad = np.where((s >= 500.0) & (s < 2000.0), 0.6, 0.0)
    else:
        grad = np.where((s >= 1000.0) & (s < 1500.0), -0.6, 0.0)
        k[1400:1420] = 1.0 / 15.0
        k[2000:2020] = -1.0 / 15.0  # the loop's total turn stays one revolution
    line = line_from_curvature(s, k, grad, closed=True)
    car = Vehicle(
        "weak", 1000.0, 150e3, 0.7, 0.0, 0.012, mu_lat=1.0, mu_brk=1.0, mu_trac=1.0, exponent=2.0
    )
    with pytest.raises(LimitlapError) as err:
        solve.solve_profile(line, car, 0.3)
    text = str(err.value)
    assert text.startswith("the car cannot complete this line: the 60.0 % " + what + " at ")
    assert "grip scale 0.3" in text
    limit = 0.3 - 0.012 if what == "climb" else 0.3 + 0.012
    assert f"(at most {100 * limit / math.sqrt(1 - limit * limit):.1f} %)" in text
    assert math.isfinite(solve.solve_profile(line, car, 1.0).lap_time_s)
