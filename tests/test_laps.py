"""Lap splitting: gate crossings against closed-form crossing times, numbering, dropouts."""

import itertools
import math

import numpy as np
import pymap3d
import pytest

from limitlap.cli import format_laps_table
from limitlap.errors import ArgumentError, InputError, LimitlapError
from limitlap.laps import (
    Gate,
    auto_gate,
    fastest_lap,
    gate_crossings,
    laps_json,
    laps_table,
    parse_gate,
    split_laps,
)
from limitlap.logfile import read_log

from .synthetic_logs import ORIGIN, Circle, csv_text

RADIUS_M = 100.0


def gate_at(angle_rad, planar=False):
    """A gate on the circle at ``angle_rad`` (ENU about ORIGIN)."""
    x, y = RADIUS_M * math.cos(angle_rad), RADIUS_M * math.sin(angle_rad)
    if planar:
        return Gate.planar(x, y)
    lat, lon, _ = pymap3d.enu2geodetic(x, y, 0.0, *ORIGIN)
    return Gate.geodetic(lat, lon)


# ----------------------------------------------------------------------------- crossing times


@pytest.mark.parametrize(
    ("accel", "noise_m", "tol_s"),
    [
        # Noise-free: only the interpolation between 10 Hz fixes errs (measured 4e-4 s).
        (0.0, 0.0, 0.01),
        (0.25, 0.0, 0.01),
        # White GPS noise of 0.5 m per axis at 10 Hz: two fixes alone would give
        # ~0.35 m / 25 m/s = 0.014 s; the fit over the ~24 fixes within 30 m averages it
        # to about 0.003 s (measured 0.0034 s max); 0.01 s is the target.
        (0.25, 0.5, 0.01),
    ],
)
def test_gate_crossing_times_match_closed_form(tmp_path, accel, noise_m, tol_s):
    circle = Circle(radius_m=RADIUS_M, v0=25.0, accel=accel, noise_m=noise_m, duration_s=60.0)
    log = read_log(circle.write(tmp_path / "c.csv"))
    for angle in (0.0, 2.0):  # gate point between fixes at a different phase
        found = gate_crossings(log, gate_at(angle))
        truth = circle.crossing_times(angle)
        assert found.shape == truth.shape
        np.testing.assert_allclose(found, truth, atol=tol_s)


def test_a_yaw_rate_that_is_not_the_cars_leaves_the_crossings_to_the_fixes(tmp_path):
    # Yaw rate 57.3 times too large (deg/s written as rad/s): the path dead reckoned from
    # it does not fit the fixes (metres off), so the crossings come from the fixes alone:
    # within 0.002 s of the closed form with the gate point 10 m outside the circle
    # (noise-free 10 Hz fixes; measured 0.0005 s; with that path laid on the fixes
    # regardless, 0.07 s).
    circle = Circle(radius_m=RADIUS_M, v0=25.0, duration_s=60.0)
    circle.yaw_rate = circle.yaw_rate * 180.0 / math.pi
    log = read_log(circle.write(tmp_path / "c.csv", planar=True))
    found = gate_crossings(log, Gate.planar(RADIUS_M + 10.0, 0.0))
    np.testing.assert_allclose(found, circle.crossing_times(0.0), atol=0.002)


def test_lap_numbering_times_and_distances(tmp_path):
    # 25 m/s on R = 100 m, start 1 rad before the gate: crossings at 4 s + k·2πR/v.
    circle = Circle(radius_m=RADIUS_M, v0=25.0, duration_s=90.0)
    log = read_log(circle.write(tmp_path / "c.csv"))
    laps = split_laps(log, gate_at(0.0))
    lap_time = 2 * math.pi * RADIUS_M / 25.0
    assert [lap.number for lap in laps] == [0, 1, 2, 3, 4]
    assert [lap.complete for lap in laps] == [False, True, True, True, False]
    # The circle log starts and ends at speed (v0 = 25 m/s): both ends are partial laps,
    # not an out-lap or an in-lap (a log that starts at rest has an out-lap: tests below).
    assert "partial lap: the log starts on the move" in laps[0].reason
    assert "partial lap: the log ends on the move" in laps[-1].reason
    for lap in laps[1:4]:
        assert lap.reason == ""
        assert lap.time_s == pytest.approx(lap_time, abs=0.01)  # the project's lap-time target
        # Constant speed integrates exactly; the ends are the crossing times, measured
        # within 5e-4 s of the closed form (x 25 m/s = 0.0125 m): 0.05 m allowed.
        assert lap.distance_m == pytest.approx(2 * math.pi * RADIUS_M, abs=0.05)
    assert laps[0].start_index == 0 and laps[-1].end_index == log.time_s.size
    for a, b in itertools.pairwise(laps):
        assert a.end_index == b.start_index and a.end_time_s == b.start_time_s
    assert laps[1].start_time_s == pytest.approx(4.0, abs=0.01)
    assert log.time_s[laps[1].start_index] >= laps[1].start_time_s
    assert log.time_s[laps[1].start_index - 1] < laps[1].start_time_s
    assert fastest_lap(laps).number in (1, 2, 3)


def test_planar_log_and_planar_gate(tmp_path):
    circle = Circle(radius_m=RADIUS_M, duration_s=60.0)
    log = read_log(circle.write(tmp_path / "c.csv", planar=True))
    laps = split_laps(log, gate_at(0.0, planar=True))
    assert [lap.complete for lap in laps] == [False, True, True, False]
    with pytest.raises(InputError, match="given as latitude,longitude but the log has planar x/y"):
        split_laps(log, gate_at(0.0))


def test_only_crossings_in_the_direction_of_travel_count(tmp_path):
    # Drive the circle clockwise: the gate's line is defined by the travel there, so the
    # same point still gives one crossing per lap.
    circle = Circle(radius_m=RADIUS_M, duration_s=60.0)
    cols = circle.columns(planar=True)
    cols["y [m]"] = -cols["y [m]"]
    cols["yaw_rate [rad/s]"] = -cols["yaw_rate [rad/s]"]
    (tmp_path / "cw.csv").write_text(csv_text(cols, fmt="{:.10f}"))
    found = gate_crossings(read_log(tmp_path / "cw.csv"), gate_at(0.0, planar=True))
    np.testing.assert_allclose(found, circle.crossing_times(0.0), atol=0.01)


def test_crossing_outside_the_gate_width_does_not_count(tmp_path):
    # Gate point 40 m inside the circle: the car passes 40 m from it, beyond the default
    # 30 m half-width; with a 50 m half-width the northbound pass counts, the southbound
    # pass across the same line does not (wrong direction).
    circle = Circle(radius_m=RADIUS_M, duration_s=60.0)
    log = read_log(circle.write(tmp_path / "c.csv", planar=True))
    narrow = Gate.planar(RADIUS_M - 40.0, 0.0)  # 40 m inside the circle: beyond 30 m
    with pytest.raises(InputError, match="never crosses the gate"):
        split_laps(log, narrow)
    wide = Gate.planar(RADIUS_M - 40.0, 0.0, half_width_m=50.0)
    assert len(split_laps(log, wide)) == 4  # crossings at 4.0, 29.1, 54.3 s


def test_gate_never_crossed_names_log_and_gate(tmp_path):
    circle = Circle(radius_m=RADIUS_M, duration_s=10.0)
    log = read_log(circle.write(tmp_path / "c.csv"))
    far = Gate.geodetic(ORIGIN[0] + 0.01, ORIGIN[1])  # 1.1 km north
    with pytest.raises(InputError) as err:
        split_laps(log, far)
    msg = str(err.value)
    assert (
        msg.startswith(str(tmp_path / "c.csv"))
        and "never crosses the gate at -35.190000,139.800000" in msg
    )
    assert "closest pass" in msg


def test_log_shorter_than_one_lap_has_no_complete_lap(tmp_path):
    circle = Circle(radius_m=RADIUS_M, duration_s=20.0)  # crosses once, at 4 s
    laps = split_laps(read_log(circle.write(tmp_path / "c.csv")), gate_at(0.0))
    assert [(lap.number, lap.complete) for lap in laps] == [(0, False), (1, False)]
    with pytest.raises(LimitlapError, match="no complete lap"):
        fastest_lap(laps)


# ----------------------------------------------------------------------------- dropouts


def test_long_dropout_marks_its_lap_incomplete(tmp_path):
    circle = Circle(radius_m=RADIUS_M, duration_s=90.0)
    # inside lap 2 (29.1 s - 54.3 s), longer than the 5 s a log with a yaw rate bridges
    circle.drop_gps(35.0, 41.0)
    log = read_log(circle.write(tmp_path / "c.csv"))
    laps = split_laps(log, gate_at(0.0))
    assert [lap.complete for lap in laps] == [False, True, False, True, False]
    assert laps[2].reason == "GPS dropout of 6.1 s at 34.9 s"
    assert any("GPS dropout of 6.1 s" in w for w in log.warnings)
    assert laps[2].time_s == pytest.approx(2 * math.pi * RADIUS_M / 25.0, abs=0.01)


def test_thirty_second_dropout_over_the_gate(tmp_path):
    # Bad-input battery: a 30 s dropout swallows a crossing; the merged lap is not complete.
    circle = Circle(radius_m=RADIUS_M, duration_s=120.0)
    circle.drop_gps(40.0, 70.0)
    log = read_log(circle.write(tmp_path / "c.csv"))
    laps = split_laps(log, gate_at(0.0))
    bad = [lap for lap in laps if "GPS dropout of 30.1 s" in lap.reason]
    assert len(bad) == 1 and not bad[0].complete
    assert bad[0].time_s == pytest.approx(2 * 2 * math.pi * RADIUS_M / 25.0, abs=0.01)
    assert [lap.number for lap in laps] == list(range(len(laps)))


def test_short_dropout_keeps_the_lap_complete(tmp_path):
    circle = Circle(radius_m=RADIUS_M, duration_s=60.0)
    circle.drop_gps(3.0, 4.8)  # across the first crossing (4 s): bridged by dead reckoning
    log = read_log(circle.write(tmp_path / "c.csv"))
    laps = split_laps(log, gate_at(0.0))
    assert [lap.complete for lap in laps] == [False, True, True, False]
    assert laps[1].start_time_s == pytest.approx(4.0, abs=0.01)


# ----------------------------------------------------------------------------- lap column


def test_lap_column_taken_as_it_is(tmp_path):
    t = np.round(np.arange(0, 30.0, 0.1), 10)
    lap = np.where(t < 5, 0, np.where(t < 15, 1, np.where(t < 25, 2, 3))).astype(float)
    lap[1::2] = np.nan  # logged at a lower rate
    text = csv_text(
        {"time": t, "speed [m/s]": np.full(t.size, 10.0), "x": t * 10, "y": 0 * t, "lap": lap}
    )
    (tmp_path / "l.csv").write_text(text)
    laps = split_laps(read_log(tmp_path / "l.csv"))
    assert [lap.number for lap in laps] == [0, 1, 2, 3]
    assert [lap.complete for lap in laps] == [False, True, True, False]
    assert laps[1].time_s == pytest.approx(10.0, abs=1e-9)
    assert laps[1].distance_m == pytest.approx(100.0, rel=1e-9)


def test_no_gate_no_lap_column(tmp_path):
    circle = Circle(radius_m=RADIUS_M, duration_s=5.0)
    # The library's words name no command-line option (the command line places a gate
    # itself when it has none).
    with pytest.raises(InputError, match=r"no 'lap' column: give the start/finish gate$"):
        split_laps(read_log(circle.write(tmp_path / "c.csv")))


def test_auto_gate_on_a_circle_is_on_the_path(tmp_path):
    # A circle has no straight: every point is as fast and as curved as the next, so the
    # gate goes on the longest fast run; wherever it is, it must lie on the path (radius
    # R, fixes exact) and time laps of the closed form 2 pi R / v.
    circle = Circle(radius_m=RADIUS_M, v0=25.0, duration_s=90.0)
    log = read_log(circle.write(tmp_path / "c.csv", planar=True))
    gate = auto_gate(log)
    assert not gate.is_geodetic
    # chord interpolation between fixes 2.5 m apart sags 2.5²/(8 R) = 8 mm inside
    assert math.hypot(gate.x_m, gate.y_m) == pytest.approx(RADIUS_M, abs=0.01)
    complete = [lap for lap in split_laps(log, gate) if lap.complete]
    assert len(complete) >= 2
    for lap in complete:
        assert lap.time_s == pytest.approx(2 * math.pi * RADIUS_M / 25.0, abs=0.01)
    geo = auto_gate(read_log(circle.write(tmp_path / "g.csv")))
    assert geo.is_geodetic


# ----------------------------------------------------------------------------- gate text and tables


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("-31.4", "not LAT,LON"),
        ("a,b", "not LAT,LON"),
        ("1,2,3", "not LAT,LON"),
        ("91,0", "latitude 91 is out of range"),
        ("0,-181", "longitude -181 is out of range"),
        ("nan,0", "not a finite position"),
    ],
)
def test_parse_gate_rejects_bad_text(text, fragment):
    with pytest.raises(ArgumentError, match=r"^gate: ") as err:
        parse_gate(text)
    assert fragment in str(err.value)


def test_parse_gate():
    gate = parse_gate(" -31.41780 , 148.61724 ")
    assert (gate.latitude_deg, gate.longitude_deg) == (-31.4178, 148.61724)


def test_tables(tmp_path):
    circle = Circle(radius_m=RADIUS_M, v0=25.0, accel=0.05, duration_s=90.0)  # laps get faster
    laps = split_laps(read_log(circle.write(tmp_path / "c.csv")), gate_at(0.0))
    best = fastest_lap(laps)
    assert best.number == max(lap.number for lap in laps if lap.complete)
    rows = laps_table(laps)
    assert [r["fastest"] for r in rows].count(True) == 1
    assert rows[best.number]["fastest"]
    doc = laps_json(laps)
    assert set(doc) == {"laps"}
    for rec in doc["laps"]:
        assert {"number", "time_s", "distance_m", "complete"} <= set(rec)
    assert doc["laps"][0]["complete"] is False and doc["laps"][0]["reason"].startswith(
        "partial lap"
    )
    text = format_laps_table(laps)
    lines = text.splitlines()
    assert len(lines) == len(laps) + 1
    assert "<- fastest" in lines[best.number + 1]
    assert "not complete: partial lap" in lines[1]  # the circle log starts on the move
    minutes, seconds = divmod(round(best.time_s * 1000), 60000)
    assert f"{minutes}:{seconds / 1000:06.3f}" in lines[best.number + 1]


# ----------------------------------------------------------------------------- command line


def test_laps_command_json_and_error(tmp_path, capsys, monkeypatch):
    import json
    import sys

    from limitlap.cli import main

    circle = Circle(radius_m=RADIUS_M, duration_s=60.0)
    path = circle.write(tmp_path / "c.csv")
    gate = gate_at(0.0)
    monkeypatch.setattr(sys, "argv", ["limitlap", "laps", str(path), "--gate", str(gate), "--json"])
    main()
    doc = json.loads(capsys.readouterr().out)
    assert [rec["complete"] for rec in doc["laps"]] == [False, True, True, False]
    lap_time = 2 * math.pi * RADIUS_M / 25.0
    # str(gate) prints 6 decimals of a degree (0.1 m): the gate line moves < 0.1 m along
    # the travel, which shifts all crossings alike; lap times stay within 0.01 s.
    assert doc["laps"][1]["time_s"] == pytest.approx(lap_time, abs=0.01)
    monkeypatch.setattr(sys, "argv", ["limitlap", "laps", str(path), "--gate", "-35.2;139.8"])
    with pytest.raises(SystemExit) as stop:
        main()
    assert stop.value.code == 2
    err = capsys.readouterr().err.strip()
    assert (
        err
        == "limitlap: error: --gate: '-35.2;139.8' is not LAT,LON (two numbers separated by a comma)"
    )


def test_a_log_that_starts_and_ends_at_rest_has_an_out_lap_and_an_in_lap(tmp_path):
    # Standing start (v0 = 0, 3 m/s²) on the circle: the stretch before the first gate
    # crossing is an out-lap; the same log cut to end at rest (speed set to 0 over its
    # last second) has an in-lap after the last crossing.
    circle = Circle(radius_m=RADIUS_M, v0=0.0, accel=0.5, duration_s=60.0)
    circle.speed[circle.t > circle.t[-1] - 1.0] = 0.0
    laps = split_laps(read_log(circle.write(tmp_path / "c.csv")), gate_at(0.0))
    assert laps[0].reason.startswith("out-lap") and not laps[0].complete
    assert laps[-1].reason.startswith("in-lap") and not laps[-1].complete


def test_a_lap_with_a_stop_is_not_a_complete_lap(tmp_path):
    # A 10 s stop (speed channel at 0 from 30 to 40 s, inside lap 1 of the 25 m/s circle:
    # crossings at 4 s + k 25.1 s) is a pit stop or a stop on track: that lap's
    # time is no lap time, so it is not complete and never the fastest lap.
    circle = Circle(radius_m=RADIUS_M, v0=25.0, duration_s=110.0)
    circle.speed[(circle.t > 30.0) & (circle.t < 40.0)] = 0.0
    laps = split_laps(read_log(circle.write(tmp_path / "c.csv")), gate_at(0.0))
    stopped = [lap for lap in laps if "stopped for 10 s" in lap.reason]
    assert [lap.number for lap in stopped] == [2] and not stopped[0].complete
    assert [lap.number for lap in laps if lap.complete] == [1, 3, 4]


def test_gate_direction_at_a_low_rate(tmp_path):
    # 10 Hz rows at 70 m/s are 7 m apart, more than the ±5 m the gate's direction is taken
    # from: the nearest positions either side give it. Closed form: crossings 2πR/v apart.
    circle = Circle(radius_m=300.0, v0=70.0, duration_s=90.0, imu_hz=10, gps_hz=10, gps_phase_s=0.0)
    gate = Gate.planar(300.0, 0.0)
    laps = split_laps(read_log(circle.write(tmp_path / "c.csv", planar=True)), gate)
    complete = [lap for lap in laps if lap.complete]
    assert complete
    for lap in complete:  # crossing times interpolated between rows 0.1 s apart
        assert lap.time_s == pytest.approx(2 * math.pi * 300.0 / 70.0, abs=0.01)
