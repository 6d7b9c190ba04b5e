"""Read one CSV table into a staging table with the dialect pinned from batch.toml.

Never trusts auto-detection: delimiter, quote, decimal separator, encoding and the column
list come from the table entry; every cell is read as text (``VARCHAR``) and materialised;
structurally bad lines go to DuckDB's reject table, which is copied out before the next read.
Each staged row carries its file row number (1 = first line after the header), computed
from the file bytes so that skipped blank/comment lines and rejected lines keep numbering
exact.
"""

from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass

import duckdb
import numpy as np
import pyarrow as pa

from pipeline.errors import BatchError

ENCODINGS = {"utf-8": "utf-8", "utf-8-sig": "utf-8", "latin-1": "latin-1"}
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
RESERVED_COLUMNS = ("row_number", "ord")  # added to the staging table by stage_csv


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


def read_header(text: str, spec, label: str) -> tuple[str, ...]:
    """The header row, split with the declared delimiter and quote."""
    first = text.split("\n", 1)[0].rstrip("\r")
    if not text.strip():
        raise BatchError("file is empty (no header, no rows)", file=label)
    try:
        header = tuple(c.strip() for c in next(csv.reader(
            io.StringIO(first), delimiter=spec.delimiter, quotechar=spec.quote), []))
    except csv.Error as err:  # e.g. a lone carriage return inside the header line
        raise BatchError(f"header line cannot be read as CSV: {err}", file=label, row=0) from None
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


def _data_lines(data: bytes, comment: str) -> np.ndarray:
    """File line numbers (1-based) of the lines DuckDB treats as records, header excluded.

    Vectorised over the raw bytes: a line is skipped when it is empty (or only ``\r``) or
    starts with the comment character.
    """
    buf = np.frombuffer(data, dtype=np.uint8)
    newlines = np.flatnonzero(buf == 10)
    starts = np.concatenate(([0], newlines + 1))
    ends = np.concatenate((newlines, [buf.size]))
    if starts[-1] == buf.size:          # trailing newline: no last line
        starts, ends = starts[:-1], ends[:-1]
    length = ends - starts
    cr = np.zeros_like(length, dtype=bool)
    has = length > 0
    cr[has] = buf[ends[has] - 1] == 13
    content = length - cr
    keep = content > 0
    if comment:
        first = np.zeros_like(keep)
        first[has] = buf[starts[has]] == ord(comment)
        keep &= ~first
    numbers = np.flatnonzero(keep) + 1
    return numbers[numbers > 1]


_REJECT_TEXT_LIMIT = 10_000  # DuckDB cuts the csv_line of a reject at this many characters


def _swallowed(rejects, text: str, lines: np.ndarray) -> list[tuple[int, None, str, str]]:
    """Rejects for the data lines a rejected record swallowed (an unterminated quote runs on
    over the following lines, to the end of the file when DuckDB cut the record's text), so
    that every data line is still one row."""
    if not rejects:
        return []
    physical = text.split("\n")
    out, taken = [], {int(r[0]) for r in rejects}
    for line, _, raw, message in rejects:
        span = (raw or "").strip("\r\n").count("\n")
        last = len(physical) if len(raw or "") >= _REJECT_TEXT_LIMIT else int(line) + span
        for swallowed in lines[(lines > int(line)) & (lines <= last)]:
            if int(swallowed) not in taken:
                taken.add(int(swallowed))
                out.append((int(swallowed), None, physical[swallowed - 1].rstrip("\r"),
                            f"{message.split(':')[0]}: line is inside the quoted value left "
                            f"open on row {int(line) - 1}"))
    return out


def _reject_inline_comments(con, table: str, text: str, good_lines: np.ndarray, comment: str,
                            rejects: list) -> int:
    """Move staged rows whose line holds the comment character to the rejects.

    DuckDB cuts a line at an unquoted comment character, so ``85.0,78.9#3`` would load as
    78.9; the contract skips whole comment lines only, so such a row is quarantined
    (bad-row-shape) rather than silently shortened. Returns the number of rows moved.
    """
    physical = text.split("\n")
    inline = [int(n) for n in good_lines if comment in physical[n - 1]]
    if inline:
        con.execute(f"DELETE FROM {table} WHERE list_contains($rows, row_number)",
                    {"rows": [n - 1 for n in inline]})
        rejects += [(n, None, physical[n - 1].rstrip("\r"),
                     f"INLINE COMMENT: comment character {comment!r} inside a data row (only "
                     "whole comment lines are skipped)") for n in inline]
    return len(inline)


def stage_csv(con: duckdb.DuckDBPyConnection, path: str, data: bytes, spec, label: str,
              needed: dict[str, str], table: str) -> StagedTable:
    """Read ``path`` (whose bytes are ``data``) into temporary table ``table``."""
    text = _decode(data, spec.encoding, label)
    header = read_header(text, spec, label)
    check_columns(header, needed, spec, label)
    lines = _data_lines(data[3:] if data.startswith(b"\xef\xbb\xbf") else data, spec.comment)
    if lines.size == 0:
        raise BatchError("file has a header but no data rows", file=label)
    columns = {name: "VARCHAR" for name in header}
    options = dict(header=True, delim=spec.delimiter, quote=spec.quote, escape=spec.quote,
                   columns=columns, auto_detect=False, store_rejects=True, strict_mode=True,
                   all_varchar=True, null_padding=False, encoding=ENCODINGS[spec.encoding],
                   rejects_table="fl_reject_errors", rejects_scan="fl_reject_scans",
                   rejects_limit=0)
    if "\r\n" not in text[:4096]:
        # pinned for LF files; CRLF files are left to the reader, because new_line = '\r\n'
        # makes DuckDB 2.0 return no rows and no rejects for them
        options["new_line"] = "\\n"
    if spec.comment:
        options["comment"] = spec.comment
    option_sql = ", ".join(f"{k} = ${k}" for k in options)
    con.execute("DROP TABLE IF EXISTS fl_reject_errors; DROP TABLE IF EXISTS fl_reject_scans")
    try:
        con.execute(f"CREATE OR REPLACE TEMP TABLE {table} AS SELECT row_number() OVER () AS ord, * "
                    f"FROM read_csv($path, {option_sql})", {"path": path, **options})
    except duckdb.Error as err:
        raise BatchError(f"cannot be read as CSV: {str(err).splitlines()[0]}", file=label) from None
    rejects = con.execute(
        "SELECT line, column_name, csv_line, error_type || ': ' || error_message "
        "FROM fl_reject_errors ORDER BY line").fetchall()
    rejects += _swallowed(rejects, text, lines)
    reject_lines = np.unique(np.asarray([r[0] for r in rejects], dtype=np.int64))
    if not np.isin(reject_lines, lines).all():
        # DuckDB numbered a record on a line that is not a data line: it broke a line at a
        # lone carriage return, so its line numbers no longer match the file's
        cr = re.search("\r(?!\n)", text)
        row = text.count("\n", 0, cr.start()) if cr else None
        raise BatchError("a carriage return not followed by a newline splits a row; remove it "
                         "or quote the cell", file=label, row=row)
    good_lines = lines[~np.isin(lines, reject_lines)]
    staged = con.execute(f"SELECT count(*) FROM {table}").fetchall()[0][0]
    if staged != good_lines.size:
        raise BatchError(f"reader accounting mismatch: {staged} rows staged but "
                         f"{good_lines.size} expected; check quoting and line endings", file=label)
    if np.array_equal(good_lines, np.arange(2, staged + 2)):
        # the common case: no blank, comment or rejected lines, so row number = record ordinal
        con.execute(f"ALTER TABLE {table} RENAME COLUMN ord TO row_number")
    else:
        mapping = pa.table({"ord": np.arange(1, staged + 1, dtype=np.int64),
                            "row_number": good_lines - 1})
        con.register("fl_row_map", mapping)
        con.execute(f"CREATE OR REPLACE TEMP TABLE {table} AS SELECT m.row_number, "
                    f"s.* EXCLUDE (ord) FROM {table} s JOIN fl_row_map m USING (ord)")
        con.unregister("fl_row_map")
    if spec.comment:
        staged -= _reject_inline_comments(con, table, text, good_lines, spec.comment, rejects)
    seen = {}
    for line, column, raw, message in rejects:
        seen.setdefault(int(line), (int(line) - 1, column, raw, message))
    return StagedTable(table=table, header=header, rows_read=int(staged + len(seen)),
                       rejects=tuple(seen.values()))
