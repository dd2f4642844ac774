"""Corners, the lap comparison and the best-of-laps composite against closed forms.

Lines are built from straights and constant-radius arcs (exact curvature), so the ideal
speed profile of a friction-only car has closed forms: v = sqrt(mu g R) on an arc
(Milliken & Milliken 1995, steady-state cornering), constant acceleration mu_t g and
deceleration mu_b g on the straights (kinematics v^2 = v0^2 + 2 a d).
"""

import itertools
import math
from dataclasses import dataclass

import numpy as np
import pytest

from limitlap import advice, best_laps, compare, markers, solve
from limitlap import corners as corners_mod
from limitlap.errors import LimitlapError
from limitlap.line import Line, line_from_curvature
from limitlap.units import G0_M_S2, KMH_TO_M_S
from tests.cases import ARCS_LAYOUT, EXAMPLE_CAR, friction_car, layout_line

DS = 1.0  # station spacing of every test line [m]

LAYOUT = ARCS_LAYOUT

CAR = friction_car(mu=1.2, mu_brk=1.3, mu_trac=1.1)  # no power limit, drag or downforce


def build(layout, ds=DS, rotate_m=0.0):
    """Closed line of the layout and its arcs (tests/cases.py)."""
    return layout_line(layout, ds, rotate_m)


@dataclass
class FakeDrivenLap:
    """The fields of a DrivenLap that compare_lap reads (all on the line's stations)."""

    line: Line
    time_s: np.ndarray
    speed_m_s: np.ndarray
    accel_lon_m_s2: np.ndarray
    accel_lat_m_s2: np.ndarray
    throttle: np.ndarray | None = None
    brake_pa: np.ndarray | None = None
    lap_time_s: float | None = None


def driven_from(profile, line, **channels):
    return FakeDrivenLap(
        line,
        profile.time_s.copy(),
        profile.speed_m_s.copy(),
        markers.station_accel(profile, line.closed),  # sampled at the stations, as logged
        profile.accel_lat_m_s2.copy(),
        lap_time_s=profile.lap_time_s,
        **channels,
    )


def in_arc(d, arc, length, slack=DS):
    """True when distance d lies in the arc (start, end), within slack, round the lap."""
    a, b, _ = arc
    span = (b - a) % length
    return (d - a + slack) % length <= span + 2 * slack


def capped(line, arc, v_cap):
    cap = np.full(line.n, np.inf)
    a, b, _ = arc
    inside = ((line.distance_m - a) % line.length_m) < ((b - a) % line.length_m)
    cap[inside] = v_cap
    return cap


@pytest.fixture(scope="module")
def lap():
    line, arcs = build(LAYOUT)
    return line, arcs, corners_mod.find_corners(line), solve.solve_profile(line, CAR)


def test_corners_found_in_driving_order_with_double_apex(lap):
    line, arcs, corners, _ = lap
    # Six arcs, two of them merged (20 m apart, same direction) -> five corners.
    assert [c.name for c in corners] == ["T1", "T2", "T3", "T4", "T5"]
    assert [c.direction for c in corners] == ["left", "left", "right", "left", "left"]
    assert len(corners[1].apexes_m) == 2
    assert in_arc(corners[1].apexes_m[0], arcs[1], line.length_m)
    assert in_arc(corners[1].apexes_m[1], arcs[2], line.length_m)
    # Driving order from the gate: apexes increase.
    assert all(a.apex_m < b.apex_m for a, b in itertools.pairwise(corners))


def test_apexes_at_arcs_of_smallest_speed_limit():
    # docs/checks.md, C1.7: on straights and arcs the apexes coincide with the arcs of locally
    # smallest cornering speed limit, within one station. The compound corner here
    # (R=60, then R=25, then R=60 with no straight between) must put its apex in the
    # R=25 arc; v_lim comes from the solver's own cornering_speed_limit on the raw
    # curvature, for the example vehicle (with downforce) as well as a friction-only car.
    layout = [
        ("s", 300.0),
        (60.0, 40.0, +1),
        (25.0, 60.0, +1),
        (60.0, 40.0, +1),
        ("s", 250.0),
        (45.0, 110.0, -1),
        ("s", 200.0),
        (80.0, 290.0, +1),
    ]
    line, arcs = build(layout)
    corners = corners_mod.find_corners(line)
    assert len(corners) == 3
    for car in (CAR, EXAMPLE_CAR):
        v_lim = solve.cornering_speed_limit(line.curvature_1_m, car)
        for c in corners:
            zone = corners_mod.segment_index(line.distance_m, line.length_m, [c]) == 0
            slowest = line.distance_m[zone & (v_lim <= v_lim[zone].min() * (1 + 1e-12))]
            gap = np.abs(
                (slowest - c.apex_m + line.length_m / 2) % line.length_m - line.length_m / 2
            ).min()
            assert gap <= DS
    assert in_arc(corners[0].apex_m, arcs[1], line.length_m)  # the R=25 arc


def test_segments_tile_the_lap_and_time_left_adds_up(lap):
    line, arcs, corners, ideal = lap
    # A slower driver: 85 % of the speed limit in the T1 arc, 90 % in the T4 arc.
    cap = np.minimum(
        capped(line, arcs[0], 0.85 * math.sqrt(1.2 * G0_M_S2 * 40.0)),
        capped(line, arcs[4], 0.90 * math.sqrt(1.2 * G0_M_S2 * 50.0)),
    )
    real = solve.solve_profile(line, CAR, speed_cap_m_s=cap)
    cmp = compare.compare_lap(driven_from(real, line), ideal, CAR, corners)
    # Every station in exactly one segment.
    member = np.array(
        [
            ((line.distance_m - c.start_m) % line.length_m)
            < ((c.end_m - c.start_m) % line.length_m or line.length_m)
            for c in corners
        ]
    )
    assert (member.sum(axis=0) == 1).all()
    assert (corners_mod.segment_index(line.distance_m, line.length_m, corners) >= 0).all()
    # One segment runs through the gate (boundary halfway along the first straight).
    assert sum(c.start_m > c.end_m for c in corners) == 1
    # docs/checks.md, C1.10 / docs/outputs.md, summary.json: the corners' time left adds up to the lap's,
    # 1e-9 s (the segment times telescope; what is left is float rounding).
    assert sum(c.time_left_s for c in cmp.corners) == pytest.approx(cmp.time_left_s, abs=1e-9)
    assert sum(c.actual_s for c in cmp.corners) == pytest.approx(real.lap_time_s, abs=1e-9)
    assert sum(c.ideal_s for c in cmp.corners) == pytest.approx(ideal.lap_time_s, abs=1e-9)
    assert cmp.time_left_s == pytest.approx(real.lap_time_s - ideal.lap_time_s, abs=1e-12)
    # Phases add up to each corner's time left (same telescoping, 1e-9 s).
    for c in cmp.corners:
        phases = (
            c.time_left_approach_s + c.time_left_braking_s + c.time_left_mid_s + c.time_left_exit_s
        )
        assert phases == pytest.approx(c.time_left_s, abs=1e-9)
    # Time delta along the lap: actual minus ideal elapsed time, ending at the total.
    assert cmp.time_delta_s == pytest.approx(real.time_s - ideal.time_s, abs=1e-12)
    # The two slowed corners carry the time and rank first.
    assert {c.name for c in cmp.ranked()[:2]} == {"T1", "T4"}


def test_rotated_gate_keeps_corners_and_times():
    # docs/checks.md, C1.8 (rotating the start of a closed line leaves the lap unchanged): with
    # the gate moved into the T1 braking zone, the same corners come out shifted, one of
    # them now straddling the gate, and the segments still tile the lap.
    line0, _ = build(LAYOUT)
    line1, _ = build(LAYOUT, rotate_m=230.0)
    c0 = corners_mod.find_corners(line0)
    c1 = corners_mod.find_corners(line1)
    assert len(c0) == len(c1)
    apex0 = sorted((c.apex_m - 230.0) % line0.length_m for c in c0)
    assert sorted(c.apex_m for c in c1) == pytest.approx(apex0, abs=DS)  # one station
    ideal = solve.solve_profile(line1, CAR)
    cmp = compare.compare_lap(driven_from(ideal, line1), ideal, CAR, c1)
    assert sum(c.ideal_s for c in cmp.corners) == pytest.approx(ideal.lap_time_s, abs=1e-9)


def test_lap_at_the_ideal_leaves_no_time(lap):
    line, _, corners, ideal = lap
    cmp = compare.compare_lap(driven_from(ideal, line), ideal, CAR, corners)
    # Same profile on both sides: differences are exactly zero up to float rounding.
    assert abs(cmp.time_left_s) < 1e-12
    for c in cmp.corners:
        assert abs(c.time_left_s) < 1e-12
        assert c.brake_later_m == pytest.approx(0.0, abs=1e-9)
        # Full drive: the "real" lap's drive share is the raw share of its acceleration,
        # the ideal's the phase-by-phase monotone fit of the same share; their crossings
        # of 95 % are interpolated between 1 m stations: 0.1 m.
        assert c.full_drive_sooner_m == pytest.approx(0.0, abs=0.1)
        assert c.min_speed_actual_m_s == c.min_speed_ideal_m_s
        # On the envelope in every corner: the friction-only ideal reaches the limit
        # (combined usage 1 to rounding of the solver's Heun steps, 1e-6).
        assert c.grip_used == pytest.approx(1.0, abs=1e-6)
        assert "same brake point" in c.advice


def test_planted_slow_corner_costs_time_there_and_brakes_earlier(lap):
    line, arcs, corners, ideal = lap
    v_lim = math.sqrt(1.2 * G0_M_S2 * 40.0)  # T1 arc, sqrt(mu g R)
    v_cap = 0.7 * v_lim
    real = solve.solve_profile(line, CAR, speed_cap_m_s=capped(line, arcs[0], v_cap))
    cmp = compare.compare_lap(driven_from(real, line), ideal, CAR, corners)
    t1 = cmp.corners[0]
    assert t1.rank == 1
    # Most of the loss is in T1; the rest is the slower run down the next straight
    # carried over the boundary into T2 (common sense bound, not a published value).
    assert t1.time_left_s > 0.8 * cmp.time_left_s
    assert all(c.time_left_s > -1e-9 for c in cmp.corners)
    # Both laps leave the previous corner alike and accelerate at mu_t g; braking at mu_b g
    # to v^2 lower by dv2 moves the crossing of the two parabolas v^2 = v1^2 + 2 mu_t g x
    # and v^2 = v2^2 + 2 mu_b g (L - x) earlier by dv2 / (2 g (mu_t + mu_b)) [kinematics].
    shift = (v_lim**2 - v_cap**2) / (2 * G0_M_S2 * (1.1 + 1.3))
    # 1 m: the brake start is interpolated between 1 m stations on both laps. The shift
    # (5.1 m) is above what the data resolves at about 62 m/s (0.05 s, 3.1 m), so the
    # driver's line names it.
    assert shift > 5.0
    assert t1.brake_later_m == pytest.approx(shift, abs=1.0)
    # The minimum speeds are the cap and the arc's limit (speed at a station: 1e-9).
    assert t1.min_speed_actual_m_s == pytest.approx(v_cap, rel=1e-9)
    assert t1.min_speed_ideal_m_s == pytest.approx(v_lim, rel=1e-9)
    assert "T1:" in t1.advice and "brakes" in t1.advice and "km/h more" in t1.advice


def test_brake_and_min_speed_fields_reproduce_known_values(lap):
    # docs/checks.md, C7.2: brake start within 1 m and minimum speed within 0.5 km/h of the
    # known values when the channels are dense (here one sample per 1 m station, finer
    # than 100 Hz below 100 m/s).
    line, arcs, corners, ideal = lap
    mu, mu_b, mu_t = 1.2, 1.3, 1.1
    # Brake points in closed form: the car leaves the R=120 arc (ending at the gate) at
    # sqrt(mu g 120) and meets the braking parabola to v2 at the T1 arc, 250 m on:
    # x = (v2^2 - v1^2 + 2 mu_b g L) / (2 g (mu_t + mu_b)) (kinematics).
    b1, straight = mu * G0_M_S2 * 120.0, arcs[0][0]

    def crossing(v2):
        return (v2**2 - b1 + 2 * mu_b * G0_M_S2 * straight) / (2 * G0_M_S2 * (mu_t + mu_b))

    x_ideal = crossing(math.sqrt(mu * G0_M_S2 * 40.0))
    # A real lap held to 60 km/h in T1, with a brake-pressure channel that comes on 20 m
    # after its speed starts falling (the driver lifts first: a lift counts, so the brake
    # point is where the speed starts falling, docs/methods.md, Corner record), and a
    # throttle that ramps to 100 % over 5 m from x_t.
    v_cap = 60.0 * KMH_TO_M_S
    x_real, x_t = crossing(v_cap), 318.6
    s = line.distance_m
    brake = np.clip((s - x_real - 20.0) / 3.0, 0.0, 1.0) * 60e5 * (s < corners[0].apex_m)
    throttle = np.where((s > x_real) & (s < x_t), 0.0, 1.0)
    throttle = np.where(s >= x_t, np.clip((s - x_t) / 5.0, 0.0, 1.0), throttle)
    real = solve.solve_profile(line, CAR, speed_cap_m_s=capped(line, arcs[0], v_cap))
    cmp = compare.compare_lap(
        driven_from(real, line, brake_pa=brake, throttle=throttle), ideal, CAR, corners
    )
    t1 = cmp.corners[0]
    assert t1.brake_start_actual_m == pytest.approx(x_real, abs=1.0)
    assert t1.brake_start_ideal_m == pytest.approx(x_ideal, abs=1.0)
    assert t1.brake_points_actual_m == (t1.brake_start_actual_m,)  # one braking zone
    # Entry speed: at the brake point, where the real lap leaves the R=120 arc's
    # acceleration parabola, v^2 = v1^2 + 2 mu_t g x (0.5 km/h).
    v_entry = math.sqrt(b1 + 2 * mu_t * G0_M_S2 * x_real)
    assert t1.entry_speed_actual_m_s / KMH_TO_M_S == pytest.approx(v_entry / KMH_TO_M_S, abs=0.5)
    # 98 % throttle is reached 4.9 m into the ramp; +-1 m.
    assert t1.full_drive_actual_m == pytest.approx(x_t + 4.9, abs=1.0)
    # The ideal is at full drive where the T1 arc ends (one station: 1 m).
    assert t1.full_drive_ideal_m == pytest.approx(arcs[0][1], abs=1.0)
    assert t1.min_speed_actual_m_s / KMH_TO_M_S == pytest.approx(60.0, abs=0.5)
    assert in_arc(t1.min_speed_actual_at_m, arcs[0], line.length_m)
    # Peak lateral acceleration of the ideal on the arc: mu g (closed form, rounding).
    assert t1.peak_accel_lat_ideal_m_s2 == pytest.approx(mu * G0_M_S2, rel=1e-9)
    # The pedal traces are the logged pedals: pressure as a share of its peak.
    assert cmp.throttle_logged and cmp.brake_logged
    assert np.nanmax(cmp.brake_share_actual) == 1.0
    assert cmp.drive_share_actual == pytest.approx(np.clip(throttle, 0, 1))


def test_brake_start_from_speed_without_pedals(lap):
    # Without pedal channels the brake point is where the speed starts falling, as with
    # them: for the ideal itself as "real" lap with a planted cap it must fall on the
    # closed-form crossing.
    line, arcs, corners, ideal = lap
    mu, mu_b, mu_t = 1.2, 1.3, 1.1
    v_cap = 0.8 * math.sqrt(mu * G0_M_S2 * 40.0)
    b1, b2, straight = mu * G0_M_S2 * 120.0, v_cap**2, arcs[0][0]
    x = (b2 - b1 + 2 * mu_b * G0_M_S2 * straight) / (2 * G0_M_S2 * (mu_t + mu_b))
    real = solve.solve_profile(line, CAR, speed_cap_m_s=capped(line, arcs[0], v_cap))
    cmp = compare.compare_lap(driven_from(real, line), ideal, CAR, corners)
    assert cmp.corners[0].brake_start_actual_m == pytest.approx(x, abs=1.0)  # 1 station


def test_summary_dict_has_the_interface_keys(lap):
    line, arcs, corners, ideal = lap
    real = solve.solve_profile(line, CAR, speed_cap_m_s=capped(line, arcs[0], 15.0))
    cmp = compare.compare_lap(driven_from(real, line), ideal, CAR, corners, grip_estimate=0.9)
    keys = [
        "name",
        "start_m",
        "apex_m",
        "end_m",
        "actual_s",
        "ideal_s",
        "time_left_s",
        "min_speed_actual_kmh",
        "min_speed_ideal_kmh",
        "brake_start_actual_m",
        "brake_start_ideal_m",
        "grip_used",
    ]  # docs/outputs.md, summary.json, in its order
    d = cmp.corners[0].summary_dict()
    assert list(d)[: len(keys)] == keys
    # km/h by the exact factor 3.6 (SI brochure).
    assert d["min_speed_actual_kmh"] == pytest.approx(15.0 * 3.6, rel=1e-12)
    assert 0.0 <= d["grip_used"] <= 1.0
    assert cmp.grip_estimate == 0.9
    ranked = cmp.corner_summaries(ranked=True)
    assert [r["rank"] for r in ranked] == list(range(1, len(corners) + 1))


def test_names_given_and_wrong_count():
    line, _ = build(LAYOUT)
    names = ["Gate bend", "Double", "Kink right", "Long left", "Last"]
    assert [c.name for c in corners_mod.find_corners(line, names)] == names
    with pytest.raises(LimitlapError, match="5 corners"):
        corners_mod.find_corners(line, names[:3])


def _differences(name="T6", left=0.21, phases=(0.0, 0.08, 0.07, 0.06), **kw):
    fields = dict(brake_later_m=12.0, min_speed_gain_m_s=6 * KMH_TO_M_S, full_drive_sooner_m=15.0)
    fields.update(kw)
    return advice.CornerDifferences(name, left, *phases, **fields)


def test_advice_line_wording():
    # docs/methods.md, Corners and comparison: each difference is named when it is larger
    # than the data resolves and its phase carries at least 0.02 s.
    assert advice.advice_line(_differences()) == (
        "T6: 0.21 s — the ideal brakes 12 m later, carries 6 km/h more at the minimum, "
        "and is at full drive 15 m sooner"
    )
    # Under the resolution (2 m; 1 km/h), or in a phase with under 0.02 s: left out.
    d = _differences(brake_later_m=1.5, full_drive_sooner_m=85.0, phases=(0, 0.1, 0.1, 0.01))
    assert advice.advice_line(d) == "T6: 0.21 s — the ideal carries 6 km/h more at the minimum"
    # A brake point 3 m apart at 62 m/s: one 20 Hz sample is 3.1 m, not resolved.
    d = _differences(brake_later_m=3.0, brake_resolution_m=advice.distance_resolution_m(62.0))
    assert "brakes" not in advice.advice_line(d)
    # Nothing the data resolves, but time left: where it is, phase by phase.
    d = _differences(brake_later_m=1.0, min_speed_gain_m_s=0.1, full_drive_sooner_m=0.5)
    assert advice.advice_line(d) == (
        "T6: 0.21 s — spread through the corner (braking 0.08 s, mid-corner 0.07 s, exit "
        "0.06 s): no brake point, minimum speed or drive point apart by more than the data "
        "resolves"
    )
    # Time carried from the corner before: said so, with the speed it arrives short by.
    d = _differences(
        name="T10",
        left=0.04,
        phases=(0.05, 0.0, 0.0, -0.01),
        brake_later_m=-8.0,
        min_speed_gain_m_s=-1.1 * KMH_TO_M_S,
        previous="T9",
        arrival_deficit_m_s=12 * KMH_TO_M_S,
    )
    assert advice.advice_line(d) == (
        "T10: 0.04 s — 0.05 s of it comes from T9's exit: you arrive 12 km/h slower"
    )
    # A kink the ideal takes without slowing, where the driver slows.
    d = _differences(
        name="T8", ideal_without_slowing=True, real_brake_m=2150.4, real_min_speed_m_s=50.0
    )
    assert advice.advice_line(d).startswith(
        "T8: 0.21 s — the ideal takes it without slowing; you slow from 2150 m to 180 km/h"
    )
    # On the ideal: no "-0.00"; quicker than the ideal: explained.
    assert advice.advice_line(_differences(left=-0.004)) == (
        "T6: 0.00 s — on the ideal here: same brake point, minimum speed and drive point"
    )
    assert advice.advice_line(_differences(left=-0.03)).startswith(
        "T6: -0.03 s — quicker than the ideal here by 0.03 s: this lap used more grip"
    )


def test_best_of_laps_composite(lap):
    line, arcs, corners, ideal = lap
    # Lap A slow in T1, lap B slow in T4 and 0.3 % longer (a wider line, as measured):
    # the composite takes T1 from B and T4 from A, and each lap's segments add up to it.
    a = solve.solve_profile(line, CAR, speed_cap_m_s=capped(line, arcs[0], 15.0))
    long_line = line_from_curvature(
        line.distance_m * 1.003, line.curvature_1_m / 1.003, length_m=line.length_m * 1.003
    )
    b = solve.solve_profile(long_line, CAR, speed_cap_m_s=capped(line, arcs[4], 18.0))
    best = best_laps.best_of_laps(
        [driven_from(a, line), driven_from(b, long_line)],
        corners,
        reference_length_m=line.length_m,
        lap_numbers=[4, 7],
        ideal=ideal,
    )
    assert best.segment_times_s.sum(axis=1) == pytest.approx(
        [a.lap_time_s, b.lap_time_s], abs=1e-9
    )  # telescoping sums, rounding
    assert best.best_lap[0] == 7 and best.best_lap[3] == 4
    assert best.composite_lap_time_s == pytest.approx(
        best.segment_times_s.min(axis=0).sum(), abs=1e-12
    )
    assert best.composite_lap_time_s < min(a.lap_time_s, b.lap_time_s)
    # The physics limit on the same segments, below the composite.
    assert best.ideal_s.sum() == pytest.approx(ideal.lap_time_s, abs=1e-9)
    assert best.ideal_lap_time_s <= best.composite_lap_time_s
    assert best.summary_dict()["segments"][0]["lap"] == 7


def test_names_matched_by_apex_with_a_missed_fast_bend():
    # A track file names corners by apex position. The R=900 m left-hander (60 m, 3.8°)
    # is under the detection threshold (8° of turn) but named, so it becomes a corner of
    # its own; the double apex takes its first name, its second name kept as its second
    # apex (and said so); a found bend with no name is called after the corner before it
    # ("Fast+").
    layout = [*LAYOUT[:-2], ("s", 60.0), (900.0, 60.0, +1), ("s", 40.0), (120.0, 60.0, +1)]
    line, arcs = build(layout)
    mid = [0.5 * (a + b) for a, b, _ in arcs]
    names = ["Gate bend", "Double", "Double b", "Kink right", "Long left", "Fast"]
    corners = corners_mod.find_corners(line, names, apexes_m=mid[:6])
    assert [c.name for c in corners] == [
        "Gate bend",
        "Double",
        "Kink right",
        "Long left",
        "Fast",
        "Fast+",
    ]
    fast = corners[4]
    assert abs(fast.apex_m - mid[5]) <= DS  # where the track file puts it (one station)
    assert len(corners[1].apexes_m) == 2
    assert corners[1].apex_names == ("Double", "Double b")
    assert "Double b is a further apex of Double" in corners[1].note
    # Still a tiling: every station in one segment.
    seg = corners_mod.segment_index(line.distance_m, line.length_m, corners)
    assert (seg >= 0).all()


def test_grip_used_is_low_only_where_grip_was_left(lap):
    # The real lap holds T1's arc at 0.85 of sqrt(mu g R): there its lateral usage is
    # 0.85^2 = 0.7225 of the limit (friction-only car, a_y = v^2 / R). Elsewhere it
    # drives at the limit too, so real over ideal usage is 1, except at the station
    # where the slower real lap switches from drive to braking for T2 while the ideal
    # already brakes (station accelerations are the mean of the steps either side):
    # one station of a few hundred, so 1 within 0.01.
    line, arcs, corners, ideal = lap
    v_cap = 0.85 * math.sqrt(1.2 * G0_M_S2 * 40.0)
    real = solve.solve_profile(line, CAR, speed_cap_m_s=capped(line, arcs[0], v_cap))
    cmp = compare.compare_lap(driven_from(real, line), ideal, CAR, corners)
    t1 = cmp.corners[0]
    # Between the arc's 0.7225 and 1 (the braking before it is at the limit on both).
    assert 0.7225 - 1e-6 < t1.grip_used < 0.9
    for c in cmp.corners[1:]:
        assert c.grip_used == pytest.approx(1.0, abs=0.01)


# A left-hander entered on a long R=150 m arc (60 deg, 157 m) that tightens to R=40 m:
# a friction-only ideal brakes from the straight to sqrt(mu g 150), holds that on the
# lateral limit (zero deceleration) for about 65 m, then trail-brakes into the R=40 m
# part. The speed never rises from the straight to the minimum: one brake point.
TIGHTENING = [
    ("s", 250.0),
    (150.0, 60.0, +1),
    (40.0, 30.0, +1),
    *LAYOUT[2:],
]


def test_brake_point_of_a_tightening_corner_is_where_the_speed_starts_falling():
    line, arcs = build(TIGHTENING)
    corners = corners_mod.find_corners(line)
    ideal = solve.solve_profile(line, CAR)
    mu, mu_b, mu_t = 1.2, 1.3, 1.1
    # Closed form: leaving the R=120 m arc at the gate at sqrt(mu g 120), accelerating
    # at mu_t g, braking at mu_b g to sqrt(mu g 150) at the arc 250 m on (kinematics).
    b1, b2, straight = mu * G0_M_S2 * 120.0, mu * G0_M_S2 * 150.0, arcs[0][0]
    x = (b2 - b1 + 2 * mu_b * G0_M_S2 * straight) / (2 * G0_M_S2 * (mu_t + mu_b))
    t1 = compare.compare_lap(driven_from(ideal, line), ideal, CAR, corners).corners[0]
    assert in_arc(t1.apex_m, arcs[1], line.length_m)  # the R=40 m part is the apex
    # 1 m: the crossing is interpolated between 1 m stations.
    assert t1.brake_start_ideal_m == pytest.approx(x, abs=1.0)
    # The same lap as "real" (deceleration threshold, no pressure): same brake point.
    assert t1.brake_start_actual_m == pytest.approx(t1.brake_start_ideal_m, abs=1e-9)
    assert "same brake point" in t1.advice
