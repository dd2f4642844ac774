"""Log file layouts as loggers and spreadsheet exports write them.

One short generated session (limitlap.synth: two flying laps at 50 Hz, about 17,000
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
are worked out by hand from ISO 8601's rule that a time with an offset is UTC plus that
offset (ISO 8601-1:2019, 4.3.13 and 5.3.4).
"""

from __future__ import annotations

import json
import math
from datetime import datetime, timedelta, timezone

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
    session = synth.generate_session(n_laps=2, seed=41, sample_rate_hz=50.0)
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
    body = _join(header + [""], [r + [""] for r in rows], ";", "\r\n")
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
    "ISO 8601 UTC (Z)": lambda t: _with_times(t, lambda s: _iso(timezone.utc)(s)[:-6] + "Z"),
    "clock times": lambda t: _with_times(t, _clock()),
    "clock past midnight": lambda t: _with_times(t, _clock(datetime(2026, 10, 17, 23, 58, 30))),
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
