"""Lap against lap, and one envelope fitted to several logs.

Two sessions of the invented demo circuit from :func:`limitlap.synth.generate_session`
with different planted mistakes (two invented drivers in one car); the truth is the
generator's: the motion it sampled (each lap's time between the physical corner bounds,
tests/generated_truth.py), the corners it planted the mistakes in and the kind of each
(an early brake, a late throttle), and the true car's friction coefficients. Refusals use
the closed-form circles of tests/synthetic_logs.py.
"""

from __future__ import annotations

import html
import json
import math

import numpy as np
import pymap3d
import pytest

from limitlap import ingest, pipeline, synth, versus
from limitlap.errors import InputError
from limitlap.resources import bundled_path
from limitlap.vehicle import Vehicle

from .generated_truth import physical_corners, true_corner_times
from .robust_data import run_cli
from .synthetic_logs import ORIGIN, Circle

M = synth.Mistake
#: Driver A brakes early into T1, lifts in T3 and is late on the throttle out of T9;
#: driver B lifts in T2, brakes early into T4 and lifts in T8. Each costs 0.2-0.7 s.
MISTAKES_A = (
    M("T1", 0.09, before_m=35.0, after_m=5.0),
    M("T3", 0.08, before_m=12.0, after_m=12.0),
    M("T9", 0.10, before_m=5.0, after_m=35.0),
)
MISTAKES_B = (
    M("T2", 0.10, before_m=12.0, after_m=12.0),
    M("T4", 0.05, before_m=30.0, after_m=5.0),
    M("T8", 0.08, before_m=12.0, after_m=12.0),
)
TRACK = bundled_path("demo_tracks", "tarrowby_heath.toml")


def _load(path):
    log, laps, _, _ = pipeline.load_session(path, track=ingest.read_track(TRACK))
    return path, log, laps


@pytest.fixture(scope="module")
def two_drivers(tmp_path_factory):
    folder = tmp_path_factory.mktemp("versus")
    out = []
    for name, mistakes, seed in (("a", MISTAKES_A, 21), ("b", MISTAKES_B, 121)):
        session = synth.generate_session(n_laps=3, mistakes=mistakes, lap_variation=0.0, seed=seed)
        path = folder / f"{name}.csv"
        path.write_text(synth.session_csv_text(session), encoding="utf-8")
        out.append((session, _load(path)))
    (sa, a), (sb, b) = out
    result = versus.compare_laps(a, b, track=ingest.read_track(TRACK))
    return sa, sb, result


def test_corner_deltas_equal_the_generators(two_drivers):
    # Source: the generator's own corner times of the two laps, between the physical
    # places of the corner bounds (tests/generated_truth.py). Tolerance 0.02 s (the
    # task's); measured over ten seed pairs: 0.002-0.019 s, largest at the slow bound
    # between T5 and T6 (21 m/s), where a gate crossing interpolated a few
    # milliseconds off moves the share of the lap by a few tenths of a metre.
    sa, sb, result = two_drivers
    places = physical_corners(result.corner_list, result.a.driven, sa, result.a.lap.number)
    true_a = true_corner_times(sa, result.a.lap.number, places)
    true_b = true_corner_times(sb, result.b.lap.number, places)
    deltas = np.array([c.delta_s for c in result.corners])
    np.testing.assert_allclose(deltas, true_b - true_a, atol=0.02)
    assert result.lap_delta_s == pytest.approx(float(np.sum(true_b - true_a)), abs=0.01)
    # the delta along the lap ends at the lap delta
    assert result.delta_s[-1] == pytest.approx(result.lap_delta_s, abs=0.05)


def test_each_lap_against_the_common_ideal_ranks_its_own_mistakes_first(two_drivers):
    # Source: the corners the generator planted each driver's mistakes in.
    _, _, result = two_drivers
    for side, mistakes in ((result.a, MISTAKES_A), (result.b, MISTAKES_B)):
        top = {c.name for c in side.comparison.ranked()[: len(mistakes)]}
        assert top == {m.corner for m in mistakes}, side.label
    # one common envelope for both: fitted to both logs
    assert result.fit is not None and len(result.envelope_logs) == 2


def test_the_sentences_say_who_is_quicker_and_where_the_time_is(two_drivers):
    # Source: the generator's planted mistakes and their kind: A brakes early into T1
    # (its time left mostly braking) and is late on the throttle out of T9 (mostly the
    # exit); B brakes early into T4.
    _, _, result = two_drivers
    by = {c.name: c for c in result.corners}
    t1, t9, t4 = by["T1"], by["T9"], by["T4"]
    assert t1.sentence.startswith(f"B is {abs(t1.delta_s):.2f} s quicker in T1")
    assert t1.sentence.endswith(f"A's {t1.time_left_a_s:.2f} s left there is mostly braking")
    assert t9.sentence.startswith("B is") and "is mostly the exit" in t9.sentence
    assert t4.sentence.startswith(f"A is {t4.delta_s:.2f} s quicker in T4")
    assert t4.sentence.endswith("left there is mostly braking")


def _circle_log(path, mirrored=False):
    """A car lapping a circle of R = 100 m at 25 m/s (anticlockwise, or mirrored: clockwise)."""
    circle = Circle(radius_m=100.0, v0=25.0, duration_s=70.0)
    if mirrored:  # east -> west: the same circle, driven the other way (ISO 8855 signs flip)
        circle.x, circle.x_true = -circle.x, -circle.x_true
        circle.yaw_rate, circle.accel_lat = -circle.yaw_rate, -circle.accel_lat
    return circle.write(path)


def _top_gate():
    lat, lon, _ = pymap3d.enu2geodetic(0.0, 100.0, 0.0, *ORIGIN)
    return f"{lat:.8f},{lon:.8f}"


def test_other_direction_is_refused_in_one_line(tmp_path, capsys, monkeypatch):
    a = _circle_log(tmp_path / "anticlockwise.csv")
    b = _circle_log(tmp_path / "clockwise.csv", mirrored=True)
    out = tmp_path / "out"
    code, _, err = run_cli(
        ["versus", a, b, "--gate", _top_gate(), "--out", out], capsys, monkeypatch
    )
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("limitlap: error: ")
    assert f"{a} and {b}" in err and "direction" in err
    assert not out.exists()


def test_another_circuit_is_refused_in_one_line(two_drivers, tmp_path):
    sa, _, _ = two_drivers
    circle = _circle_log(tmp_path / "circle.csv")
    demo = tmp_path / "demo.csv"
    demo.write_text(synth.session_csv_text(sa), encoding="utf-8")
    log_c, laps_c, _, _ = pipeline.load_session(circle, gate=_top_gate())
    with pytest.raises(InputError) as caught:
        versus.compare_laps(_load(demo), (circle, log_c, laps_c))
    assert str(caught.value).startswith(f"{demo} and {circle}: not the same circuit")


def test_same_circuit_check_accepts_both_drivers(two_drivers):
    # the check that refuses the two cases above passes the two generated sessions
    _, _, result = two_drivers
    versus.same_circuit(result.a.driven.line, result.b.driven.line, "a", "b")


@pytest.fixture(scope="module")
def dry_and_damp(tmp_path_factory):
    # A dry session at 100 Hz and a damp one (grip 0.85) logged at 50 Hz.
    folder = tmp_path_factory.mktemp("common")
    dry = synth.generate_session(n_laps=3, lap_variation=0.0, seed=31)
    damp = synth.generate_session(
        n_laps=3, grip_scale=0.85, lap_variation=0.0, seed=32, sample_rate_hz=50.0
    )
    paths = []
    for name, session in (("dry", dry), ("damp", damp)):
        path = folder / f"{name}.csv"
        path.write_text(synth.session_csv_text(session), encoding="utf-8")
        paths.append(path)
    return dry.truth.vehicle, paths


def test_a_common_envelope_takes_the_best_samples_of_all(dry_and_damp):
    # Source: the true car's friction coefficients (vehicles/gt_coupe.toml, the
    # generator's car). Fitted to the damp log alone the envelope is 0.85 of them; fitted
    # to both logs together it is the dry one's: the high quantile of every direction
    # takes the dry samples. 3 %: the fit's own error on a three-lap session (about 1 %
    # measured here) with room.
    car, (dry, damp) = dry_and_damp
    base = Vehicle("test", car.mass_kg)
    alone = versus.common_envelope([_load(damp)], base).vehicle
    both = versus.common_envelope([_load(damp), _load(dry)], base).vehicle
    for name in ("mu_lat", "mu_brk", "mu_trac"):
        assert getattr(alone, name) == pytest.approx(0.85 * getattr(car, name), rel=0.03)
        assert getattr(both, name) == pytest.approx(getattr(car, name), rel=0.03)


@pytest.mark.slow
def test_envelope_command_writes_one_file_versus_reads(dry_and_damp, tmp_path, capsys, monkeypatch):
    car, (dry, damp) = dry_and_damp
    out = tmp_path / "envelope.toml"
    code, text, _ = run_cli(
        ["envelope", dry, damp, "--track", TRACK, "--out", out], capsys, monkeypatch
    )
    assert code == 0 and "written to" in text
    fitted = ingest.read_vehicle(out)  # a complete envelope: [grip] and power
    assert fitted.mu_lat == pytest.approx(car.mu_lat, rel=0.03)  # the dry log's, as above
    folder = tmp_path / "vs"
    code, text, _ = run_cli(
        ["versus", dry, damp, "--vehicle", out, "--track", TRACK, "--out", folder],
        capsys,
        monkeypatch,
    )
    assert code == 0
    summary = json.loads((folder / "versus.json").read_text(encoding="utf-8"))
    assert summary["envelope"]["fitted"] is False
    # the damp lap is slower by about what the grip costs everywhere
    assert summary["lap_delta_s"] > 2.0
    assert math.isfinite(summary["a"]["ideal_time_s"])


@pytest.mark.slow
def test_versus_on_the_bundled_sessions(tmp_path, capsys, monkeypatch):
    # The README's example: the bundled dry session against the second invented driver's.
    a = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    b = bundled_path("demo_tracks", "tarrowby_second.csv.gz")
    out = tmp_path / "cmp"
    code, _, _ = run_cli(["versus", a, b, "--track", TRACK, "--out", out], capsys, monkeypatch)
    assert code == 0
    names = {
        p.name for p in out.iterdir() if not p.name.startswith(".")
    }  # the set's own record aside
    assert names == {
        "versus.json", "report.html", "envelope.toml", "versus_delta.png", "versus_corners.png"
    }  # fmt: skip
    summary = json.loads((out / "versus.json").read_text(encoding="utf-8"))
    assert summary["schema"] == "limitlap.versus/1"
    truth = json.loads(bundled_path("demo_tracks", "tarrowby_truth.json").read_text())
    planted_a = {m["corner"] for m in truth["dry"]["mistakes"]}
    planted_b = {m["corner"] for m in truth["second"]["mistakes"]}
    by = {c["name"]: c for c in summary["corners"]}
    for name in planted_a:  # B quicker where A made its mistakes, and the other way round
        assert by[name]["delta_s"] < -0.1 and by[name]["sentence"].startswith("B is")
    for name in planted_b:
        assert by[name]["delta_s"] > 0.1 and by[name]["sentence"].startswith("A is")
    page = (out / "report.html").read_text(encoding="utf-8")
    assert (
        html.escape(by["T1"]["sentence"]) in page
        and "<script" not in page
        and 'src="http' not in page
    )


def test_logs_timed_from_different_gates_are_refused(capsys, monkeypatch, tmp_path):
    # The wet session given its own lap column, each lap starting 1 s (about 60 m) after
    # the track file's gate: every corner bound of B would be that far off A's. Without
    # a gate, both logs' automatic gates lie in the middle of the same straight and they
    # compare. Common practice, no published source: 5 m at most.
    import csv
    import gzip

    import numpy as np

    dry = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    wet = bundled_path("demo_tracks", "tarrowby_wet.csv.gz")
    _, laps, _, _ = pipeline.load_session(wet, track=TRACK)
    starts = np.array([lp.start_time_s for lp in laps[1:]]) + 1.0
    with gzip.open(wet, "rt", newline="") as f:
        rows = list(csv.reader(f))
    at = rows[0].index("time [s]")
    shifted = tmp_path / "wet_own_laps.csv"
    with open(shifted, "w", newline="") as f:
        out = csv.writer(f)
        out.writerow([*rows[0], "lap [-]"])
        for r in rows[1:]:
            out.writerow([*r, int(np.searchsorted(starts, float(r[at]), side="right"))])
    code, _, err = run_cli(["versus", dry, shifted, "--out", tmp_path / "a"], capsys, monkeypatch)
    assert code == 2 and f"{dry} and {shifted}: the laps start" in err
    assert "m apart" in err
    code, _, _ = run_cli(["versus", dry, wet, "--out", tmp_path / "b"], capsys, monkeypatch)
    assert code == 0


def test_a_gps_only_log_gets_the_same_ideal_as_its_analysis(tmp_path):
    # A GPS-only log (time, position, speed at 10 Hz): its accelerations are derived and
    # the envelope fitted with the derived a_y's noise read from the laps, the same way by
    # `versus` (its common envelope of one log) as by `analyse`; lap A's ideal on its own
    # line is then the analysis's ideal of that lap (it was 0.7 % faster in `versus`,
    # whose fit took the derived channel's noise from its differences, where it does not
    # show).
    from tests.test_gps_only import gps_only_session, written

    s = gps_only_session(10.0, seed=2)
    path = written(s, tmp_path / "gps.csv")
    gate = f"{s.truth.gate_latlon[0]},{s.truth.gate_latlon[1]}"
    log, laps, _, _ = pipeline.load_session(path, gate=gate)
    result = versus.compare_laps((path, log, laps))
    analysed = pipeline.analyse(path, gate=gate, lap=result.a.lap.number)
    assert result.a.ideal.lap_time_s == pytest.approx(analysed.ideal.lap_time_s, abs=1e-9)
