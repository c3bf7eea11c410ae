"""Readers: turn a CSV or Parquet file (or an SQL query, see :mod:`monitor.ingest.query`) into
chunks of rows, each row with its line number and, on demand, its raw text.

CSV files are read in blocks of bytes. Without quote characters every line is one row, so the
rows of a block are found with array operations and handed to Arrow's CSV parser in one piece
(the fast path); files with quotes go through the standard ``csv`` module, which follows quoted
fields across lines. Either way each row keeps its physical line number, a row with the wrong
number of fields is set aside (never shifts the others), and memory stays bounded by the block.

A row longer than MAX_RECORD_BYTES is rejected ("row_too_long", with its first line number and
its first 4 KiB) without ever being held whole, and reading goes on after it. Where it ends: on
the fast path at the next newline; on the csv path where csv.reader would end it, at the first
line end outside quotes, so a quoted field spanning a million lines is one rejected row and its
lines are not read as rows (csv.reader itself refuses a field over 128 KiB: same reason). A
quote that is never closed would make the rest of the file one field: instead the line where
that row starts is rejected ("bad_quoting") and the lines after it are read again, as rows of
their own, so nothing is lost.
"""

from __future__ import annotations

import contextlib
import csv
import gzip
import hashlib
import io
import os
import zlib
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO, cast

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
from numpy.typing import NDArray

from monitor.columnar import from_strings
from monitor.errors import InputError, MissingColumnsError
from monitor.ingest.reasons import Rejection

MAX_RECORD_BYTES = 1 << 20  # a longer row is rejected unread ("row_too_long")
HEADER_LIMIT = 1 << 20
BLOCK_LIMIT = 2 << 20  # bytes read at a time (memory per chunk is a few times this)
DELIMITERS = (",", "\t", ";", "|")
PARQUET_MAGIC = b"PAR1"
GZIP_MAGIC = b"\x1f\x8b"  # RFC 1952 §2.3.1: ID1 ID2
PARQUET_SUFFIXES = (".parquet", ".pq", ".parq")


@dataclass(frozen=True, eq=False)
class RawChunk:
    """Rows as read: the model's columns (Arrow arrays), line numbers, raw text on demand."""

    columns: dict[str, pa.Array]
    lines: NDArray[np.int64]
    texts: Callable[[NDArray[np.intp]], list[str]]
    malformed: tuple[Rejection, ...] = ()
    progress: int = 0

    @property
    def rows(self) -> int:
        """Rows read, including the malformed ones."""
        return len(self.lines) + len(self.malformed)


class Source:
    """Something to ingest: a label for messages, a location for the batch, and its chunks."""

    label: str
    location: str
    kind: str
    size: int | None = None
    total: int | None = None  # progress units in all (bytes or rows), if known
    unit: str = "rows"
    record_repeats = True  # keep a batch even when every row was stored before


    def chunks(self) -> Iterator[RawChunk]:
        raise NotImplementedError

    def content_hash(self) -> str | None:
        """SHA-256 of what was read (for files known at once, for queries after reading)."""
        raise NotImplementedError


# opening files ----------------------------------------------------------------------------------
def open_file(path: str | os.PathLike[str], columns: Sequence[str], chunk_rows: int, *,
              time_column: str | None = None, id_column: str | None = None) -> Source:
    """A CSV or Parquet file, checked: it exists, is readable and has the columns. A header
    without rows is a night without rows, not an error."""
    p = Path(path)
    name = str(path)
    if not p.exists():
        raise InputError(f"{name}: no such file")
    if p.is_dir():
        raise InputError(f"{name} is a folder, not a file")
    if not p.is_file():
        raise InputError(f"{name} is not a regular file")
    try:
        with p.open("rb") as fh:
            head = fh.read(len(PARQUET_MAGIC))
    except OSError as exc:
        raise InputError(f"{name}: cannot read ({exc.strerror or exc})") from exc
    if not head:
        raise InputError(f"{name} is empty")
    if head[:2] == GZIP_MAGIC:  # read as it is, like pandas and zcat; Parquet compresses inside
        return CsvSource(p, name, columns, chunk_rows, compressed=True)
    if head == PARQUET_MAGIC or p.suffix.lower() in PARQUET_SUFFIXES:
        from monitor.ingest.parquet import ParquetSource

        return ParquetSource(p, name, columns, chunk_rows, time_column, id_column)
    return CsvSource(p, name, columns, chunk_rows)


def _opener(path: Path, compressed: bool) -> Callable[[], BinaryIO]:
    """Opens the file's bytes, decompressed when it is gzip."""
    if compressed:
        return lambda: cast(BinaryIO, gzip.open(path, "rb"))
    return lambda: path.open("rb")


def _scan_bytes(path: Path, name: str) -> tuple[str, int]:
    """SHA-256 and size of a file."""
    digest = hashlib.sha256()
    try:
        with path.open("rb") as fh:
            while block := fh.read(1 << 20):
                digest.update(block)
    except OSError as exc:
        raise InputError(f"{name}: cannot read ({exc.strerror or exc})") from exc
    return digest.hexdigest(), path.stat().st_size


def _scan(path: Path, name: str, compressed: bool = False) -> tuple[str, int, bool, bool]:
    """One pass over the bytes (decompressed, for a gzip file): SHA-256, size, and whether the
    first line and the rest hold quote characters. A NUL byte means a binary file."""
    digest = hashlib.sha256()
    size = 0
    head_quotes = body_quotes = False
    in_head = True
    try:
        with _opener(path, compressed)() as fh:
            while block := fh.read(1 << 20):
                if b"\0" in block:
                    raise InputError(f"{name} looks like a binary file (it contains NUL bytes), "
                                     "not CSV text")
                digest.update(block)
                size += len(block)
                body = block
                if in_head:
                    cut = block.find(b"\n")
                    head_quotes = head_quotes or b'"' in (block if cut < 0 else block[:cut])
                    in_head = cut < 0
                    body = b"" if cut < 0 else block[cut + 1:]
                body_quotes = body_quotes or b'"' in body
    except (gzip.BadGzipFile, EOFError, zlib.error) as exc:  # damaged or cut short
        raise InputError(f"{name} is not a complete gzip file ({exc}); compress it again or "
                         "ingest the uncompressed CSV") from exc
    except OSError as exc:
        raise InputError(f"{name}: cannot read ({exc.strerror or exc})") from exc
    return digest.hexdigest(), size, head_quotes, body_quotes


# CSV ------------------------------------------------------------------------------------------
class CsvSource(Source):
    kind = "csv"
    unit = "B"

    def __init__(self, path: Path, name: str, columns: Sequence[str], chunk_rows: int, *,
                 use_csv_module: bool = False, compressed: bool = False):
        self.path = path
        self.label = name
        self.location = str(path.resolve())
        self.chunk_rows = max(1, int(chunk_rows))
        self._bytes = _opener(path, compressed)  # sizes, offsets and the hash: of the CSV text
        self.compressed = compressed
        self._hash, self.size, head_quotes, body_quotes = _scan(path, name, compressed)
        self.total = self.size
        # Quotes only in the header (some exporters quote the names) keep the fast path; a
        # quoted newline in the header would put a quote after the first newline too.
        self.slow = body_quotes or use_csv_module
        head = self._first_line()
        self.header_bytes = len(head)
        text = self._decode_header(head)
        self.delimiter, fields = _pick_delimiter(text, columns,
                                                 quoted=self.slow or head_quotes)
        self.fields = len(fields)
        missing = [c for c in columns if c not in fields]
        if missing:
            raise MissingColumnsError(missing, [f for f in fields if f] or [], name)
        for column in columns:
            if fields.count(column) > 1:
                raise InputError(f"column '{column}' appears {fields.count(column)} times in "
                                 f"the header of {name}")
        self.index = {c: fields.index(c) for c in columns}

    def content_hash(self) -> str | None:
        return self._hash

    def _first_line(self) -> bytes:
        with self._bytes() as fh:
            head = fh.read(HEADER_LIMIT + 1)
        if self.slow:  # the header ends at the first newline outside quotes
            end = _quoted_line_end(head)
        else:
            end = head.find(b"\n")
            end = len(head) if end < 0 and len(head) <= HEADER_LIMIT else end
        if end < 0 or end > HEADER_LIMIT:
            raise InputError(f"{self.label}: the first line is longer than "
                             f"{HEADER_LIMIT // 1024} KiB; is this a CSV file?")
        return head[:end + 1] if end < len(head) else head

    def _decode_header(self, head: bytes) -> str:
        try:
            text = head.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise InputError(f"{self.label} is not UTF-8 text (a binary file?): undecodable "
                             f"byte at offset {exc.start} of the first line") from exc
        text = text.removeprefix("\ufeff").rstrip("\n").removesuffix("\r")
        if "\r" in text and not self.slow:
            raise InputError(f"{self.label} uses CR-only line endings; save it with LF or "
                             "CRLF line endings")
        return text

    def chunks(self) -> Iterator[RawChunk]:
        return self._slow_chunks() if self.slow else self._fast_chunks()

    # fast path: no quotes anywhere, so every line is exactly one row -----------------------
    def _fast_chunks(self) -> Iterator[RawChunk]:
        block_size = int(min(max(self.chunk_rows * 48, 1 << 16), BLOCK_LIMIT))
        delim = ord(self.delimiter)
        line = 2  # the header is line 1
        carry = b""
        pending: list[Rejection] = []  # a row too long to hold, reported with the next chunk
        skipping: tuple[int, bytes] | None = None
        with self._bytes() as fh:
            fh.seek(self.header_bytes)
            while True:
                block = fh.read(block_size)
                eof = not block
                if skipping is not None:  # inside an over-long row: drop bytes to its end
                    cut = block.find(b"\n")
                    if cut < 0 and not eof:
                        continue
                    pending.append(_too_long(skipping[0], skipping[1]))
                    line = skipping[0] + 1
                    skipping = None
                    block = block[cut + 1:] if cut >= 0 else b""
                data = carry + block if carry else block
                got = len(block)
                del block, carry  # only ``data`` stays in memory
                if eof and data and not data.endswith(b"\n"):
                    data += b"\n"
                end = data.rfind(b"\n") + 1
                if end == 0:
                    if eof:
                        break
                    if len(data) > MAX_RECORD_BYTES:
                        skipping, carry = (line, data[:4096]), b""
                    else:
                        carry = data
                    continue
                carry = data[end:]
                yield from self._split_block(data, end, line, delim, pending, got)
                pending = []
                line += data.count(b"\n", 0, end)
                if eof:
                    break
        if pending:
            yield RawChunk({}, np.zeros(0, np.int64), lambda rows: [], tuple(pending))

    def _split_block(self, data: bytes, end: int, first_line: int, delim: int,
                     pending: list[Rejection], progress: int) -> Iterator[RawChunk]:
        arr = np.frombuffer(data, dtype=np.uint8, count=end)
        ends = np.flatnonzero(arr == 10)
        starts = np.concatenate(([0], ends[:-1] + 1))
        has_cr = np.zeros(len(ends), dtype=bool)
        nonempty = ends > starts
        has_cr[nonempty] = arr[ends[nonempty] - 1] == 13
        stops = ends - has_cr  # end of the row's text, without CR LF
        lone_cr = int(np.count_nonzero(arr == 13)) > int(has_cr.sum())  # a CR inside a field
        where = np.searchsorted(ends, np.flatnonzero(arr == delim))  # row of each delimiter
        fields = np.bincount(where, minlength=len(ends)) + 1
        blank = stops == starts
        lines = first_line + np.arange(len(ends), dtype=np.int64)
        step = self.chunk_rows
        for lo in range(0, len(ends), step):
            hi = min(lo + step, len(ends))
            sl = slice(lo, hi)
            too_long = (stops[sl] - starts[sl]) > MAX_RECORD_BYTES
            bad_count = (fields[sl] != self.fields) & ~blank[sl] & ~too_long
            good = ~blank[sl] & ~too_long & ~bad_count
            malformed = list(pending) if lo == 0 else []
            for i in np.flatnonzero(too_long):
                malformed.append(_too_long(int(lines[lo + i]),
                                           data[starts[lo + i]:starts[lo + i] + 4096]))
            for i in np.flatnonzero(bad_count):
                j = lo + i
                malformed.append(Rejection(
                    int(lines[j]), _text(data[starts[j]:stops[j]]), "wrong_field_count",
                    f"{fields[j]} fields where the header has {self.fields}"))
            malformed.sort(key=lambda r: r.line)
            g_starts, g_stops = starts[sl][good], stops[sl][good]
            payload = _payload(arr, starts[lo], ends[hi - 1] + 1, good,
                               ends[sl] - starts[sl] + 1, has_cr[sl], ends[sl] - starts[lo])
            columns = self._parse(payload, int(good.sum()), lone_cr)

            def texts(rows: NDArray[np.intp], s: NDArray[np.intp] = g_starts,
                      e: NDArray[np.intp] = g_stops) -> list[str]:
                return [_text(data[s[i]:e[i]]) for i in rows]

            share = progress if lo == 0 else 0
            yield RawChunk(columns, lines[sl][good], texts, tuple(malformed), share)

    def _parse(self, payload: memoryview | bytes, count: int,
               lone_cr: bool = False) -> dict[str, pa.Array]:
        """Split the payload's lines into the model's columns, all as text.

        Arrow's parser is the fast one; pandas (told that only LF ends a line) takes the
        payloads Arrow cannot: a CR inside a field, bytes that are not UTF-8.
        """
        if count == 0:
            return {c: from_strings([]) for c in self.index}
        names = [f"c{i}" for i in range(self.fields)]
        wanted = {f"c{i}" for i in self.index.values()}
        try:
            if lone_cr:
                raise pa.ArrowInvalid("Arrow would end a line at a lone CR")
            table = pacsv.read_csv(
                pa.BufferReader(pa.py_buffer(payload)),
                read_options=pacsv.ReadOptions(column_names=names, use_threads=False,
                                               block_size=max(len(payload), 1 << 16)),
                parse_options=pacsv.ParseOptions(delimiter=self.delimiter, quote_char=False,
                                                 escape_char=False, newlines_in_values=False,
                                                 ignore_empty_lines=False),
                convert_options=pacsv.ConvertOptions(
                    include_columns=sorted(wanted), column_types=dict.fromkeys(wanted, pa.string()),
                    strings_can_be_null=False, quoted_strings_can_be_null=False,
                    null_values=[], true_values=[], false_values=[]))
            columns = {c: table.column(f"c{i}").combine_chunks() for c, i in self.index.items()}
        except pa.ArrowInvalid:  # e.g. bytes that are not UTF-8: pandas replaces them
            import pandas as pd  # only here: importing it costs more than parsing most files

            frame = pd.read_csv(
                io.BytesIO(bytes(payload)), sep=self.delimiter, header=None,
                names=range(self.fields),
                usecols=sorted(self.index.values()), dtype=str, na_filter=False,
                quoting=csv.QUOTE_NONE, lineterminator="\n", encoding="utf-8",
                encoding_errors="replace", skip_blank_lines=False, index_col=False,
                low_memory=False, engine="c")
            columns = {c: pa.array(frame[i], pa.string()) for c, i in self.index.items()}
        rows = len(next(iter(columns.values())))
        if rows != count:  # cannot happen: every payload line has the header's fields
            raise RuntimeError(f"CSV parser returned {rows} rows for {count} lines")
        return columns

    # slow path: quoted fields (possibly across lines) through the csv module ----------------
    def _slow_chunks(self) -> Iterator[RawChunk]:
        wanted = list(self.index.items())
        tap = _LineTap(lambda: io.TextIOWrapper(self._bytes(), encoding="utf-8-sig",
                                                errors="replace", newline=""), self.delimiter)
        with contextlib.closing(tap):
            reader = csv.reader(tap, delimiter=self.delimiter, strict=False)
            next(reader)  # the header, already checked
            tap.forget()
            values: list[list[str]] = [[] for _ in wanted]
            lines: list[int] = []
            raws: list[str] = []
            malformed: list[Rejection] = []
            done = tap.bytes
            while True:
                first = tap.count + 1
                fields: list[str] | None = None
                problem: Exception | None = None
                try:
                    fields = next(reader)
                    closed = not tap.ended  # at the end of the file csv ends even a quoted field
                except StopIteration:
                    break
                except (_TooLong, csv.Error) as exc:  # csv.reader starts afresh after either
                    problem, closed = exc, tap.skip_record()
                if not closed:  # a quote never closed: set its line aside, read on after it
                    malformed.append(_unclosed(first, tap.taken[0]))
                    tap.rewind(first)
                raw = tap.forget().rstrip("\r\n")
                if closed and problem is not None:
                    malformed.append(_unreadable(first, raw, problem))
                elif closed and fields:
                    if len(raw) > MAX_RECORD_BYTES:
                        malformed.append(_too_long(first, raw[:4096].encode()))
                    elif len(fields) != self.fields:
                        malformed.append(Rejection(
                            first, raw, "wrong_field_count",
                            f"{len(fields)} fields where the header has {self.fields}"))
                    else:
                        for target, (_, i) in zip(values, wanted, strict=True):
                            target.append(fields[i])
                        lines.append(first)
                        raws.append(raw)
                if (len(lines) + len(malformed) >= self.chunk_rows
                        or tap.bytes - done >= BLOCK_LIMIT):  # long rows: bounded by the block
                    yield _text_chunk(wanted, values, lines, raws, malformed, tap.bytes - done)
                    done = tap.bytes
                    values, lines, raws, malformed = [[] for _ in wanted], [], [], []
            if lines or malformed:
                yield _text_chunk(wanted, values, lines, raws, malformed, tap.bytes - done)


class _TooLong(Exception):
    """The record being read has outgrown its allowance."""


ALLOWANCE = MAX_RECORD_BYTES + 2  # characters of a record held: the longest row and a CR LF
START, FIELD, QUOTED = 0, 1, 2  # where csv.reader is in a record (see _quote_state)


class _LineTap:
    """Feeds lines to ``csv.reader`` and keeps those of the current record, to number rows and
    keep their text.

    It never reads more of a record than its allowance, so a giant line is never held whole:
    when csv.reader asks for more than that, the tap raises _TooLong, and ``skip_record``
    reads on to the end of the record keeping nothing more. Physical lines end with LF, CR LF
    or CR (as ``newline=""`` reads them) and are counted, for row numbers.
    """

    def __init__(self, open_text: Callable[[], io.TextIOWrapper], delimiter: str):
        self.open_text = open_text
        self.delimiter = delimiter
        self.fh = open_text()
        self.taken: list[str] = []  # the current record's pieces, at most ALLOWANCE characters
        self.count = 0  # physical lines read
        self.bytes = 0  # characters read, for progress
        self.ended = False  # the end of the file was met
        self.split_cr = False  # the last piece was cut by the limit right after a CR

    def __iter__(self) -> _LineTap:
        return self

    def __next__(self) -> str:
        room = ALLOWANCE - sum(map(len, self.taken)) if self.taken else ALLOWANCE
        if room <= 0:  # csv.reader wants more of a record that had its share
            raise _TooLong
        line = self.fh.readline(room)
        if len(line) == room or self.split_cr or not line:  # the rare cases, in _read
            line = self._read(room, line)
            if not line:
                self.ended = True
                raise StopIteration
        else:  # a whole line (or the last one, without its line end)
            self.count += 1
            self.bytes += len(line)
        self.taken.append(line)
        if len(line) == room and not _ends_line(line):  # cut by the limit: longer still
            raise _TooLong
        return line

    def _read(self, limit: int, line: str | None = None) -> str:
        """The current physical line, or at most ``limit`` characters of what is left of it
        (``line``: what ``readline(limit)`` has just given)."""
        if line is None:
            line = self.fh.readline(limit)
        if self.split_cr and line == "\n":  # the LF of a CR LF that the limit cut apart
            self.bytes += 1
            line = self.fh.readline(limit)
        self.split_cr = len(line) == limit and line.endswith("\r")
        self.bytes += len(line)
        self.count += _ends_line(line)
        return line

    def skip_record(self) -> bool:
        """Read on to the end of the current record without keeping it: the first line end
        outside quotes, found as csv.reader finds it, or the end of the file. False if the
        file ended inside a quoted field."""
        state = START
        for piece in self.taken:
            state = _quote_state(piece, state, self.delimiter)
        line = self.taken[-1]
        while state == QUOTED or not _ends_line(line):
            line = self._read(BLOCK_LIMIT)
            if not line:
                self.ended = True
                break
            state = _quote_state(line, state, self.delimiter)
        return state != QUOTED

    def rewind(self, line: int) -> None:
        """Go back to the start of physical line ``line + 1`` (reading the file again)."""
        self.fh.close()
        self.fh = self.open_text()
        self.count = self.bytes = 0
        self.split_cr = self.ended = False
        while self.count < line and self._read(BLOCK_LIMIT):
            pass

    def forget(self) -> str:
        """The text held of the current record, which is then forgotten."""
        text = "".join(self.taken)
        self.taken.clear()
        return text

    def close(self) -> None:
        self.fh.close()


def _ends_line(piece: str) -> bool:
    return piece.endswith(("\n", "\r"))


def _quote_state(text: str, state: int, delimiter: str) -> int:
    """Where csv.reader (doubled quotes, not strict) is after ``text``, starting in ``state``.

    START: a quote would open a quoted field (at the start of a field, and right after a quoted
    field closes: csv.reader goes on alike from both); FIELD: in unquoted text, where a quote is
    an ordinary character; QUOTED: in a quoted field, which a single quote closes (a line end
    there is part of the field; anywhere else it ends the record, which the caller checks). A
    doubled quote leaves every state as it was, so the pairs are dropped first and the loop
    only visits the quotes that open or close a field or stand alone.
    """
    text = text.replace('""', "")
    end = 0
    at = text.find('"')
    while at >= 0:
        if state != QUOTED and at > 0:  # the character before the quote decides
            state = START if text[at - 1] == delimiter else FIELD
        state = (QUOTED, FIELD, START)[state]  # START opens, FIELD keeps, QUOTED closes
        end = at + 1
        at = text.find('"', end)
    if state != QUOTED and end < len(text):
        state = START if text[-1] == delimiter else FIELD
    return state


def _text_chunk(wanted: list[tuple[str, int]], values: list[list[str]], lines: list[int],
                raws: list[str], malformed: list[Rejection], progress: int) -> RawChunk:
    columns = {name: from_strings(v) for (name, _), v in zip(wanted, values,
                                                                      strict=True)}

    def texts(rows: NDArray[np.intp], r: list[str] = raws) -> list[str]:
        return [r[i] for i in rows]

    return RawChunk(columns, np.array(lines, dtype=np.int64), texts, tuple(malformed), progress)


def _payload(arr: NDArray[np.uint8], lo: int, hi: int, good: NDArray[np.bool_],
             lengths: NDArray[np.intp], has_cr: NDArray[np.bool_],
             newline_at: NDArray[np.intp]) -> memoryview | bytes:
    """The bytes of the good rows of ``arr[lo:hi]`` without their CRs, ready for the parser."""
    if good.all() and not has_cr.any():
        return arr[lo:hi].data
    keep = np.repeat(good, lengths)
    keep[newline_at[has_cr] - 1] = False
    return arr[lo:hi][keep].tobytes()


def _pick_delimiter(header: str, columns: Sequence[str], quoted: bool) -> tuple[str, list[str]]:
    """The delimiter under which the header names every column (comma first)."""
    best: list[str] = []
    best_delim = ","
    for delim in DELIMITERS:
        split = next(csv.reader([header], delimiter=delim), []) if quoted else header.split(delim)
        fields = [f.strip() for f in split]
        if all(c in fields for c in columns):
            return delim, fields
        if len(fields) > len(best):
            best, best_delim = fields, delim
    return best_delim, best


def _quoted_line_end(data: bytes) -> int:
    """Index of the first newline outside double quotes, or -1."""
    inside = False
    for i, byte in enumerate(data):
        if byte == 34:
            inside = not inside
        elif byte == 10 and not inside:
            return i
    return -1


def _unreadable(line: int, text: str, problem: Exception) -> Rejection:
    """A record longer than its allowance, or one that csv.reader gave up on."""
    if isinstance(problem, _TooLong):
        return _too_long(line, text[:4096].encode())
    code = "row_too_long" if "field larger" in str(problem) else "bad_quoting"
    return Rejection(line, text[:4096], code, str(problem))


def _unclosed(line: int, text: str) -> Rejection:
    return Rejection(line, text[:4096].rstrip("\r\n"), "bad_quoting",
                     "a quote opened in this row is never closed; the lines after it are read "
                     "as rows of their own")


def _text(raw: bytes) -> str:
    return raw.decode("utf-8", "replace")


def _too_long(line: int, start: bytes) -> Rejection:
    return Rejection(line, _text(start), "row_too_long",
                     f"the row is longer than {MAX_RECORD_BYTES // 1024} KiB")
