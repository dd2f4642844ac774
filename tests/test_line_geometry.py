"""Lines from x/y points against closed forms: arcs, steps, clothoids, noise, bridges.

Every shape here is written from its own formulas (no limitlap code makes the points):
straights and circular arcs, clothoids from the Fresnel integrals (scipy.special.fresnel),
a figure eight from its parametric equations. The solver's answers are checked against
the point-mass closed forms: on an arc of radius R with friction coefficient mu and no
aero, v = sqrt(mu g R) (Milliken & Milliken, Race Car Vehicle Dynamics, SAE R-146, 1995,
steady-state cornering); a circle's lap is 2 pi R / v; a stadium's straights are run at
constant mu g, T = 2 pi R / v + 4 (v_peak - v) / (mu g) with v_peak² = v² + mu g L.
"""

import math

import numpy as np
import pytest
from scipy.integrate import cumulative_trapezoid
from scipy.special import fresnel

from limitlap import circuits, solve
from limitlap.errors import InputError, LimitlapError
from limitlap.ingest import read_line
from limitlap.line import line_from_curvature, line_from_xy, point_noise_m
from limitlap.units import G0_M_S2
from tests.cases import EXAMPLE_CAR, friction_car

R = 80.0  # arc radius of the stadium and circle [m]
STRAIGHT = 200.0  # stadium straights [m]
CAR = friction_car(1.0)  # friction circle mu = 1, no aero, no power limit


def stadium_points(spacing, start=0.0, radius=R, straight=STRAIGHT):
    """Points every ``spacing`` m (from distance ``start``) on a stadium, counter-clockwise."""
    length = 2 * straight + 2 * math.pi * radius
    n = round(length / spacing)
    s = (np.arange(n) * (length / n) + start) % length
    half = math.pi * radius
    x, y = np.empty(n), np.empty(n)
    a = s < straight
    x[a], y[a] = s[a], -radius
    b = (s >= straight) & (s < straight + half)
    ang = (s[b] - straight) / radius - math.pi / 2
    x[b], y[b] = straight + radius * np.cos(ang), radius * np.sin(ang)
    c = (s >= straight + half) & (s < 2 * straight + half)
    x[c], y[c] = straight - (s[c] - straight - half), radius
    d = s >= 2 * straight + half
    ang = (s[d] - 2 * straight - half) / radius + math.pi / 2
    x[d], y[d] = radius * np.cos(ang), radius * np.sin(ang)
    return x, y


def stadium_closed_form(mu=1.0, radius=R, straight=STRAIGHT):
    """(lap time, minimum speed) of the point mass on the stadium (module docstring)."""
    v = math.sqrt(mu * G0_M_S2 * radius)
    v_peak = math.sqrt(v * v + mu * G0_M_S2 * straight)
    return 2 * math.pi * radius / v + 4 * (v_peak - v) / (mu * G0_M_S2), v


def clothoid_xy(s, a):
    """Point at distance s from the straight end of a clothoid of curvature s / a²."""
    scale = a * math.sqrt(math.pi)
    fs, fc = fresnel(np.asarray(s) / scale)  # scipy returns (S, C)
    return scale * (fc + 1j * fs)


def rounded_square(spacing, straight=100.0, clothoid=40.0, radius=60.0):
    """Four left corners (clothoid, arc, clothoid; 90° each) joined by straights.

    Returns points every ``spacing`` m, the curvature as a function of distance (linear on
    the clothoids, 1/radius on the arcs, 0 on the straights) and the length.
    """
    a2 = radius * clothoid
    turn_c = clothoid / (2 * radius)  # heading change over one clothoid [rad]
    arc = radius * (math.pi / 2 - 2 * turn_c)
    side = straight + 2 * clothoid + arc
    p_in = straight + clothoid_xy(clothoid, math.sqrt(a2))
    centre = p_in + 1j * radius * np.exp(1j * turn_c)
    p_out = centre - 1j * radius * np.exp(1j * (turn_c + arc / radius))

    def local(u):
        u = np.asarray(u, dtype=np.float64)
        z = np.where(u < straight, u + 0j, 0j)
        m = (u >= straight) & (u < straight + clothoid)
        z[m] = straight + clothoid_xy(u[m] - straight, math.sqrt(a2))
        m = (u >= straight + clothoid) & (u < straight + clothoid + arc)
        z[m] = centre - 1j * radius * np.exp(1j * (turn_c + (u[m] - straight - clothoid) / radius))
        m = u >= straight + clothoid + arc
        back = side - u[m]  # the exit clothoid run backwards from its straight end
        z[m] = p_out + 1j * np.conj(
            clothoid_xy(clothoid, math.sqrt(a2)) - clothoid_xy(back, math.sqrt(a2))
        )
        return z

    corner = local(np.array([side]))[0]  # where one side ends, in its own frame
    length = 4 * side
    n = round(length / spacing)
    s = np.arange(n) * (length / n)
    k = np.minimum((s // side).astype(int), 3)
    starts = np.cumsum([0j] + [1j**j * corner for j in range(3)])
    z = starts[k] + 1j**k * local(s - k * side)

    def curvature(dist):
        u = np.asarray(dist) % side
        out = np.zeros_like(u)
        m = (u >= straight) & (u < straight + clothoid)
        out[m] = (u[m] - straight) / a2
        out[(u >= straight + clothoid) & (u < side - clothoid)] = 1 / radius
        m = u >= side - clothoid
        out[m] = (side - u[m]) / a2
        return out

    return z.real, z.imag, curvature, length


def exact_line(curvature, length, spacing=0.25):
    """The distance/curvature line of a closed-form curvature."""
    n = round(length / spacing)
    s = np.arange(n) * (length / n)
    return line_from_curvature(s, curvature(s), length_m=length)


# --------------------------------------------------------------------------- arcs, steps


@pytest.mark.parametrize("spacing", [0.1, 0.5, 2.0, 5.0])
def test_stadium_and_circle_points_against_closed_forms(spacing):
    # Points exactly on the shapes. Tolerances: lap 0.1 %, minimum speed 0.3 % (the
    # required accuracy); the lap's remaining error is the solver's, where a curvature
    # step falls between 1 m stations (up to 0.09 % on this stadium with the exact
    # curvature table, measured).
    t_ref, v_ref = stadium_closed_form()
    assert (t_ref, v_ref) == pytest.approx((27.8948, 28.0095), abs=1e-4)  # docs/checks.md, C8.1
    line = line_from_xy(*stadium_points(spacing, start=0.37 * spacing))
    p = solve.solve_profile(line, CAR)
    assert p.lap_time_s == pytest.approx(t_ref, rel=1e-3)
    assert p.speed_m_s.min() == pytest.approx(v_ref, rel=3e-3)
    # arcs to 0.1 % and the steps without overshoot (at most 2 % above the arc)
    k = line.curvature_1_m * R
    assert k.max() <= 1.02
    assert np.count_nonzero(np.abs(k - 1) < 1e-3) >= 0.95 * np.count_nonzero(k > 0.5)
    assert line.length_m == pytest.approx(2 * STRAIGHT + 2 * math.pi * R, rel=1e-6)
    assert line.meta["warnings"] == []

    ang = np.arange(round(2 * math.pi * R / spacing)) * spacing / R
    circle = line_from_xy(R * np.cos(ang), R * np.sin(ang))
    p = solve.solve_profile(circle, CAR)
    assert p.lap_time_s == pytest.approx(2 * math.pi * R / v_ref, rel=1e-3)
    assert p.speed_m_s.min() == pytest.approx(v_ref, rel=3e-3)
    assert circle.curvature_1_m * R == pytest.approx(np.ones(circle.n), abs=1e-3)


@pytest.mark.parametrize("spacing", [0.5, 2.0])
def test_clothoid_arc_clothoid_corners_against_closed_form_curvature(spacing):
    # Curvature linear in distance on the clothoids (Fresnel integrals), 1/R on the arcs.
    # Tolerances, ours: 1 % of 1/R anywhere (the kinks where a clothoid meets an arc or
    # a straight are resolved to about one point spacing) and 0.3 % of 1/R a point
    # spacing and more away from them; the lap 0.1 % from the closed-form curvature's.
    x, y, curvature, length = rounded_square(spacing)
    line = line_from_xy(x, y)
    assert line.length_m == pytest.approx(length, rel=1e-6)
    err = np.abs(line.curvature_1_m - curvature(line.distance_m)) * 60.0
    assert err.max() < 1e-2
    side = length / 4
    u = line.distance_m % side
    kinks = np.array([0.0, 100.0, 140.0, side - 40.0, side])
    away = np.min(np.abs(u[:, None] - kinks[None, :]), axis=1) > 2 * spacing
    assert err[away].max() < 3e-3
    assert line.curvature_1_m.max() * 60.0 <= 1.02  # no overshoot
    t_exact = solve.solve_profile(exact_line(curvature, length), EXAMPLE_CAR).lap_time_s
    assert solve.solve_profile(line, EXAMPLE_CAR).lap_time_s == pytest.approx(t_exact, rel=1e-3)


def test_what_a_point_file_may_hold_changes_nothing():
    # The same corners given as points in other ways: a repeated closing point, points
    # 1 cm apart (a point listed twice), clockwise (the loop reversed: same lap for a car with
    # equal braking and driving grip, by symmetry), irregular spacing (0.5-3 m). Each
    # lap within 0.05 % of the closed-form curvature's (ours: a tenth of the 0.5 % scale).
    x, y, curvature, length = rounded_square(0.5)
    t_exact = solve.solve_profile(exact_line(curvature, length), CAR).lap_time_s
    rng = np.random.default_rng(4)
    keep = np.sort(rng.choice(x.size, x.size // 3, replace=False))
    near = np.arange(0, x.size, 97)  # a second point 1 cm on, towards the next one
    step = np.hypot(x[near + 1] - x[near], y[near + 1] - y[near]) / 0.01
    close_x = x[near] + (x[near + 1] - x[near]) / step
    close_y = y[near] + (y[near + 1] - y[near]) / step
    variants = {
        "closing point": (np.append(x, x[0]), np.append(y, y[0])),
        "close points": (np.insert(x, near + 1, close_x), np.insert(y, near + 1, close_y)),
        "clockwise": (x[::-1], y[::-1]),
        "irregular": (x[keep], y[keep]),
    }
    for name, (vx, vy) in variants.items():
        line = line_from_xy(vx, vy)
        lap = solve.solve_profile(line, CAR).lap_time_s
        assert lap == pytest.approx(t_exact, rel=5e-4), name
        assert np.sign(line.curvature_1_m.sum()) == (-1 if name == "clockwise" else 1)


def test_same_loop_from_ten_first_points():
    # The bundled demo circuit's line (clothoids and arcs) as points 2 m apart written
    # to the millimetre, listed from ten different first points: lap times within 0.02 %.
    exact = circuits.demo_circuit(spacing_m=0.25).line
    x, y = np.round(exact.x_m[::8], 3), np.round(exact.y_m[::8], 3)
    laps = []
    for k in range(10):
        shift = (k * x.size) // 10 + 3 * k
        line = line_from_xy(np.roll(x, -shift), np.roll(y, -shift))
        laps.append(solve.solve_profile(line, EXAMPLE_CAR).lap_time_s)
    assert (max(laps) - min(laps)) / min(laps) < 2e-4


# --------------------------------------------------------------------------- noise


@pytest.mark.parametrize("spacing", [2.0, 5.0])
@pytest.mark.parametrize("sigma", [0.02, 0.05])
def test_noisy_points_within_one_percent(spacing, sigma):
    # Survey noise, independent normal per axis. Lap time and minimum speed within 1 % of
    # the closed forms (the required accuracy); the noise found within 25 % of the noise
    # put in (ours: a median of about 500 residuals scatters by about 5 %).
    t_ref, v_ref = stadium_closed_form()
    rng = np.random.default_rng(int(1000 * sigma + spacing))
    x, y = stadium_points(spacing)
    x, y = x + rng.normal(0, sigma, x.size), y + rng.normal(0, sigma, y.size)
    assert point_noise_m(x, y) == pytest.approx(sigma, rel=0.25)
    line = line_from_xy(x, y)
    p = solve.solve_profile(line, CAR)
    assert p.lap_time_s == pytest.approx(t_ref, rel=1e-2)
    assert p.speed_m_s.min() == pytest.approx(v_ref, rel=1e-2)
    assert line.meta["noise_m"] == pytest.approx(sigma, rel=0.25)


def test_noise_estimate_leaves_curvature_out():
    # Exact points on the clothoid corners 5 m apart: what a curve leaves in the
    # pseudo-residuals (about h⁴/(2R³), 1.3 mm here) is not taken for noise.
    x, y, _, _ = rounded_square(5.0)
    assert point_noise_m(x, y) < 1e-3


def test_too_noisy_and_too_sparse_are_warned_with_the_noise_in_cm():
    exact = circuits.demo_circuit(spacing_m=0.25).line
    rng = np.random.default_rng(9)
    # 5 cm of noise on points 2 m apart round the demo's tight corners (radius 30-60 m)
    x = exact.x_m[::8] + rng.normal(0, 0.05, exact.x_m[::8].size)
    y = exact.y_m[::8] + rng.normal(0, 0.05, exact.y_m[::8].size)
    warnings = line_from_xy(x, y).meta["warnings"]
    noisy = [w for w in warnings if w.startswith("points too noisy")]
    assert noisy, warnings
    cm = float(noisy[0].split("scatter about ")[1].split(" cm")[0])
    assert cm == pytest.approx(5.0, rel=0.25)
    # exact points 5 m apart on its 16 m hairpin: 18° from one point to the next
    sparse = line_from_xy(exact.x_m[::20], exact.y_m[::20]).meta["warnings"]
    assert any(w.startswith("points too sparse") for w in sparse), sparse
    # and none on points that describe their corners well
    assert line_from_xy(exact.x_m[::4], exact.y_m[::4]).meta["warnings"] == []


# --------------------------------------------------------------------------- bridges


def figure_eight(n=1500, a=150.0):
    """Gerono's lemniscate x = a sin t, y = a sin t cos t: crosses itself at the origin
    (t = 0 and t = pi). Points evenly in t (so unevenly in distance), with its distance,
    curvature and the height z = 3 cos t (+3 m at one pass, -3 m at the other)."""
    t = np.arange(n) * (2 * math.pi / n)
    fine = np.linspace(0.0, 2 * math.pi, 400_001)
    speed = a * np.hypot(np.cos(fine), np.cos(2 * fine))
    dist = np.interp(t, fine, cumulative_trapezoid(speed, fine, initial=0.0))
    length = float(np.trapezoid(speed, fine))
    xp, yp = a * np.cos(fine), a * np.cos(2 * fine)
    xpp, ypp = -a * np.sin(fine), -2 * a * np.sin(2 * fine)
    kappa = (xp * ypp - yp * xpp) / np.hypot(xp, yp) ** 3
    s_fine = cumulative_trapezoid(speed, fine, initial=0.0)

    def curvature(s):
        return np.interp(np.asarray(s) % length, s_fine, kappa)

    return a * np.sin(t), a * np.sin(t) * np.cos(t), 3.0 * np.cos(t), dist, curvature, length


def test_figure_eight_over_a_bridge():
    x, y, z, _, curvature, length = figure_eight()
    with pytest.raises(LimitlapError, match="crosses itself"):
        line_from_xy(x, y)  # no heights: out-of-order points cannot be told from a bridge
    with pytest.raises(LimitlapError, match="crosses itself at the same height"):
        line_from_xy(x, y, np.zeros_like(x))
    line = line_from_xy(x, y, z)
    assert line.length_m == pytest.approx(length, rel=1e-5)
    # its own curvature, from the parametric form (total turning zero): within 0.5 % of
    # the largest (ours; irregular spacing, no steps)
    top = np.abs(curvature(np.linspace(0, length, 10_000))).max()
    assert np.abs(line.curvature_1_m - curvature(line.distance_m)).max() < 5e-3 * top
    # gradient dz/ds = -3 sin t / |r'(t)| at each station: within 1e-4
    t = np.interp(line.distance_m, figure_eight()[3], np.arange(1500) * (2 * math.pi / 1500))
    slope = -3.0 * np.sin(t) / (150.0 * np.hypot(np.cos(t), np.cos(2 * t)))
    assert line.gradient == pytest.approx(slope, abs=1e-4)
    # declared instead: points on the upper pass at level 1
    level = (np.cos(np.arange(x.size) * (2 * math.pi / x.size)) > 0).astype(float)
    declared = line_from_xy(x, y, level=level)
    assert declared.length_m == pytest.approx(line.length_m, rel=1e-9)


def test_line_file_with_heights_over_a_bridge(tmp_path):
    x, y, z, *_ = figure_eight(n=800)
    path = tmp_path / "eight.csv"
    rows = "".join(f"{a:.3f},{b:.3f},{c:.3f}\n" for a, b, c in zip(x, y, z, strict=True))
    path.write_text("x [m],y [m],z [m]\n" + rows)
    assert read_line(path).length_m > 900
    flat = tmp_path / "flat.csv"
    flat.write_text(
        "x [m],y [m]\n" + "".join(f"{a:.3f},{b:.3f}\n" for a, b in zip(x, y, strict=True))
    )
    with pytest.raises(InputError, match=r"flat\.csv: the line crosses itself at x 0\.0 m"):
        read_line(flat)
    levels = tmp_path / "levels.csv"
    deck = (z > 0).astype(int)
    levels.write_text(
        "x [m],y [m],level [-]\n"
        + "".join(f"{a:.3f},{b:.3f},{c}\n" for a, b, c in zip(x, y, deck, strict=True))
    )
    assert read_line(levels).length_m == pytest.approx(read_line(path).length_m, rel=1e-6)


def test_line_file_with_a_units_row_reads_as_with_bracketed_units(tmp_path):
    # The same points written the two ways the formats page allows: "x [m],y [m],z [m]",
    # or bare names with "m,m,m" under them; a unit other than the one shown is refused,
    # naming the column, either way (docs/formats.md, Line files). Through the command
    # that takes a line file or a log by its header, the units row is a line file too.
    x, y, z, *_ = figure_eight(n=800)
    rows = "".join(f"{a:.3f},{b:.3f},{c:.3f}\n" for a, b, c in zip(x, y, z, strict=True))
    bracketed, units_row = tmp_path / "bracketed.csv", tmp_path / "units_row.csv"
    bracketed.write_text("x [m],y [m],z [m]\n" + rows)
    units_row.write_text("x,y,z\nm,m,m\n" + rows)
    a, b = read_line(bracketed), read_line(units_row)
    np.testing.assert_array_equal(a.curvature_1_m, b.curvature_1_m)
    np.testing.assert_array_equal(a.z_m, b.z_m)
    from limitlap.pipeline import line_from_source

    assert line_from_source(units_row)[1] == "line file units_row.csv"
    feet = tmp_path / "feet.csv"
    feet.write_text("x,y,z\nft,ft,ft\n" + rows)
    with pytest.raises(InputError, match=r"feet\.csv, column 'x \[ft\]': unit 'ft' not accepted"):
        read_line(feet)
