"""Read one CSV table into a staging table with the dialect pinned from batch.toml.

Never trusts auto-detection: delimiter, quote, decimal separator, encoding and the column
list come from the table entry; every cell is read as text (``VARCHAR``) and materialised;
structurally bad lines go to DuckDB's reject table, which is copied out before the next read.
Each staged row carries its file row number (1 = first line after the header), computed
from the file bytes so that skipped blank/comment lines and rejected lines keep numbering
exact.

The rows come from the bytes the caller read and hashed, never from a second read of the
file: DuckDB reads a private copy of them (from the header line on, line endings made LF),
so a file rewritten during the ingest cannot put one version's rows under the other's
SHA-256. Before DuckDB sees anything the bytes are bounded: at most :data:`MAX_COLUMNS`
header columns and :data:`MAX_LINE_BYTES` bytes per line (a longer line is no number). With
``comment`` declared, comment and blank lines above the header are skipped too.
"""

from __future__ import annotations

import codecs
import csv
import io
import os
import re
import tempfile
from dataclasses import dataclass

import duckdb
import numpy as np
import pyarrow as pa

from pipeline.errors import BatchError

ENCODINGS = {"utf-8": "utf-8", "utf-8-sig": "utf-8", "latin-1": "latin-1"}
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
RESERVED_COLUMNS = ("row_number", "ord")  # added to the staging table by stage_csv
#: Most columns a header may have (a batch maps a few; a wide export may carry some more)
MAX_COLUMNS = 1024
#: Longest line of a CSV file [bytes]; no cell of numbers comes near it
MAX_LINE_BYTES = 1024 * 1024


@dataclass(frozen=True)
class StagedTable:
    """Where the rows of one CSV file now are, and what the reader rejected."""

    table: str                       # temporary table: row_number BIGINT + one VARCHAR per column
    header: tuple[str, ...]
    rows_read: int                   # data records in the file (staged + rejected)
    rejects: tuple[tuple[int, str | None, str, str], ...]  # (row_number, column, raw line, message)


def _decode(data: bytes, encoding: str, label: str) -> str:
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode(ENCODINGS[encoding])
    except UnicodeDecodeError as err:
        line = data.count(b"\n", 0, err.start) + 1
        hint = " ; declare encoding = \"latin-1\" in the table entry if the file is Latin-1"
        raise BatchError(f"byte {err.start} is not valid {encoding}{hint}", file=label,
                         row=line - 1) from None


_CHECK_CHUNK = 1 << 22


def _check_encoding(data: bytes, encoding: str, label: str) -> None:
    """Refuse bytes that are not valid in ``encoding`` as :func:`_decode` does, without
    keeping the decoded text (a large file is checked a few MiB at a time)."""
    if ENCODINGS[encoding] != "utf-8":
        return                           # every byte is a Latin-1 character
    decoder = codecs.getincrementaldecoder("utf-8")()
    view = memoryview(data)
    try:
        for start in range(0, len(view), _CHECK_CHUNK):
            decoder.decode(view[start:start + _CHECK_CHUNK])
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        _decode(data, encoding, label)   # the same message, with its byte and row
        raise AssertionError("incremental and whole UTF-8 decoding disagree") from None


def read_header(first: str, spec, label: str) -> tuple[str, ...]:
    """The header row (the text of the header line), split with the declared delimiter and
    quote; at most :data:`MAX_COLUMNS` columns."""
    first = first.rstrip("\r")
    try:
        header = tuple(c.strip() for c in next(csv.reader(
            io.StringIO(first), delimiter=spec.delimiter, quotechar=spec.quote), []))
    except csv.Error as err:  # e.g. a lone carriage return inside the header line
        raise BatchError(f"header line cannot be read as CSV: {err}", file=label, row=0) from None
    if len(header) > MAX_COLUMNS:
        raise BatchError(f"header has {len(header):,} columns; the limit is {MAX_COLUMNS:,}",
                         file=label, row=0)
    if len(set(header)) != len(header):
        dup = sorted({c for c in header if header.count(c) > 1})
        raise BatchError(f"header repeats column(s) {dup}", file=label, row=0)
    reserved = [c for c in header if c.lower() in RESERVED_COLUMNS]
    if reserved:
        raise BatchError(f"column name(s) {reserved} are reserved by the reader, which numbers "
                         "rows with them (names are case-insensitive in SQL); rename the "
                         "column(s)", file=label, row=0, column=reserved[0])
    return header


def check_columns(header: tuple[str, ...], needed: dict[str, str], spec, label: str) -> None:
    """Every mapped column must be in the header; unmapped columns are refused unless ignored."""
    for role, column in needed.items():
        if column not in header:
            hint = ""
            for delim, name in _DELIMITER_NAMES.items():
                if delim != spec.delimiter and any(column in h.split(delim) for h in header):
                    hint = f"; the file seems to use the {name} delimiter: declare delimiter = {delim!r}"
            raise BatchError(f"column '{column}' named for {role} is not in the header "
                             f"{list(header)}{hint}", file=label, column=column)
    extra = [c for c in header if c not in needed.values()]
    if extra and spec.extra_columns != "ignore":
        raise BatchError(f"unmapped column(s) {extra}: map them in batch.toml or set "
                         "extra_columns = \"ignore\" for the table", file=label, column=extra[0])


@dataclass(frozen=True)
class _Lines:
    """Where the physical lines of the file bytes are (1-based line i = index i - 1)."""

    starts: np.ndarray       # byte offset of each line
    content: np.ndarray      # its length without the line break (and a CR before it)
    first_byte: np.ndarray   # its first byte (-1 for an empty line)

    @classmethod
    def of(cls, data: bytes) -> "_Lines":
        buf = np.frombuffer(data, dtype=np.uint8)
        # the newlines found a few MiB at a time: no mask as large as the file
        newlines = np.concatenate([np.flatnonzero(buf[i:i + _CHECK_CHUNK] == 10) + i
                                   for i in range(0, buf.size, _CHECK_CHUNK)] or
                                  [np.zeros(0, np.int64)]).astype(np.int64, copy=False)
        starts = np.empty(newlines.size + 1, dtype=np.int64)
        starts[0] = 0
        starts[1:] = newlines + 1
        length = np.append(newlines, buf.size)      # the ends, made lengths in place
        del newlines
        if starts[-1] == buf.size:          # trailing newline: no last line
            starts, length = starts[:-1], length[:-1]
        has = length > starts
        ends = length
        cr = np.zeros(ends.shape, dtype=bool)
        cr[has] = buf[ends[has] - 1] == 13
        first = np.full(ends.shape, -1, dtype=np.int16)
        first[has] = buf[starts[has]]
        length -= starts
        length -= cr
        return cls(starts, length, first)

    def skipped(self, comment: str) -> np.ndarray:
        """Per line: blank (or only ``\\r``), or starting with the comment character."""
        skip = self.content <= 0
        if comment:
            skip |= self.first_byte == ord(comment)
        return skip


class _Physical:
    """The file's lines (``physical[i]`` is line i + 1) from its bytes (BOM removed), decoded
    only when first needed: a large file without rejects or comments never pays for its
    text, nor for a list of its lines."""

    def __init__(self, body: bytes, encoding: str):
        self._body, self._encoding, self._text, self._lines = body, encoding, None, None

    @property
    def text(self) -> str:
        if self._text is None:
            self._text = self._body.decode(ENCODINGS[self._encoding])
        return self._text

    def _split(self) -> list[str]:
        if self._lines is None:
            self._lines = self.text.split("\n")
        return self._lines

    def __getitem__(self, i: int) -> str:
        if i == 0 and self._lines is None:   # a newline byte is never part of a character
            end = self._body.find(b"\n")
            first = self._body if end < 0 else self._body[:end]
            return first.decode(ENCODINGS[self._encoding])
        return self._split()[i]

    def __len__(self) -> int:
        return len(self._split())


def _header_line(lines: _Lines, comment: str, label: str) -> int:
    """The 1-based line of the header: the first line, or with ``comment`` declared the first
    line that is neither blank nor a comment."""
    if lines.content.size == 0 or not (lines.content > 0).any():
        raise BatchError("file is empty (no header, no rows)", file=label)
    if not comment:
        return 1
    candidates = np.flatnonzero(~lines.skipped(comment))
    if candidates.size == 0:
        raise BatchError("file holds only comment and blank lines (no header, no rows)",
                         file=label)
    return int(candidates[0]) + 1


def _data_lines(lines: _Lines, comment: str, header: int) -> np.ndarray:
    """File line numbers (1-based) of the lines DuckDB treats as records, after the header:
    a line is skipped when it is empty (or only ``\\r``) or starts with the comment
    character."""
    numbers = np.flatnonzero(~lines.skipped(comment)) + 1
    return numbers[numbers > header]


def _check_line_lengths(lines: _Lines, header: int, label: str) -> None:
    """Refuse a line longer than :data:`MAX_LINE_BYTES`, naming its row."""
    long = np.flatnonzero(lines.content > MAX_LINE_BYTES)
    if long.size:
        line = int(long[0]) + 1
        raise BatchError(f"line of {int(lines.content[long[0]]):,} bytes, over the limit of "
                         f"{MAX_LINE_BYTES:,} bytes per line (no cell of numbers is that "
                         "long); fix or remove the row", file=label, row=max(line - header, 0))


_REJECT_TEXT_LIMIT = 10_000  # DuckDB cuts the csv_line of a reject at this many characters


def _swallowed(rejects, physical: _Physical, lines: np.ndarray, header_line: int
               ) -> list[tuple[int, None, str, str]]:
    """Rejects for the data lines a rejected record swallowed (an unterminated quote runs on
    over the following lines, to the end of the file when DuckDB cut the record's text), so
    that every data line is still one row (``physical``: the file's lines)."""
    if not rejects:
        return []
    out, taken = [], {int(r[0]) for r in rejects}
    for line, _, raw, message in rejects:
        span = (raw or "").strip("\r\n").count("\n")
        last = len(physical) if len(raw or "") >= _REJECT_TEXT_LIMIT else int(line) + span
        for swallowed in lines[(lines > int(line)) & (lines <= last)]:
            if int(swallowed) not in taken:
                taken.add(int(swallowed))
                out.append((int(swallowed), None, physical[swallowed - 1].rstrip("\r"),
                            f"{message.split(':')[0]}: line is inside the quoted value left "
                            f"open on row {int(line) - header_line}"))
    return out


def _reject_inline_comments(con, table: str, physical: _Physical, good_lines: np.ndarray,
                            comment: str, rejects: list, header_line: int) -> int:
    """Move staged rows whose line holds the comment character to the rejects.

    DuckDB cuts a line at an unquoted comment character, so ``85.0,78.9#3`` would load as
    78.9; the contract skips whole comment lines only, so such a row is quarantined
    (bad-row-shape) rather than silently shortened. Returns the number of rows moved.
    """
    inline = [int(n) for n in good_lines if comment in physical[n - 1]]
    if inline:
        con.execute(f"DELETE FROM {table} WHERE list_contains($rows, row_number)",
                    {"rows": [n - header_line for n in inline]})
        rejects += [(n, None, physical[n - 1].rstrip("\r"),
                     f"INLINE COMMENT: comment character {comment!r} inside a data row (only "
                     "whole comment lines are skipped)") for n in inline]
    return len(inline)


def _private_copy(data: bytes, start: int) -> str:
    """Write ``data[start:]`` (CRLF made LF) to a private temporary file in chunks, without a
    second copy of a large file in memory; return its path."""
    view = memoryview(data)[start:]
    fd, path = tempfile.mkstemp(prefix="fluidledger-stage-", suffix=".csv")
    try:
        with os.fdopen(fd, "wb") as fh:
            if data.find(b"\r", start) < 0:     # no line ending to change: written as it is
                fh.write(view)
                return path
            pos, size = 0, len(view)
            while pos < size:
                end = min(pos + _COPY_CHUNK, size)
                while end < size and view[end - 1] == 13:   # keep a CR beside its LF
                    end += 1
                fh.write(bytes(view[pos:end]).replace(b"\r\n", b"\n"))
                pos = end
    except BaseException:
        os.unlink(path)
        raise
    return path


_COPY_CHUNK = 1 << 22


def checked_header(info, header_line: int, first: str, spec, needed: dict[str, str],
                   label: str) -> tuple[tuple[str, ...], np.ndarray]:
    """The header (line ``header_line``, text ``first``) and the data line numbers of a
    table file, after the limits on width and line length and the mapped columns are checked
    (what every reader of a CSV file refuses alike: :func:`stage_csv` and the plain split of
    :mod:`pipeline.ingest.plaincsv`)."""
    if first.count(spec.delimiter) >= MAX_COLUMNS and len(first) > MAX_LINE_BYTES:
        raise BatchError(f"header has more than {MAX_COLUMNS:,} columns ({len(first):,} "
                         f"characters); the limit is {MAX_COLUMNS:,} columns", file=label, row=0)
    _check_line_lengths(info, header_line, label)
    header = read_header(first, spec, label)
    check_columns(header, needed, spec, label)
    lines = _data_lines(info, spec.comment, header_line)
    if lines.size == 0:
        raise BatchError("file has a header but no data rows", file=label)
    return header, lines


def stage_csv(con: duckdb.DuckDBPyConnection, data: bytes, spec, label: str,
              needed: dict[str, str], table: str) -> StagedTable:
    """Stage the CSV file whose bytes are ``data`` into temporary table ``table``."""
    _check_encoding(data, spec.encoding, label)
    body = data[3:] if data.startswith(b"\xef\xbb\xbf") else data
    info = _Lines.of(body)
    header_line = _header_line(info, spec.comment, label)
    physical = _Physical(body, spec.encoding)
    first = physical[header_line - 1]
    header, lines = checked_header(info, header_line, first, spec, needed, label)
    start = int(info.starts[header_line - 1])
    del info                             # freed before DuckDB reads: its arrays are large
    offset = header_line - 1             # DuckDB numbers the lines of the copy: + offset
    columns = {name: "VARCHAR" for name in header}
    options = dict(header=True, delim=spec.delimiter, quote=spec.quote, escape=spec.quote,
                   columns=columns, auto_detect=False, store_rejects=True, strict_mode=True,
                   all_varchar=True, null_padding=False, encoding=ENCODINGS[spec.encoding],
                   rejects_table="fl_reject_errors", rejects_scan="fl_reject_scans",
                   rejects_limit=0, new_line="\\n")
    if spec.comment:
        options["comment"] = spec.comment
    option_sql = ", ".join(f"{k} = ${k}" for k in options)
    con.execute("DROP TABLE IF EXISTS fl_reject_errors; DROP TABLE IF EXISTS fl_reject_scans")
    copy = _private_copy(body, start)
    try:
        con.execute(f"CREATE OR REPLACE TEMP TABLE {table} AS SELECT row_number() OVER () AS ord, * "
                    f"FROM read_csv($path, {option_sql})", {"path": copy, **options})
    except duckdb.Error as err:
        if type(err).__name__ == "InterruptException":
            raise
        raise BatchError(f"cannot be read as CSV: {str(err).splitlines()[0]}", file=label) from None
    finally:
        os.unlink(copy)
    # the staged rows and the rejects in one query (a fixed cost per file counts)
    staged, found = con.execute(
        f"SELECT (SELECT count(*) FROM {table}), (SELECT list([line::VARCHAR, column_name, "
        "csv_line, error_type || ': ' || error_message] ORDER BY line) FROM fl_reject_errors)"
    ).fetchall()[0]
    rejects = [(int(line) + offset, column, raw, message)
               for line, column, raw, message in found or []]
    rejects += _swallowed(rejects, physical, lines, header_line)
    reject_lines = np.unique(np.asarray([r[0] for r in rejects], dtype=np.int64))
    if not np.isin(reject_lines, lines).all():
        # DuckDB numbered a record on a line that is not a data line: it broke a line at a
        # lone carriage return, so its line numbers no longer match the file's
        text = physical.text
        cr = re.search("\r(?!\n)", text)
        row = text.count("\n", 0, cr.start()) + 1 - header_line if cr else None
        raise BatchError("a carriage return not followed by a newline splits a row; remove it "
                         "or quote the cell", file=label, row=row)
    good_lines = lines[~np.isin(lines, reject_lines)]
    if staged != good_lines.size:
        raise BatchError(f"reader accounting mismatch: {staged} rows staged but "
                         f"{good_lines.size} expected; check quoting and line endings", file=label)
    if header_line == 1 and np.array_equal(good_lines, np.arange(2, staged + 2)):
        # the common case: no blank, comment or rejected lines, so row number = record ordinal
        con.execute(f"ALTER TABLE {table} RENAME COLUMN ord TO row_number")
    else:
        mapping = pa.table({"ord": np.arange(1, staged + 1, dtype=np.int64),
                            "row_number": good_lines - header_line})
        con.register("fl_row_map", mapping)
        con.execute(f"CREATE OR REPLACE TEMP TABLE {table} AS SELECT m.row_number, "
                    f"s.* EXCLUDE (ord) FROM {table} s JOIN fl_row_map m USING (ord)")
        con.unregister("fl_row_map")
    if spec.comment:
        staged -= _reject_inline_comments(con, table, physical, good_lines, spec.comment,
                                          rejects, header_line)
    seen = {}
    for line, column, raw, message in rejects:
        seen.setdefault(int(line), (int(line) - header_line, column, raw, message))
    return StagedTable(table=table, header=header, rows_read=int(staged + len(seen)),
                       rejects=tuple(seen.values()))
