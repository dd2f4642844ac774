"""Target tables per grip scale against the grip-scale laws of docs/methods.md, Rules of thumb (T7.1)."""

import itertools
import json
import math

import numpy as np
import pytest

from limitlap import cli, solve, targets
from limitlap import corners as corners_mod
from limitlap.errors import LimitlapError
from limitlap.units import KMH_TO_M_S, RHO_ISA_KG_M3
from limitlap.vehicle import Vehicle
from tests.cases import ARCS_LAYOUT, EXAMPLE_CAR, friction_car, layout_line

SCALES = (1.0, 0.85, 0.70)

LAYOUT = ARCS_LAYOUT


def build(layout, ds=1.0):
    return layout_line(layout, ds)[0]


@pytest.fixture(scope="module")
def line():
    return build(LAYOUT)


@pytest.fixture(scope="module")
def corners(line):
    return corners_mod.find_corners(line)


def test_lap_time_ratios_within_the_grip_scale_bounds(line, corners):
    # docs/checks.md, C7.1: with CdA = ClA = Crr = 0 and finite power every acceleration limit
    # shrinks by a factor between k and 1, and the profile is monotone in the limits, so
    # 1 <= T(k)/T(1) <= k^-1/2 [D]. 1e-9 relative slack: float rounding of the passes.
    car = Vehicle(
        "no aero", 1000.0, 150e3, 0.0, 0.0, 0.0, mu_lat=1.3, mu_brk=1.4, mu_trac=1.2, exponent=2.0
    )
    tables = targets.target_tables(line, car, SCALES, corners)
    t1 = tables[0].lap_time_s
    for table, k in zip(tables, SCALES, strict=True):
        ratio = table.lap_time_s / t1
        assert 1.0 - 1e-9 <= ratio <= k**-0.5 * (1 + 1e-9)
    # The power limit binds somewhere, so the lower bound is not the friction-only law.
    assert tables[2].lap_time_s / t1 < 0.70**-0.5 - 1e-3


def test_grip_limited_minimum_speed_with_downforce_follows_the_aero_law(line, corners):
    # docs/methods.md, Rules of thumb [D]: with downforce, v_lim^2(k)/v_lim^2(1) =
    # k (kappa - mu k_z/m) / (kappa - k mu k_z/m), k_z = rho ClA / 2, at the apex of every
    # grip-limited corner (no drag or rolling resistance, so the ideal holds v_lim on an
    # arc exactly). 1e-6 relative: float rounding of the solver's v = sqrt(b).
    m, mu, cla = 700.0, 1.5, 2.0
    car = Vehicle(
        "downforce", m, 300e3, 0.0, cla, 0.0, mu_lat=mu, mu_brk=1.6, mu_trac=1.4, exponent=2.0
    )
    kz = 0.5 * RHO_ISA_KG_M3 * cla
    tables = targets.target_tables(line, car, SCALES, corners)
    checked = 0
    for j, c in enumerate(corners):
        i_apex = round(c.apex_m)  # 1 m stations from 0
        kappa = abs(line.curvature_1_m[i_apex])
        v_lim = {
            k: solve.cornering_speed_limit(line.curvature_1_m[[i_apex]], car, k)[0] for k in SCALES
        }
        mins = {k: t.corners[j].min_speed_m_s for k, t in zip(SCALES, tables, strict=True)}
        if not all(mins[k] == pytest.approx(v_lim[k], rel=1e-9) for k in SCALES):
            continue  # not grip-limited at its apex at every scale
        checked += 1
        for k in SCALES[1:]:
            law = k * (kappa - mu * kz / m) / (kappa - k * mu * kz / m)
            assert (mins[k] / mins[1.0]) ** 2 == pytest.approx(law, rel=1e-6)
            assert law < k  # downforce makes the corner more sensitive than k
    assert checked >= 4  # the law was checked on most of the five corners


def test_friction_only_car_scales_with_sqrt_k_and_brake_points_stay(line, corners):
    # docs/checks.md, S-d [D]: limited only by friction, every limit scales by k, so
    # v_k = sqrt(k) v_1 at every station (also in the discrete scheme) and the brake points
    # do not move. Speeds: 1e-9 relative (rounding); brake points: 1 m (the fixed
    # -2.5 m/s² threshold is crossed at a different point of one 1 m step).
    car = friction_car(mu=1.2, mu_brk=1.3, mu_trac=1.1)
    tables = targets.target_tables(line, car, SCALES, corners)
    for table, k in zip(tables, SCALES, strict=True):
        assert table.profile.speed_m_s == pytest.approx(
            math.sqrt(k) * tables[0].profile.speed_m_s, rel=1e-9
        )
        assert table.lap_time_s == pytest.approx(tables[0].lap_time_s / math.sqrt(k), rel=1e-9)
        for a, b in zip(table.corners, tables[0].corners, strict=True):
            assert a.brake_start_m == pytest.approx(b.brake_start_m, abs=1.0)
            assert a.min_speed_m_s == pytest.approx(math.sqrt(k) * b.min_speed_m_s, rel=1e-9)


def test_lower_grip_is_never_faster_and_matches_the_solver(line, corners):
    # Requirement: lower grip never gives a higher minimum speed or a shorter lap; the lap time
    # of the table is solve_profile's on the same line and envelope (same call: exact).
    tables = targets.target_tables(line, EXAMPLE_CAR, SCALES, corners)
    for hi, lo in itertools.pairwise(tables):
        assert lo.lap_time_s > hi.lap_time_s
        for a, b in zip(hi.corners, lo.corners, strict=True):
            assert b.min_speed_m_s <= a.min_speed_m_s
    for table, k in zip(tables, SCALES, strict=True):
        assert table.lap_time_s == solve.solve_profile(line, EXAMPLE_CAR, k).lap_time_s
        # Segment times tile the lap (telescoping sums, 1e-9 s).
        assert sum(c.segment_time_s for c in table.corners) == pytest.approx(
            table.lap_time_s, abs=1e-9
        )
        braked = [c for c in table.corners if math.isfinite(c.brake_start_m)]
        assert len(braked) >= 4  # all but the fast R=120 left-hander need braking
        for c in braked:
            # The brake point lies before the apex, and entry speed is above the minimum.
            assert c.brake_before_apex_m > 0
            assert c.entry_speed_m_s > c.min_speed_m_s
    # Corners found once: the same apexes in every condition.
    assert all([c.apex_m for c in t.corners] == [c.apex_m for c in corners] for t in tables)


def test_terminal_table_rounds_the_lap_time_before_the_minutes(line, corners):
    # 119.9996 s rounds to 120.000 s: "2:00.000" (the table printed "1:60.000" before).
    import dataclasses

    table = targets.target_table(line, EXAMPLE_CAR, 1.0, corners, label="dry")
    text = cli.format_targets_table(dataclasses.replace(table, lap_time_s=119.9996))
    assert "ideal lap 2:00.000" in text and "1:60" not in text


def test_json_form_matches_the_interface(line, corners):
    tables = targets.target_tables(line, EXAMPLE_CAR, ["dry", "wet"], corners)
    doc = targets.targets_json(tables)
    json.dumps(doc, allow_nan=False)  # plain JSON, no NaN
    assert list(doc) == ["conditions"]
    cond = doc["conditions"][1]
    # docs/outputs.md, Target sheets `targets --json` keys, exactly: the interface's
    # first, in its order, then the added ones.
    assert list(cond) == ["grip_scale", "lap_time_s", "corners", "condition"]
    assert list(cond["corners"][0]) == [
        "name",
        "apex_m",
        "entry_speed_kmh",
        "brake_start_m",
        "min_speed_kmh",
        "exit_speed_kmh",
        "segment_time_s",
        "label",
        "brake_points_m",
        "brake_before_apex_m",
        "min_speed_at_m",
        "own_minimum",
    ]
    assert cond["grip_scale"] == 0.70 and cond["condition"] == "wet"
    assert doc["conditions"][0]["condition"] == "dry"
    for c in cond["corners"]:  # brake_start_m is the first of every brake point
        assert c["brake_start_m"] == (c["brake_points_m"][0] if c["brake_points_m"] else None)
    # km/h by the exact factor 3.6, rounded to 0.1; seconds to 0.001.
    t = tables[1].corners[0]
    assert cond["corners"][0]["min_speed_kmh"] == pytest.approx(
        t.min_speed_m_s / KMH_TO_M_S, abs=0.05
    )
    assert cond["lap_time_s"] == pytest.approx(tables[1].lap_time_s, abs=5e-4)


def test_terminal_table_and_conditions(line, corners):
    table = targets.target_table(line, EXAMPLE_CAR, 0.85, corners, label="damp")
    text = cli.format_targets_table(table)
    assert "damp" in text and "0.85" in text
    assert all(c.name in text for c in corners)
    assert "theoretical estimates" in text  # the caution goes with every table
    assert targets.resolve_condition("Wet") == ("wet", 0.70)
    assert targets.resolve_condition("wet", {"wet": 0.6}) == ("wet", 0.6)  # user override
    assert targets.resolve_condition("0.9") == (None, 0.9)
    with pytest.raises(LimitlapError, match="unknown condition"):
        targets.resolve_condition("icy")
    with pytest.raises(LimitlapError):
        targets.resolve_condition(3.0)  # outside 0.2-2.0


@pytest.mark.parametrize("car", [EXAMPLE_CAR, friction_car(mu=1.2, mu_brk=1.3, mu_trac=1.1)])
def test_apex_brake_point_and_minimum_are_consistent(line, corners, car):
    # The corner record of docs/methods.md (no published source): the apex shown is the
    # corner's main apex at every grip scale; the brake points are in driving order and
    # the first is brake_start_m, brake_before_apex_m from the apex (exactly: same
    # numbers); the entry speed is the speed at the first brake point and never below
    # the minimum (1e-9: interpolation rounding); without braking both are blank.
    length = line.length_m
    for k in SCALES:
        table = targets.target_table(line, car, k, corners)
        for t, c in zip(table.corners, corners, strict=True):
            assert t.apex_m == c.apex_m
            if t.brake_points_m:
                assert t.brake_start_m == t.brake_points_m[0]
                ahead = (t.apex_m - t.brake_start_m) % length
                assert ahead == pytest.approx(t.brake_before_apex_m, abs=1e-9)
                assert t.min_speed_m_s <= t.entry_speed_m_s + 1e-9
                v_at = float(np.interp(t.brake_start_m, line.distance_m, table.profile.speed_m_s))
                assert t.entry_speed_m_s == pytest.approx(v_at, rel=1e-3)
            else:
                assert math.isnan(t.brake_start_m) and math.isnan(t.entry_speed_m_s)
                assert math.isnan(t.brake_before_apex_m)
            if t.own_minimum:  # the profile's own minimum, no lower station near it
                near = np.abs(
                    (line.distance_m - t.min_speed_at_m + length / 2) % length - length / 2
                )
                assert t.min_speed_m_s == pytest.approx(
                    table.profile.speed_m_s[near <= 25.0].min(), rel=1e-9
                )
