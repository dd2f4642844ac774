"""The corridor and the better line on lines whose answer is known in closed form."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial import cKDTree

from limitlap import better_line, corridor
from limitlap.line import Line
from tests import arc_circuit

#: Rounded square: four 90° left-hand arcs of radius R joined by straights of length L.
R_M, STRAIGHT_M, HALF_WIDTH_M = 50.0, 300.0, 4.0


def _belt(centres, radii, step_m=0.25):
    """The belt round circles (tests/arc_circuit.py: no limitlap geometry), sampled: x, y, heading, curvature."""
    xs, ys, hs, ks = [], [], [], []
    for p in arc_circuit.belt_pieces(centres, radii):
        s = np.arange(0.0, p.length_m, step_m)
        if isinstance(p, arc_circuit.Straight):
            xs.append(p.start_xy[0] + s * math.cos(p.heading_rad))
            ys.append(p.start_xy[1] + s * math.sin(p.heading_rad))
            hs.append(np.full_like(s, p.heading_rad))
            ks.append(np.zeros_like(s))
        else:
            psi = p.heading_in_rad + s / p.radius_m
            xs.append(p.centre_xy[0] + p.radius_m * np.sin(psi))
            ys.append(p.centre_xy[1] - p.radius_m * np.cos(psi))
            hs.append(psi)
            ks.append(np.full_like(s, 1.0 / p.radius_m))
    return tuple(np.concatenate(v) for v in (xs, ys, hs, ks))


def _smooth_reference(length_m, start_xy, heading, width_m=10.0, step_m=0.25) -> Line:
    """A closed line through the rounded square from the middle of a straight, whose curvature is the band's centreline's
    (1/R on the arcs, 0 on the straights) smoothed by a Gaussian, as a rebuilt lap's is
    smooth; heading and position integrated (it closes by the square's symmetry); 1 m
    stations."""
    from scipy.ndimage import gaussian_filter1d

    quarter = STRAIGHT_M + R_M * math.pi / 2
    per_quarter = round(quarter / step_m)
    h = quarter / per_quarter
    grid = np.arange(4 * per_quarter) * h
    on_arc = np.mod(grid + STRAIGHT_M / 2, quarter) >= STRAIGHT_M  # from a straight's middle
    k = gaussian_filter1d(np.where(on_arc, 1.0, 0.0), width_m / h, mode="wrap")
    k *= 2 * math.pi / (np.sum(k) * h)  # exactly one turn, so that it closes
    psi = heading + np.concatenate([[0.0], np.cumsum(0.5 * (k[1:] + k[:-1])) * h])
    x = start_xy[0] + np.concatenate([[0.0], np.cumsum(np.cos(0.5 * (psi[1:] + psi[:-1]))) * h])
    y = start_xy[1] + np.concatenate([[0.0], np.cumsum(np.sin(0.5 * (psi[1:] + psi[:-1]))) * h])
    n = round(length_m)
    s = np.arange(n) * (length_m / n)
    at = [np.interp(s, grid, v) for v in (k, x, y)]
    return Line(s, at[0], np.zeros(n), length_m, True, at[1], at[2])


@pytest.fixture(scope="module")
def square():
    """The band's centreline (x, y at 0.25 m), its edges, and a smooth reference line inside it."""
    half = STRAIGHT_M / 2.0
    centres = [(half, -half), (half, half), (-half, half), (-half, -half)]
    x, y, psi, _ = _belt(centres, [R_M] * 4)
    length = 4 * (STRAIGHT_M + R_M * math.pi / 2)
    nx, ny = -np.sin(psi), np.cos(psi)
    w = HALF_WIDTH_M
    edges = corridor.EdgeLines(x + w * nx, y + w * ny, x - w * nx, y - w * ny, margin_m=0.0)
    reference = _smooth_reference(length, (half + R_M, 0.0), math.pi / 2)
    return x, y, edges, reference


def test_minimum_curvature_is_the_largest_arc_that_fits(square):
    # Closed form (plane geometry): in a band of half-width w round a θ = 90° arc of
    # radius R between straights, the largest arc tangent to both outer edges and
    # touching the inner edge has radius ρ = R + w (1 + cos θ/2) / (1 - cos θ/2) (its
    # centre on the bisector; |OV| = (R + w) / cos θ/2 from the arc's centre to the outer
    # edges' corner). No line in the band turns through the corner with a larger smallest
    # radius, and the arc's Σκ²ds = θ/ρ bounds the minimum-curvature line's from above.
    x, y, edges, reference = square
    frame = corridor.reference_frame(reference)
    band = corridor.corridor(frame, [], edges)
    basis = better_line.spline_basis(frame.distance_m, frame.length_m)
    c = better_line.min_curvature(frame, band, basis)
    n = basis.b0 @ c
    kappa, steps = better_line.offset_geometry(frame, n, basis.b1 @ c, basis.b2 @ c)
    half_turn = math.pi / 4.0
    rho = R_M + HALF_WIDTH_M * (1 + math.cos(half_turn)) / (1 - math.cos(half_turn))
    assert np.all(n >= band.low_m - 1e-9) and np.all(n <= band.high_m + 1e-9)
    assert 1.0 / np.max(np.abs(kappa)) <= rho * 1.005  # no radius beyond the largest arc
    assert 1.0 / np.max(np.abs(kappa)) > 0.8 * rho  # and close to it
    assert np.sum(kappa**2 * steps) <= 4 * (math.pi / 2) / rho * 1.01
    # Inside at each apex, the full width at entry and exit: the line's distance from the
    # band's centreline (+ towards the inside) at the arcs' middles and along the
    # straights either side. Tolerance: the spline's coefficients keep it inside by up
    # to the band's curvature over a knot (a few cm).
    lx, ly = better_line.positions(frame, n)
    tree = cKDTree(np.column_stack([x, y]))
    _, near = tree.query(np.column_stack([lx, ly]))
    half = STRAIGHT_M / 2.0
    inside = np.hypot(lx - x[near], ly - y[near]) * np.sign(
        (np.hypot(lx, ly) < np.hypot(x[near], y[near])) - 0.5
    )
    for cx, cy in [(half, -half), (half, half), (-half, half), (-half, -half)]:
        d = np.hypot(lx - cx, ly - cy)
        assert d.min() == pytest.approx(R_M - HALF_WIDTH_M, abs=0.05)  # touches the inside
    assert inside.max() == pytest.approx(HALF_WIDTH_M, abs=0.05)
    assert inside.min() == pytest.approx(-HALF_WIDTH_M, abs=0.05)  # and the outside
    assert np.sum(inside < -HALF_WIDTH_M + 0.05) > 4 * 20  # before and after every corner


def _noisy_paths(reference: Line, sigma_m, n_laps, seed, extra=None):
    """Lap paths on the reference line moved sideways by a smooth random offset (standard deviation ``sigma_m``, correlated over about 30 m), plus ``extra(lap, s)`` metres. Independent of limitlap's geometry: the normal from the points' own differences."""
    from scipy.ndimage import gaussian_filter1d

    rng = np.random.default_rng(seed)
    x, y = reference.x_m, reference.y_m
    tx, ty = np.roll(x, -1) - np.roll(x, 1), np.roll(y, -1) - np.roll(y, 1)
    norm = np.hypot(tx, ty)
    nx, ny = -ty / norm, tx / norm
    paths = []
    for lap in range(n_laps):
        raw = gaussian_filter1d(rng.standard_normal(x.size), 30.0, mode="wrap")
        off = sigma_m * raw / raw.std()
        if extra is not None:
            off = off + extra(lap, reference.distance_m)
        paths.append(corridor.LapPath(lap + 1, x + off * nx, y + off * ny))
    return paths


def test_laps_on_one_line_close_the_corridor(square):
    # Six laps on one line, moved only by a smooth error of σ = 0.3 m: the rebuild's
    # uncertainty read from their spread is σ (its estimator divides the spread's lower
    # quartile by the same quartile of a chi-distributed sample standard deviation, so
    # pure noise gives σ back; ±35 % for six laps over the ~50 independent stretches of a
    # 1.5 km lap: measured 0.32-0.36 m over seeds 1-5), and the band shrunk by the 99 %
    # reach of the largest of six errors closes at nearly every station (99 % per station
    # by construction).
    _, _, _, reference = square
    frame = corridor.reference_frame(reference)
    band = corridor.corridor(frame, _noisy_paths(reference, 0.3, 6, seed=1))
    assert band.uncertainty_m == pytest.approx(0.3, rel=0.35)
    assert np.mean(band.width_m < 0.05) > 0.95
    assert np.all(band.low_m <= 0.0) and np.all(band.high_m >= 0.0)


def test_a_lap_off_the_track_does_not_widen_the_corridor_but_another_line_does(square):
    # Five laps on one line (σ = 0.05 m); lap 2 takes a line 3 m to the left for 150 m
    # (a smooth bump), lap 4 goes 15 m off for 40 m (beyond OFF_M of the laps' median).
    # The corridor opens towards lap 2's line by its offset less the shrink, and not at
    # all where lap 4 went off.
    _, _, _, reference = square
    frame = corridor.reference_frame(reference)

    def bump(centre, half, size, s):
        return size * np.exp(-0.5 * ((s - centre) / half) ** 2)

    def extra(lap, s):
        if lap == 1:
            return bump(300.0, 50.0, 3.0, s)
        if lap == 3:
            return bump(900.0, 12.0, 15.0, s)
        return 0.0 * s

    band = corridor.corridor(frame, _noisy_paths(reference, 0.05, 5, seed=2, extra=extra))
    at = np.argmin(np.abs(frame.distance_m - 300.0))
    off = np.argmin(np.abs(frame.distance_m - 900.0))
    shrink = corridor.noise_reach(5) * band.uncertainty_m
    assert band.high_m[at] == pytest.approx(3.0 - shrink, abs=0.25)
    assert band.width_m[off] < 0.05


def test_dropout_stations_do_not_count(square):
    # The same 3 m line of lap 2, but its rebuild only dead-reckoned there (a GNSS
    # dropout marks those points unsound): the corridor stays closed.
    _, _, _, reference = square
    frame = corridor.reference_frame(reference)
    paths = _noisy_paths(
        reference,
        0.05,
        5,
        seed=2,
        extra=lambda lap, s: 3.0 * np.exp(-0.5 * ((s - 300.0) / 50.0) ** 2) * (lap == 1),
    )
    s = frame.distance_m
    paths[1] = corridor.LapPath(2, paths[1].x_m, paths[1].y_m, np.abs(s - 300.0) < 200.0)
    band = corridor.corridor(frame, paths)
    assert band.width_m[np.argmin(np.abs(s - 300.0))] < 0.05


def _vehicle():
    from tests.test_outside_truth import _true_vehicle

    return _true_vehicle(arc_circuit.Car())


def _corners_of(reference):
    from limitlap.corners import track_corners

    return track_corners(reference)


def test_better_line_keeps_inside_the_corridor_and_is_no_slower(square):
    # The rounded square's band (edges 4 m either side of its centreline, the reference a
    # smoothed line inside it): the better line keeps inside the corridor at every
    # station, is no slower than the driven line, no corner's line time is negative, the
    # corners' line times add up to at least the whole lap's (each stretch's gain counted,
    # its losses shown as 0), and the line steers no quicker than the reference does
    # (its curvature rate under the bound, the reference's own highest, with the soft
    # penalty's slack of 25 %: our choice).
    _, _, edges, reference = square
    frame = corridor.reference_frame(reference)
    band = corridor.corridor(frame, [], edges)
    result = better_line.line_opportunity(frame, band, _corners_of(reference), _vehicle())
    n = result.offset_m
    assert np.all(n >= band.low_m - 1e-6) and np.all(n <= band.high_m + 1e-6)
    assert result.better_time_s <= result.driven_time_s
    assert result.line_time_s == pytest.approx(result.driven_time_s - result.better_time_s)
    times = [c.line_time_s for c in result.corners]
    assert all(t >= 0.0 for t in times)
    assert sum(times) >= result.line_time_s - 1e-9
    assert result.rate_max_1_m2 <= 1.25 * result.rate_bound_1_m2


def _track_with_edges(folder, csv_text, table='file = "edges.csv"'):
    (folder / "edges.csv").write_text(csv_text, encoding="utf-8")
    path = folder / "track.toml"
    path.write_text(f'name = "t"\n[edges]\n{table}\n', encoding="utf-8")
    return path


def test_track_edges_in_both_forms(tmp_path):
    from limitlap.ingest import read_track

    widths = "latitude [deg],longitude [deg],left [m],right [m]\n" + "".join(
        f"{-33.0 + i * 1e-4},{147.0},{5 + i},{6}\n" for i in range(5)
    )
    trk = read_track(_track_with_edges(tmp_path, widths, 'file = "edges.csv"\nmargin_m = 1.5'))
    assert trk.edges.form == "widths" and trk.edges.geodetic and trk.edges.margin_m == 1.5
    assert list(trk.edges.columns[2]) == [5, 6, 7, 8, 9]
    lines = "left_x [m],left_y [m],right_x [m],right_y [m]\n" + "".join(
        f"{i},{5},{i},{-5}\n" for i in range(4)
    )
    trk = read_track(_track_with_edges(tmp_path, lines))
    assert trk.edges.form == "edges" and not trk.edges.geodetic and trk.edges.margin_m == 1.0
    # The widths form becomes edge lines square to its line (here due north: left is west).
    e = corridor.edges_from_widths(
        np.zeros(4), np.arange(4.0) * 10, np.full(4, 5.0), np.full(4, 6.0), 1.0
    )
    assert np.allclose(e.left_x_m, -5.0) and np.allclose(e.right_x_m, 6.0)


@pytest.mark.parametrize(
    ("csv_text", "table", "says"),
    [
        ("x [m],y [m],left [m],right [m]\n0,0,5,-1\n1,0,5,5\n2,0,5,5\n3,0,5,5\n", None, "negative"),
        ("x [m],y [m],left [ft],right [m]\n0,0,5,1\n1,0,5,5\n2,0,5,5\n3,0,5,5\n", None, "unit"),
        ("x [m],y [m],width [m]\n0,0,5\n1,0,5\n2,0,5\n3,0,5\n", None, "needs columns"),
        ("x [m],y [m],left [m],right [m]\n0,0,5,5\n1,0,5,5\n", None, "at least 4 rows"),
        (
            "x [m],y [m],left [m],right [m]\n0,0,5,5\n",
            'file = "edges.csv"\nmargin_m = 20',
            "margin_m",
        ),
        ("x [m],y [m],left [m],right [m]\n0,0,5,5\n", "margin = 1", "needs 'file'"),
    ],
)
def test_bad_track_edges_name_the_file(tmp_path, csv_text, table, says):
    from limitlap.errors import InputError
    from limitlap.ingest import read_track

    path = _track_with_edges(tmp_path, csv_text, table or 'file = "edges.csv"')
    with pytest.raises(InputError) as err:
        read_track(path)
    assert says in str(err.value)
    assert "edges.csv" in str(err.value) or "track.toml" in str(err.value)


def test_missing_edges_file_names_the_track_file(tmp_path):
    from limitlap.errors import InputError
    from limitlap.ingest import read_track

    path = tmp_path / "track.toml"
    path.write_text('name = "t"\n[edges]\nfile = "gone.csv"\n', encoding="utf-8")
    with pytest.raises(InputError, match=r"track\.toml: \[edges\] file 'gone\.csv' not found"):
        read_track(path)


def test_local_re_solves_equal_whole_solves(square):
    # The descent's gradient re-solves only the stretch of the speed traces a moved
    # coefficient reaches (_kernels.lap_time_changes); each lap time must equal the whole
    # QSS solve of the moved line (the same passes, so to rounding: 1e-9 s of a lap).
    _, _, _, reference = square
    frame = better_line.coarse_frame(corridor.reference_frame(reference))
    basis = better_line.spline_basis(frame.distance_m, frame.length_m)
    walls = (np.full(frame.n, -4.0), np.full(frame.n, 4.0))
    problem = better_line._LapTime(frame, basis, _vehicle(), 1.0, walls)
    c = np.random.default_rng(5).normal(0.0, 0.5, basis.size)
    base, gradient = problem.with_gradient(c)
    for k in range(0, basis.size, 37):
        moved = c.copy()
        moved[k] += better_line.DIFFERENCE_M
        whole = (problem.time(moved) - base) / better_line.DIFFERENCE_M
        assert gradient[k] == pytest.approx(whole, abs=1e-9 / better_line.DIFFERENCE_M)
