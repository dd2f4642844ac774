"""The one corner record (docs/methods.md, Corner record): the same corners and numbers in
every output, and targets that are the solver's profile and agree with references
limitlap did not make.

References: the closed-form arc speeds and solve_ivp brake points of tests/arc_circuit.py
(no limitlap code), kinematics on straights-and-arcs lines (v² = v0² + 2 a d, v = √(μ g R)),
the grip-scale law v ∝ √k without aero (docs/checks.md, S-d), and the convex minimum-time
optimum of Lipp & Boyd (Int. J. Control 2014, doi:10.1080/00207179.2013.875224) solved by
cvxpy.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest

from limitlap import circuits, compare, ingest, markers, solve, synth, targets
from limitlap import corners as corners_mod
from limitlap.line import line_from_curvature
from limitlap.resources import bundled_path
from limitlap.units import G0_M_S2, KMH_TO_M_S
from limitlap.vehicle import Vehicle
from tests import arc_circuit
from tests.cases import friction_car, layout_line
from tests.robust_data import run_cli

TRACK = bundled_path("demo_tracks", "tarrowby_heath.toml")


def _kmh(v):
    return v / KMH_TO_M_S


def _near(s, at, length, reach):
    """Stations within ``reach`` of ``at`` round the lap."""
    return np.abs((s - at + length / 2) % length - length / 2) <= reach


# ----------------------------------------------------------------------- demo circuit


@pytest.fixture(scope="module")
def demo():
    """The demo circuit's exact line, its track file, the demo car's dry targets."""
    line = circuits.demo_circuit().line
    trk = ingest.read_track(TRACK)
    with_track = corners_mod.track_corners(line, trk)
    table = targets.target_table(line, synth.default_vehicle(), 1.0, with_track, label="dry")
    return line, trk, with_track, table


def test_same_corners_with_and_without_the_track_file(demo):
    # docs/methods.md, Corner record: the detection finds the flat-out kink (T8, R 500 m,
    # 10°) without the track file, so every corner has the same name and apex either way;
    # the track file's T11b, in the same bend as T11, is kept as T11's second apex and
    # said so, not dropped.
    line, trk, with_track, _ = demo
    without = corners_mod.track_corners(line)
    assert [c.name for c in without] == [f"T{i}" for i in range(1, 13)]
    assert [c.name for c in with_track] == [c.name for c in without]
    assert [c.apex_m for c in with_track] == [c.apex_m for c in without]
    named = dict(zip(trk.corner_names, trk.corner_apexes_m, strict=True))
    kept = {n for c in with_track for n in c.apex_names if n}
    assert kept == set(trk.corner_names)  # every name of the track file is somewhere
    t11 = next(c for c in with_track if c.name == "T11")
    assert t11.apex_names == ("T11", "T11b") and "T11b" in t11.note
    # Each named apex lies on the apex it names (the line's own, within the 15 m the
    # track file's positions are matched by).
    for c in with_track:
        for at, name in zip(c.apexes_m, c.apex_names, strict=True):
            assert abs(at - named[name]) <= 15.0, (name, at)
    assert {c.name: c.label for c in with_track}["T8"] == "Flick"


def test_double_apex_has_a_brake_point_for_each_braking_zone(demo):
    # T11 is a double apex braked twice: the big stop from about 207 km/h into the first
    # apex and a second, shorter one into the second apex. Each brake point is where the
    # profile's speed starts falling (its peak), and the first is brake_start_m.
    line, _, _, table = demo
    t11 = next(t for t in table.corners if t.name == "T11")
    v, s = table.profile.speed_m_s, line.distance_m
    assert len(t11.brake_points_m) == 2
    first, second = t11.brake_points_m
    assert t11.brake_start_m == first and 2760 < first < 2810 < 2900 < second < 2940
    for bp in (first, second):  # the highest speed within 30 m either side
        near = _near(s, bp, line.length_m, 30.0)
        assert float(np.interp(bp, s, v)) == pytest.approx(v[near].max(), rel=2e-3)
    assert _kmh(t11.entry_speed_m_s) > 200.0
    between = (s > first) & (s < second)
    assert _kmh(v[between].min()) < 100.0  # the stop takes off more than 100 km/h


def test_fast_corner_brake_point_is_found_with_the_track(demo):
    # T9: the profile brakes from about 240 km/h; its brake point must be on the sheet.
    _, _, _, table = demo
    t9 = next(t for t in table.corners if t.name == "T9")
    assert len(t9.brake_points_m) == 1 and 2370 < t9.brake_start_m < t9.apex_m
    assert _kmh(t9.entry_speed_m_s) > 230.0


def test_targets_are_the_profile(demo):
    # Targets equal the solver's profile: the minimum of a corner the profile slows in is
    # the profile's lowest station over the corner (its curvature zone and 25 m either
    # side, within its segment); the brake point is a peak of the profile and the speed
    # falls from there; a corner taken without slowing reports the profile at its apex.
    line, _, corners, table = demo
    v, s, length = table.profile.speed_m_s, line.distance_m, line.length_m
    for c, t in zip(corners, table.corners, strict=True):
        zone = (s - c.turn_in_m + markers.EDGE_M) % length <= (
            (c.exit_m - c.turn_in_m) % length + 2 * markers.EDGE_M
        )
        own = zone & (corners_mod.segment_index(s, length, [c]) == 0)
        if t.own_minimum:
            assert t.min_speed_m_s == pytest.approx(v[own].min(), rel=1e-12)
            seg = corners_mod.segment_index([t.min_speed_at_m], length, [c]) == 0
            assert seg.all(), t.name  # never another corner's minimum
        else:
            assert t.min_speed_m_s == pytest.approx(np.interp(c.apex_m, s, v), rel=1e-12)
        for bp in t.brake_points_m:
            ahead = ((s - bp) % length > 0) & ((s - bp) % length < 15.0)
            assert v[ahead].max() <= float(np.interp(bp, s, v)) + 1e-6
            assert v[ahead].min() < float(np.interp(bp, s, v)) - 0.2


def test_a_corner_is_never_given_another_corners_speed():
    # A fast bend followed 60 m later by a heavy stop into a hairpin, and a fast bend
    # right after a hairpin, taken still accelerating: neither fast bend slows on its
    # own, so neither reports the stop's speed or its turn-in speed as its minimum, and
    # neither gets a brake point (friction-only car, kinematics).
    layout = [
        ("s", 400.0),
        (300.0, 40.0, -1),  # fast bend, then the stop
        ("s", 60.0),
        (15.0, 180.0, +1),  # hairpin
        ("s", 40.0),
        (300.0, 40.0, -1),  # fast bend, still accelerating
        ("s", 400.0),
        (60.0, 130.0, +1),
        ("s", 200.0),
        (60.0, 130.0, +1),
    ]
    line, arcs = layout_line(layout)
    car = friction_car(mu=1.2, mu_brk=1.3, mu_trac=1.1)
    corners = corners_mod.find_corners(line)
    assert len(corners) == 5
    table = targets.target_table(line, car, 1.0, corners)
    hairpin = math.sqrt(1.2 * G0_M_S2 * 15.0)
    fast_in, hair, fast_out = table.corners[0], table.corners[1], table.corners[2]
    assert hair.min_speed_m_s == pytest.approx(hairpin, rel=1e-6) and hair.own_minimum
    for t, c in ((fast_in, corners[0]), (fast_out, corners[2])):
        assert not t.own_minimum and not t.brake_points_m and math.isnan(t.entry_speed_m_s)
        v_apex = float(np.interp(c.apex_m, line.distance_m, table.profile.speed_m_s))
        assert t.min_speed_m_s == pytest.approx(v_apex, rel=1e-12)
        assert t.min_speed_m_s > 1.5 * hairpin
    # Still accelerating through the second: its apex speed is above its turn-in speed.
    v_in = float(np.interp(corners[2].turn_in_m, line.distance_m, table.profile.speed_m_s))
    assert fast_out.min_speed_m_s > v_in + 1.0
    # The hairpin's brake point lies in the first fast bend's segment or before the
    # hairpin: where the speed starts falling, from v² = v_bend² ... (kinematics).
    assert hair.brake_points_m and hair.brake_start_m < arcs[1][0]


# ------------------------------------------------------------- independent references


def _arc_line(circuit):
    """The arc circuit's exact curvature, a station at every piece end, about 0.5 m apart."""
    s_parts, k_parts, start = [], [], 0.0
    for piece in circuit.pieces:
        n = math.ceil(piece.length_m / 0.5)
        s_parts.append(start + np.arange(n) * piece.length_m / n)
        curv = 1.0 / piece.radius_m if isinstance(piece, arc_circuit.Arc) else 0.0
        k_parts.append(np.full(n, curv))
        start += piece.length_m
    return line_from_curvature(
        np.concatenate(s_parts), np.concatenate(k_parts), length_m=circuit.length_m
    )


def _vehicle(car: arc_circuit.Car) -> Vehicle:
    return Vehicle(
        "arc car",
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


def _check_against_arc_circuit(circuit, table, corners):
    """Minimum speeds within 1 % of the steady arc speeds (Brent's method on the friction
    ellipse) and brake points within 5 m of the solve_ivp crossing of the drive and
    braking curves (the issue's tolerances); one corner per arc, in order."""
    starts = circuit.starts_m()
    arcs = [i for i, p in enumerate(circuit.pieces) if isinstance(p, arc_circuit.Arc)]
    assert len(corners) == len(arcs)
    for j, i in enumerate(arcs):
        t = table.corners[j]
        straight = circuit.pieces[i - 1]
        assert t.min_speed_m_s == pytest.approx(circuit.pieces[i].speed_m_s, rel=0.01)
        expected = (starts[i - 1] + straight.brake_point_m) % circuit.length_m
        assert len(t.brake_points_m) == 1
        assert abs((t.brake_start_m - expected + 100.0) % circuit.length_m - 100.0) <= 5.0


def test_targets_against_the_integrated_arc_circuit():
    # tests/arc_circuit.py: imports no limitlap code; power, drag and downforce on.
    circuit = arc_circuit.rounded_triangle()
    line = _arc_line(circuit)
    corners = corners_mod.find_corners(line)
    table = targets.target_table(line, _vehicle(circuit.car), 1.0, corners)
    _check_against_arc_circuit(circuit, table, corners)


def test_minimum_speed_scales_with_the_square_root_of_the_grip_scale():
    # Without aero the cornering limit is √(μ k g R) (rolling resistance only trims it
    # through the friction ellipse), so target minimum speeds go as √k: each grip scale
    # checked against the generator run with μ × k (its own brentq and solve_ivp), and
    # against √k times the dry targets, within 1 %.
    base = dict(drag_area_m2=0.0, downforce_area_m2=0.0, rolling_coeff=0.012)
    dry = None
    for k in (1.0, 0.85, 0.70):
        truth = arc_circuit.Car(mu_lat=1.40 * k, mu_brk=1.50 * k, mu_trac=1.25 * k, **base)
        circuit = arc_circuit.rounded_triangle(truth)
        line = _arc_line(circuit)
        corners = corners_mod.find_corners(line)
        car = _vehicle(arc_circuit.Car(**base))  # grip scale 1, scaled by the table
        table = targets.target_table(line, car, k, corners)
        _check_against_arc_circuit(circuit, table, corners)
        dry = dry or table
        for t, t1 in zip(table.corners, dry.corners, strict=True):
            assert t.min_speed_m_s == pytest.approx(math.sqrt(k) * t1.min_speed_m_s, rel=0.01)


def test_targets_against_the_convex_minimum_time_optimum():
    # Lipp & Boyd 2014: the minimum-time speed over a fixed path is convex in b = v²
    # (friction ellipse with drag and downforce, symmetric longitudinal limit, no power
    # limit), solved by cvxpy (Clarabel). The convex optimum read with the same corner
    # record: minimum speeds within 1 %, brake points within 5 m of the targets.
    cp = pytest.importorskip("cvxpy")
    line, _ = layout_line(
        [
            *[("s", 250.0), (40.0, 90.0, +1), ("s", 150.0), (90.0, 60.0, +1), ("s", 120.0)],
            *[(30.0, 90.0, -1), ("s", 120.0), (50.0, 210.0, +1), ("s", 100.0)],
            (120.0, 90.0, +1),
        ],
        ds=2.0,
    )
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
    n, ds, kap = line.n, line.ds_m, line.curvature_1_m
    m, rho = car.mass_kg, car.air_density_kg_m3
    b = cp.Variable(n, nonneg=True)
    c = cp.Variable(n, nonneg=True)
    b_next = cp.hstack([b[1:], b[:1]])
    q = 0.5 * rho * b
    fx = cp.multiply(b_next - b, 1 / (2 * ds)) + q * car.drag_area_m2 / m
    fx = fx + car.rolling_coeff * G0_M_S2
    normal = G0_M_S2 + q * car.downforce_area_m2 / m
    stack = cp.vstack([fx / car.mu_brk, cp.multiply(kap, b) / car.mu_lat])
    cons = [c <= cp.sqrt(b), b <= 200.0**2, cp.norm(stack, 2, axis=0) <= normal]
    c_next = cp.hstack([c[1:], c[:1]])
    prob = cp.Problem(cp.Minimize(cp.sum(cp.multiply(2 * ds, cp.inv_pos(c + c_next)))), cons)
    prob.solve(solver=cp.CLARABEL)
    assert prob.status == "optimal"
    v = np.sqrt(np.maximum(b.value, 0.0))
    a = (np.roll(b.value, -1) - b.value) / (2 * ds)  # each step's acceleration
    ax = 0.5 * (a + np.roll(a, 1))
    t = np.concatenate([[0.0], np.cumsum(2 * ds / (v + np.roll(v, -1)))])
    zeros = np.zeros(n)
    optimum = markers.Trace(
        line.distance_m, line.length_m, True, t[:-1], t[-1], v, ax, kap * v * v, zeros, zeros
    )
    corners = corners_mod.find_corners(line)
    assert len(corners) >= 3
    table = targets.target_table(line, car, 1.0, corners)
    bounds = markers.unwrapped_bounds(corners, line.length_m, True)
    for corner, bound, tgt in zip(corners, bounds, table.corners, strict=True):
        ref = markers.corner_marks(optimum, corner, bound)
        assert tgt.min_speed_m_s == pytest.approx(ref.min_speed, rel=0.01), corner.name
        assert len(tgt.brake_points_m) == len(ref.brake_points), corner.name
        for got, want in zip(tgt.brake_points_m, ref.brake_points, strict=True):
            want = want % line.length_m
            gap = abs((got - want + line.length_m / 2) % line.length_m - line.length_m / 2)
            assert gap <= 5.0, corner.name


def _extrema_every_station(v, drop=markers.MIN_SPEED_DROP_M_S):
    """The turning-point pass of docs/methods.md (Corner record) written plainly: every
    station visited (limitlap visits only where the speed turns)."""
    peaks, valleys = [], []
    good = np.flatnonzero(np.isfinite(v))
    hi = lo = int(good[0])
    first, state = v[hi], 0
    for i in good[1:].tolist():
        x = v[i]
        rose, fell = v[hi] > first, v[lo] < first
        hi = i if x >= v[hi] else hi
        lo = i if x < v[lo] else lo
        if state >= 0 and x < v[hi] - drop:
            peaks += [hi] if state == 1 or rose else []
            state, lo = -1, i
        elif state <= 0 and x > v[lo] + drop:
            valleys += [lo] if state == -1 or fell else []
            state, hi = 1, i
    return peaks, valleys


def test_turning_points_visit_only_where_the_speed_turns():
    # Running highs and lows change only where the speed turns or is level, so visiting
    # those stations alone gives the plain pass's turning points: random walks with
    # level runs (0.1 rounding, repeats) and blanks.
    rng = np.random.default_rng(0)
    for k in range(400):
        v = np.round(np.cumsum(rng.normal(0.0, 0.7, rng.integers(3, 300))), 1)
        if k % 3 == 0:
            v[rng.integers(0, v.size, size=v.size // 10)] = np.nan
        if k % 5 == 0:
            v = np.repeat(v, 3)
        peaks, valleys = markers.speed_extrema(v)
        assert (peaks.tolist(), valleys.tolist()) == _extrema_every_station(v)


# ----------------------------------------------------- comparison: advice and pedals


def _fake_lap(profile, line):
    from tests.test_compare import FakeDrivenLap

    return FakeDrivenLap(
        line,
        profile.time_s.copy(),
        profile.speed_m_s.copy(),
        markers.station_accel(profile, line.closed),
        profile.accel_lat_m_s2.copy(),
        lap_time_s=profile.lap_time_s,
    )


def test_a_grip_scale_the_lap_beats_everywhere_is_called_too_low():
    # A lap driven at the dry limit measured against the ideal at grip scale 0.8: it is
    # quicker in every corner, which no lap can be against a true limit, so the scale is
    # too low: a warning, and the negative time left in words.
    line, _ = layout_line(
        [
            ("s", 300.0),
            (40.0, 180.0, +1),
            ("s", 300.0),
            (60.0, 90.0, +1),
            ("s", 80.0),
            (60.0, 90.0, +1),
        ]
    )
    car = friction_car(mu=1.2, mu_brk=1.3, mu_trac=1.1)
    dry = solve.solve_profile(line, car, 1.0)
    low = solve.solve_profile(line, car, 0.8)
    corners = corners_mod.find_corners(line)
    cmp_ = compare.compare_lap(_fake_lap(dry, line), low, car, corners)
    assert cmp_.time_left_s < 0 and all(c.time_left_s < 0 for c in cmp_.corners)
    assert len(cmp_.warnings) == 1
    assert cmp_.warnings[0].startswith(
        "this lap used more grip than the scale allows: the scale is too low"
    )
    assert cmp_.time_left_words().startswith(f"the lap is {-cmp_.time_left_s:.2f} s quicker")
    assert all("quicker than the ideal here" in c.advice for c in cmp_.corners)
    # At its own grip the same lap draws no such warning.
    assert compare.compare_lap(_fake_lap(dry, line), dry, car, corners).warnings == ()


def _direction_changes(x, tol=1e-6):
    d = np.diff(x)
    d = d[np.abs(d) > tol]
    return int(np.sum(np.sign(d[1:]) != np.sign(d[:-1])))


def test_ideal_pedals_do_not_oscillate_on_a_rippled_line():
    # Curvature noise of a measured line (±2 % ripple of 12 m wavelength on every arc)
    # makes the profile on the lateral limit go up and down, and the raw shares of the
    # tyre force with it. The drawn pedals go one way per phase: brake up then down
    # while the speed falls, drive only up while it rises; and the fit keeps each phase's
    # level (isotonic regression keeps the mean of each pooled block: 1e-9).
    line0, _ = layout_line(
        [
            ("s", 300.0),
            (40.0, 120.0, +1),
            ("s", 200.0),
            (80.0, 150.0, +1),
            ("s", 150.0),
            (50.0, 90.0, +1),
        ]
    )
    s = line0.distance_m
    ripple = 1.0 + 0.02 * np.sin(2 * math.pi * s / 12.0)
    line = line_from_curvature(s, line0.curvature_1_m * ripple, length_m=line0.length_m)
    car = friction_car(mu=1.2, mu_brk=1.3, mu_trac=1.1)
    prof = solve.solve_profile(line, car)
    tr = markers.ideal_trace(prof, line, car)
    brake, drive = tr.lap_part(tr.brake_share), tr.lap_part(tr.drive_share)
    _, raw_d = markers._tyre_force_shares(prof.speed_m_s, markers.station_accel(prof, True), car)
    peaks, valleys = markers.speed_extrema(prof.speed_m_s)
    cuts = np.sort(np.concatenate([peaks, valleys]))
    assert _direction_changes(raw_d) > 3 * len(cuts)  # the raw share oscillates
    for a, b in itertools.pairwise(cuts):
        if prof.speed_m_s[b] < prof.speed_m_s[a]:  # falling: brake up, then down
            assert _direction_changes(brake[a : b + 1]) <= 1 and not drive[a + 1 : b].any()
        else:  # rising: drive only up
            assert np.all(np.diff(drive[a : b + 1]) >= -1e-12) and not brake[a + 1 : b].any()
            assert drive[a : b + 1].mean() == pytest.approx(raw_d[a : b + 1].mean(), abs=1e-9)


def test_solve_json_says_where_the_minimum_is_and_the_profile_file(tmp_path, capsys, monkeypatch):
    line = tmp_path / "loop.csv"
    s = np.arange(0.0, 1000.0, 1.0)
    k = np.where((s > 300) & (s < 300 + 50 * math.pi), 1 / 50.0, 0.0)
    k = np.where(s >= 800, 1 / 50.0, k)
    line.write_text(
        "distance [m],curvature [1/m]\n" + "".join(f"{a},{b}\n" for a, b in zip(s, k, strict=True))
    )
    car = tmp_path / "car.toml"
    car.write_text(
        'name = "c"\nmass_kg = 1000\npower_kw = 200\ndrag_area_m2 = 0.7\n'
        "downforce_area_m2 = 0.5\nrolling_coeff = 0.012\n[grip]\nlateral = 1.3\n"
        "braking = 1.4\ntraction = 1.2\nexponent = 2.0\n"
    )
    out = tmp_path / "profile.csv"
    code, text, err = run_cli(
        ["solve", line, "--vehicle", car, "--grip", "wet", "--json", "--out", out],
        capsys,
        monkeypatch,
    )
    assert code == 0, err
    doc = json.loads(text)
    assert doc["profile_csv"] == str(out) and out.exists() and doc["grip_scale"] == 0.7
    # The lowest speed is on one of the two R=50 m arcs, at their speed limit.
    at = doc["min_speed_at_m"]
    assert (300 <= at <= 300 + 50 * math.pi) or at >= 800
    assert doc["min_speed_kmh"] <= _kmh(math.sqrt(1.3 * 0.7 * G0_M_S2 * 50.0 * 1.05))


# --------------------------------------------- a generated session, end to end (slow)

#: The demo's planted mistakes plus a lift before the flat-out kink T8 (6 % off its
#: speed over 40 m round its apex).
KINK_LIFT = synth.Mistake("T8", 0.06, before_m=30.0, after_m=10.0)


@pytest.fixture(scope="module")
def session(tmp_path_factory):
    """A two-lap session on the demo circuit (synth, seed 3) and its analyses."""
    from limitlap import laps, pipeline

    folder = tmp_path_factory.mktemp("record")
    s = synth.generate_session(
        n_laps=2, lap_variation=0.0, mistakes=(*synth.DEMO_MISTAKES, KINK_LIFT), seed=3
    )
    log = folder / "session.csv"
    log.write_text(synth.session_csv_text(s), encoding="utf-8")
    gate = laps.Gate.geodetic(*s.truth.gate_latlon)
    with_track = pipeline.analyse(log, gate=gate, track=TRACK)
    without = pipeline.analyse(log, gate=gate)
    return s, log, folder, with_track, without


@pytest.mark.slow
def test_summary_and_targets_json_and_csv_give_the_same_corners(session, capsys, monkeypatch):
    # The acceptance figure of the corner record: for the same lap and envelope, the
    # corners, labels, apexes, ideal minimum speeds and brake points of summary.json are
    # those of `targets --json` and targets.csv. Through the library the numbers are the
    # same numbers; through the commands (envelope.toml written with repr, so the same
    # envelope; the same lap's line rebuilt) they agree to the rounding of each file:
    # 0.1 m and 0.1 km/h (docs/outputs.md).
    from limitlap import outputs, sheets

    s, log, folder, a, _ = session
    summary = outputs.build_summary(a)["corners"]
    table = targets.target_tables(a.driven.line, a.vehicle, ["dry"], a.corners)[0]
    for rec, t in zip(summary, table.corners, strict=True):
        assert (rec["name"], rec["label"], rec["apex_m"]) == (t.name, t.label, t.apex_m)
        assert rec["min_speed_ideal_kmh"] == _kmh(t.min_speed_m_s)
        assert rec["brake_points_ideal_m"] == list(t.brake_points_m)
        entry = _kmh(t.entry_speed_m_s)
        assert rec["entry_speed_ideal_kmh"] == (entry if math.isfinite(entry) else None)

    out = folder / "out"
    gate = ",".join(f"{x:.10f}" for x in s.truth.gate_latlon)
    args = ["analyse", log, "--track", TRACK, "--gate", gate, "--out", out, "--no-figures"]
    code, _, err = run_cli([*args, "--quiet"], capsys, monkeypatch)
    assert code == 0, err
    written = json.loads((out / "summary.json").read_text())["corners"]
    args = ["targets", log, "--vehicle", out / "envelope.toml", "--grip", "dry", "--track", TRACK]
    code, text, err = run_cli([*args, "--gate", gate, "--json"], capsys, monkeypatch)
    assert code == 0, err
    cond = json.loads(text)["conditions"][0]
    assert cond["condition"] == "dry"
    rows = [r.split(",") for r in sheets.targets_csv_text([table]).splitlines()[1:]]
    assert [c["name"] for c in written] == [c["name"] for c in cond["corners"]]
    for rec, c, row in zip(written, cond["corners"], rows, strict=True):
        assert rec["label"] == c["label"] == row[4]
        assert rec["apex_m"] == pytest.approx(c["apex_m"], abs=0.051)
        assert rec["min_speed_ideal_kmh"] == pytest.approx(c["min_speed_kmh"], abs=0.051)
        assert len(rec["brake_points_ideal_m"]) == len(c["brake_points_m"])
        for x, y in zip(rec["brake_points_ideal_m"], c["brake_points_m"], strict=True):
            assert x == pytest.approx(y, abs=0.051)
        # targets.csv: the JSON's numbers, cell for cell.
        assert float(row[5]) == c["apex_m"] and float(row[9]) == c["min_speed_kmh"]
        assert row[12] == " ".join(f"{x:.1f}" for x in c["brake_points_m"])


@pytest.mark.slow
def test_a_lift_before_a_flat_out_kink_is_its_own_corner(session):
    # Without a track file the kink is found and named T8 (so T9 is T9), the ideal takes
    # it without slowing, the driver's lift is a brake point (a lift counts), and its
    # cost stays in T8's segment: T8 and T9 each within 25 % of the generator's cost of
    # their own planted mistake in their segment (the project's 25 %, as
    # tests/test_acceptance.py).
    from tests.test_acceptance import _segment_truth

    s, _, _, with_track, a = session
    assert [c.name for c in a.corners] == [c.name for c in with_track.corners]
    by = {c.name: c for c in a.comparison.corners}
    t8 = by["T8"]
    assert abs(t8.apex_m - s.truth.circuit.corner("T8").apex_m) < 20.0
    assert t8.brake_points_ideal_m == () and len(t8.brake_points_actual_m) == 1
    assert t8.brake_points_actual_m[0] < t8.apex_m
    assert "the ideal takes it without slowing; you slow from" in t8.advice
    truth = _segment_truth(a, s.truth)
    index = {c.name: j for j, c in enumerate(a.corners)}
    for name in ("T8", "T9"):
        assert by[name].time_left_s == pytest.approx(truth[index[name]], rel=0.25), name


@pytest.mark.slow
def test_full_drive_is_where_the_drawn_traces_reach_it(session):
    # docs/methods.md, Corner record: full drive is where the drawn pedal trace reaches
    # full throttle (98 %) and where the ideal's drawn drive share reaches 95 % of the
    # drive limit: read off the arrays the figures draw, the marker sits on that
    # crossing (within one 1 m station either side). The planted T1 (early, slow) has
    # both at full drive within a few metres, as its figure shows.
    _, _, _, a, _ = session
    cmp_ = a.comparison
    s, length = cmp_.distance_m, cmp_.length_m
    for c in cmp_.corners:
        for at, share, on in (
            (c.full_drive_actual_m, cmp_.drive_share_actual, 0.98),
            (c.full_drive_ideal_m, cmp_.drive_share_ideal, 0.95),
        ):
            if not math.isfinite(at):
                continue
            after = np.interp((at + 1.0) % length, s, share)
            before = np.interp((at - 1.0) % length, s, share)
            assert after >= on - 1e-9 and before < on + 0.05, (c.name, at)
    t1 = next(c for c in cmp_.corners if c.name == "T1")
    assert abs(t1.full_drive_sooner_m) < 10.0
    assert "full drive" not in t1.advice


@pytest.mark.slow
def test_the_ideal_pedals_go_one_way_per_phase_on_the_session(session):
    # The ideal's drawn pedals on the rebuilt (measured) line: in each stretch between
    # two turning points of its speed the drive share changes direction at most once
    # and the brake share at most once (up, then down).
    _, _, _, a, _ = session
    cmp_ = a.comparison
    peaks, valleys = markers.speed_extrema(cmp_.speed_ideal_m_s)
    cuts = np.sort(np.concatenate([peaks, valleys]))
    for lo, hi in itertools.pairwise(cuts):
        assert _direction_changes(cmp_.drive_share_ideal[lo : hi + 1]) <= 1
        assert _direction_changes(cmp_.brake_share_ideal[lo : hi + 1]) <= 1
