"""Reading a session log: CSV in, SI channels on the log's own time base out.

:func:`read_log` detects the file's layout (gzip, encoding and line ends, metadata
lines, a units row, delimiter and decimal comma, :mod:`limitlap.logformat`; what is not
a text table is refused as such), maps column headers to channels (built-in names with
units in brackets or a units row, or a channel map), parses the numbers with polars,
turns date-times and clock times into seconds (:mod:`limitlap.logtime`), merges
duplicate time stamps and converts every channel to SI; latitude and longitude go to a local frame (:mod:`limitlap.gnss`). The
pedal, steering and gear columns can be left out of the parse and read later for one
lap's rows only (:data:`TRACE_CHANNELS`, :meth:`Log.channel_rows`). Every problem
becomes an :class:`~limitlap.errors.InputError` naming the file, row and column.
Format: docs/formats.md, Log files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from limitlap import derived as derived_mod
from limitlap.errors import InputError
from limitlap.gnss import dropout_warnings, to_enu
from limitlap.ingest import (
    ChannelMap,
    accepted_units,
    read_channel_map,
    unit_key,
)
from limitlap.logformat import (
    Layout,
    describe,
    detect_layout,
    log_source,
    session_info,
    split_header,
    time_format,
)
from limitlap.logtime import clock_seconds, iso_seconds
from limitlap.units import CHANNEL_UNITS


@dataclass(frozen=True, eq=False)
class Log:
    """A session log in SI on one time base (the log's own rows).

    Attributes
    ----------
    path : str
        The file it came from.
    time_s : numpy.ndarray
        Time of each row, strictly increasing. [s]
    channels : dict[str, numpy.ndarray]
        docs/formats.md, Log files channel name -> values per row in SI (``speed`` m/s, ``accel_*``
        m/s², ``yaw_rate`` rad/s, ``throttle`` 0-1, ``brake`` Pa, ``steer`` rad,
        ``altitude`` m). NaN where the row left the cell blank (lower-rate channels).
        Position is always planar: ``x`` east and ``y`` north in metres; a WGS84 log is
        converted to a local east-north-up frame at ``origin``.
    origin : tuple of float or None
        (latitude deg, longitude deg, height m) of the ENU origin, None for x/y logs.
    warnings : list of str
        Problems found that did not stop the read (one line each, naming the file).
    session : dict of str to str
        What the log says of its session: ``date``, ``venue``, ``driver``, ``car``,
        ``session``, each only when named (:func:`limitlap.logformat.session_info`).
    metadata : tuple of (str, str)
        Every metadata line above the header, key and value as written.
    layout_note : str or None
        One line saying what was detected when the file is not in the plain form
        (:func:`limitlap.logformat.describe`), None when it is.
    derived : dict
        Channels not logged but derived from others (:mod:`limitlap.derived`): name -> how
        (its record there). They stand in where a channel is needed as a quantity, never
        where one is checked against the GPS path or taken as an independent
        measurement of the line's shape (:meth:`measured`).
    """

    path: str
    time_s: np.ndarray
    channels: dict[str, np.ndarray]
    origin: tuple[float, float, float] | None = None
    warnings: list[str] = field(default_factory=list)
    session: dict[str, str] = field(default_factory=dict)
    metadata: tuple[tuple[str, str], ...] = ()
    layout_note: str | None = None
    derived: dict = field(default_factory=dict)

    def has(self, name: str) -> bool:
        """True when the channel exists and has at least one value (a deferred channel, see :func:`read_log`'s ``defer``: when its column exists)."""
        ch = self.channels.get(name)
        if ch is None:
            deferred = getattr(self.channels, "deferred", None)
            return deferred is not None and name in deferred.specs
        # remembered per array (the line rebuild asks about ten times a lap)
        seen = self.__dict__.setdefault("_has_seen", {})
        hit = seen.get(name)
        if hit is None or hit[0] is not ch:
            hit = seen[name] = (ch, bool(np.isfinite(ch).any()))
        return hit[1]

    def measured(self, name: str) -> bool:
        """True when the log has the channel and it was logged, not derived (:attr:`derived`)."""
        return name not in self.derived and self.has(name)

    def channel_rows(self, name: str, start: int, stop: int) -> np.ndarray:
        """Values of channel ``name`` for rows ``start`` to ``stop`` (exclusive), SI.

        A channel :func:`read_log` deferred is parsed for those rows only (the bytes of
        that stretch of the file, located by the time stamps), the same values the whole
        column would give; when that cannot be done the whole column is parsed.
        """
        deferred = getattr(self.channels, "deferred", None)
        if name not in self.channels and deferred is not None and name in deferred.specs:
            part = deferred.rows(name, start, stop)
            if part is not None:
                return part
        return self.channels[name][start:stop]

    def remembered(self, key, compute):
        """``compute(self)``, computed once per log and key while its arrays stay the same.

        Derived arrays (distance travelled, fix rows, dropouts, filled positions) are asked
        for by the reader, the lap splitter and the pipeline in turn; the result is kept
        with references to ``time_s`` and the channel arrays it came from and recomputed
        when any of them is replaced. Arrays in the result are made read-only, so a caller
        cannot change what the next one gets.
        """
        memo = self.__dict__.setdefault("_remembered", {})
        basis = (self.time_s, *self.channels.values())
        hit = memo.get(key)
        if (
            hit is not None
            and len(hit[0]) == len(basis)
            and all(a is b for a, b in zip(hit[0], basis, strict=True))
        ):
            return hit[1]
        value = compute(self)
        for arr in value if isinstance(value, tuple) else (value,):
            if isinstance(arr, np.ndarray):
                arr.flags.writeable = False
        memo[key] = (basis, value)
        return value


def _resolve_columns(path: Path, layout: Layout, cmap: ChannelMap | None):
    """Channel -> (column index, factor to SI, sign) for the channels the log holds.

    A time column of date-times or clock times (:func:`limitlap.logformat.time_format`)
    takes no unit: its factor is 1 (its text becomes seconds in :func:`read_log`).
    """
    header = layout.header
    stated = cmap.layout.time_format if cmap is not None and cmap.layout is not None else None
    found: dict[str, tuple[int, float, float]] = {}
    claimed: set[int] = set()
    mapped = cmap.channels if cmap is not None else {}
    for channel, spec in mapped.items():
        want = spec.column.lower()
        hits = [
            i
            for i, cell in enumerate(header)
            if cell.lower() == want or cell.partition("[")[0].strip().lower() == want
        ]
        if not hits:
            raise InputError(
                path, f"no column '{spec.column}' (channel '{channel}' of channel map {cmap.path})"
            )
        i = hits[0]
        factor = _to_si(path, channel, header[i], spec.unit, layout, i, stated)
        found[channel] = (i, factor, -1.0 if spec.invert else 1.0)
        claimed.add(i)
    for i, cell in enumerate(header):
        name, _ = split_header(cell)
        if name not in CHANNEL_UNITS or name in mapped or i in claimed:
            continue
        if name in found:
            raise InputError(path, f"two columns for channel '{name}'", column=cell)
        found[name] = (i, _to_si(path, name, cell, None, layout, i, stated), 1.0)
    if "time" not in found:
        raise InputError(
            path,
            "missing required channel 'time' (a column 'time [unit]' or a channel-map entry)",
        )
    has_geo = "latitude" in found and "longitude" in found
    has_xy = "x" in found and "y" in found
    if not (has_geo or has_xy):
        half = [c for c in ("latitude", "longitude", "x", "y") if c in found]
        detail = f" (found only '{half[0]}')" if half else ""
        raise InputError(
            path,
            f"missing position: needs columns 'latitude' and 'longitude', or 'x' and 'y'{detail}",
        )
    return found, time_format(layout, found["time"][0], stated)


def _to_si(path, channel, cell, unit, layout, i, stated_time) -> float:
    """The factor from a column's unit (``unit``, else its header's) to SI.

    1 for a time column written as date-times or clock times, whatever unit it gives.
    """
    if channel == "time" and time_format(layout, i, stated_time) != "number":
        return 1.0
    if unit is None:
        written = split_header(cell)[1] or ""
        unit = unit_key(channel, written)
        if unit is None:
            raise InputError(
                path,
                f"unknown unit '{written}' for channel '{channel}' (accepted: {accepted_units(channel)})",
                column=cell,
            )
    return CHANNEL_UNITS[channel][unit]


def _parse_numbers(path, raw, layout: Layout, found, text=()):
    """Selected columns as float64 arrays (NaN for blanks), one polars pass when clean.

    Channels in ``text`` come back as lists of their stripped cells (None for a blank).
    """
    import polars as pl  # deferred: polars takes a quarter of a second to import

    header, decimal_comma = layout.header, layout.decimal_comma
    names = [f"column_{i}" for i in range(len(header))]
    wanted = {names[i]: ch for ch, (i, _, _) in found.items() if ch not in text}
    texts = {names[found[ch][0]]: ch for ch in text}
    options = dict(
        has_header=False,
        skip_lines=layout.skip,
        separator=layout.sep,
        columns=[*wanted, *texts],
        encoding=layout.encoding,
        truncate_ragged_lines=True,
        missing_columns="insert",
        extra_columns="ignore",
        raise_if_empty=False,
        quote_char='"',
    )
    schema = {n: (pl.Float64 if n in wanted else pl.String) for n in names}
    try:
        frame = pl.read_csv(raw, schema=schema, decimal_comma=decimal_comma, **options)
        clean = True
    except pl.exceptions.PolarsError:
        clean = False
    if not clean:  # find the first cell that is not a number, or parse after trimming
        try:
            strings = pl.read_csv(raw, schema={n: pl.String for n in names}, **options)
        except pl.exceptions.PolarsError as err:
            first = str(err).splitlines()[0]
            raise InputError(path, f"cannot be read as CSV: {first}") from err
        cols = {}
        bad_rows = []
        for name in wanted:
            cells = strings[name].str.strip_chars()
            cells = cells.replace("", None)
            numeric = cells.str.replace(",", ".", literal=True) if decimal_comma else cells
            values = numeric.cast(pl.Float64, strict=False)
            bad = (values.is_null() & cells.is_not_null()).arg_true()
            if len(bad):
                bad_rows.append((int(bad[0]), int(name[7:]), name, cells[int(bad[0])]))
            cols[name] = values
        if bad_rows:
            row, _, name, value = min(bad_rows)
            raise InputError(
                path,
                f"'{value}' is not a number",
                row=row + layout.first_row,
                column=header[int(name[7:])],
            )
        frame = pl.DataFrame(cols).hstack(strings.select(list(texts)))
    data = {ch: frame[n].str.strip_chars().replace("", None).to_list() for n, ch in texts.items()}
    # Column by column (blanks -> NaN), each parsed column let go once converted: the
    # numbers are held twice one column at a time, not all at once.
    for n, ch in wanted.items():
        values = frame.drop_in_place(n).to_numpy().astype(np.float64, copy=False)
        data[ch] = values if values.flags.writeable else values.copy()
    return data


def _merge_duplicate_stamps(time_s, data, rows):
    """Drop rows whose time equals the previous row's, keeping the first value of each cell."""
    group = np.concatenate(([0], np.cumsum(np.diff(time_s) != 0)))
    first = np.concatenate(([True], np.diff(group) != 0))
    n_groups = int(group[-1]) + 1
    merged = {name: _first_cell(values, group, n_groups) for name, values in data.items()}
    return time_s[first], merged, rows[first]


def _first_cell(values, group, n_groups):
    """The first non-blank value of each group (rows in order, ``group`` their group number, -1 for none), NaN for a group with none."""
    out = np.full(n_groups, np.nan)
    ok = np.isfinite(values) & (group >= 0)
    groups, at = np.unique(group[ok], return_index=True)
    out[groups] = values[ok][at]
    return out


def _check_finite(path, values, rows, column):
    """InputError at the first infinite cell (``rows``: spreadsheet row of each value)."""
    inf = np.isinf(values)
    if inf.any():
        i, row = _first_bad(rows, inf)
        raise InputError(path, f"'{values[i]}' is not a finite number", row=row, column=column)


#: Channels only the analysed lap's traces use (pedal and steering traces, gear): with
#: ``read_log(defer=TRACE_CHANNELS)`` they are parsed for that lap's rows when asked
#: (:meth:`Log.channel_rows`), not for the whole log: on a one-hour log, 16 ms of the
#: reader's 100. [-]
TRACE_CHANNELS = ("brake", "steer", "gear")


class _Channels(dict):
    """A log's channels; one the reader deferred is parsed whole when asked for by key."""

    deferred: _Deferred | None = None

    def __missing__(self, key):
        if self.deferred is None or key not in self.deferred.specs:
            raise KeyError(key)
        values = self.deferred.whole(key)
        self[key] = values
        return values


@dataclass(eq=False)
class _Deferred:
    """What it takes to parse deferred channels later, and where each log row came from.

    ``group_start[j]``: the parsed row (0-based after the header, or the units row) of
    log row j's first line (later lines with the same time stamp were merged into it);
    ``dropped``: parsed rows left out as blank. ``time_kind``: how the time column is
    written (:func:`limitlap.logformat.time_format`).
    """

    path: Path
    source: str | bytes
    layout: Layout
    time_kind: str
    specs: dict
    time_spec: tuple
    time_s: np.ndarray
    group_start: np.ndarray
    dropped: np.ndarray
    n_parsed: int
    cache: dict = field(default_factory=dict)

    def whole(self, name):
        """The channel for every log row, from a parse of its whole column."""
        values = _parse_numbers(self.path, self.source, self.layout, {name: self.specs[name]})[name]
        return self._merged(name, values, 0, self.group_start)

    def rows(self, name, start, stop):
        """The channel for log rows start..stop from those rows' bytes alone, or None."""
        key = (start, stop)
        if key not in self.cache:
            self.cache.clear()
            import polars as pl

            try:
                self.cache[key] = self._window(start, stop)
            except (OSError, ValueError, ArithmeticError, pl.exceptions.PolarsError):
                self.cache[key] = None  # the whole column instead (its errors name the row)
        part = self.cache[key]
        return None if part is None else part.get(name)

    def _merged(self, name, values, first, starts):
        """Parsed rows ``first``..

        -> log rows whose first lines are ``starts``: units, the reader's checks,
        and the first non-blank cell of merged duplicates.
        """
        rows = np.arange(values.shape[0]) + first + self.layout.first_row  # spreadsheet rows
        _check_finite(self.path, values, rows, self.layout.header[self.specs[name][0]])
        _, factor, sign = self.specs[name]
        if factor * sign != 1.0:
            values = values * (factor * sign)
        if self.dropped.size:  # a row the reader found blank must be blank here too
            inside = self.dropped[
                (self.dropped >= first) & (self.dropped < first + values.shape[0])
            ]
            cell = np.isfinite(values[inside - first])
            if cell.any():
                row = int(inside[np.argmax(cell)]) + self.layout.first_row
                column = self.layout.header[self.time_spec[0]]
                raise InputError(self.path, "time is blank", row=row, column=column)
        if starts.shape[0] == values.shape[0]:  # one line per log row: nothing merged
            return values
        group = np.searchsorted(starts - first, np.arange(values.shape[0]), side="right") - 1
        return _first_cell(values, group, starts.shape[0])  # as _merge_duplicate_stamps

    def _window(self, start, stop):
        """Every deferred channel for log rows start..stop, or None when the stretch cannot be found or does not parse to the same time stamps."""
        if not (0 <= start < stop <= self.time_s.shape[0]) or self.layout.encoding != "utf8":
            return None
        if self.time_kind != "number":  # stamps found by number only: the whole column
            return None
        first = int(self.group_start[start])
        last = int(self.group_start[stop]) if stop < self.time_s.shape[0] else self.n_parsed
        with _ByteSource(self.source, self.layout.skip) as src:
            begin = src.line_offset(first, float(self.time_s[start]), self)
            end = (
                src.size
                if last == self.n_parsed
                else src.line_offset(last, float(self.time_s[stop]), self)
            )
            if begin is None or end is None or end <= begin:
                return None
            text = src.read(begin, end - begin)
        import polars as pl

        names = [f"column_{i}" for i in range(len(self.layout.header))]
        wanted = {names[self.time_spec[0]]: "time"}
        wanted.update({names[spec[0]]: ch for ch, spec in self.specs.items()})
        frame = pl.read_csv(
            text,
            has_header=False,
            separator=self.layout.sep,
            columns=list(wanted),
            schema={n: (pl.Float64 if n in wanted else pl.String) for n in names},
            decimal_comma=self.layout.decimal_comma,
            truncate_ragged_lines=True,
            missing_columns="insert",
            extra_columns="ignore",
            raise_if_empty=False,
            quote_char='"',
        )
        if frame.height != last - first:
            return None
        cols = {wanted[n]: frame[n].to_numpy().astype(np.float64) for n in wanted}
        starts = self.group_start[start:stop]
        _, factor, sign = self.time_spec
        t = cols.pop("time")
        if factor * sign != 1.0:
            t = t * (factor * sign)
        if not np.array_equal(t[starts - first], self.time_s[start:stop]):
            return None
        return {ch: self._merged(ch, values, first, starts) for ch, values in cols.items()}


def _after_lines(data: bytes, n: int) -> int:
    """The offset just past the ``n``-th line end of ``data``, 0 when it has fewer."""
    at = 0
    for _ in range(n):
        end = data.find(b"\n", at)
        if end < 0:
            return 0
        at = end + 1
    return at


class _ByteSource:
    """Byte ranges of a log: a plain file read at offsets, or gzip-decompressed bytes."""

    #: Bytes read around an estimated row offset: a hundred lines or so. [B]
    CHUNK = 1 << 13

    def __init__(self, source, skip=1):
        self.source = source
        self.skip = skip  # lines before the data: metadata, header, units row

    def __enter__(self):
        if isinstance(self.source, bytes):
            self.fh, self.size = None, len(self.source)
            data_start = _after_lines(self.source, self.skip)
        else:
            self.fh = open(self.source, "rb")  # closed in __exit__
            self.size = self.fh.seek(0, 2)
            length = self.CHUNK
            while True:  # the lines above the data, however long
                chunk = self.read(0, length)
                data_start = _after_lines(chunk, self.skip)
                if data_start or len(chunk) < length:
                    break
                length *= 4
        self.data_start = data_start
        return self

    def __exit__(self, *exc):
        if self.fh is not None:
            self.fh.close()

    def read(self, offset, length):
        if self.fh is None:
            return self.source[offset : offset + length]
        self.fh.seek(offset)
        return self.fh.read(length)

    def line_offset(self, row, time_s, deferred):
        """Byte offset of parsed row ``row``, the first line whose time stamp is ``time_s``, or None.

        From an offset estimated by the mean line length, small chunks are read and
        their first and last time stamps move the estimate until the chunk holds the
        stamp; only that chunk's lines are all read.
        """
        if self.data_start <= 0:
            return None
        per_row = (self.size - self.data_start) / max(deferred.n_parsed, 1)
        estimate = self.data_start + row * per_row
        for _ in range(32):
            lo = max(self.data_start, int(estimate) - self.CHUNK // 2)
            chunk = self.read(lo, self.CHUNK)
            cut = 0 if lo == self.data_start else chunk.find(b"\n") + 1
            if cut < 0 or (lo > self.data_start and cut == 0):
                return None
            lines = chunk[cut:].split(b"\n")
            if lo + len(chunk) < self.size:
                lines.pop()  # the last one is cut off by the chunk
            if len(lines) < 2:
                return None
            # the first and last stamps of the chunk (blank rows have none)
            i_first = next(
                (i for i, ln in enumerate(lines[:16]) if math.isfinite(self._time(ln, deferred))),
                None,
            )
            i_last = next(
                (
                    i
                    for i in range(len(lines) - 1, max(len(lines) - 17, -1), -1)
                    if math.isfinite(self._time(lines[i], deferred))
                ),
                None,
            )
            if i_first is None or i_last is None or i_last <= i_first:
                return None
            t_first, t_last = (
                self._time(lines[i_first], deferred),
                self._time(lines[i_last], deferred),
            )
            if not t_last > t_first:
                return None
            step = (t_last - t_first) / (i_last - i_first)
            if time_s < t_first or (time_s == t_first and lo > self.data_start):
                if lo <= self.data_start:
                    return None
                estimate = lo + cut - ((t_first - time_s) / step + len(lines) // 4) * per_row
                continue
            if time_s > t_last:
                if lo + len(chunk) >= self.size:
                    return None
                estimate = lo + len(chunk) + ((time_s - t_last) / step) * per_row
                continue
            return self._scan(lines, lo + cut, time_s, deferred, lo)
        return None

    def _scan(self, lines, at, time_s, deferred, lo):
        """Offset of the first of ``lines`` (starting at byte ``at``) stamped ``time_s``."""
        for i, line in enumerate(lines):
            if self._time(line, deferred) == time_s:
                if i == 0 and lo > self.data_start:
                    return None  # an earlier line might have the same stamp
                return at
            at += len(line) + 1
        return None

    @staticmethod
    def _time(line, deferred):
        """The time stamp of one line in SI, NaN when blank or not a number."""
        col, factor, sign = deferred.time_spec
        cells = line.split(deferred.layout.sep.encode(), col + 1)
        try:
            cell = cells[col].strip().strip(b'"').strip()
            if deferred.layout.decimal_comma:
                cell = cell.replace(b",", b".")
            return float(cell) * (factor * sign) if cell else math.nan
        except (IndexError, ValueError):
            return math.nan


def _first_bad(rows, mask):
    i = int(np.argmax(mask))
    return i, int(rows[i])


def read_log(path, channel_map=None, *, on_channels=None, defer=()) -> Log:
    """Read a session log (docs/formats.md, Log files) into SI arrays on the log's own time base.

    Parameters
    ----------
    path : str or Path
        CSV file, optionally gzip-compressed (``.csv.gz``); comma, semicolon (with
        decimal commas) or tab separated; UTF-8 (with or without a byte-order mark) or
        UTF-16, LF, CRLF or CR line ends (:func:`limitlap.logformat.log_source`);
        metadata lines above the header and a units row under it are allowed, and time
        as a number, ISO 8601 date-times or clock times
        (:func:`limitlap.logformat.detect_layout`).
    channel_map : ChannelMap, str, Path or None
        Column names and units for a log that does not use the §1 names (a
        :class:`ChannelMap` or the path of its TOML file).
    on_channels : callable, optional
        ``on_channels(time_s, channels)`` as soon as the time base and the channels are
        final and in SI (the same arrays the returned :class:`Log` holds), before the
        positions are converted and the dropouts looked for: work that needs only them can
        start in another thread meanwhile (the pipeline's envelope samples).
    defer : sequence of str
        Channels (of :data:`TRACE_CHANNELS`: the pipeline's choice) not parsed now: the
        log's ``channels`` gets them on first access by key (the whole column) and
        :meth:`Log.channel_rows` for a stretch of rows (those rows alone). Their cells are
        checked when parsed, so a bad cell outside the rows asked for goes unnoticed
        (a row blank but for such cells is dropped as blank, and found out when its
        stretch is parsed).

    Returns
    -------
    Log
        ``channels`` in SI (see :class:`Log`), ``x``/``y`` east/north in metres (WGS84
        fixes converted to a local east-north-up frame at the first fix with pymap3d,
        which implements the ECEF -> ENU rotation of the geodetic-to-local conversion
        [1]_), NaN where a cell was blank. Exact duplicate time stamps are merged (the
        first non-blank cell of each channel kept) with a warning; GPS dropouts are listed
        in ``warnings`` (see :func:`gps_dropouts`).

    Raises
    ------
    InputError
        The file is missing, empty or header-only; it is not a text table (binary
        data, no separator, a first line over 1 MB or 10,000 columns, a limitlap TOML
        file); metadata lines have no header after them; a units row does not match
        the header; its GPS position never changes while the car moves; a required
        channel is missing; a cell is not a number, or a time stamp not a date-time or
        clock time (its row as a spreadsheet counts: the file's first line = row 1); a
        unit is unknown; a latitude/longitude is out of range; time goes backwards; no
        row has a position.

    References
    ----------
    .. [1] B. Hofmann-Wellenhof, H. Lichtenegger, E. Wasle, *GNSS — Global Navigation
       Satellite Systems*, Springer, 2008, §10.2 (local level frame).
    """
    path = Path(path)
    if channel_map is not None and not isinstance(channel_map, ChannelMap):
        channel_map = read_channel_map(channel_map)
    source, head, whole = log_source(path)
    if whole and (not head or head.isspace()):
        raise InputError(path, "file is empty")
    layout = detect_layout(path, head, whole, getattr(channel_map, "layout", None))
    header = layout.header
    found, time_kind = _resolve_columns(path, layout, channel_map)
    later = {ch: found[ch] for ch in defer if ch in found and ch != "time"}
    text = ("time",) if time_kind != "number" else ()
    data = _parse_numbers(
        path, source, layout, {ch: spec for ch, spec in found.items() if ch not in later}, text
    )
    n_rows = len(data["time"])

    def column(channel):
        return header[found[channel][0]]

    first_stamp = None
    if text:
        data["time"], first_stamp = _text_times(path, data["time"], layout, time_kind, column)
    data, rows, keep = _data_rows(path, data, found, column, layout.first_row)
    warnings: list[str] = []
    time_s, data, rows = _time_base(path, data, rows, column, warnings)
    if "speed" in data and not np.isfinite(data["speed"]).any():
        raise InputError(path, "no speed: the column is blank in every row", column=column("speed"))
    if "lap" in data:
        _check_lap_column(path, data["lap"], rows, column("lap"))
    if on_channels is not None and "speed" in data:
        on_channels(time_s, data)
    origin = _local_positions(path, data, time_s, rows, column, warnings)
    derived = {}
    if "speed" not in data:  # a GPS-only log without speed: from the fixes
        derived["speed"] = _speed_from_fixes(path, data, time_s, warnings)
        if on_channels is not None:
            on_channels(time_s, data)
    channels = _Channels(data)
    if later:
        channels.deferred = _Deferred(
            path, source, layout, time_kind, later, found["time"], time_s,
            rows - layout.first_row, np.flatnonzero(~keep), n_rows,
        )  # fmt: skip
    log = Log(
        path=str(path), time_s=time_s, channels=channels, origin=origin, warnings=warnings,
        session=session_info(layout.metadata, first_stamp), metadata=layout.metadata,
        layout_note=describe(path, layout, time_kind), derived=derived,
    )  # fmt: skip
    warnings.extend(dropout_warnings(log, rows))
    return log


def _text_times(path, cells, layout, time_kind, column):
    """The time column's date-times or clock times as seconds from the first, and the first date-time (None for clock times)."""
    rows = np.arange(len(cells)) + layout.first_row
    if time_kind == "iso8601":
        return iso_seconds(path, cells, rows, column("time"))
    return clock_seconds(path, cells, rows, column("time")), None


def _data_rows(path, data, found, column, first_row=2):
    """Blank rows dropped, every value checked finite and scaled to SI.

    Returns the data, the spreadsheet row of each kept row (header = 1) and the mask of
    the parsed rows kept.
    """
    n_rows = len(data["time"])
    rows = np.arange(n_rows) + first_row  # spreadsheet rows: the file's first line = 1
    # A row is blank when every cell is; only rows without a time can be (cheap to test).
    blank = np.isnan(data["time"])
    if blank.any():
        maybe = np.flatnonzero(blank)
        blank[maybe] = np.all([np.isnan(v[maybe]) for v in data.values()], axis=0)
    if n_rows == 0 or blank.all():
        raise InputError(path, "no data rows (header only)")
    for channel, values in data.items():
        _check_finite(path, values, rows, column(channel))
    keep = ~blank
    if not keep.all():  # rows with every cell blank are dropped (most logs have none)
        data = {k: v[keep] for k, v in data.items()}
        rows = rows[keep]
    for channel, values in data.items():
        _, factor, sign = found[channel]
        if factor * sign != 1.0:
            values *= factor * sign
    return data, rows, keep


def _time_base(path, data, rows, column, warnings):
    """The time channel checked (no blanks, never backwards), repeated stamps merged."""
    time_s = data.pop("time")
    if np.isnan(time_s).any():
        _, row = _first_bad(rows, np.isnan(time_s))
        raise InputError(path, "time is blank", row=row, column=column("time"))
    step = np.diff(time_s)
    if (step < 0).any():
        i, _ = _first_bad(rows[1:], step < 0)
        raise InputError(
            path, f"time goes backwards: {time_s[i + 1]:g} s after {time_s[i]:g} s",
            row=int(rows[i + 1]), column=column("time"),
        )  # fmt: skip
    if (step == 0).any():
        n_dup = int((step == 0).sum())
        first_row = int(rows[1:][np.argmax(step == 0)])
        time_s, data, rows = _merge_duplicate_stamps(time_s, data, rows)
        warnings.append(
            f"{path}: {n_dup} row(s) repeat the previous time stamp (first at row {first_row}); "
            "merged into one row each"
        )
    return time_s, data, rows


def _local_positions(path, data, time_s, rows, column, warnings):
    """Positions in the local frame, in place: ``x``/``y`` [m]; returns the WGS84 origin.

    Latitude/longitude go to east-north-up (:func:`limitlap.gnss.to_enu`); a planar
    ``x``/``y`` log is taken as it is (origin None). Rows without a fix get NaN.
    """
    if "latitude" in data and "longitude" in data:
        if "x" in data or "y" in data:
            warnings.append(f"{path}: both latitude/longitude and x/y columns; x/y ignored")
            data.pop("x", None)
            data.pop("y", None)
        lat, lon = data["latitude"], data["longitude"]
        for channel, values, limit in (("latitude", lat, 90.0), ("longitude", lon, 180.0)):
            with np.errstate(invalid="ignore"):
                out = np.abs(values) > limit  # False for blanks (NaN)
            if out.any():
                i, row = _first_bad(rows, out)
                raise InputError(
                    path, f"{channel} {values[i]:g} is out of range -{limit:g}..{limit:g} degrees",
                    row=row, column=column(channel),
                )  # fmt: skip
        fix = np.isfinite(lat) & np.isfinite(lon)
        _require_a_fix(path, lat, fix, "latitude", "longitude", column)
        lat[~fix] = np.nan
        lon[~fix] = np.nan
        data["x"], data["y"], origin = to_enu(lat, lon, data.get("altitude"), fix)
        where = f"{origin[0]:.6f},{origin[1]:.6f}"
        _require_movement(path, data, time_s, fix, ("latitude", "longitude"), column, where)
        return origin
    fix = np.isfinite(data["x"]) & np.isfinite(data["y"])
    _require_a_fix(path, data["x"], fix, "x", "y", column)
    data["x"][~fix] = np.nan
    data["y"][~fix] = np.nan
    first = int(np.argmax(fix))
    where = f"x={data['x'][first]:.1f} m, y={data['y'][first]:.1f} m"
    _require_movement(path, data, time_s, fix, ("x", "y"), column, where)
    return None


#: Fixes that all lie within this span while the car moved (by its speed) more than
#: :data:`_FROZEN_TRAVEL_M` are a frozen or absent GPS position. [m]
#: Common practice, no published source.
_FROZEN_SPAN_M = 1.0
_FROZEN_TRAVEL_M = 50.0


def _require_movement(path, data, time_s, fix, names, column, where):
    """InputError naming the log when its position never changes while the car moves.

    A quick look at every 997th row first (a moving car's fixes spread at once; the
    stride is prime so it meets the fix rows of any GPS rate), then every fix.
    """
    x, y = data["x"], data["y"]
    for a in (x, y):
        probe = a[::997]
        if np.fmax.reduce(probe) - np.fmin.reduce(probe) >= _FROZEN_SPAN_M:
            return
    span = max(float(np.ptp(x[fix])), float(np.ptp(y[fix])))
    cols = " and ".join(f"'{column(n)}'" for n in names)
    if "speed" not in data:
        if span >= _FROZEN_SPAN_M or fix.sum() < 3:  # too few fixes: the speed's own message
            return
        raise InputError(
            path,
            f"no 'speed' channel, and columns {cols} never change (all {int(fix.sum())} "
            f"fixes within {_FROZEN_SPAN_M:g} m of {where}): speed cannot be derived from "
            "a frozen or absent GPS position",
        )
    speed = data["speed"]
    moved = float(np.nansum(0.5 * (speed[1:] + speed[:-1]) * np.diff(time_s)))
    if span >= _FROZEN_SPAN_M or not moved > _FROZEN_TRAVEL_M:
        return
    raise InputError(
        path,
        f"columns {cols}: the position never changes (all {int(fix.sum())} fixes within "
        f"{_FROZEN_SPAN_M:g} m of {where} while the speed covers {moved / 1000:.1f} km): "
        "frozen or absent GPS",
    )


def _speed_from_fixes(path, data, time_s, warnings):
    """Speed from the fixes (:func:`limitlap.derived.speed_from_fixes`) into ``data``, a warning saying so; its record."""
    found = derived_mod.speed_from_fixes(time_s, data["x"], data["y"])
    if not np.isfinite(found.speed_m_s).any():
        raise InputError(
            path,
            "no 'speed' channel, and too few GPS fixes in a row to derive it from them "
            f"(no {max(found.window, 3)} fixes without a gap of {derived_mod.GAP_INTERVALS:g} "
            "fix intervals or more)",
        )
    data["speed"] = found.speed_m_s
    warnings.append(
        f"{path}: no 'speed' channel: speed derived from the GPS fixes (their path "
        f"smoothed over {found.window_s:.2g} s, noise about {found.noise_m_s:.2f} m/s)"
    )
    return found


def _require_a_fix(path, first, fix, first_name, second_name, column):
    if not fix.any():
        blank_one = first_name if not np.isfinite(first).any() else second_name
        raise InputError(
            path, "no position: the column is blank in every row", column=column(blank_one)
        )


def _check_lap_column(path, lap, rows, column):
    ok = np.isfinite(lap)
    not_int = ok & (np.abs(lap - np.round(lap)) > 1e-9)
    if not_int.any():
        i, row = _first_bad(rows, not_int)
        raise InputError(
            path, f"lap number {lap[i]:g} is not a whole number", row=row, column=column
        )
    if ok.any():
        seen = lap[ok]
        back = np.diff(seen) < 0
        if back.any():
            i = int(np.argmax(back)) + 1
            row = int(rows[ok][i])
            raise InputError(
                path,
                f"lap number goes down from {seen[i - 1]:g} to {seen[i]:g}",
                row=row,
                column=column,
            )
