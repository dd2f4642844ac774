"""A log's time stamps written as text: ISO 8601 date-times and clock times -> seconds.

The time column of a log holds seconds or milliseconds (a number, by its unit), ISO
8601 date-times (``2026-10-17T13:42:05.250``, with or without a zone) or clock times
(``13:42:05.250``); :mod:`limitlap.logformat` tells which from the first cells. The text
forms are read by the standard library (:meth:`datetime.datetime.fromisoformat`,
:meth:`datetime.time.fromisoformat`) and become seconds from the column's first stamp.
docs/formats.md, Log files, Time stamps.
"""

from __future__ import annotations

from datetime import datetime, time

import numpy as np

from limitlap.errors import InputError

#: Microseconds in a day: a clock time that falls back by more than half of one is
#: taken as the next day's (a session running past midnight). [us]
_DAY_US = 86_400_000_000


def iso_seconds(path, cells, rows, column) -> tuple[np.ndarray, datetime | None]:
    """Seconds from the first stamp of a column of ISO 8601 date-times.

    Parameters
    ----------
    path : str or Path
        The log, for messages. [-]
    cells : sequence of str or None
        The column's cells, stripped; None or ``""`` for a blank cell. [-]
    rows : numpy.ndarray
        The row of each cell as a spreadsheet counts (first line = 1), for messages. [-]
    column : str
        The column's header cell, for messages. [-]

    Returns
    -------
    numpy.ndarray
        Seconds after the first stamp, NaN for a blank cell. [s]
    datetime.datetime or None
        The first stamp as written (its date is the session's), None when all are blank.

    Notes
    -----
    The difference of two date-times is Python's (``datetime`` subtraction): stamps with
    a zone are compared in UTC, so a change of offset within the log (daylight saving
    time) does not move the time base. Stamps with and without a zone are not mixed.
    Python reads fractions of a second to the microsecond.
    """
    out = np.full(len(cells), np.nan)
    first = None
    for i, cell in enumerate(cells):
        if not cell:
            continue
        try:
            stamp = datetime.fromisoformat(cell)
        except ValueError:
            raise InputError(
                path, f"'{cell}' is not an ISO 8601 date-time", row=int(rows[i]), column=column
            ) from None
        if first is None:
            first = stamp
        elif (stamp.tzinfo is None) != (first.tzinfo is None):
            which = "has no time zone" if stamp.tzinfo is None else "has a time zone"
            raise InputError(
                path,
                f"'{cell}' {which} and the first time stamp ('{first.isoformat()}') "
                f"{'does' if stamp.tzinfo is None else 'does not'}",
                row=int(rows[i]),
                column=column,
            )
        out[i] = (stamp - first).total_seconds()
    return out, first


def clock_seconds(path, cells, rows, column) -> np.ndarray:
    """Seconds from the first stamp of a column of clock times (hh:mm:ss.sss).

    Parameters and messages as :func:`iso_seconds`. A time more than 12 hours before
    the one above it is taken as the next day's (a session past midnight). Times with a
    zone (``13:42:05.250Z``, ``13:42:05.250+10:00``) are compared in UTC, as date-times
    are; times with and without a zone are not mixed.

    Returns
    -------
    numpy.ndarray
        Seconds after the first stamp, NaN for a blank cell. [s]
    """
    out = np.full(len(cells), np.nan)
    day = 0
    first = last = zoned = None
    for i, cell in enumerate(cells):
        if not cell:
            continue
        t = _clock(path, cell, int(rows[i]), column)
        if zoned is None:
            zoned = t.tzinfo is not None
        elif zoned != (t.tzinfo is not None):
            which = "has no time zone" if zoned else "has a time zone"
            raise InputError(
                path,
                f"'{cell}' {which} and the first time stamp {'does' if zoned else 'does not'}",
                row=int(rows[i]),
                column=column,
            )
        us = ((t.hour * 60 + t.minute) * 60 + t.second) * 1_000_000 + t.microsecond
        if zoned:  # to UTC: an offset's change within the log does not move the time base
            us -= (t.utcoffset().days * 86_400 + t.utcoffset().seconds) * 1_000_000
        if last is not None and us + day < last - _DAY_US // 2:
            day += _DAY_US
        last = us + day
        if first is None:
            first = last
        out[i] = (last - first) / 1e6  # whole microseconds: exact until the division
    return out


def _clock(path, cell, row, column) -> time:
    """One clock time cell read by the standard library (a one-digit hour taken as two)."""
    try:  # ISO 8601 writes two-digit hours; a logger's 9:05:01 is taken as 09:05:01
        return time.fromisoformat("0" + cell if cell[1:2] == ":" else cell)
    except ValueError:
        raise InputError(
            path, f"'{cell}' is not a clock time (hh:mm:ss.sss)", row=row, column=column
        ) from None
