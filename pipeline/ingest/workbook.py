"""Read one worksheet table of a workbook (.xlsx) into the staging table the CSV reader makes.

A ``[[table]]`` whose ``file`` is a workbook names a ``sheet``, optionally the ``header_row``
(as the spreadsheet numbers rows, default 1, or the first row of the range) and a cell
``range`` (``B3:E40``). The result is the same temporary table as
:func:`pipeline.ingest.reader.stage_csv` makes - ``row_number`` (1 = first row after the
header; blank rows count) and one VARCHAR per header column - so normalisation, quarantine and
provenance stay one code path. What differs is what a cell can hold, so the type of every
mapped cell is checked here, before any text reaches the normaliser:

* a number becomes its shortest round-trip text (a formula cell gives its cached value);
* an empty cell (or a text cell that is blank or a declared null value) stays empty, and the
  normaliser routes it as for CSV (``missing-value`` when required);
* an error value (``#DIV/0!``, ``#N/A``, ``#VALUE!``...) is rejected as ``error-cell``, a
  formula the file holds no value for (saved by a program that does not calculate) as
  ``formula-without-value``;
* a date, a time, a boolean or any other text in a number column is rejected as
  ``wrong-cell-type``: never coerced (a number stored as text is not taken either).

A row whose table cells are all empty is skipped, as a blank CSV line is. Each rejected row
keeps its cell reference as the spreadsheet shows it (``VLE!C14``, ``'Rig B'!C14``).

Reader: python-calamine (Rust calamine), about 10x faster than openpyxl's read-only mode on a
100k-row sheet (``benchmarks/workbook.py``). calamine 0.9 returns error cells and formulas
without a value as empty strings, so when a worksheet part of the file holds such a cell (a
byte search for ``t="e"`` or a formula without ``<v>``), they are located with openpyxl
(read-only) - the slow path only runs for such workbooks. The file is parsed from the bytes
the stage hashed.
"""

from __future__ import annotations

import datetime as dt
import io
import re
import zipfile
from dataclasses import dataclass, field

import duckdb
import numpy as np
import pyarrow as pa

from pipeline.errors import BatchError
from pipeline.ingest.normalise import ident
from pipeline.ingest.reader import RESERVED_COLUMNS, check_columns

WORKBOOK_SUFFIXES = (".xlsx",)
REJECT_CODES = {"error": "error-cell", "type": "wrong-cell-type",
                "uncalculated": "formula-without-value"}
_RANGE = re.compile(r"^([A-Z]{1,3})([1-9][0-9]*):([A-Z]{1,3})([1-9][0-9]*)$")
_PLAIN_SHEET = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_MAX_ROWS, _MAX_COLS = 1_048_576, 16_384        # the xlsx grid
_NUMBERS = (float, int)                          # cell types that are numbers (bool is not)


def is_workbook(file: str) -> bool:
    """True when a table file is a workbook (by its suffix, as the schema declares it)."""
    return file.lower().endswith(WORKBOOK_SUFFIXES)


def table_path(rel_file: str, spec) -> str:
    """The path that identifies a table in the store: the file, and for a workbook table
    ``file#sheet`` (``file#sheet!B3:E40`` with a range), so that one workbook may hold
    several tables, each with its own versions."""
    sheet = getattr(spec, "sheet", "") if not isinstance(spec, dict) else spec.get("sheet", "")
    rng = getattr(spec, "range", "") if not isinstance(spec, dict) else spec.get("range", "")
    if not sheet:
        return rel_file
    return f"{rel_file}#{sheet}" + (f"!{rng}" if rng else "")


def column_letter(index: int) -> str:
    """0-based column index -> spreadsheet letters (0 -> A, 26 -> AA)."""
    out = ""
    index += 1
    while index:
        index, rem = divmod(index - 1, 26)
        out = chr(65 + rem) + out
    return out


def column_index(letters: str) -> int:
    """Spreadsheet letters -> 0-based column index (A -> 0, AA -> 26)."""
    n = 0
    for ch in letters:
        n = n * 26 + ord(ch) - 64
    return n - 1


def sheet_prefix(sheet: str) -> str:
    """How a formula names the sheet: ``VLE!`` or, quoted, ``'Rig B'!``."""
    if _PLAIN_SHEET.match(sheet):
        return f"{sheet}!"
    return "'" + sheet.replace("'", "''") + "'!"


@dataclass(frozen=True)
class Region:
    """Where the table sits on its sheet, 0-based and inclusive (``last_*`` None: to the end)."""

    header_row: int
    first_col: int = 0
    last_row: int | None = None
    last_col: int | None = None

    @classmethod
    def of(cls, spec, label: str) -> "Region":
        """The region a table entry declares (range and header row checked against each other)."""
        header = spec.header_row
        if not spec.range:
            return cls(header_row=(header or 1) - 1)
        m = _RANGE.match(spec.range)
        if not m:
            raise BatchError(f"range {spec.range!r} is not a cell range like B3:E40",
                             file=label, key="range")
        c0, r0, c1, r1 = column_index(m[1]), int(m[2]), column_index(m[3]), int(m[4])
        if c1 < c0 or r1 < r0 or c1 >= _MAX_COLS or r1 > _MAX_ROWS:
            raise BatchError(f"range {spec.range} does not run from a top-left to a "
                             "bottom-right cell of the sheet", file=label, key="range")
        header = header or r0
        if not r0 <= header <= r1:
            raise BatchError(f"header row {header} is outside the range {spec.range} "
                             f"(rows {r0}-{r1})", file=label, key="header_row")
        return cls(header_row=header - 1, first_col=c0, last_row=r1 - 1, last_col=c1)


@dataclass(frozen=True)
class WorkbookTable:
    """Where the rows of one worksheet table now are, what was rejected, and their cells."""

    table: str                         # temporary table: row_number BIGINT + one VARCHAR per column
    header: tuple[str, ...]
    rows_read: int                     # data rows (staged + rejected); blank rows not counted
    rejects: tuple[tuple[int, str, str, str, str], ...]  # (row, column, raw, code, message)
    sheet: str
    header_row: int                    # spreadsheet row number of the header (1-based)
    letters: dict[str, str] = field(default_factory=dict)   # header column -> column letters

    def cell_prefix(self, column: str) -> str:
        """``VLE!C``: the cell of ``column`` in data row r is this plus ``header_row + r``."""
        return sheet_prefix(self.sheet) + self.letters[column]

    def cell(self, column: str, row_number: int) -> str:
        """The cell reference of a data row's cell, as the spreadsheet shows it."""
        return f"{self.cell_prefix(column)}{self.header_row + row_number}"


# --- cells ------------------------------------------------------------------------------------

def _number_text(value: float) -> str:
    """A number cell as text: shortest round-trip form, without a trailing ``.0``."""
    if isinstance(value, int):
        return str(value)
    text = repr(float(value))
    return text[:-2] if text.endswith(".0") else text


def _cell_text(value) -> str | None:
    """Any cell as text (header and unmapped cells); None for an empty cell."""
    if value is None or value == "":
        return None
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, (int, float)):
        return _number_text(value)
    if isinstance(value, (dt.date, dt.time, dt.datetime)):
        return value.isoformat()
    return str(value)


def _kind(value) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, (dt.datetime, dt.date)):
        return "a date"
    if isinstance(value, (dt.time, dt.timedelta)):
        return "a time"
    return "text"


def _number_cell(value, nulls: frozenset[str]) -> tuple[str | None, str | None]:
    """(reject code, what the cell holds) of a mapped cell; (None, None) when it is a number,
    empty, blank text or a declared null value (the normaliser's empty)."""
    if value is None or value == "" or type(value) in _NUMBERS:
        return None, None
    if isinstance(value, str) and (not value.strip() or value.strip() in nulls):
        return None, None
    return REJECT_CODES["type"], _kind(value)


# --- the workbook -----------------------------------------------------------------------------

def _open(data: bytes, label: str):
    from python_calamine import CalamineError, CalamineWorkbook

    try:
        return CalamineWorkbook.from_filelike(io.BytesIO(data))
    except CalamineError as err:
        raise BatchError(f"cannot be read as a workbook (.xlsx): {err}", file=label) from None


_UNCALCULATED = re.compile(rb"</f>\s*(?:<v\s*/>|</c>)")   # a formula without a value


def _flags(data: bytes) -> tuple[bool, bool]:
    """Whether any worksheet part of the .xlsx holds a cell of type error (``t="e"``), and a
    formula cell without a cached value: byte searches, no XML parsing."""
    errors = uncalculated = False
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as z:
            for name in z.namelist():
                if name.startswith("xl/worksheets/") and name.endswith(".xml"):
                    part = z.read(name)
                    errors = errors or b't="e"' in part or b"t='e'" in part
                    uncalculated = uncalculated or bool(_UNCALCULATED.search(part))
    except (zipfile.BadZipFile, KeyError):
        pass
    return errors, uncalculated


def flagged_cells(data: bytes, sheet: str) -> dict[tuple[int, int], tuple[str, str]]:
    """(row, column) 0-based -> (reject code, text) of the cells calamine reads as empty but
    are not: error values (``#DIV/0!``) and formulas without a cached value (a file saved by
    a program that does not calculate).

    Empty without parsing when no worksheet part holds such a cell (the common case); else
    the sheet is read with openpyxl in read-only mode, whose cells keep their type.
    """
    errors, uncalculated = _flags(data)
    if not (errors or uncalculated):
        return {}
    import openpyxl

    out: dict[tuple[int, int], tuple[str, str]] = {}
    cached: dict[tuple[int, int], object] = {}
    book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    try:
        for row in book[sheet].iter_rows():
            for c in row:
                if getattr(c, "data_type", None) == "e":
                    out[(c.row - 1, c.column - 1)] = (REJECT_CODES["error"], str(c.value))
                elif uncalculated and c.value is not None:
                    cached[(c.row - 1, c.column - 1)] = c.value
    finally:
        book.close()
    if uncalculated:
        book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=False)
        try:
            for row in book[sheet].iter_rows():
                for c in row:
                    key = (c.row - 1, c.column - 1)
                    if getattr(c, "data_type", None) == "f" and key not in cached \
                            and key not in out:
                        out[key] = (REJECT_CODES["uncalculated"], str(c.value))
        finally:
            book.close()
    return out


def _header(cells: list, region: Region, prefix: str, label: str) -> dict[int, str]:
    """0-based column -> header name, for the non-empty header cells of the region."""
    header: dict[int, str] = {}
    for j, value in enumerate(cells):
        text = _cell_text(value)
        if text is not None and text.strip():
            header[region.first_col + j] = text.strip()
    names = list(header.values())
    for j, name in header.items():
        if names.count(name) > 1:
            where = [f"{prefix}{column_letter(k)}{region.header_row + 1}"
                     for k, n in header.items() if n == name]
            raise BatchError(f"header repeats column '{name}' (cells {', '.join(where)})",
                             file=label, row=0, column=name)
        if name.lower() in RESERVED_COLUMNS:
            raise BatchError(f"column name '{name}' (cell {prefix}{column_letter(j)}"
                             f"{region.header_row + 1}) is reserved by the reader, which numbers "
                             "rows with it; rename the column", file=label, row=0, column=name)
    return header


def _unnamed_columns(grid, region: Region, last_row: int, header: dict[int, str], prefix: str,
                     label: str) -> None:
    """Refuse a column of the region with values below an empty header cell (an unmapped
    column, as extra_columns = "error" refuses one with a name)."""
    end = region.last_col
    for r in range(region.header_row + 1, last_row + 1):
        row = grid[r]
        for j in range(region.first_col, len(row) if end is None else min(end + 1, len(row))):
            if j not in header and row[j] != "":
                cell = f"{prefix}{column_letter(j)}{r + 1}"
                raise BatchError(f"column {column_letter(j)} holds values (cell {cell}) but its "
                                 f"header cell {prefix}{column_letter(j)}{region.header_row + 1} "
                                 "is empty: name and map it, or set extra_columns = \"ignore\" "
                                 "for the table", file=label, column=column_letter(j))


def stage_workbook(con: duckdb.DuckDBPyConnection, data: bytes, spec, label: str,
                   needed: dict[str, str], table: str) -> WorkbookTable:
    """Read the table of ``spec`` from the workbook bytes ``data`` into temp table ``table``."""
    region = Region.of(spec, label)
    book = _open(data, label)
    if spec.sheet not in book.sheet_names:
        raise BatchError(f"sheet '{spec.sheet}' is not in the workbook (its sheets: "
                         f"{book.sheet_names})", file=label, key="sheet")
    prefix = sheet_prefix(spec.sheet)
    grid = book.get_sheet_by_name(spec.sheet).to_python(skip_empty_area=False)
    if not any(v != "" for row in grid for v in row):
        raise BatchError(f"sheet '{spec.sheet}' is empty (no header, no rows)", file=label)
    last_row = len(grid) - 1 if region.last_row is None else min(region.last_row, len(grid) - 1)
    if region.header_row > last_row:
        raise BatchError(f"header row {region.header_row + 1} is below the last row with data "
                         f"({last_row + 1}) of sheet '{spec.sheet}'", file=label, key="header_row")

    def cut(row: list) -> list:
        return row[region.first_col:None if region.last_col is None else region.last_col + 1]

    header = _header(cut(grid[region.header_row]), region, prefix, label)
    if not header:
        raise BatchError(f"header row {region.header_row + 1} of sheet '{spec.sheet}' is empty",
                         file=label, row=0)
    names = tuple(header.values())
    check_columns(names, needed, spec, label)
    if spec.extra_columns != "ignore":
        _unnamed_columns(grid, region, last_row, header, prefix, label)
    columns = list(header)                                      # 0-based sheet columns
    letters = {header[j]: column_letter(j) for j in columns}
    mapped = [j for j in columns if header[j] in needed.values()]
    order = [j for name in needed.values() for j in mapped if header[j] == name]
    errors = {(r - region.header_row - 1, j): v for (r, j), v in flagged_cells(data, spec.sheet).items()
              if region.header_row < r <= last_row and j in header}   # data-row index, column
    body = grid[region.header_row + 1:last_row + 1]
    n = len(body)
    # column-wise: one list per table column, and numpy masks of its number and filled cells
    cells = {j: [row[j] if j < len(row) else "" for row in body] for j in columns}
    numeric = {j: np.fromiter((type(v) in _NUMBERS for v in c), bool, n) for j, c in cells.items()}
    filled = {j: np.fromiter((v != "" for v in c), bool, n) for j, c in cells.items()}
    kept = np.zeros(n, bool)                                   # blank rows are skipped
    suspect = np.zeros(n, bool)                                # rows with a mapped non-number
    for j in columns:
        kept |= filled[j]
    for j in order:
        suspect |= filled[j] & ~numeric[j]
    for i, j in errors:
        kept[i] = True
        suspect[i] |= j in order
    nulls = frozenset(spec.null_values)
    rejects, bad = [], np.zeros(n, bool)
    for i in np.flatnonzero(suspect):
        fault = _first_fault([(header[j], cells[j][i], errors.get((i, j))) for j in order], nulls)
        if fault:
            rejects.append((int(i) + 1, *fault))
            bad[i] = True
    good = np.flatnonzero(kept & ~bad)
    if good.size == 0 and not rejects:
        raise BatchError(f"sheet '{spec.sheet}' has a header (row {region.header_row + 1}) but "
                         "no data rows", file=label)
    arrays = {"row_number": pa.array(good + 1, pa.int64())}
    select = ["row_number"]
    for k, j in enumerate(columns):
        values = [cells[j][i] for i in good]
        number = numeric[j][good]
        if number.all():                                        # the common case
            arrays[f"n{k}"] = pa.array(np.asarray(values, dtype=float))
            arrays[f"t{k}"] = pa.nulls(len(values), pa.string())
        else:
            arrays[f"n{k}"] = pa.array(np.asarray([v if m else 0.0 for v, m in zip(values, number)],
                                                  dtype=float), mask=~number)
            arrays[f"t{k}"] = pa.array([None if m else _cell_text(v)
                                        for v, m in zip(values, number)], pa.string())
        # numbers as DuckDB's shortest round-trip text: the same text a CSV of them would hold
        select.append(f"coalesce(t{k}, CAST(n{k} AS VARCHAR)) AS {ident(header[j])}")
    con.register("fl_workbook_rows", pa.table(arrays))
    try:
        con.execute(f"CREATE OR REPLACE TEMP TABLE {table} AS SELECT {', '.join(select)} "
                    "FROM fl_workbook_rows")
    finally:
        con.unregister("fl_workbook_rows")
    return WorkbookTable(table=table, header=names, rows_read=int(good.size) + len(rejects),
                         rejects=tuple(rejects), sheet=spec.sheet,
                         header_row=region.header_row + 1, letters=letters)


def _first_fault(row: list[tuple[str, object, tuple | None]], nulls: frozenset[str]):
    """(column, raw text, code, message) of the first mapped cell of a row that is flagged
    (an error value, a formula without value) or not a number, in the table's column order;
    None when every cell is fine."""
    for column, value, flag in row:
        if flag is not None:
            code, text = flag
            if code == REJECT_CODES["error"]:
                return column, text, code, f"error value {text}"
            return column, text, code, (f"formula {text} has no cached value (the file was "
                                        "saved by a program that does not calculate); open and "
                                        "save it in a spreadsheet program")
        code, what = _number_cell(value, nulls)
        if code:
            text = _cell_text(value)
            shown = f"'{text}'" if what == "text" else text
            return column, text, code, (f"{what} {shown} in a number column; cells are never "
                                        "coerced, enter the value as a number")
    return None
