"""Log file layouts as loggers and spreadsheet exports write them.

One short generated session (limitlap.synth: two flying laps at 20 Hz, about 8,500
rows) is written in the plain form of docs/formats.md (one header row, units in
brackets, commas, seconds) and again in each layout of docs/formats.md, Log files,
Layouts: metadata lines above the header, a units row under bare names, semicolons with
decimal commas, tabs, milliseconds, ISO 8601 date-times with and without a zone, clock
times, quoted cells, an empty last column, and all of them at once. Each must read to
the same time base and channels as the plain file and analyse to the same summary.json
numbers (lap times, ideal lap, corners' time left), with the session information the
metadata names.

The outside truths: the date-times and clock times are written here with the standard
library's own date arithmetic (``datetime + timedelta``, ISO 8601 as
``datetime.isoformat`` writes it; Python docs, datetime), independently of the reader,
so reading them back must give the generator's seconds; the offsets in a zone change
are worked out by hand from ISO 8601's rule that a local time with a time shift is UTC
plus that shift (ISO 8601-1:2019, time shift from UTC; clause numbers not quoted, from
memory only).
"""

from __future__ import annotations

import html
import json
from datetime import UTC, datetime, timedelta, timezone

import numpy as np
import pytest

from limitlap import outputs, pipeline, synth
from limitlap.errors import InputError
from limitlap.logfile import read_log

#: The session's date-time at its first row (an invented afternoon).
START = datetime(2026, 10, 17, 13, 42, 5, 250000)

#: Metadata lines as exports write them: key,value and key: value, a padded row, a
#: blank line, a key the session information does not use.
METADATA = [
    "Logger export,v2",
    "Venue,Tarrowby Heath",
    "Driver: Ada Quill",
    "Car,GT coupe (invented),,,",
    "Date,2026-10-17",
    "Session: Practice 2",
    "",
]
SESSION = {
    "date": "2026-10-17",
    "venue": "Tarrowby Heath",
    "driver": "Ada Quill",
    "car": "GT coupe (invented)",
    "session": "Practice 2",
}


@pytest.fixture(scope="module")
def plain_text():
    session = synth.generate_session(n_laps=2, seed=41, sample_rate_hz=20.0)
    return synth.session_csv_text(session)


def _rows(text):
    lines = text.splitlines()
    return lines[0].split(","), [ln.split(",") for ln in lines[1:]]


def _join(header, rows, sep=",", end="\n"):
    return end.join(sep.join(r) for r in [header, *rows]) + end


def _with_times(text, stamp, name="time"):
    """The plain text with its time cells replaced by ``stamp(seconds)``."""
    header, rows = _rows(text)
    header[0] = name
    return _join(header, [[stamp(float(r[0])), *r[1:]] for r in rows])


def _iso(zone=None):
    start = START if zone is None else START.replace(tzinfo=zone)
    return lambda t: (start + timedelta(seconds=t)).isoformat(timespec="milliseconds")


def _clock(start=START):
    return lambda t: (start + timedelta(seconds=t)).time().isoformat(timespec="milliseconds")


def _units_row(text):
    header, rows = _rows(text)
    names = [h.partition(" [")[0] for h in header]
    units = [h.partition(" [")[2].rstrip("]") for h in header]
    return _join(names, [units, *rows])


def _ms(text):
    header, rows = _rows(text)
    header[0] = "time [ms]"
    return _join(header, [[f"{round(float(r[0]) * 1000)}", *r[1:]] for r in rows])


def _quoted(text):
    header, rows = _rows(text)
    return _join([f'"{h}"' for h in header], [[f'"{c}"' if c else c for c in r] for r in rows])


def _semicolon(text):
    return text.replace(",", ";").replace(".", ",")


def _combined(text):
    """Metadata, units row, semicolons with decimal commas, zoned ISO times, quoted cells,
    an empty last column and Windows line ends, all in one file."""
    zoned = _with_times(text, _iso(timezone(timedelta(hours=10))))
    header, rows = _rows(_units_row(zoned))
    rows = [[f'"{c}"' if c else c for c in r] for r in rows]
    body = _join([*header, ""], [[*r, ""] for r in rows], ";", "\r\n")
    meta = "\r\n".join(m.replace(",", ";") for m in METADATA) + "\r\n"
    return meta + body.replace(".", ",")


LAYOUTS = {
    "metadata": lambda t: "\n".join(METADATA) + "\n" + t,
    "units row": _units_row,
    "semicolon, decimal comma": _semicolon,
    "tab": lambda t: t.replace(",", "\t"),
    "milliseconds": _ms,
    "ISO 8601 without zone": lambda t: _with_times(t, _iso()),
    "ISO 8601 with zone": lambda t: _with_times(t, _iso(timezone(timedelta(hours=-5)))),
    "ISO 8601 UTC (Z)": lambda t: _with_times(t, lambda s: _iso(UTC)(s)[:-6] + "Z"),
    "clock times": lambda t: _with_times(t, _clock()),
    "clock past midnight": lambda t: _with_times(t, _clock(datetime(2026, 10, 17, 23, 58, 30))),
    "clock times with a zone": lambda t: _with_times(t, lambda s: _clock()(s) + "+02:00"),
    "quoted": _quoted,
    "empty last column": lambda t: "".join(ln + ",\n" for ln in t.splitlines()),
    "combined": _combined,
}

#: What each layout's date is in the session information (a date-time column's date).
DATES = {"ISO 8601 without zone": "2026-10-17", "ISO 8601 with zone": "2026-10-17"}
DATES["ISO 8601 UTC (Z)"] = "2026-10-17"


def _session_of(name):
    if name in ("metadata", "combined"):
        return SESSION
    return {"date": DATES[name]} if name in DATES else {}


#: The line each layout's reading says on stderr (after the file name); None: the plain
#: form (milliseconds are a unit of the plain form's header).
NOTES = {
    "metadata": "6 metadata lines",
    "units row": "units row",
    "semicolon, decimal comma": "';' with decimal commas",
    "tab": "tab",
    "milliseconds": None,
    "ISO 8601 without zone": "ISO 8601 times",
    "ISO 8601 with zone": "ISO 8601 times",
    "ISO 8601 UTC (Z)": "ISO 8601 times",
    "clock times": "clock times",
    "clock past midnight": "clock times",
    "clock times with a zone": "clock times",
    "quoted": "quoted cells",
    "empty last column": "an empty last column",
    "combined": (
        "6 metadata lines, units row, ';' with decimal commas, quoted cells, "
        "an empty last column, ISO 8601 times"
    ),
}


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("layouts")


@pytest.fixture(scope="module")
def plain(folder, plain_text):
    path = folder / "plain.csv"
    path.write_text(plain_text)
    return path, read_log(path)


def _write(folder, name, text):
    path = folder / (name.replace(" ", "_").replace(",", "").replace("(", "").replace(")", ""))
    path = path.with_suffix(".csv")
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(text)
    return path


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_each_layout_reads_as_the_plain_file(folder, plain, plain_text, name):
    text = LAYOUTS[name](plain_text)
    if name == "clock past midnight":
        assert "\n23:59:59.9" in text and "\n00:00:00.0" in text  # it does cross midnight
    path = _write(folder, name, text)
    log, base = read_log(path), plain[1]
    # docs/checks.md, C6.3. The date-times and clock times were written from the
    # generator's seconds by datetime + timedelta (Python docs, datetime): read back
    # they are those seconds.
    # Whole microseconds divided by 1e6 round as the decimal text does (IEEE 754 division
    # and parsing both round correctly), so they agree bit for bit; milliseconds times
    # 0.001 round once more (a few 1e-14 s).
    if name == "milliseconds":
        np.testing.assert_allclose(log.time_s, base.time_s, rtol=0, atol=1e-12)
    else:
        np.testing.assert_array_equal(log.time_s, base.time_s)
    assert sorted(log.channels) == sorted(base.channels)
    for ch in base.channels:
        np.testing.assert_array_equal(log.channels[ch], base.channels[ch], err_msg=ch)
    assert log.session == _session_of(name)
    note = NOTES[name]
    assert log.layout_note == (None if note is None else f"{path}: {note}")
    if name in ("metadata", "combined"):
        assert ("Logger export", "v2") in log.metadata  # kept, though no session item


@pytest.fixture(scope="module")
def plain_summary(plain):
    return _summary(plain[0])


def _summary(path):
    return outputs.build_summary(pipeline.analyse(path))


def _numbers(summary):
    """The summary's numbers that must not depend on the file's layout."""
    return {
        "lap": summary["lap"]["time_s"],
        "ideal": summary["ideal"]["time_s"],
        "time_left": summary["time_left_s"],
        "laps": [lap["time_s"] for lap in summary["laps"]],
        "corners": [c["time_left_s"] for c in summary["corners"]],
        "corner names": [c["name"] for c in summary["corners"]],
    }


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_layouts_analyse_to_the_plain_summary(folder, plain_text, plain_summary, name):
    # The same session in another layout: the same laps, ideal lap and corners' time
    # left (docs/outputs.md, summary.json); the milliseconds' last-bit differences in
    # the time base (see above) may move a time by far less than a microsecond.
    path = _write(folder, name, LAYOUTS[name](plain_text))
    summary = _summary(path)
    got, want = _numbers(summary), _numbers(plain_summary)
    assert got["corner names"] == want["corner names"]
    assert len(want["corners"]) >= 5 and sum(c > 0 for c in want["corners"]) >= 2
    for key in ("lap", "ideal", "time_left", "laps", "corners"):
        assert got[key] == pytest.approx(want[key], abs=1e-6), key
    assert summary["session"] == _session_of(name)
    assert plain_summary["session"] == {}  # the plain file names nothing


def test_a_zone_change_inside_the_log_keeps_the_time_base(tmp_path):
    # Daylight saving time ends: the wall clock falls back an hour and the offset goes
    # from +11:00 to +10:00. ISO 8601-1:2019: local time = UTC + time shift, so
    # 02:59:59+11:00 = 15:59:59Z (the day before) and 02:00:00+10:00 = 16:00:00Z, one
    # second later (worked by hand; docs/checks.md, C6.4); then +0.5 s steps.
    stamps = [
        "2026-04-05T02:59:59.000+11:00",
        "2026-04-05T02:59:59.500+11:00",
        "2026-04-05T02:00:00.000+10:00",
        "2026-04-05T02:00:00.500+10:00",
        "2026-04-05 02:00:01+10:00",
    ]
    rows = [f"{s},10,{i},0" for i, s in enumerate(stamps)]
    path = tmp_path / "dst.csv"
    path.write_text("time,speed [m/s],x,y\n" + "\n".join(rows) + "\n")
    log = read_log(path)
    assert log.time_s.tolist() == [0.0, 0.5, 1.0, 1.5, 2.0]
    assert log.session == {"date": "2026-04-05"}  # the date as written, in its own zone


def test_clock_times_with_a_zone_are_compared_in_utc(tmp_path):
    # The same fall-back as above, written as clock times (ISO 8601-1:2019: a time of day
    # may carry its shift from UTC): 02:59:59+11:00 is 15:59:59Z, 02:00:00+10:00 is
    # 16:00:00Z, one second later (worked by hand). A time without a zone after one with
    # is refused, naming its row, as for date-times.
    stamps = ["02:59:59.000+11:00", "02:59:59.500+11:00", "02:00:00.000+10:00"]
    rows = [f"{s},10,{i},0" for i, s in enumerate(stamps)]
    path = tmp_path / "clock_dst.csv"
    path.write_text("time,speed [m/s],x,y\n" + "\n".join(rows) + "\n")
    assert read_log(path).time_s.tolist() == [0.0, 0.5, 1.0]
    path.write_text("time,speed [m/s],x,y\n" + f"{stamps[0]},10,0,0\n13:00:00.000,10,1,0\n")
    with pytest.raises(InputError) as err:
        read_log(path)
    assert str(err.value) == (
        f"{path}, row 3, column 'time': '13:00:00.000' has no time zone and the first time "
        "stamp does"
    )


def test_fractions_of_a_second_to_the_microsecond(tmp_path):
    # Python reads an ISO 8601 fraction to the microsecond (Python docs,
    # datetime.fromisoformat); 123456 us and 1 us after a whole second, exactly.
    text = (
        "time,speed [m/s],x,y\n"
        "2026-10-17T13:42:05,10,0,0\n"
        "2026-10-17T13:42:05.123456,10,1,0\n"
        "2026-10-17T13:42:06.000001,10,2,0\n"
    )
    log = read_log(_write(tmp_path, "micro", text))
    assert log.time_s.tolist() == [0.0, 123456 / 1e6, 1000001 / 1e6]


def test_a_metadata_date_wins_over_the_time_column(tmp_path, plain_text):
    # written here with the standard library: date-times one day after the stated date
    text = _with_times(plain_text, _iso())
    meta = "Date: 2026-10-16T08:00:00\nTrack,Tarrowby Heath\n"
    log = read_log(_write(tmp_path, "dated", meta + text))
    assert log.session == {"date": "2026-10-16", "venue": "Tarrowby Heath"}
    other = read_log(_write(tmp_path, "written", "Date,17/10/2026\n" + text))
    assert other.session == {"date": "17/10/2026"}  # not ISO 8601: kept as written


def test_a_two_column_header_is_not_a_metadata_line(tmp_path):
    # a first line of two names over rows of two numbers is a header (too few columns
    # for a log), not a metadata line with no header after it
    path = _write(tmp_path, "short", "time,speed\n0,1\n")
    with pytest.raises(InputError, match="missing position"):
        read_log(path)


# ------------------------------------------------------------------------ refusals

REFUSED = [
    (
        "Venue,Tarrowby Heath\nDriver: Ada Quill\n\n",
        "log.csv: 2 metadata lines and no header row after them",
    ),
    (
        "Venue,Tarrowby Heath\n0,10,0,0\n0.1,10,1,0\n",
        "log.csv, row 2: 1 metadata line, then data and no header row naming the columns",
    ),
    (
        "Venue,Tarrowby Heath\ntime,speed,x,y\ns,km/h,m\n0,10,0,0\n",
        "log.csv, row 3: the units row has 3 cells, the header 4: they do not match",
    ),
    (
        "time,speed,x,y\ns,km/h,m,m,deg\n0,10,0,0\n",
        "log.csv, row 2: the units row has 5 cells, the header 4: they do not match",
    ),
    (
        "time,speed [m/s],x,y\n2026-10-17T13:42:05.000,10,0,0\n2026-10-17T13:4x:05,10,1,0\n",
        "log.csv, row 3, column 'time': '2026-10-17T13:4x:05' is not an ISO 8601 date-time",
    ),
    (
        "Driver,A\ntime,speed,x,y\n,m/s,m,m\n2026-10-17T13:42:05Z,10,0,0\n"
        "2026-10-17T13:42:06,10,1,0\n",
        "log.csv, row 5, column 'time': '2026-10-17T13:42:06' has no time zone and the first "
        "time stamp ('2026-10-17T13:42:05+00:00') does",
    ),
    (
        "time;speed [m/s];x;y\n13:42:05,000;10;0;0\n13:42:61,000;10;1;0\n",
        "log.csv, row 3, column 'time': '13:42:61,000' is not a clock time (hh:mm:ss.sss)",
    ),
]


@pytest.mark.parametrize(("text", "message"), REFUSED)
def test_bad_layouts_are_refused_in_one_line(tmp_path, text, message):
    path = tmp_path / "log.csv"
    path.write_text(text)
    with pytest.raises(InputError) as err:
        read_log(path)
    assert str(err.value) == f"{tmp_path}/{message}"


# ------------------------------------------------------------- layouts a channel map states


def _map(tmp_path, toml):
    path = tmp_path / "map.toml"
    path.write_text(toml)
    return path


def test_stated_header_row_takes_lines_detection_would_call_a_header(tmp_path, plain):
    # a metadata line of four cells looks like a header: only the channel map can say
    text = "Note,wet start,dry after ten minutes,slicks\nDriver,Ada Quill\n"
    path = _write(tmp_path, "notes", text + plain[0].read_text())
    with pytest.raises(InputError, match="row 2: the units row has 2 cells, the header 4"):
        read_log(path)  # the note taken as the header, the driver's line as its units
    log = read_log(path, _map(tmp_path, "[layout]\nheader_row = 3\n"))
    np.testing.assert_array_equal(log.time_s, plain[1].time_s)
    assert log.session == {"driver": "Ada Quill"}
    assert log.layout_note == f"{path}: 2 metadata lines"


def test_stated_decimal_comma_where_the_first_rows_show_none(tmp_path):
    rows = [f"{i};10;{i};0" for i in range(30)] + ["30;10,5;30;0"]
    path = _write(tmp_path, "late", "time;speed [m/s];x;y\n" + "\n".join(rows) + "\n")
    with pytest.raises(InputError, match=r"row 32, column 'speed \[m/s\]': '10,5' is not"):
        read_log(path)
    log = read_log(path, _map(tmp_path, '[layout]\ndecimal = ","\n'))
    assert log.channels["speed"][-1] == 10.5


def test_stated_delimiter_when_names_hold_commas(tmp_path):
    text = "time\tspeed, GPS [m/s]\tpos, east\tpos, north\n0\t10\t0\t0\n1\t10\t10\t0\n"
    path = _write(tmp_path, "commas", text)
    toml = (
        '[layout]\ndelimiter = "tab"\n[channels.speed]\ncolumn = "speed, GPS"\n'
        '[channels.x]\ncolumn = "pos, east"\n[channels.y]\ncolumn = "pos, north"\n'
    )
    log = read_log(path, _map(tmp_path, toml))
    assert log.channels["x"].tolist() == [0.0, 10.0]


def test_stated_clock_times_in_the_basic_format(tmp_path):
    # hhmmss.sss (ISO 8601 basic format) reads as a number of seconds unless stated:
    # 13:42:59.5 -> 13:43:00.0 would be a step of 40.5 s instead of 0.5 s
    text = "time,speed [m/s],x,y\n134259.000,10,0,0\n134259.500,10,5,0\n134300.000,10,10,0\n"
    path = _write(tmp_path, "basic", text)
    assert np.diff(read_log(path).time_s).tolist() == [0.5, 40.5]
    log = read_log(path, _map(tmp_path, '[layout]\ntime_format = "clock"\n'))
    assert log.time_s.tolist() == [0.0, 0.5, 1.0]


@pytest.mark.parametrize(
    ("toml", "fragment"),
    [
        ("[layout]\nheader_row = 0\n", "'layout.header_row' must be a row number from 1"),
        ("[layout]\nunits_row = 'yes'\n", "'layout.units_row' must be true or false"),
        ("[layout]\ndelimiter = '|'\n", "'layout.delimiter' must be one of ',', ';', 'tab'"),
        ("[layout]\ndecimal = ';'\n", "'layout.decimal' must be one of '.', ','"),
        ("[layout]\ntime_format = 'epoch'\n", "must be one of 'number', 'iso8601', 'clock'"),
        ("[layout]\nheader = 2\n", "unknown key 'layout.header'"),
        ("layout = 3\n", "[layout] must be a table"),
    ],
)
def test_bad_layout_tables_are_refused(tmp_path, toml, fragment):
    from limitlap.ingest import read_channel_map

    with pytest.raises(InputError, match=r"map\.toml") as err:
        read_channel_map(_map(tmp_path, toml))
    assert fragment in str(err.value)


def test_a_stated_header_row_beyond_the_file_is_refused(tmp_path, plain):
    path = _write(tmp_path, "short", "time,speed,x,y\n0,1,0,0\n")
    with pytest.raises(InputError, match=r"short\.csv, row 9: no row 9 for the header"):
        read_log(path, _map(tmp_path, "[layout]\nheader_row = 9\n"))


def test_session_date_from_a_date_time_is_its_date():
    from limitlap.logformat import session_info

    # the keys exports use for each item, any case and punctuation
    meta = [("Track Name", "Tarrowby Heath"), ("VEHICLE", "GT coupe"), ("session_type", "Race")]
    assert session_info(meta) == {"venue": "Tarrowby Heath", "car": "GT coupe", "session": "Race"}
    stamp = datetime(2026, 10, 17, 23, 59, tzinfo=timezone(timedelta(hours=-5)))
    assert session_info([], stamp) == {"date": "2026-10-17"}


# ------------------------------------------------------------------- through the commands


@pytest.fixture
def cli(capsys, monkeypatch):
    from .robust_data import run_cli

    return lambda *args: run_cli(args, capsys, monkeypatch)


def test_the_command_line_says_what_it_detected_in_one_line(folder, plain, plain_text, cli):
    path = _write(folder, "combined", LAYOUTS["combined"](plain_text))
    code, out, err = cli("laps", path, "--json")
    assert code == 0, err
    said = [ln for ln in err.splitlines() if not ln.startswith("limitlap: warning: ")]
    assert said == [f"limitlap: {path}: {NOTES['combined']}"]
    code, plain_out, err = cli("laps", plain[0], "--json")
    assert code == 0 and json.loads(plain_out) == json.loads(out)
    assert all(ln.startswith("limitlap: warning: ") for ln in err.splitlines())  # no note


def test_analyse_writes_the_session_and_shows_it_in_the_report(folder, plain_text, cli):
    path = _write(folder, "combined", LAYOUTS["combined"](plain_text))
    out = folder / "combined-out"
    code, _, err = cli("analyse", path, "--out", out, "--no-figures", "--quiet")
    assert code == 0, err
    assert f"limitlap: {path}: {NOTES['combined']}" in err.splitlines()
    summary = json.loads((out / "summary.json").read_text())
    assert summary["session"] == SESSION
    page = (out / "report.html").read_text()
    header = page[page.index('<header id="summary">') : page.index("</header>")]
    for key, value in SESSION.items():
        assert f'<span class="k">{key}</span> {html.escape(value)}' in header
    assert "combined.csv" in header and str(folder) not in page  # the file's name, no path


def test_a_refused_layout_is_one_error_line(tmp_path, cli):
    path = tmp_path / "meta.csv"
    path.write_text("Venue,Tarrowby Heath\nDriver: Ada Quill\n")
    code, out, err = cli("laps", path)
    assert code == 2 and out == ""
    assert err.splitlines() == [
        f"limitlap: error: {path}: 2 metadata lines and no header row after them"
    ]


@pytest.mark.parametrize("name", ["metadata and units row", "ISO 8601 with zone"])
def test_deferred_trace_channels_below_metadata_lines(folder, plain_text, name):
    # The pedal and steering columns read later for a lap's rows (docs DEVELOPERS.md,
    # Speed) are the whole column's values, found by their bytes below the metadata
    # lines and the units row; with date-times, from the whole column.
    from limitlap.logfile import TRACE_CHANNELS

    if name == "metadata and units row":
        text = LAYOUTS["metadata"](LAYOUTS["units row"](plain_text))
    else:
        text = LAYOUTS[name](plain_text)
    path = _write(folder, name + " deferred", text)
    eager, lazy = read_log(path), read_log(path, defer=TRACE_CHANNELS)
    n = eager.time_s.size
    for start, stop in ((0, 40), (n // 2, n // 2 + 300), (n - 25, n)):
        for ch in TRACE_CHANNELS:
            np.testing.assert_array_equal(
                lazy.channel_rows(ch, start, stop), eager.channels[ch][start:stop], err_msg=ch
            )
        if name == "metadata and units row":  # found by its bytes, no whole column
            assert lazy.channels.deferred.cache[(start, stop)] is not None
            assert not any(ch in lazy.channels for ch in TRACE_CHANNELS)
    if name != "metadata and units row":  # stamps found by number only: parsed whole
        assert all(ch in lazy.channels for ch in TRACE_CHANNELS)
