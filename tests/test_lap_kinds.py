"""Laps as an engineer counts them: out-, flying, in-, pit and partial laps; the automatic
gate on the main straight; crossing times against the generator's; a gate that
contradicts the track file; files given to the wrong option.

The pit-lane sessions come from tests/pit_lane_session.py, which imports nothing of
limitlap: closed-form geometry driven at constant accelerations, with a plan of pit
visits, so each lap's kind is known by construction (said beside each check) and each
gate crossing's time is the generator's own. The crossing-time checks on the demo
circuit use limitlap.synth's session, whose truth is its own time base and its recorded
GNSS error.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pymap3d
import pytest

from limitlap import synth
from limitlap.errors import ArgumentError, InputError
from limitlap.ingest import read_channel_map, read_track, read_vehicle
from limitlap.laps import (
    Gate,
    auto_gate,
    fastest_lap,
    flying_laps,
    gate_crossings,
    laps_json,
    split_laps,
)
from limitlap.logfile import read_log
from limitlap.outputs import laps_summary
from limitlap.pipeline import load_session
from limitlap.resources import bundled_path

from . import pit_lane_session as pls
from .robust_data import run_cli
from .synthetic_logs import csv_text
from .test_bad_input import one_error_line

#: Stands 45 s in a box after the gate, leaves by the pit lane, two flying laps, into
#: the pit lane (crossing the gate slowly), a 25 s stop, out, two flying laps, into the
#: pit lane again and stops in the box (the log ends there).
BOX_AFTER_GATE = 600.0
#: The same with the box before the gate: every visit crosses the gate after its stop.
BOX_BEFORE_GATE = 300.0


def _plan(box):
    return [
        ("box", box, 45.0),
        ("pit", pls.PIT_OUT_X),
        ("track", 3, pls.PIT_IN_X),
        ("pit", box),
        ("box", box, 25.0),
        ("pit", pls.PIT_OUT_X),
        ("track", 3, pls.PIT_IN_X),
        ("pit", box),
        ("box", box, 5.0),
    ]


@pytest.fixture(scope="module")
def sessions(tmp_path_factory):
    """(session, log path) per box position, 50 Hz rows, 10 Hz GNSS with 0.3 m white noise."""
    folder = tmp_path_factory.mktemp("pit_lane")
    out = {}
    for box in (BOX_AFTER_GATE, BOX_BEFORE_GATE):
        session = pls.generate(_plan(box))
        path = folder / f"box_{box:.0f}.csv"
        path.write_text(csv_text(session.columns(), fmt="{:.10g}"))
        out[box] = (session, path)
    return out


GATE = Gate.geodetic(*pls.gate_latlon())


# ----------------------------------------------------------------------------- kinds


def test_pit_stop_after_the_gate_gives_an_in_lap_then_a_pit_lap(sessions):
    session, path = sessions[BOX_AFTER_GATE]
    laps = split_laps(read_log(path), GATE)
    # By construction: lap 0 leaves the box (log starts at rest); 1 flying; 2 ends in the
    # pit lane, crossing the gate at its speed limit (in); 3 holds the 25 s stop (pit);
    # 4 flying; 5 ends in the pit lane again (in); the log then ends in the box (in).
    assert [lap.kind for lap in laps] == ["out", "flying", "in", "pit", "flying", "in", "in"]
    assert [lap.number for lap in laps] == list(range(7))
    # the generator's crossings (tests/pit_lane_session.py truth), 10 Hz GNSS with 0.3 m
    # noise: within 0.01 s (the target for gate timing; measured 0.0025 s)
    found = np.array([lap.start_time_s for lap in laps[1:]])
    np.testing.assert_allclose(found, session.crossings_s, atol=0.01)
    assert [lap.complete for lap in laps] == [lap.kind == "flying" for lap in laps]
    assert "stopped for 2" in laps[3].reason and "pit stop" in laps[3].reason
    assert laps[2].reason.startswith("in-lap: ends slowly, 60 km/h")  # 16.7 m/s limit
    assert laps[0].reason.startswith("out-lap: the log starts at rest")
    assert laps[-1].reason.startswith("in-lap: the log ends at rest")
    # only flying laps are lap times: the fastest and the envelope's laps are among them,
    # at the generator's flying-lap time
    assert fastest_lap(laps).kind == "flying"
    assert fastest_lap(laps).time_s == pytest.approx(session.flying_lap_s, abs=0.01)
    assert {lap.number for lap in flying_laps(laps)} == {1, 4}


def test_pit_stop_before_the_gate_gives_a_pit_lap_then_an_out_lap(sessions):
    session, path = sessions[BOX_BEFORE_GATE]
    laps = split_laps(read_log(path), GATE)
    # By construction: lap 0 from the box to the gate in the pit lane (at rest: out);
    # 1 from that slow pit-lane crossing round to the gate (starts slowly: out); 2
    # flying; 3 into the pit lane and the 25 s stop before the gate (pit); 4 from the
    # pit-lane crossing after the stop (out); 5 flying; the log ends in the box (in).
    assert [lap.kind for lap in laps] == ["out", "out", "flying", "pit", "out", "flying", "in"]
    found = np.array([lap.start_time_s for lap in laps[1:]])
    np.testing.assert_allclose(found, session.crossings_s, atol=0.01)
    assert laps[4].reason.startswith("out-lap: starts slowly, 60 km/h")
    assert [lap.number for lap in laps if lap.complete] == [2, 5]


def test_a_log_cut_mid_lap_starts_with_a_partial_lap(sessions):
    session, path = sessions[BOX_AFTER_GATE]
    full = split_laps(read_log(path), GATE)
    # Cut where the car is in the slowest corner (r = 40 m, 22 m/s) of flying lap 1:
    # slower than at the gate (70 m/s) but as fast as laps go there, so partial, not out.
    t, x, y = session.time_s, session.x_m, session.y_m
    corner = (t > session.crossings_s[0]) & (x < pls.RADII_M[3]) & (y < pls.RADII_M[3])
    start = float(t[np.argmax(corner)])
    cut = path.with_name("cut.csv")
    cut.write_text(csv_text(session.columns(start_s=start), fmt="{:.10g}"))
    laps = split_laps(read_log(cut), GATE)
    assert laps[0].kind == "partial" and laps[0].reason.startswith("partial lap: the log starts")
    # numbering: lap 0 is the stretch before the first crossing, lap 1 the first whole
    # lap; the laps after the cut are the full log's from lap 2 on, same times and kinds
    assert [lap.number for lap in laps] == list(range(len(full) - 1))
    assert [lap.kind for lap in laps[1:]] == [lap.kind for lap in full[2:]]
    for mine, theirs in zip(laps[1:], full[2:], strict=True):
        assert mine.time_s == pytest.approx(theirs.time_s, abs=0.005)
        assert mine.start_time_s + start == pytest.approx(theirs.start_time_s, abs=0.005)


def test_a_log_that_starts_in_the_pit_lane_on_the_move_has_an_out_lap(sessions):
    session, path = sessions[BOX_AFTER_GATE]
    # Cut 3 s after the car leaves the box after its stop: it drives the pit lane at
    # 16.7 m/s (not at rest) where laps pass at about 60 m/s, so lap 0 is an out-lap.
    t, v = session.time_s, session.speed_m_s
    stop = (t > session.crossings_s[2]) & (t < session.crossings_s[3]) & (v == 0.0)
    start = float(t[np.flatnonzero(stop)[-1]]) + 3.0
    assert 10.0 < np.interp(start, t, v) < 17.0  # the scenario: moving in the pit lane
    cut = path.with_name("pitlane.csv")
    cut.write_text(csv_text(session.columns(start_s=start), fmt="{:.10g}"))
    laps = split_laps(read_log(cut), GATE)
    assert laps[0].kind == "out"
    assert laps[0].reason.startswith("out-lap: the log starts slowly")


def test_a_log_without_a_flying_lap_has_no_lap_to_analyse(tmp_path, capsys, monkeypatch):
    # Out of the box, round once past the gate and into the pit lane (crossing the gate
    # slowly), a stop, out again, past the gate, and a stop on the straight where the
    # log ends: by construction lap 0 out (from rest), 1 in (ends in the pit lane), 2 pit
    # (the stop), 3 in (the log ends at rest). None is a lap time, so analyse has no lap
    # to take and says what each lap was.
    plan = [
        ("box", BOX_AFTER_GATE, 20.0),
        ("pit", pls.PIT_OUT_X),
        ("track", 2, pls.PIT_IN_X),
        ("pit", BOX_AFTER_GATE),
        ("box", BOX_AFTER_GATE, 20.0),
        ("pit", pls.PIT_OUT_X),
        ("track", 0, 600.0),
    ]
    path = tmp_path / "no_flying.csv"
    path.write_text(csv_text(pls.generate(plan).columns(), fmt="{:.10g}"))
    laps = split_laps(read_log(path), GATE)
    assert [lap.kind for lap in laps] == ["out", "in", "pit", "in"]
    code, _, err = run_cli(
        ("analyse", path, "--gate", str(GATE), "--out", tmp_path / "out", "--quiet"),
        capsys,
        monkeypatch,
    )
    assert one_error_line(code, err, path) == (
        f"{path}: no complete flying lap in the log (lap 0 out, lap 1 in, lap 2 pit, lap 3 in)"
    )
    assert not (tmp_path / "out").exists()


def test_kinds_in_laps_json_the_table_and_summary(sessions, capsys, monkeypatch):
    _, path = sessions[BOX_AFTER_GATE]
    code, out, err = run_cli(("laps", path, "--gate", str(GATE), "--json"), capsys, monkeypatch)
    assert code == 0, err
    doc = json.loads(out)
    kinds = ["out", "flying", "in", "pit", "flying", "in", "in"]  # as constructed (above)
    assert [rec["kind"] for rec in doc["laps"]] == kinds
    for rec in doc["laps"]:  # the fixed keys stay
        assert {"number", "time_s", "distance_m", "complete"} <= set(rec)
    code, out, err = run_cli(("laps", path, "--gate", str(GATE)), capsys, monkeypatch)
    rows = out.splitlines()[1:]
    assert [row.split()[1] for row in rows] == kinds
    laps = split_laps(read_log(path), GATE)
    assert laps_json(laps)["laps"][3]["kind"] == "pit"
    summary = laps_summary(laps)
    assert [rec["kind"] for rec in summary] == kinds
    assert [rec["number"] for rec in summary] == list(range(7))
    assert summary[1]["time_s"] == laps[1].time_s


# ----------------------------------------------------------------------------- automatic gate


def test_automatic_gate_goes_on_the_main_straight_not_the_pit_lane(sessions):
    session, path = sessions[BOX_AFTER_GATE]
    log = read_log(path)
    # The scenario: the first minute is in the pit lane (15 m beside the home straight,
    # slow) and the first place the car reaches 60 % of its 95th-percentile speed is
    # on the short straight after turn 1 or the back straight, not the home straight.
    v95 = np.percentile(session.speed_m_s, 95)
    first_fast = np.argmax(session.speed_m_s >= 0.6 * v95)
    assert session.y_m[first_fast] > 30.0
    gate = auto_gate(log)
    x, y, _ = pymap3d.geodetic2enu(gate.latitude_deg, gate.longitude_deg, 0.0, *pls.ORIGIN)
    # The home straight runs from x = 40 to 840 m on y = 0 (the longest straight, 800 m
    # against the back straight's 660 m): the gate lies on it, in its middle half, off
    # the pit lane (y = 15 m); GNSS noise 0.3 m.
    assert abs(y) < 1.5
    assert 240.0 < x < 640.0
    laps = split_laps(log, gate)
    flying = [lap for lap in laps if lap.kind == "flying"]
    assert len(flying) == 2
    for lap in flying:  # every flying lap of the plan is driven alike: the generator's
        assert lap.time_s == pytest.approx(session.flying_lap_s, abs=0.01)


# ----------------------------------------------------------------------------- crossing times


def _gate_off_line(truth, offset_m, station_m=0.0):
    """A gate point ``offset_m`` to the left of the true line's station nearest
    ``station_m``, and the line's direction there; the station is ``truth.line.distance_m[i]``."""
    line = truth.line
    i = int(np.argmin(np.abs(line.distance_m - station_m)))
    tx = line.x_m[(i + 1) % line.n] - line.x_m[i - 1]
    ty = line.y_m[(i + 1) % line.n] - line.y_m[i - 1]
    norm = math.hypot(tx, ty)
    tx, ty = tx / norm, ty / norm
    lat, lon, _ = pymap3d.enu2geodetic(
        line.x_m[i] - ty * offset_m, line.y_m[i] + tx * offset_m, 0.0, *truth.circuit.origin
    )
    return Gate.geodetic(float(lat), float(lon)), (tx, ty), float(line.distance_m[i])


@pytest.mark.parametrize("rate_hz", [100, 10])
def test_crossing_times_at_10_hz_gnss_with_the_gate_3_m_off_the_line(tmp_path, rate_hz):
    # Demo circuit, 10 Hz GNSS with white noise of 0.3 m per axis (no slowly wandering
    # part): crossings within 0.01 s of the generator's gate times (its own time base).
    # Measured: 0.0044 s at 100 Hz rows, 0.0032 s at 10 Hz rows (before the crossings
    # were placed on the fused path: 0.0063 and 0.0043 s).
    session = synth.generate_session(
        n_laps=2, sample_rate_hz=rate_hz, gps_rate_hz=10, gps_sigma_m=0.0, gps_white_m=0.3
    )
    path = tmp_path / "s.csv"
    path.write_text(synth.session_csv_text(session))
    gate, _, _ = _gate_off_line(session.truth, 3.0)
    found = gate_crossings(read_log(path), gate)
    np.testing.assert_allclose(found, session.truth.gate_times_s, atol=0.01)


def test_crossing_times_at_a_hairpin_with_the_gate_off_the_line(tmp_path):
    # The slowest corner's apex (radius 16 m, passed at 9-15 m/s), gate point 3 and 10 m
    # to the side, 10 Hz GNSS with the generator's white noise (0.1 m per axis) alone.
    # The truth is the time the generator's motion passes that station of the lap (its
    # 100 Hz rows' true distance, interpolated). Within 0.01 s; measured 0.0044 s.
    # Fitting the fixes' distance past the line with a quadratic, the line square to the
    # nearest pass's chord, was off by 0.011 s (3 m) and 0.018 s (10 m) here: the fused
    # path follows the bend between fixes and the line's direction is the mean over all
    # passes.
    session = synth.generate_session(
        n_laps=2, sample_rate_hz=100, gps_rate_hz=10, gps_sigma_m=0.0, gps_white_m=0.1
    )
    path = tmp_path / "s.csv"
    path.write_text(synth.session_csv_text(session))
    truth = session.truth
    hairpin = min(truth.circuit.corners, key=lambda c: abs(c.radius_m))
    log = read_log(path)
    d = truth.distance_m + 1e-9 * session.time_s  # since the pit exit, increasing
    for offset in (3.0, 10.0):
        gate, _, station = _gate_off_line(truth, offset, station_m=hairpin.apex_m)
        first = (station - truth.circuit.pit_exit_m) % truth.line.length_m
        passes = np.interp(np.arange(first, d[-1], truth.line.length_m), d, session.time_s)
        np.testing.assert_allclose(gate_crossings(log, gate), passes, atol=0.01)


def test_crossing_error_is_the_gnss_error_alone(tmp_path):
    # With the generator's GNSS error (a Gauss-Markov part of 0.7 m over 60 s plus 0.1 m
    # white), the fixes near the gate are off by a nearly constant amount that no
    # processing of the log can tell from the car's position: a car whose fixes lie d
    # ahead crosses d / v early. Taking that out (the generator's recorded error along
    # the travel at the fixes within 0.5 s, over the speed) leaves the processing's own
    # error: within 1 ms (measured 0.1 ms; 1.8 ms when the crossings were fitted to the
    # fixes' distance past the line alone).
    session = synth.generate_session(n_laps=2, sample_rate_hz=100, gps_rate_hz=10, seed=1)
    path = tmp_path / "s.csv"
    path.write_text(synth.session_csv_text(session))
    gate, (tx, ty), _ = _gate_off_line(session.truth, 3.0)
    found = gate_crossings(read_log(path), gate)
    truth = session.truth.gate_times_s
    err = session.truth.gps_error_m
    fixes = np.flatnonzero(np.isfinite(err[:, 0]))
    explained = []
    for t in truth:
        near = fixes[np.abs(session.time_s[fixes] - t) <= 0.5]
        along = np.mean(err[near, 0] * tx + err[near, 1] * ty)
        explained.append(-along / np.interp(t, session.time_s, session.channels["speed"]))
    assert np.max(np.abs(found - truth)) > 0.005  # the GNSS error shows (this seed)
    np.testing.assert_allclose(found - truth, explained, atol=0.001)


# ----------------------------------------------------------------------------- gate vs track


def _track_file(folder, gate_xy):
    lat, lon = pls.gate_latlon(*gate_xy)
    path = folder / "oval.toml"
    path.write_text(
        f'name = "Oval"\n[gate]\nlatitude = {lat:.9f}\nlongitude = {lon:.9f}\n'
        '[[corners]]\nname = "T1"\napex_m = 420.0\n'
    )
    return path


def test_a_gate_that_contradicts_the_track_file_is_refused(sessions, tmp_path, capsys, monkeypatch):
    _, path = sessions[BOX_AFTER_GATE]
    track = _track_file(tmp_path, (pls.GATE_X, 0.0))
    far = Gate.geodetic(*pls.gate_latlon(pls.GATE_X + 150.0, 0.0))  # 150 m down the straight
    with pytest.raises(ArgumentError) as err:
        load_session(path, gate=str(far), track=track)
    message = str(err.value)
    assert message.startswith(f"gate: {far} is 150 m (150 m along the track) from the gate")
    assert str(track) in message
    code, out, err_text = run_cli(
        ("laps", path, "--gate", str(far), "--track", track), capsys, monkeypatch
    )
    line = one_error_line(code, err_text)
    assert code == 2 and out == ""
    assert line.startswith(f"--gate: {far} is 150 m") and str(track) in line
    # The same start/finish line typed by someone else: 8 m to the side (on the line's
    # other side of the track), 4 m along it: both are taken, with the same laps.
    near = Gate.geodetic(*pls.gate_latlon(pls.GATE_X + 4.0, 8.0))
    _, laps, _, _ = load_session(path, gate=str(near), track=track)
    _, own, _, _ = load_session(path, track=track)
    assert [lap.kind for lap in laps] == [lap.kind for lap in own]
    # 4 m further along: every flying lap starts and ends about 0.06 s later (60-70 m/s
    # on the straight), so its time stays within 0.01 s
    for mine, theirs in zip(laps, own, strict=True):
        if mine.kind == "flying":
            assert mine.time_s == pytest.approx(theirs.time_s, abs=0.01)


# ----------------------------------------------------------------------------- wrong options


@pytest.mark.parametrize(
    ("reader", "what"),
    [
        (read_vehicle, "vehicle file"),
        (read_track, "track file"),
        (read_channel_map, "channel-map file"),
    ],
)
def test_tables_given_as_toml_files_are_named_by_what_they_hold(sessions, tmp_path, reader, what):
    _, log = sessions[BOX_AFTER_GATE]
    with pytest.raises(InputError) as err:
        reader(log)
    head = "time [s], latitude [deg], longitude [deg], ..."  # the log's header (above)
    assert str(err.value) == f"{log}: this is a log (a table with columns {head}), not a {what}"
    line = bundled_path("demo_tracks", "tarrowby_heath_line.csv")
    with pytest.raises(InputError, match=r"this is a line file \(a table with columns x \[m\]"):
        reader(line)
    with pytest.raises(InputError, match=f"this is gzip-compressed data .*, not a {what}$"):
        reader(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"))


def test_toml_files_given_to_the_wrong_option(tmp_path, capsys, monkeypatch):
    track = bundled_path("demo_tracks", "tarrowby_heath.toml")
    vehicle = bundled_path("vehicles", "gt_coupe.toml")
    channels = tmp_path / "map.toml"
    channels.write_text('[channels.speed]\ncolumn = "GPS Speed"\n')
    with pytest.raises(InputError, match=r"this is a track file \(it has \[gate\]"):
        read_vehicle(track)
    with pytest.raises(InputError, match=r"this is a vehicle file \(it has mass_kg/power_kw"):
        read_track(vehicle)
    for reader in (read_vehicle, read_track):
        with pytest.raises(InputError, match=r"this is a channel-map file \(it has \[channels"):
            reader(channels)
    # through the command line: one line naming the file, exit status 2
    line = bundled_path("demo_tracks", "tarrowby_heath_line.csv")
    code, out, err = run_cli(("solve", line, "--vehicle", track), capsys, monkeypatch)
    message = one_error_line(code, err, track)
    assert message.endswith("not a vehicle file") and code == 2 and out == ""
