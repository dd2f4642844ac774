"""Honest warnings: when the data cannot support a confident result, both
summary.json ("warnings") and report.html say so in plain words."""

from __future__ import annotations

import html
import json

import pytest

from .robust_data import demo_csv, demo_gate, demo_session, run_cli

#: Whole-session and multi-process runs: the quick loop leaves them out.
pytestmark = pytest.mark.slow


def analyse(tmp_path, capsys, monkeypatch, text, *extra):
    log = tmp_path / "session.csv"
    log.write_text(text)
    out = tmp_path / "out"
    code, _, err = run_cli(
        ["analyse", log, "--gate", demo_gate(), "--out", out, "--no-figures", "--quiet", *extra],
        capsys,
        monkeypatch,
    )
    assert code == 0, err
    summary = json.loads((out / "summary.json").read_text())
    page = (out / "report.html").read_text()
    return log, summary["warnings"], page, err


def shown_everywhere(warning, page, err):
    """The warning is in report.html's warnings (file names only) and on stderr as well."""
    from limitlap.report import file_names_only

    assert f'<p class="warn">{html.escape(file_names_only(warning))}</p>' in page
    assert f"limitlap: warning: {warning}" in err


@pytest.fixture
def bridged(tmp_path, capsys, monkeypatch):
    # A 1.5 s GNSS gap 30 s into lap 1 of a generated session: bridged by dead reckoning.
    t_gate = float(demo_session(2).truth.gate_times_s[0])
    return analyse(tmp_path, capsys, monkeypatch, demo_csv(2, ((t_gate + 30.0, 1.5),)))


def test_bridged_dropout_is_reported(bridged):
    log, warnings, page, err = bridged
    (gap,) = [w for w in warnings if "GPS dropout" in w]
    assert gap.startswith(f"{log}: GPS dropout of 1.6 s") and gap.endswith(
        "bridged from speed and yaw rate"
    )
    shown_everywhere(gap, page, err)


def test_sparse_speed_band_is_reported(bridged):
    # Two laps of the demo circuit hold few samples near the limit below 15 m/s (only
    # the slowest hairpin): the fit says the envelope there is borrowed.
    log, warnings, page, err = bridged
    (sparse,) = [w for w in warnings if "samples within 5 % of the fitted limit" in w]
    assert sparse.startswith(f"{log}: speed band")
    shown_everywhere(sparse, page, err)


def test_poor_curvature_agreement_is_reported(tmp_path, capsys, monkeypatch):
    # accel_lat logged with the opposite sign convention (inverted through a channel
    # map): a_y / v² disagrees with the GNSS path's curvature. The unit check stops such a
    # run (tests/test_unit_checks.py); asked to go on, the rebuild's own warnings remain.
    cmap = tmp_path / "map.toml"
    cmap.write_text("[channels.accel_lat]\ninvert = true\n")
    log, warnings, page, err = analyse(
        tmp_path, capsys, monkeypatch, demo_csv(2), "--channels", cmap, "--accept-units"
    )
    flagged = [w for w in warnings if "accel lat looks like the sign inverted" in w]
    assert flagged and "going on as asked" in flagged[0]
    poor = [w for w in warnings if "agrees poorly with the GNSS path" in w]
    assert poor and all(w.startswith(f"{log}: lap ") and "'accel_lat'" in w for w in poor)
    # ... with the figure that shows it: the data-check panel is in the report
    assert "data-check figure" in poor[0]
    out = tmp_path / "with_figures"
    code, _, err_fig = run_cli(
        [
            "analyse",
            log,
            "--gate",
            demo_gate(),
            "--out",
            out,
            "--quiet",
            "--channels",
            cmap,
            "--accept-units",
        ],
        capsys,
        monkeypatch,
    )
    assert code == 0, err_fig
    assert (out / "data_check.png").is_file()
    page = (out / "report.html").read_text()
    assert (
        "Data check: curvature three ways" in page and "The rebuilt line&#x27;s curvature" in page
    )
    sign = [w for w in warnings if "does not follow the GNSS course" in w]
    assert sign and "sign convention?" in sign[0]
    for w in poor + sign:
        shown_everywhere(w, page, err)


def test_clean_data_has_no_such_warnings(tmp_path, capsys, monkeypatch):
    # The same session without a gap or a flipped sign: neither warning (the checks can fail).
    _, warnings, _, _ = analyse(tmp_path, capsys, monkeypatch, demo_csv(2))
    assert not [
        w for w in warnings if "GPS dropout" in w or "agrees poorly" in w or "does not follow" in w
    ]


def test_out_lap_left_out_of_the_envelope_is_reported(tmp_path, capsys, monkeypatch):
    # The bundled dry session without a track file: the automatic gate goes on the main
    # straight about 100 m after the gate of the generator (docs/formats.md, Laps), 9 m
    # after the pit exit where the log starts, so lap 0 is the few seconds before it and
    # lap 1 the out-lap from the pits (1:55 against 1:24), which starts slowly: it is an
    # out-lap (summary.json's laps say so), not a complete lap. Its cold-tyre samples,
    # well inside the limit, must not go into the envelope: the fit must be that of the
    # flying laps with the real gate (when the out-lap counted, it pulled the traction
    # limit down by 6 %), and summary.json must list the laps used.
    from limitlap.resources import bundled_path

    demo = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    out_auto, out_gate = tmp_path / "auto", tmp_path / "gate"
    for out, extra in ((out_auto, []), (out_gate, ["--gate", "-33.85736267,147.23744215"])):
        code, _, err = run_cli(
            ["analyse", demo, "--out", out, "--no-figures", "--quiet", *extra], capsys, monkeypatch
        )
        assert code == 0, err
    summary = json.loads((out_auto / "summary.json").read_text())
    page = (out_auto / "report.html").read_text()
    kinds = [lap["kind"] for lap in summary["laps"]]
    assert kinds == ["out", "out"] + ["flying"] * 7 + ["in"]
    assert [lap["number"] for lap in summary["laps"]] == list(range(10))
    assert summary["envelope"] == {"fitted": True, "laps": [2, 3, 4, 5, 6, 7, 8]}
    assert "fitted to your own best samples of laps 2-8, the flying laps" in page
    gated = json.loads((out_gate / "summary.json").read_text())
    assert gated["envelope"]["laps"] == [1, 2, 3, 4, 5, 6, 7]
    assert [lap["kind"] for lap in gated["laps"]] == ["out"] + ["flying"] * 7 + ["in"]
    for summ in (summary, gated):
        assert not any("left out of the grip envelope" in w for w in summ["warnings"])

    def grip(out):
        import tomllib

        return tomllib.loads((out / "envelope.toml").read_text())["grip"]

    auto, gate = grip(out_auto), grip(out_gate)
    for key in ("lateral", "braking", "traction"):
        assert auto[key] == pytest.approx(gate[key], rel=0.01), key


def test_report_says_when_the_envelope_is_the_vehicle_files(tmp_path, capsys, monkeypatch):
    # With a complete vehicle file nothing is fitted: the report must not claim the
    # envelope is the driver's own, and summary.json lists no fitted laps.
    from limitlap.resources import bundled_path

    out = tmp_path / "out"
    car = bundled_path("vehicles", "gt_coupe.toml")
    log = bundled_path("demo_tracks", "tarrowby_dry.csv.gz")
    code, _, err = run_cli(
        [
            "analyse",
            log,
            "--vehicle",
            car,
            "--gate",
            "-33.85736267,147.23744215",
            "--out",
            out,
            "--no-figures",
            "--quiet",
        ],
        capsys,
        monkeypatch,
    )
    assert code == 0, err
    page = html.unescape((out / "report.html").read_text())
    assert "The envelope is the vehicle file's ('GT coupe (invented example)')" in page
    assert "fitted to your own best samples" not in page
    assert json.loads((out / "summary.json").read_text())["envelope"] == {
        "fitted": False,
        "laps": [],
    }
