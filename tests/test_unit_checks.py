"""Channels in the wrong unit or with the wrong sign, found against the GNSS path.

The mix-ups are made the way users make them: a header that names the wrong unit for the
numbers under it (or a channel map that inverts a sign). The expected factors are the
unit conversions themselves (1 mph = 1.609344 km/h exactly, international mile; 1 km/h =
1/3.6 m/s; g0 = 9.80665 m/s², 3rd CGPM 1901; 1 rad = 180/pi deg), so a check that found
another factor, or none, fails.
"""

import math

import pytest

from limitlap import logfile, unit_checks
from limitlap.resources import bundled_path
from tests.robust_data import demo_csv, demo_gate, run_cli

# Every check compares averages over whole laps; 2 % covers GNSS chord shortening at
# 10 Hz, the slip angle and the generator's noise (measured: the clean demo logs give
# 0.999-1.003).
REL = 0.02


@pytest.fixture(scope="module")
def clean_text():
    return demo_csv(2)


def _findings(tmp_path, text, name="session.csv"):
    path = tmp_path / name
    path.write_text(text)
    return unit_checks.check_units(logfile.read_log(path))


@pytest.mark.parametrize("log", ["tarrowby_dry.csv.gz", "tarrowby_wet.csv.gz"])
def test_bundled_sessions_raise_no_false_alarm(log):
    assert unit_checks.check_units(logfile.read_log(bundled_path("demo_tracks", log))) == []


def test_generated_session_with_a_gps_dropout_raises_no_false_alarm(tmp_path):
    from limitlap import synth
    from tests.robust_data import demo_session

    text = synth.session_csv_text(demo_session(2, gps_dropouts=((300.0, 1.5),)))
    assert _findings(tmp_path, text) == []


@pytest.mark.parametrize(
    ("header", "wrong", "channel", "factor", "mix_up"),
    [
        # km/h numbers read as mph are 1.609344 times too fast: GPS/speed = 1/1.609344.
        ("speed [km/h]", "speed [mph]", "speed", 1 / 1.609344, "km/h labelled mph"),
        # km/h numbers read as m/s are 3.6 times too fast: GPS/speed = 1/3.6.
        ("speed [km/h]", "speed [m/s]", "speed", 1 / 3.6, "km/h labelled m/s"),
        # g numbers read as m/s^2 are 9.80665 times too small.
        ("accel_lon [g]", "accel_lon [m/s^2]", "accel_lon", 9.80665, "g labelled m/s^2"),
        ("accel_lat [g]", "accel_lat [m/s^2]", "accel_lat", 9.80665, "g labelled m/s^2"),
        # deg/s numbers read as rad/s are 180/pi times too large.
        ("yaw_rate [deg/s]", "yaw_rate [rad/s]", "yaw_rate", math.pi / 180, "deg/s labelled rad/s"),
    ],
)
def test_a_wrong_unit_is_named_with_its_factor(
    tmp_path, clean_text, header, wrong, channel, factor, mix_up
):
    found = _findings(tmp_path, clean_text.replace(header, wrong, 1))
    assert [f.channel for f in found] == [channel]
    assert found[0].factor == pytest.approx(factor, rel=REL)
    assert found[0].mix_up == mix_up


@pytest.mark.parametrize("channel", ["accel_lat", "yaw_rate", "accel_lon"])
def test_an_inverted_sign_is_named(tmp_path, clean_text, channel):
    cmap = tmp_path / "map.toml"
    cmap.write_text(f"[channels.{channel}]\ninvert = true\n")
    path = tmp_path / "session.csv"
    path.write_text(clean_text)
    found = unit_checks.check_units(logfile.read_log(path, cmap))
    assert [f.channel for f in found] == [channel]
    assert found[0].factor == pytest.approx(-1.0, rel=REL)
    assert "sign inverted" in found[0].mix_up


@pytest.mark.slow
def test_the_run_stops_with_one_line_unless_asked_to_go_on(
    tmp_path, clean_text, capsys, monkeypatch
):
    log = tmp_path / "mislabelled.csv"
    log.write_text(clean_text.replace("speed [km/h]", "speed [mph]", 1))
    out = tmp_path / "out"
    args = ["analyse", log, "--gate", demo_gate(), "--out", out, "--no-figures", "--quiet"]
    code, _, err = run_cli(args, capsys, monkeypatch)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2 and len(lines) == 1, err
    assert (
        str(log) in lines[0] and "speed looks like km/h labelled mph: ×0.62" in lines[0]
    )  # 1/1.609 = 0.621 +- 2 %
    assert "--accept-units" in lines[0] and "Traceback" not in err
    assert not out.exists()  # nothing written
    code, _, err = run_cli([*args, "--accept-units"], capsys, monkeypatch)
    assert code == 0, err
    assert "speed looks like km/h labelled mph" in err and "going on as asked" in err


def test_derived_channels_are_skipped_not_passed(tmp_path, clean_text):
    # A channel derived from the GPS path (limitlap.derived: GPS-only logs) agrees with it
    # by construction, so it is not checked. Shown with a lateral acceleration in the
    # wrong unit: logged, it is flagged; the same values marked derived are not checked
    # at all (a check of them would pass or fail on how they were made, not on the log).
    path = tmp_path / "session.csv"
    path.write_text(clean_text)
    log = logfile.read_log(path)
    log.channels["accel_lat"] = log.channels["accel_lat"] * 9.80665
    (logged,) = unit_checks.check_units(log)
    assert logged.channel == "accel_lat" and "m/s^2 labelled g" in str(logged)
    log.derived["accel_lat"] = "test: as if derived"
    assert unit_checks.check_units(log) == []
