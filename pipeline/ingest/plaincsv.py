"""Plain CSV files split in Python, exactly as DuckDB's strict reader would stage them.

Most small files of a compilation are *plain*: from the header line on, a quote character
only around a whole field (``"101.3"``), no carriage return other than the one of a CRLF line
break, no NUL byte, no comment character inside a data line, and every data line has the
header's number of fields. In such a file each record is one line and each field is the text
between two delimiters (without its quotes), so a split gives exactly the rows DuckDB's
reader stages with the dialect of :func:`pipeline.ingest.reader.stage_csv` (an empty field,
quoted or not, is NULL; spaces are kept; blank and whole comment lines are skipped; row
numbers count from the header). Reading a plain file
costs no SQL statement: the many small files of a group (:mod:`pipeline.ingest.grouped`)
reach DuckDB as one Arrow table. ``tests/ingest/test_plaincsv.py`` holds the split equal to
DuckDB's staging on generated files and on the bad-input corpus.

The checks before any row is looked at (encoding, header, header width, line length, mapped
columns, no data rows) are those of :func:`~pipeline.ingest.reader.stage_csv`, with its
messages. Any file that is not plain gives ``None`` and is staged by DuckDB as before. The
rows come from the bytes the caller read and hashed (issue 13): nothing is written or read
again.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pipeline.ingest.reader import _decode, _header_line, _Lines, checked_header


@dataclass(frozen=True)
class PlainTable:
    """The staged rows of a plain file: what :class:`~pipeline.ingest.reader.StagedTable`
    says of it, and the cells of its mapped columns."""

    header: tuple[str, ...]
    rows_read: int
    row_numbers: np.ndarray                     # int64, 1 = first line after the header
    cells: dict[str, list[str | None]]          # mapped column -> its cells, None when empty
    rejects: tuple = ()


def split_plain(data: bytes, spec, label: str, needed: dict[str, str]) -> PlainTable | None:
    """The rows of the CSV file whose bytes are ``data`` when it is plain (see the module
    docstring), else None. A file that is refused whatever reads it (not decodable, no
    header or data rows, a header or line over the limits, a mapped column missing) raises
    :class:`BatchError` with :func:`~pipeline.ingest.reader.stage_csv`'s message."""
    text = _decode(data, spec.encoding, label)
    body = data[3:] if data.startswith(b"\xef\xbb\xbf") else data
    info = _Lines.of(body)
    header_line = _header_line(info, spec.comment, label)
    physical = text.split("\n")
    first = physical[header_line - 1]
    header, lines = checked_header(info, header_line, first, spec, needed, label)
    # plain: what DuckDB reads from the header line on holds no NUL or lone CR, and each
    # line is one record (a quote only around a whole field)
    rest = "\n".join(physical[header_line - 1:])
    if "\x00" in rest or "\r" in rest.replace("\r\n", "\n"):
        return None
    width, delimiter, quote = len(header), spec.delimiter, spec.quote
    if _fields(first.removesuffix("\r"), delimiter, quote) is None:
        return None
    data = set(lines.tolist())
    if any(quote in physical[n] for n in range(header_line, len(physical)) if n + 1 not in data):
        return None                    # a quote on a comment line
    records = []
    for n in lines.tolist():
        line = physical[n - 1].removesuffix("\r")
        if (spec.comment and spec.comment in line) or line.count(delimiter) != width - 1:
            return None
        fields = _fields(line, delimiter, quote)
        if fields is None:
            return None
        records.append(fields)
    positions = {name: i for i, name in enumerate(header)}
    cells = {}
    for column in dict.fromkeys(needed.values()):
        i = positions[column]
        cells[column] = [r[i] or None for r in records]
    return PlainTable(header, len(records), lines - header_line, cells)



def _fields(line: str, delimiter: str, quote: str) -> list[str] | None:
    """The fields of a line split at every delimiter; a field may be quoted whole
    (``"101.3"``, ``""``) when no quote is inside it. None when a quote is anywhere else
    (a field quoted in part, an escaped quote, a delimiter or line break inside quotes):
    such a line is left to DuckDB."""
    fields = line.split(delimiter)
    if quote not in line:
        return fields
    out = []
    for field in fields:
        if quote in field:
            if len(field) < 2 or field[0] != quote or field[-1] != quote or \
                    quote in field[1:-1]:
                return None
            field = field[1:-1]
        out.append(field)
    return out
