"""Bad-input battery through the real command line.

Every case runs ``limitlap`` as a user would (in-process through ``limitlap.cli.main``,
the console entry point with its error handling; a few as a subprocess of
``python -m limitlap``) and checks its outcome: either a non-zero exit with exactly one
line on stderr, ``limitlap: error: FILE...: what is wrong``, naming the file and the
column/row/value/key at fault; or success with a ``limitlap: warning:`` line where the
data are usable. A traceback fails the test (in-process: the exception escapes ``main``).

Reader-level checks of the same inputs (without the command line) are in
tests/test_ingest.py (``BAD_LOGS``, missing file, damaged gzip, BOM/CRLF, decimal
commas, duplicate stamps, dropouts) and tests/test_laps.py (gate never crossed, log
shorter than a lap, 30 s dropout over the gate); they are not repeated here.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from .robust_data import (
    VEHICLE_TOML,
    circle_csv,
    circle_gate,
    demo_csv,
    demo_gate,
    digest,
    run_cli,
    square_line_csv,
)

ERROR_PREFIX = "limitlap: error: "


def one_error_line(code: int, err: str, path=None) -> str:
    """The single error line of a failed run, checked for shape; returns its message."""
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code != 0, err
    assert len(lines) == 1, err
    assert lines[0].startswith(ERROR_PREFIX), err
    assert "Traceback" not in err
    if path is not None:
        assert str(path) in lines[0], lines[0]
    return lines[0][len(ERROR_PREFIX) :]


@pytest.fixture
def cli(capsys, monkeypatch):
    def run(*args):
        return run_cli(args, capsys, monkeypatch)

    return run


@pytest.fixture
def line_file(tmp_path):
    path = tmp_path / "loop.csv"
    path.write_text(square_line_csv())
    return path


@pytest.fixture
def vehicle_file(tmp_path):
    path = tmp_path / "car.toml"
    path.write_text(VEHICLE_TOML)
    return path


def write(tmp_path, name, text):
    path = tmp_path / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8", newline="")
    return path


# ----------------------------------------------------------------------------- log files

#: (name, text, expected message after the file name). Hand-written logs, each wrong in
#: one way; the message must say where (row as a spreadsheet counts it, header = row 1).
BAD_LOGS = [
    ("empty", "", ": file is empty"),
    ("header only", "time [s],speed [km/h],latitude,longitude\n", ": no data rows (header only)"),
    (
        # no speed: derived from the fixes, which one fix cannot give
        "missing speed, one fix",
        "time [s],latitude,longitude\n0,-33.86,147.24\n",
        ": no 'speed' channel, and too few GPS fixes in a row to derive it from them",
    ),
    (
        "missing speed, frozen position",
        "time [s],latitude,longitude\n0,-33.86,147.24\n0.1,-33.86,147.24\n0.2,-33.86,147.24\n",
        ": no 'speed' channel, and columns 'latitude' and 'longitude' never change",
    ),
    (
        "missing position",
        "time [s],speed [km/h],accel_lat [g]\n0,100,0.1\n",
        ": missing position: needs columns 'latitude' and 'longitude', or 'x' and 'y'",
    ),
    (
        "non-numeric cell",
        "time [s],speed [km/h],latitude,longitude\n0,100,-33.86,147.24\n0.1,fast,-33.86,147.24\n",
        ", row 3, column 'speed [km/h]': 'fast' is not a number",
    ),
    (
        "all-blank latitude",
        "time [s],speed [km/h],latitude,longitude\n0,100,,147.24\n0.1,100,,147.24\n",
        ", column 'latitude': no position: the column is blank in every row",
    ),
    (
        "time going backwards",
        "time [s],speed [km/h],x [m],y [m]\n0,100,0,0\n0.1,100,2.8,0\n0.05,100,5.6,0\n",
        ", row 4, column 'time [s]': time goes backwards: 0.05 s after 0.1 s",
    ),
    (
        "unknown unit",
        "time [s],speed [knots],x [m],y [m]\n0,100,0,0\n",
        ", column 'speed [knots]': unknown unit 'knots' for channel 'speed' (accepted: km/h, m/s, mph)",
    ),
    (
        "latitude out of range",
        "time [s],speed [km/h],latitude,longitude\n0,100,-33.86,147.24\n0.1,100,-93.86,147.24\n",
        ", row 3, column 'latitude': latitude -93.86 is out of range -90..90 degrees",
    ),
]


@pytest.mark.slow
@pytest.mark.parametrize(("name", "text", "expected"), BAD_LOGS, ids=[c[0] for c in BAD_LOGS])
@pytest.mark.parametrize("command", ["laps", "analyse"])
def test_bad_log(tmp_path, cli, name, text, expected, command):
    log = write(tmp_path, "session.csv", text)
    before = log.read_bytes()
    out_dir = tmp_path / "out"
    args = [command, log] + (["--out", out_dir, "--quiet"] if command == "analyse" else [])
    code, out, err = cli(*args)
    message = one_error_line(code, err, log)
    assert message.startswith(f"{log}{expected}"), message
    assert code == 2 and out == ""
    assert log.read_bytes() == before
    assert not out_dir.exists()  # nothing written for a log that cannot be read


def test_missing_log_file(tmp_path, cli):
    code, _, err = cli("laps", tmp_path / "nope.csv")
    assert one_error_line(code, err) == f"{tmp_path / 'nope.csv'}: file not found"


# ----------------------------------------------------------------------------- usable logs


def laps_json(cli, log, gate):
    code, out, err = cli("laps", log, "--gate", gate, "--json")
    assert code == 0, err
    assert "Traceback" not in err and ERROR_PREFIX not in err
    return json.loads(out)["laps"], err


def test_duplicated_timestamps_work_with_a_warning(tmp_path, cli):
    text = circle_csv(2)
    lines = text.splitlines(keepends=True)
    # repeat rows 101 and 2001 (a logger writing the same sample twice)
    doubled = [*lines[:101], lines[100], *lines[101:2001], lines[2000], *lines[2001:]]
    plain = write(tmp_path, "plain.csv", text)
    dup = write(tmp_path, "dup.csv", "".join(doubled))
    laps_plain, _ = laps_json(cli, plain, circle_gate())
    laps_dup, err = laps_json(cli, dup, circle_gate())
    assert laps_dup == laps_plain  # the merged rows are the same samples
    (warning,) = [ln for ln in err.splitlines() if "time stamp" in ln]
    assert warning == (
        f"limitlap: warning: {dup}: 2 row(s) repeat the previous time stamp (first at row 102); "
        "merged into one row each"
    )


def test_thirty_second_gps_dropout_marks_the_lap_incomplete(tmp_path, cli):
    # Gate crossings of this session at 22.4, 38.4, 54.5, 70.5, 86.5, 102.6 s: the 30 s
    # gap from 45 s hides two of them, so lap 2 runs from 38.4 s to 86.5 s.
    log = write(tmp_path, "gap.csv", circle_csv(5, ((45.0, 30.0),)))
    laps, err = laps_json(cli, log, circle_gate())
    assert [lap["complete"] for lap in laps] == [False, True, False, True, False]
    assert laps[2]["reason"].startswith("GPS dropout of 30.")
    (warning,) = [ln for ln in err.splitlines() if "dropout" in ln]
    assert warning.startswith(f"limitlap: warning: {log}: GPS dropout of 30.")
    assert "the lap holding it is not complete" in warning


def test_semicolons_and_decimal_commas_read_as_plain(tmp_path, cli):
    text = circle_csv(2)
    european = text.replace(",", ";").replace(".", ",")
    laps_plain, _ = laps_json(cli, write(tmp_path, "plain.csv", text), circle_gate())
    laps_eu, _ = laps_json(cli, write(tmp_path, "eu.csv", european), circle_gate())
    assert laps_eu == laps_plain


def test_bom_and_crlf_work(tmp_path, cli):
    text = circle_csv(2)
    plain = write(tmp_path, "plain.csv", text)
    windows = write(tmp_path, "win.csv", b"\xef\xbb\xbf" + text.replace("\n", "\r\n").encode())
    laps_plain, _ = laps_json(cli, plain, circle_gate())
    laps_win, _ = laps_json(cli, windows, circle_gate())
    assert laps_win == laps_plain
    assert [lap["complete"] for lap in laps_win] == [False, True, True, False]


def test_log_shorter_than_one_lap(tmp_path, cli):
    # The first crossing of this session is at 22.4 s, the next at 38.4 s: 30 s of it
    # holds the out-lap and part of lap 1, no complete lap.
    lines = circle_csv(2).splitlines(keepends=True)
    log = write(tmp_path, "short.csv", "".join(lines[: 1 + 3000]))
    code, _out, err = cli(
        "analyse", log, "--gate", circle_gate(), "--out", tmp_path / "out", "--quiet"
    )
    message = one_error_line(code, err, log)
    assert message == f"{log}: no complete lap in the log (a lap needs two gate crossings)"
    assert not (tmp_path / "out").exists()


def test_log_too_plain_to_fit_an_envelope(tmp_path, cli):
    # Laps on one circle at one speed show one point of the g-g diagram: no envelope can
    # be fitted from it, and the message says which log and what to give instead.
    log = write(tmp_path, "c.csv", circle_csv(2))
    code, _, err = cli(
        "analyse", log, "--gate", circle_gate(), "--out", tmp_path / "out", "--quiet"
    )
    message = one_error_line(code, err, log)
    assert message.startswith(f"{log}: ") and "too few to fit a grip envelope" in message
    assert message.endswith("(give a vehicle file with [grip])")
    assert not (tmp_path / "out").exists()


def test_targets_from_a_log_without_a_complete_lap(tmp_path, cli, vehicle_file):
    lines = circle_csv(2).splitlines(keepends=True)
    log = write(tmp_path, "short.csv", "".join(lines[: 1 + 3000]))
    code, out, err = cli(
        "targets", log, "--vehicle", vehicle_file, "--grip", "1", "--gate", circle_gate()
    )
    assert one_error_line(code, err, log).startswith(f"{log}: no complete lap (lap 0: out-lap")
    assert out == ""


def test_gate_never_crossed(tmp_path, cli):
    log = write(tmp_path, "c.csv", circle_csv(2))
    lat, lon = (float(v) for v in circle_gate().split(","))
    far = f"{lat + 0.01:.6f},{lon:.6f}"  # 1.1 km north of the circle
    code, _, err = cli("laps", log, "--gate", far)
    message = one_error_line(code, err, log)
    assert f"{log}: the car never crosses the gate at {lat + 0.01:.6f},{lon:.6f}" in message
    assert "closest pass" in message


# ----------------------------------------------------------------------------- vehicle files

BAD_VEHICLES = [
    (
        "negative mass",
        VEHICLE_TOML.replace("mass_kg = 1300.0", "mass_kg = -1300.0"),
        "key 'mass_kg' must be positive, got negative value -1300",
    ),
    ("missing key", VEHICLE_TOML.replace("power_kw = 370.0\n", ""), "missing key 'power_kw'"),
    (
        "wrong type",
        VEHICLE_TOML.replace("drag_area_m2 = 0.75", 'drag_area_m2 = "0.75"'),
        "key 'drag_area_m2' must be a number, got '0.75'",
    ),
    (
        "wrong type in grip",
        VEHICLE_TOML.replace("lateral = 1.45", "lateral = true"),
        "key 'grip.lateral' must be a number, got True",
    ),
    ("not TOML", "mass_kg = = 3\n", "not valid TOML"),
]


@pytest.mark.parametrize(
    ("name", "text", "expected"), BAD_VEHICLES, ids=[c[0] for c in BAD_VEHICLES]
)
def test_bad_vehicle(tmp_path, cli, line_file, name, text, expected):
    car = write(tmp_path, "car.toml", text)
    code, out, err = cli("solve", line_file, "--vehicle", car)
    message = one_error_line(code, err, car)
    assert message.startswith(f"{car}: {expected}"), message
    assert out == ""


def test_missing_vehicle_file(tmp_path, cli, line_file):
    car = tmp_path / "nope.toml"
    code, _, err = cli("solve", line_file, "--vehicle", car)
    assert one_error_line(code, err) == f"{car}: file not found"


def test_bad_vehicle_for_analyse(tmp_path, cli):
    # analyse reads the vehicle after the log: the vehicle's message, nothing written.
    log = write(tmp_path, "d.csv", demo_csv(2))
    car = write(tmp_path, "car.toml", VEHICLE_TOML.replace("mass_kg = 1300.0", "mass_kg = 0"))
    code, _, err = cli("analyse", log, "--vehicle", car, "--out", tmp_path / "out", "--quiet")
    assert one_error_line(code, err) == f"{car}: key 'mass_kg' must be positive, got zero value 0"
    assert not (tmp_path / "out").exists()


# ----------------------------------------------------------------------------- grip scales

BAD_GRIPS = [  # (value, the one message of every command)
    ("0", "--grip: grip scale 0 is outside 0.2-2.0"),
    ("-1", "--grip: grip scale -1 is outside 0.2-2.0"),
    ("5", "--grip: grip scale 5 is outside 0.2-2.0"),
    ("abc", "--grip: unknown condition 'abc' (use dry, damp, wet or a grip scale 0.2-2.0)"),
]


@pytest.mark.parametrize(("value", "expected"), BAD_GRIPS, ids=[c[0] for c in BAD_GRIPS])
@pytest.mark.parametrize("command", ["solve", "targets", "analyse"])
def test_bad_grip_scale(tmp_path, cli, vehicle_file, value, expected, command):
    # Checked while the options are parsed, before any file is read: the log or line
    # file does not even exist. Every command says it the same way.
    missing = tmp_path / "unread.csv"
    if command == "analyse":
        args = ["analyse", missing, "--grip", value, "--out", tmp_path / "out"]
    else:
        args = [command, missing, "--vehicle", vehicle_file, "--grip", value]
    code, out, err = cli(*args)
    assert one_error_line(code, err) == expected
    assert out == ""


@pytest.mark.parametrize("command", ["solve", "targets"])
def test_grip_takes_condition_names_in_every_command(cli, line_file, vehicle_file, command):
    # docs/formats.md, Vehicle files: dry 1.0, damp 0.85, wet 0.70 or a number, in every
    # command that has --grip; the named scale is the number's.
    runs = {}
    for value in ("damp", "0.85"):
        code, out, err = cli(
            command, line_file, "--vehicle", vehicle_file, "--grip", value, "--json"
        )
        assert code == 0, err
        runs[value] = json.loads(out)
    if command == "solve":
        assert runs["damp"] == runs["0.85"] and runs["damp"]["grip_scale"] == 0.85
    else:
        named, number = runs["damp"]["conditions"][0], runs["0.85"]["conditions"][0]
        assert (named["condition"], number["condition"]) == ("damp", "0.85")
        assert named["lap_time_s"] == number["lap_time_s"] and named["grip_scale"] == 0.85


# ----------------------------------------------------------------------------- line files

FIGURE_EIGHT = "x [m],y [m]\n" + "".join(
    f"{100 * __import__('math').sin(2 * t):.3f},{100 * __import__('math').sin(t):.3f}\n"
    for t in [k * 2 * 3.141592653589793 / 40 for k in range(40)]
)

BAD_LINES = [
    ("two points", "x [m],y [m]\n0,0\n100,0\n", ": a closed line needs at least 4 points, found 2"),
    (
        "NaN",
        "x [m],y [m]\n0,0\n100,0\nnan,100\n0,100\n",
        ", row 4, column 'x [m]': 'nan' is not a finite number",
    ),
    (
        "self-crossing",
        FIGURE_EIGHT,
        ": the line crosses itself at x 0.0 m, y 0.0 m; points must follow the driven loop "
        "in order (where it passes over itself, give heights z or a level column)",
    ),
    (
        "curvature NaN",
        "distance [m],curvature [1/m]\n0,0\n1,nan\n2,0\n",
        ", row 3, column 'curvature [1/m]': 'nan' is not a finite number",
    ),
    (
        "distance not increasing",
        "distance [m],curvature [1/m]\n0,0\n2,0\n1,0\n",
        ": line distance must increase strictly",
    ),
]


@pytest.mark.parametrize(("name", "text", "expected"), BAD_LINES, ids=[c[0] for c in BAD_LINES])
def test_bad_line(tmp_path, cli, vehicle_file, name, text, expected):
    path = write(tmp_path, "line.csv", text)
    code, out, err = cli("solve", path, "--vehicle", vehicle_file)
    assert one_error_line(code, err, path) == f"{path}{expected}"
    assert out == ""


def test_valid_line_solves(cli, line_file, vehicle_file):
    # The battery's own good inputs are good: the failures above are the inputs' fault.
    code, out, err = cli("solve", line_file, "--vehicle", vehicle_file, "--json")
    assert code == 0 and err == ""
    assert json.loads(out)["lap_time_s"] > 0


def test_repeated_points_are_not_a_self_crossing(tmp_path, cli, vehicle_file):
    # A point listed twice in a row, and a last point repeating the first (against
    # docs/formats.md, Line files, but common), touch nothing: the line still solves.
    lines = square_line_csv().splitlines(keepends=True)
    text = "".join([*lines[:10], lines[9], *lines[10:], lines[1]])
    path = write(tmp_path, "line.csv", text)
    code, _out, err = cli("solve", path, "--vehicle", vehicle_file, "--json")
    assert code == 0, err


# ----------------------------------------------------------------------------- output folder


def test_output_folder_cannot_be_written(tmp_path, cli):
    # A path under a regular file: no folder can be made there, whoever runs the test
    # (root ignores permission bits, not the file system's structure).
    log = write(tmp_path, "d.csv", demo_csv(2))
    blocker = write(tmp_path, "blocker", "a regular file\n")
    code, _out, err = cli(
        "analyse", log, "--gate", demo_gate(), "--out", blocker / "out", "--no-figures", "--quiet"
    )
    message = one_error_line(code, err, blocker / "out")
    assert message.startswith(f"{blocker / 'out'}: output folder cannot be made")
    code, _, err = cli(
        "analyse", log, "--gate", demo_gate(), "--out", blocker, "--no-figures", "--quiet"
    )
    assert one_error_line(code, err) == f"{blocker}: is a file, not an output folder"
    assert blocker.read_text() == "a regular file\n"


def test_solve_profile_into_a_folder_that_is_a_file(tmp_path, cli, line_file, vehicle_file):
    blocker = write(tmp_path, "blocker", "x")
    code, _, err = cli("solve", line_file, "--vehicle", vehicle_file, "--out", blocker / "p.csv")
    assert one_error_line(code, err) == f"{blocker}: is not a folder"


# ----------------------------------------------------------------------------- end to end


def run_process(*args, cwd):
    return subprocess.run(
        [sys.executable, "-m", "limitlap", *[str(a) for a in args]],
        capture_output=True,
        text=True,
        cwd=cwd,
        timeout=120,
    )


@pytest.mark.slow
def test_subprocess_error_is_one_line(tmp_path, line_file):
    # The installed entry point as a user runs it: exit status 2, one stderr line.
    car = write(
        tmp_path, "car.toml", VEHICLE_TOML.replace("rolling_coeff = 0.012", "rolling_coeff = -0.5")
    )
    before = digest(car), digest(line_file)
    proc = run_process("solve", line_file, "--vehicle", car, cwd=tmp_path)
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert (
        proc.stderr
        == f"limitlap: error: {car}: key 'rolling_coeff' must be positive, got negative value -0.5\n"
    )
    assert (digest(car), digest(line_file)) == before


@pytest.mark.slow
def test_subprocess_bom_crlf_log_analyses(tmp_path):
    text = demo_csv(2)
    log = write(tmp_path, "win.csv", b"\xef\xbb\xbf" + text.replace("\n", "\r\n").encode())
    proc = run_process(
        "analyse",
        log,
        "--gate",
        demo_gate(),
        "--out",
        tmp_path / "out",
        "--no-figures",
        "--quiet",
        cwd=tmp_path,
    )
    assert proc.returncode == 0, proc.stderr
    assert "Traceback" not in proc.stderr and ERROR_PREFIX not in proc.stderr
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert summary["lap"]["number"] in (1, 2)
    assert Path(tmp_path / "out" / "report.html").stat().st_size > 0


# ----------------------------------------------------------------------------- advice wording


def test_advice_names_the_option_only_on_the_command_line(tmp_path, cli):
    # The library states facts with the parameter names of the Python call; the command
    # line words the same facts with its options. No gate and no lap column: the gate is
    # placed automatically and the advice is to give one. A bad gate names the parameter.
    from limitlap import pipeline
    from limitlap.errors import ArgumentError

    log = write(tmp_path, "s.csv", circle_csv(2))
    code, _, err = cli("laps", log)
    assert code == 0, err
    (said,) = [ln for ln in err.splitlines() if "gate placed at" in ln]
    cli_advice = " (give --gate LAT,LON for lap times from the real line)"
    assert said.endswith(cli_advice)
    _, _, _, warnings = pipeline.load_session(log)
    (fact,) = [w for w in warnings if "gate placed at" in w]
    assert said == f"limitlap: warning: {fact.fact}{cli_advice}"
    api_advice = " (give the start/finish gate as LAT,LON for lap times from the real line)"
    assert str(fact) == f"{fact.fact}{api_advice}"
    assert "--" not in "".join(warnings)

    problem = "'1;2' is not LAT,LON (two numbers separated by a comma)"
    code, _, err = cli("laps", log, "--gate", "1;2")
    assert one_error_line(code, err) == f"--gate: {problem}"
    with pytest.raises(ArgumentError) as raised:
        pipeline.load_session(log, gate="1;2")
    assert str(raised.value) == f"gate: {problem}"


def test_grip_and_extra_advice_wording():
    # The two other facts with advice: the grip a lap showed (a suggested grip scale,
    # rounded to the hundredth as the corner table shows grip) and a missing optional part.
    import pickle

    from limitlap.cli import worded
    from limitlap.errors import ExtraNeeded, WarningLine

    line = WarningLine("log.csv: this lap showed about 0.76 of the grip", "grip_scale", 0.756)
    assert str(line) == (
        "log.csv: this lap showed about 0.76 of the grip; analyse at grip scale 0.76 for the "
        "ideal at the grip found"
    )
    assert worded(line) == (
        "log.csv: this lap showed about 0.76 of the grip; analyse with --grip 0.76 for the "
        "ideal at the grip found"
    )
    # A warning pickled to another process (a batch worker's) keeps its hint.
    assert worded(pickle.loads(pickle.dumps(line))) == worded(line)
    assert worded("a plain line") == "a plain line"
    extra = ExtraNeeded("scheduler", "Dask", "dask")
    assert str(extra) == "scheduler needs Dask: pip install 'limitlap[dask]'"
    assert worded(extra) == "a --scheduler needs Dask: pip install 'limitlap[dask]'"
