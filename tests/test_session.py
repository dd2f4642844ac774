"""Every lap of a session: kinds, each lap's ideal, time left, grip found and corner times.

Sessions come from :func:`limitlap.synth.generate_session` on the invented demo circuit
(the truth: the generator's planted grip per lap, its planted mistakes and the time each
costs, and the motion it sampled); the lap kinds from the closed-form circle of
tests/synthetic_logs.py.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from limitlap import laps, outputs, pipeline, synth
from limitlap.laps import Gate, split_laps
from limitlap.logfile import read_log
from limitlap.resources import bundled_path
from limitlap.session import lap_kind

from .generated_truth import physical_corners, true_corner_times
from .robust_data import run_cli
from .synthetic_logs import ORIGIN, Circle

#: The drying session: grip rising 0.70 -> 0.97 over six flying laps (the issue's case).
DRYING = tuple(np.linspace(0.70, 0.97, 6))


def _gate(session):
    return laps.Gate.geodetic(*session.truth.gate_latlon)


@pytest.fixture(scope="module")
def drying(tmp_path_factory):
    session = synth.generate_session(
        n_laps=6, grip_scale=DRYING, mistakes=(), lap_variation=0.0, seed=7
    )
    path = tmp_path_factory.mktemp("drying") / "drying.csv"
    path.write_text(synth.session_csv_text(session), encoding="utf-8")
    analysis = pipeline.analyse(
        path, vehicle=session.truth.vehicle, gate=_gate(session), intervals=False
    )
    return session, analysis


def test_drying_track_grip_found_lap_by_lap(drying):
    # Source: the generator's grip scale of each lap (each lap held to the solver's
    # closed lap at its own grip). Measured against the true car at grip 1, the grip each
    # lap showed must follow it within 0.04 (the tolerance the task sets: about a third
    # of one lap's step of 0.054).
    session, analysis = drying
    found = {r.number: r.grip_estimate for r in analysis.session.laps if r.timed}
    assert sorted(found) == [1, 2, 3, 4, 5, 6]
    for number, planted in enumerate(session.truth.lap_grip_scales, start=1):
        assert found[number] == pytest.approx(planted, abs=0.04), number
    # and it rises lap by lap, as the track dries
    assert all(np.diff([found[n] for n in range(1, 7)]) > 0)


def test_time_left_on_a_drying_track_is_the_grip_that_was_not_there(drying):
    # Source: the generator. Every lap is driven at its own grip's limit on the true line,
    # so its time left against the ideal at grip 1 is its lap time minus the solver's
    # ideal at grip 1 on that line; the ideal on each lap's own (rebuilt) line is within
    # the rebuild's error of that (docs/methods.md, Every lap: 0.02-0.05 s measured).
    session, analysis = drying
    from limitlap import solve

    dry_ideal = solve.solve_profile(session.truth.line, session.truth.vehicle).lap_time_s
    for r in analysis.session.timed():
        assert r.ideal_time_s == pytest.approx(dry_ideal, abs=0.12)
        assert r.time_left_s == pytest.approx(r.time_s - dry_ideal, abs=0.12)


@pytest.fixture(scope="module")
def one_slip(tmp_path_factory):
    # Five laps at the limit but for a planted early brake into T4 on lap 3 only.
    mistake = synth.Mistake("T4", 0.05, before_m=30.0, after_m=5.0)
    session = synth.generate_session(
        n_laps=5, mistakes=(mistake,), mistake_laps=(3,), lap_variation=0.0, seed=11
    )
    path = tmp_path_factory.mktemp("slip") / "slip.csv"
    path.write_text(synth.session_csv_text(session), encoding="utf-8")
    track = bundled_path("demo_tracks", "tarrowby_heath.toml")
    analysis = pipeline.analyse(path, gate=_gate(session), track=track)
    return session, analysis


def test_corner_times_of_every_lap_match_the_generator(one_slip):
    # Source: the generator's sampled motion (time against true distance), timed between
    # the physical places of the corner bounds (tests/generated_truth.py). The gate
    # crossings are interpolated between GNSS fixes (a few milliseconds: 0.2 m at
    # 60 m/s), which moves a slow bound (T5/T6 at 21 m/s) by up to 0.01 s; tolerance
    # 0.02 s, the task's for corner times.
    session, analysis = one_slip
    table = analysis.session
    assert table.corner_names == tuple(c.name for c in analysis.corners)
    places = physical_corners(analysis.corners, analysis.driven, session, analysis.lap.number)
    for r in table.timed():
        truth = true_corner_times(session, r.number, places)
        np.testing.assert_allclose(r.corner_times_s, truth, atol=0.02)
        assert float(np.sum(r.corner_times_s)) == pytest.approx(r.time_s, abs=1e-6)


def test_consistency_shows_the_one_slip(one_slip):
    # Source: the generator's planted cost d of the early brake, on one lap of five; the
    # sample standard deviation of n values with one of them d higher is d / sqrt(n)
    # (closed form). The corners driven the same on every lap spread by the timing's
    # noise only (< 0.01 s).
    session, analysis = one_slip
    cost = session.truth.mistakes[0].time_cost_s
    cons = {c.name: c for c in analysis.session.consistency}
    assert cons["T4"].n_laps == 5
    assert cons["T4"].spread_s == pytest.approx(cost / math.sqrt(5), abs=0.01)
    assert cons["T4"].range_s == pytest.approx(cost, abs=0.02)
    others = [c.spread_s for name, c in cons.items() if name not in ("T4",)]
    assert max(others) < 0.01
    # the slow lap's time left is the planted cost more than the others'
    left = {r.number: r.time_left_s for r in analysis.session.timed()}
    rest = np.median([v for n, v in left.items() if n != 3])
    assert left[3] - rest == pytest.approx(cost, abs=0.05)


def test_the_analysed_lap_row_is_the_headline(one_slip):
    _, analysis = one_slip
    row = next(r for r in analysis.session.laps if r.number == analysis.lap.number)
    assert row.ideal_time_s == analysis.ideal.lap_time_s
    assert row.grip_estimate == analysis.grip_estimate
    assert row.time_left_s == pytest.approx(analysis.comparison.time_left_s, abs=1e-9)


def test_summary_json_carries_every_lap(one_slip, tmp_path):
    # docs/outputs.md, summary.json: the keys of the fixed interface.
    _, analysis = one_slip
    outputs.write_outputs(analysis, tmp_path / "out", figures=False)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8"))
    n_corners = len(summary["corners"])
    assert [lap["number"] for lap in summary["laps"]] == [lp.number for lp in analysis.laps]
    kinds = [lap["kind"] for lap in summary["laps"]]
    assert kinds[0] == "out" and kinds[-1] == "in" and set(kinds[1:-1]) == {"flying"}
    for lap in summary["laps"][1:-1]:
        assert lap["time_left_s"] == pytest.approx(lap["time_s"] - lap["ideal_time_s"])
        assert len(lap["corner_times_s"]) == n_corners
        assert 0.9 < lap["grip_estimate"] < 1.1
    assert "ideal_time_s" not in summary["laps"][0]
    assert [c["name"] for c in summary["consistency"]] == [c["name"] for c in summary["corners"]]


def test_lap_kinds_on_a_session_with_a_pit_stop(tmp_path):
    # Closed form: a circle of R = 100 m, standing start at 0.5 m/s² then a 10 s stop in
    # lap 2 and a stop at the end: out-lap, flying laps, a pit lap, in-lap.
    circle = Circle(radius_m=100.0, v0=0.0, accel=0.5, duration_s=160.0)
    circle.speed = np.minimum(circle.speed, 25.0)
    circle.speed[(circle.t > 70.0) & (circle.t < 80.0)] = 0.0
    circle.speed[circle.t > circle.t[-1] - 1.0] = 0.0
    import pymap3d

    lat, lon, _ = pymap3d.enu2geodetic(100.0, 0.0, 0.0, *ORIGIN)
    found = split_laps(read_log(circle.write(tmp_path / "c.csv")), Gate.geodetic(lat, lon))
    kinds = [lap_kind(lap, found) for lap in found]
    stopped = [k for lap, k in zip(found, kinds, strict=True) if "stopped" in lap.reason]
    assert kinds[0] == "out" and kinds[-1] == "in"
    assert stopped == ["pit"]
    assert all(k == "flying" for lap, k in zip(found, kinds, strict=True) if lap.complete)


@pytest.mark.slow
def test_laps_command_with_a_vehicle_prints_every_lap(capsys, monkeypatch):
    # The bundled demo session with its true car: each flying lap's row has its ideal,
    # time left, grip found and one time per corner; --json the same as summary.json.
    log = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    car = bundled_path("vehicles", "gt_coupe.toml")
    track = bundled_path("demo_tracks", "tarrowby_heath.toml")
    code, out, _ = run_cli(["laps", log, "--vehicle", car, "--track", track], capsys, monkeypatch)
    assert code == 0
    head = out.splitlines()[0].split()
    assert head[:6] == ["lap", "kind", "time", "ideal", "left", "grip"] and "T12" in head
    n = len(head)  # six columns and one per corner
    rows = [line.split() for line in out.splitlines() if line.split()[:2][1:] == ["flying"]]
    assert len(rows) == 7 and all(len(r) >= n for r in rows)
    assert all(float(x) > 0 for r in rows for x in r[6:n])  # a time in every corner
    assert out.splitlines()[-1].split()[0] == "spread"
    code, out, _ = run_cli(
        ["laps", log, "--vehicle", car, "--track", track, "--json"], capsys, monkeypatch
    )
    records = json.loads(out)["laps"]
    assert [r["kind"] for r in records] == ["out"] + ["flying"] * 7 + ["in"]
    assert all(len(r["corner_times_s"]) == n - 6 for r in records[1:-1])


@pytest.mark.slow
def test_report_shows_the_session_and_its_figure(one_slip, tmp_path):
    # The report carries the session lap by lap (after the summary, the corner table and
    # the warnings, which fill the first printed page), one row per lap of the log, and
    # the grip-by-lap figure (PNG at the pictures' width, read back by matplotlib's own
    # PNG reader).
    from matplotlib import image

    from limitlap.figures import HEIGHT_PX, PICTURE_WIDTH_PX

    _, analysis = one_slip
    written = outputs.write_outputs(analysis, tmp_path / "out")
    png = image.imread(written["session.png"])
    assert png.shape[1] == PICTURE_WIDTH_PX and png.shape[0] > HEIGHT_PX["session"]
    page = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    at = page.index('<section id="session"><h2>The session, lap by lap</h2>')
    assert page.index('<section id="corners">') < page.index('<section id="warnings">') < at
    table = page[at : page.index("</table>", at)]
    assert table.count("<tr") == 1 + len(analysis.laps) + 1  # head, laps, spread
    assert 'id="figure-session"' in page
