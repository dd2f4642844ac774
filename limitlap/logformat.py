"""What a log file is before its cells are read: encoding, layout, header.

Compression, encoding, line ends and the layout. :func:`log_source` opens a log (gzip or
plain) and hands on what polars can parse: the path itself for UTF-8 with LF or CRLF,
else the text converted to UTF-8 with LF in memory (UTF-16 with or without a byte-order
mark, CR-only line ends). :func:`detect_layout` reads the first lines: metadata lines
above the header, the header's cells, a units row under bare names, the delimiter
(comma, semicolon with decimal commas, or tab), quoting and the encoding, as a
:class:`Layout` (what a channel map's ``[layout]`` states replaces what is detected);
:func:`time_format` tells how the time column is written, :func:`session_info` what the
metadata names of the session, :func:`describe` the line saying what was found. Files
that are not text, not a table, a TOML file given as a log, a header too long to be one,
metadata lines with no header after them and a units row that does not match the header
are refused here in one line (docs/formats.md, Log files, Layouts).
"""

from __future__ import annotations

import csv
import gzip
import re
import tomllib
import zlib
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from limitlap.errors import InputError
from limitlap.ingest import reading, toml_kind

#: Start of the gzip format (RFC 1952 §2.3.1: ID1 = 0x1f, ID2 = 0x8b).
_GZIP_MAGIC = b"\x1f\x8b"


_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+(?:[eE][-+]?\d+)?\s*$")


def _read_log_bytes(path: Path) -> bytes:
    with reading(path, "log file"):
        raw = path.read_bytes()
    if raw[:2] == _GZIP_MAGIC:
        try:
            raw = gzip.decompress(raw)
        except (OSError, EOFError, zlib.error) as err:
            raise InputError(path, f"damaged gzip file: {err}") from err
    elif path.suffix.lower() == ".gz" and raw:
        raise InputError(path, "named .gz but not gzip-compressed")
    return raw


#: Bytes read from the start of a plain log to find its header and separator. [B]
_HEAD_BYTES = 65536


#: Longest first line read as a header: a log's header names its columns on one line, a
#: few hundred of them; a longer first line is refused unread. [B]
#: Common practice, no published source.
_MAX_HEADER_BYTES = 1 << 20


#: Most columns a header may name (logger exports carry hundreds at most). [-]
#: Common practice, no published source.
_MAX_COLUMNS = 10_000


#: Byte-order marks and the text encodings they start (The Unicode Standard, §23.8).
_BOMS = ((b"\xef\xbb\xbf", "utf-8"), (b"\xff\xfe", "utf-16-le"), (b"\xfe\xff", "utf-16-be"))


#: Control characters that text does not hold (all of C0 but tab, LF and CR; DEL).
_NOT_TEXT = "[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]"


_NOT_TEXT_BYTES = re.compile(_NOT_TEXT.encode())


_NOT_TEXT_CHARS = re.compile(_NOT_TEXT)


#: Every byte but those: deleting them leaves the controls (a C loop, ten times the
#: regular expression's speed on 64 KB of clean text).
_TEXT_BYTES = bytes(b for b in range(256) if not _NOT_TEXT_BYTES.match(bytes([b])))


def _first_line(fh) -> bytes:
    """The start of an open file: 64 KB, or more up to the first line end (a cap past it)."""
    parts = [fh.read(_HEAD_BYTES)]
    size = len(parts[0])
    while parts[-1] and b"\n" not in parts[-1] and b"\r" not in parts[-1]:
        if size > _MAX_HEADER_BYTES:
            break
        parts.append(fh.read(_HEAD_BYTES))
        size += len(parts[-1])
    return b"".join(parts)


def _text_form(path: Path, head: bytes) -> tuple[str, int, str]:
    """Encoding, byte-order mark length and line end of a log from its first bytes.

    UTF-8 (with or without a byte-order mark) and UTF-16 with one are told by the mark;
    UTF-16 without one by its zero bytes beside ASCII. Line ends: LF, CRLF or CR (before
    the first LF, a CR not followed by LF). Control characters that text never holds
    refuse the file as not a text table, at their byte.
    """
    codec, bom = "utf-8", 0
    for mark, name in _BOMS:
        if head.startswith(mark):
            codec, bom = name, len(mark)
            break
    else:
        if len(head) >= 4 and head[1] == head[3] == 0 and head[0] and head[2]:
            codec = "utf-16-le"
        elif len(head) >= 4 and head[0] == head[2] == 0 and head[1] and head[3]:
            codec = "utf-16-be"
    if codec == "utf-8":
        text, width = head, 1
        clean = not head.translate(None, _TEXT_BYTES)
        hit = None if clean else _NOT_TEXT_BYTES.search(head, bom)
    else:  # the first characters (a cut-off last one replaced)
        text, width = head[bom : len(head) - (len(head) - bom) % 2].decode(codec, "replace"), 2
        hit = _NOT_TEXT_CHARS.search(text)
    if hit is not None:
        at = hit.start() if width == 1 else bom + width * hit.start()
        raise InputError(path, f"not a text table (binary data at byte {at})")
    lf, cr = text.find("\n" if width == 2 else b"\n"), text.find("\r" if width == 2 else b"\r")
    if cr >= 0 and (lf < 0 or cr < lf - 1):
        return codec, bom, "CR"
    return codec, bom, ("CRLF" if cr >= 0 and cr == lf - 1 else "LF")


def _as_plain_text(path: Path, raw: bytes, codec: str, bom: int, line_end: str) -> bytes:
    """UTF-8 with LF (or CRLF) line ends from a UTF-16 or CR-only log's bytes."""
    if codec != "utf-8":
        try:
            raw = raw[bom:].decode(codec).encode("utf-8")
        except UnicodeDecodeError as err:
            raise InputError(
                path, f"not {codec.upper()} text: bytes at {bom + err.start} cannot be decoded"
            ) from None
    if line_end == "CR":
        raw = raw.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    return raw


def log_source(path: Path) -> tuple[str | bytes, bytes, bool]:
    """What the parser reads, the start of the text, and whether that start is all of it.

    A plain file is handed to polars by its path (it maps the file: measured 9 ms less
    than reading 19 MB into memory first); a gzip file is decompressed into memory, and
    so is a UTF-16 or CR-only one, converted to UTF-8 with LF line ends
    (:func:`_text_form`). The start (at least the header line, 64 KB or so) serves the
    format detection; a UTF-8 byte-order mark is removed from it (the parser skips the
    header line anyway).
    """
    with reading(path, "log file"), path.open("rb") as fh:
        head = _first_line(fh)
        whole = not fh.read(1)
    raw = None
    if head[:2] == _GZIP_MAGIC:
        raw = _read_log_bytes(path)
        head = raw[:_HEAD_BYTES]
    elif path.suffix.lower() == ".gz" and head:
        raise InputError(path, "named .gz but not gzip-compressed")
    codec, bom, line_end = _text_form(path, head)
    if codec != "utf-8" or line_end == "CR":
        raw = _as_plain_text(
            path, _read_log_bytes(path) if raw is None else raw, codec, bom, line_end
        )
        bom = 0
    if raw is None:
        return str(path), head[bom:], whole
    if raw.startswith(b"\xef\xbb\xbf"):
        raw = raw[3:]
    head = _bytes_head(raw)
    return raw, head, len(head) == len(raw)


def _bytes_head(raw: bytes) -> bytes:
    """The start of a log in memory: 64 KB, or up to the first line end (a cap past it)."""
    end = raw.find(b"\n", 0, _MAX_HEADER_BYTES + 1)
    return raw[: max(_HEAD_BYTES, end + 1 if end >= 0 else _MAX_HEADER_BYTES + 1)]


def split_header(cell: str) -> tuple[str, str | None]:
    """``'Speed [km/h]'`` -> (``'speed'``, ``'km/h'``); no bracket -> unit None."""
    name, bracket, unit = cell.partition("[")
    name = re.sub(r"\s+", "_", name.strip().lower())
    return name, (unit.rstrip().rstrip("]").strip() if bracket else None)


@dataclass(frozen=True, eq=False)
class Layout:
    """Where a log's header, units and data are, and how its cells are written.

    docs/formats.md, Log files, Layouts.

    Attributes
    ----------
    header : list of str
        The header's cells, stripped; a units row's unit joined to a bare name as
        ``name [unit]``. [-]
    sep : str
        The delimiter: ``","``, ``";"`` or a tab. [-]
    decimal_comma : bool
        True when numbers are written with a decimal comma. [-]
    encoding : str
        The encoding polars is given (``"utf8"``, or ``"utf8-lossy"`` for a header in
        another 8-bit code page). [-]
    skip : int
        Lines before the first data line: metadata lines (and blank lines among them),
        the header and the units row. [-]
    metadata : tuple of (str, str)
        The metadata lines' keys and values, as written (a line without a value has
        ``""``). [-]
    metadata_lines : int
        Lines of text above the header (blank lines not counted). [-]
    units_row : bool
        True when the row under the header gives the units. [-]
    quoted : bool
        True when the header or the first data rows quote cells. [-]
    trailing_empty : bool
        True when each line ends with a delimiter (an empty, unnamed last column). [-]
    sample : tuple of tuple of str
        The cells of the first few data rows (the time format is told from them). [-]
    """

    header: list[str]
    sep: str
    decimal_comma: bool
    encoding: str
    skip: int = 1
    metadata: tuple[tuple[str, str], ...] = ()
    metadata_lines: int = 0
    units_row: bool = False
    quoted: bool = False
    trailing_empty: bool = False
    sample: tuple[tuple[str, ...], ...] = ()

    @property
    def first_row(self) -> int:
        """The row of the first data line, as a spreadsheet counts (first line = 1)."""
        return self.skip + 1


#: Most lines above the header taken as metadata lines (exports write a few to a few
#: dozen). [-] Common practice, no published source.
_MAX_METADATA_LINES = 200


#: Data rows kept in :attr:`Layout.sample`. [-]
_SAMPLE_ROWS = 20


#: A ``key: value`` metadata line: a key that starts with a letter and holds no
#: delimiter, bracket or quote, a colon, then a space (or nothing).
_KEY_COLON = re.compile(r'^\s*"?([A-Za-z][^,;\t:=\[\]"]{0,79}?)"?\s*:(?:\s+(.*?))?\s*$')


#: The start of an ISO 8601 date-time (ISO 8601-1:2019, date and time of day combined:
#: a date, "T" or a space, the hour) and a clock time (hh:mm, hh:mm:ss, with a decimal
#: fraction; a zone, Z or an offset from UTC, may follow).
_ISO_DATE_TIME = re.compile(r"^\d{4}-?\d{2}-?\d{2}[T ]\d{2}")
_CLOCK = re.compile(r"^\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?(?:Z|[+-]\d{2}(?::?\d{2})?)?$")


def _cells(line: str, sep: str) -> list[str]:
    """One line's cells, quotes removed (csv rules), stripped."""
    return [c.strip() for c in next(csv.reader([line], delimiter=sep), [])]


def _line_sep(line: str) -> str:
    """The delimiter a line holds most of; a comma when none or tied."""
    counts = {sep: line.count(sep) for sep in (",", ";", "\t")}
    return max(counts, key=lambda s: (counts[s], s == ","))


def _is_value(cell: str) -> bool:
    """True for a cell that holds a value: a number (decimal point or comma), a date-time or a clock time."""
    try:
        float(cell.replace(",", "."))
        return True
    except ValueError:
        return bool(_ISO_DATE_TIME.match(cell) or _CLOCK.match(cell))


def _key_value(line: str) -> tuple[str, str] | None:
    """A metadata line's key and value, or None when the line is not one.

    ``key: value``, or one or two cells (the rest empty) whose first is text: ``Venue,
    Tarrowby Heath``; ``Session;Practice 2;;;``.
    """
    hit = _KEY_COLON.match(line)
    if hit:
        return hit.group(1).strip(), (hit.group(2) or "").strip().strip('"').strip()
    sep = _line_sep(line)
    if line.count(sep) >= _MAX_COLUMNS:  # a header too wide to be one: refused unsplit
        return None
    cells = _cells(line, sep)
    full = [c for c in cells if c]
    if not cells or not cells[0] or len(full) > 2 or _is_value(cells[0]):
        return None
    if not any(ch.isalpha() for ch in cells[0]):
        return None
    return cells[0], (full[1] if len(full) == 2 else "")


def _head_lines(raw: bytes, whole: bool, header_row: int | None) -> tuple[list[str], str]:
    """The first complete lines of the start of a log as text, and polars' encoding for it.

    As many lines as the layout's detection looks at: the metadata lines (or the rows
    up to a stated header row), the header, the units row and the sample. UTF-8; lines
    that are not UTF-8 are read as Windows-1252 (a Latin-1 header), and polars is then
    told to read the file leniently ("utf8-lossy").
    """
    wanted = max(_MAX_METADATA_LINES, header_row or 0) + 2 + 4 * _SAMPLE_ROWS
    parts = raw.split(b"\n", wanted)
    if len(parts) > wanted or (not whole and len(parts) > 1):
        parts.pop()  # the rest, or a line cut off by the end of the start
    lines, encoding = [], "utf8"
    for part in parts:
        try:
            lines.append(part.decode("utf-8").rstrip("\r"))
        except UnicodeDecodeError:
            lines.append(part.decode("cp1252", errors="replace").rstrip("\r"))
            encoding = "utf8-lossy"
    return lines, encoding


def _header_at(path: Path, lines: list[str], whole: bool, header_row: int | None):
    """The index of the header line and the metadata lines above it, [(key, value)].

    The header is the first line that is neither blank nor a metadata line
    (:func:`_key_value`), unless the channel map states its row. A two-cell first line
    over data of the same width is a (short) header, not a metadata line.
    """
    if header_row is not None:
        if header_row > len(lines):
            raise InputError(
                path, f"no row {header_row} for the header the channel map states", row=header_row
            )
        above = [ln for ln in lines[: header_row - 1] if ln.strip()]
        return header_row - 1, [_key_value(ln) or (ln.strip(), "") for ln in above]
    meta: list[tuple[int, tuple[str, str]]] = []
    for i, line in enumerate(lines[: _MAX_METADATA_LINES + 1]):
        if not line.strip():
            continue
        pair = _key_value(line)
        if pair is None:
            break
        meta.append((i, pair))
    else:
        n = len(meta)
        where = "after them" if whole else f"in the first {len(lines)} lines"
        raise InputError(path, f"{n} metadata line{'s' * (n != 1)} and no header row {where}")
    if meta and _is_value(_cells(line, _line_sep(line))[0]):
        last = meta[-1][0]
        if len(_cells(lines[last], _line_sep(lines[last]))) == len(_cells(line, _line_sep(line))):
            i, meta = last, meta[:-1]
        else:
            n = len(meta)
            raise InputError(
                path,
                f"{n} metadata line{'s' * (n != 1)}, then data and no header row naming the columns",
                row=i + 1,
            )
    return i, [pair for _, pair in meta]


def _units_row(path: Path, lines, at: int, sep: str, header: list[str], stated: bool | None):
    """The units row's cells under the header at ``at``, or None when there is none.

    Told from its cells unless ``stated``: a row is a units row when it has text and no
    cell is a value (:func:`_is_value`). It must reach as far as the header does (an
    extra empty cell at the end is allowed).
    """
    if stated is False or at + 1 >= len(lines) or not lines[at + 1].strip():
        return None
    cells = _cells(lines[at + 1], sep)
    if not stated and (not any(cells) or any(_is_value(c) for c in cells if c)):
        return None
    width = len(header)
    while width > 1 and not header[width - 1]:
        width -= 1
    used = len(cells)
    while used > 1 and not cells[used - 1]:
        used -= 1
    if used > width or len(cells) < width:
        raise InputError(
            path,
            f"the units row has {len(cells)} cells, the header {len(header)}: they do not match",
            row=at + 2,
        )
    return cells


def _join_units(header: list[str], units: list[str]) -> list[str]:
    """``name`` + unit -> ``name [unit]``; a header cell with its own ``[unit]`` keeps it."""
    return [
        f"{name} [{unit}]" if unit and name and "[" not in name else name
        for name, unit in zip(header, units + [""] * (len(header) - len(units)), strict=False)
    ]


def detect_layout(path: Path, raw: bytes, whole: bool, stated=None) -> Layout:
    """The layout of a log from the start of its text (docs/formats.md, Log files, Layouts).

    ``raw`` is the start of the text (:func:`log_source`), ``whole`` True when it is all
    of it; ``stated`` a channel map's :class:`limitlap.ingest.StatedLayout` (or None),
    whose values replace what would be detected. A first line longer than
    :data:`_MAX_HEADER_BYTES`, a header of more than :data:`_MAX_COLUMNS` columns and
    text without a separator are refused before any cell is split; so are metadata
    lines with no header after them and a units row that does not match the header.
    """
    end = raw.find(b"\n")
    if end < 0 and not whole:
        raise InputError(
            path, f"not a log's header: the first line is longer than {_MAX_HEADER_BYTES >> 20} MB"
        )
    if whole:  # a small file: perhaps a TOML file given where a log belongs
        _refuse_toml(path, raw)
    lines, encoding = _head_lines(raw, whole, getattr(stated, "header_row", None))
    if not any(sep in lines[0] for sep in (",", ";", "\t")):
        _refuse_if_not_a_table(path, raw, whole)
    at, metadata = _header_at(path, lines, whole, getattr(stated, "header_row", None))
    header_line = lines[at]
    sep = getattr(stated, "delimiter", None) or _line_sep(header_line)
    if header_line.count(sep) >= _MAX_COLUMNS:
        raise InputError(
            path,
            f"not a log's header: {header_line.count(sep) + 1} columns (at most {_MAX_COLUMNS:,})",
        )
    header = _cells(header_line, sep)
    units = _units_row(path, lines, at, sep, header, getattr(stated, "units_row", None))
    if units is not None:
        header = _join_units(header, units)
    skip = at + 1 + (units is not None)
    data = [ln for ln in lines[skip : skip + 4 * _SAMPLE_ROWS] if ln.strip()][:_SAMPLE_ROWS]
    sample = tuple(tuple(_cells(ln, sep)) for ln in data)
    decimal = getattr(stated, "decimal", None)
    decimal_comma = decimal == "," or (
        decimal is None
        and sep != ","
        and any(_DECIMAL_COMMA.match(c) for row in sample for c in row)
    )
    _refuse_repeated_names(path, header)
    return Layout(
        header=header,
        sep=sep,
        decimal_comma=decimal_comma,
        encoding=encoding,
        skip=skip,
        metadata=tuple(metadata),
        metadata_lines=sum(1 for ln in lines[:at] if ln.strip()),
        units_row=units is not None,
        quoted='"' in header_line or any('"' in ln for ln in data),
        trailing_empty=len(header) > 1 and not header[-1],
        sample=sample,
    )


def _refuse_repeated_names(path: Path, header: list[str]) -> None:
    """InputError naming a column the header names twice."""
    if len(header) != len(set(header)):
        seen: set[str] = set()
        for h in header:
            if h in seen and h:
                raise InputError(path, "the header names this column twice", column=h)
            seen.add(h)


def time_format(layout: Layout, column: int, stated: str | None = None) -> str:
    """How the time column is written: ``"number"``, ``"iso8601"`` or ``"clock"``.

    ``stated`` (a channel map's) when given; otherwise told from the first non-blank
    cell of the column in the sample rows (docs/formats.md, Log files, Time stamps).
    """
    if stated is not None:
        return stated
    for row in layout.sample:
        cell = row[column] if column < len(row) else ""
        if not cell:
            continue
        if _ISO_DATE_TIME.match(cell):
            return "iso8601"
        return "clock" if _CLOCK.match(cell) else "number"
    return "number"


def describe(path, layout: Layout, time_kind: str = "number") -> str | None:
    """One line saying what was detected, or None for the plain form.

    Parameters
    ----------
    path : str or Path
        The log as given. [-]
    layout : Layout
        Its layout. [-]
    time_kind : str
        Its time format (:func:`time_format`). [-]

    Returns
    -------
    str or None
        E.g. ``"session.csv: 4 metadata lines, units row, ';' with decimal commas, ISO
        8601 times"``. [-]
    """
    parts = []
    if layout.metadata_lines:
        n = layout.metadata_lines
        parts.append(f"{n} metadata line{'s' * (n != 1)}")
    if layout.units_row:
        parts.append("units row")
    if layout.sep != "," or layout.decimal_comma:
        shown = "tab" if layout.sep == "\t" else f"'{layout.sep}'"
        parts.append(shown + (" with decimal commas" if layout.decimal_comma else ""))
    if layout.quoted:
        parts.append("quoted cells")
    if layout.trailing_empty:
        parts.append("an empty last column")
    if time_kind != "number":
        parts.append("ISO 8601 times" if time_kind == "iso8601" else "clock times")
    return f"{path}: {', '.join(parts)}" if parts else None


#: Metadata keys (lower case, runs of other characters as one space) that name each
#: item of the session information (docs/formats.md, Log files, Metadata lines).
SESSION_KEYS = {
    "date": (
        "date",
        "session date",
        "event date",
        "log date",
        "start date",
        "datetime",
        "date time",
    ),
    "venue": ("venue", "track", "circuit", "track name", "circuit name", "venue name", "location"),
    "driver": ("driver", "driver name", "pilot"),
    "car": ("car", "vehicle", "car name", "vehicle name"),
    "session": ("session", "session name", "session type", "run name"),
}


def session_info(metadata, first_stamp=None) -> dict[str, str]:
    """The session information a log names: ``date``, ``venue``, ``driver``, ``car``, ``session``.

    Parameters
    ----------
    metadata : sequence of (str, str)
        The metadata lines' keys and values (:attr:`Layout.metadata`). [-]
    first_stamp : datetime.datetime, optional
        The time column's first date-time, when it holds date-times: its date serves
        when no metadata line gives one. [-]

    Returns
    -------
    dict of str to str
        Only the items the log names, in the order above; a date written in ISO 8601 (a
        date or a date-time) as ``YYYY-MM-DD``, any other value as written. [-]
    """
    wanted = {alias: item for item, aliases in SESSION_KEYS.items() for alias in aliases}
    found: dict[str, str] = {}
    for key, value in metadata:
        item = wanted.get(" ".join(re.sub(r"[^a-z0-9]+", " ", key.lower()).split()))
        if item is not None and value and item not in found:
            found[item] = _iso_date(value) if item == "date" else value
    if "date" not in found and first_stamp is not None:
        found["date"] = first_stamp.date().isoformat()
    return {item: found[item] for item in SESSION_KEYS if item in found}


def _iso_date(value: str) -> str:
    """``YYYY-MM-DD`` of an ISO 8601 date or date-time (Python's reading of it), else the text."""
    try:
        return datetime.fromisoformat(value).date().isoformat()
    except ValueError:
        return value


#: Lines looked at for a separator before a file is refused as not a table. [-]
_TABLE_LINES = 20


def _refuse_toml(path: Path, raw: bytes) -> None:
    """InputError naming a limitlap TOML file (vehicle, track, channel map) given as a log."""
    try:
        kind = toml_kind(tomllib.loads(raw.decode("utf-8")))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError):
        return
    if kind is not None:
        raise InputError(path, f"this is a {kind[0]} (it has {kind[1]}), not a log")


def _refuse_if_not_a_table(path: Path, raw: bytes, whole: bool) -> None:
    """InputError when no line of the start of the text has a separator."""
    text = raw.decode("utf-8", errors="replace")
    lines = [ln for ln in text.splitlines()[:_TABLE_LINES] if ln.strip()]
    if any(sep in ln for ln in lines for sep in (",", ";", "\t")):
        return
    n = min(len(lines), _TABLE_LINES)
    raise InputError(path, f"not a text table (no comma, semicolon or tab in its first {n} lines)")
