"""What a log file is before its cells are read: encoding, delimiter, header.

Compression, encoding, line ends, delimiter, decimal mark and the header row.
:func:`log_source` opens a log (gzip or plain) and hands on what polars can parse:
the path itself for UTF-8 with LF or CRLF, else the text converted to UTF-8 with LF in
memory (UTF-16 with or without a byte-order mark, CR-only line ends). :func:`detect_format`
reads the header row: its cells, the delimiter (comma, semicolon with decimal commas, or
tab) and the encoding. Files that are not text, not a table, a TOML file given as a log,
or a header too long to be one are refused here in one line (docs/formats.md, Log files).
"""

from __future__ import annotations

import csv
import gzip
import re
import tomllib
import zlib
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


def detect_format(path: Path, raw: bytes, whole: bool) -> tuple[list[str], str, bool, str]:
    """Header cells, separator, decimal comma, encoding for polars.

    ``raw`` is the start of the text (:func:`log_source`), ``whole`` True when it is all
    of it. A first line longer than :data:`_MAX_HEADER_BYTES`, a header of more than
    :data:`_MAX_COLUMNS` columns and text without a separator are refused before any
    cell is split.
    """
    end = raw.find(b"\n")
    if end < 0 and not whole:
        raise InputError(
            path, f"not a log's header: the first line is longer than {_MAX_HEADER_BYTES >> 20} MB"
        )
    if whole:  # a small file: perhaps a TOML file given where a log belongs
        _refuse_toml(path, raw)
    head = raw if end < 0 else raw[:end]
    encoding = "utf8"
    try:
        header_line = head.decode("utf-8")
    except UnicodeDecodeError:
        header_line = head.decode("cp1252", errors="replace")
        encoding = "utf8-lossy"
    header_line = header_line.rstrip("\r")
    counts = {sep: header_line.count(sep) for sep in (",", ";", "\t")}
    sep = max(counts, key=lambda s: (counts[s], s == ","))
    if counts[sep] >= _MAX_COLUMNS:
        raise InputError(
            path, f"not a log's header: {counts[sep] + 1} columns (at most {_MAX_COLUMNS:,})"
        )
    if counts[sep] == 0:
        _refuse_if_not_a_table(path, raw, whole)
    header = next(csv.reader([header_line], delimiter=sep))
    header = [h.strip() for h in header]
    decimal_comma = False
    if sep != ",":
        sample = raw[end + 1 : end + 1 + 8192].decode("utf-8", errors="replace").splitlines()[:20]
        for line in sample:
            cells = line.split(sep)
            if any(_DECIMAL_COMMA.match(c) for c in cells):
                decimal_comma = True
                break
    if len(header) != len(set(header)):
        seen: set[str] = set()
        for h in header:
            if h in seen and h:
                raise InputError(path, "the header names this column twice", column=h)
            seen.add(h)
    return header, sep, decimal_comma, encoding


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
