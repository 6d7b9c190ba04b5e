"""Workbook tables: a worksheet ingests through the CSV path's normaliser with every value's
cell kept; each spreadsheet fault is quarantined (or the batch refused) naming the cell.
Test workbooks are written with XlsxWriter (formulas with the cached values a spreadsheet
program would store) and, for formulas without cached values, with openpyxl."""

from __future__ import annotations

import datetime
import hashlib
import io
import re
import tomllib

import pytest
import xlsxwriter

from pipeline.ingest.stage import run_ingest
from pipeline.ingest.workbook import column_index, column_letter, sheet_prefix
from pipeline.store import open_store
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch
from tests.storekit import batch_toml, source, vp_table



def workbook_batch(sheet: str = "VLE", extra: str = "") -> str:
    """An argon batch of one worksheet table; ``extra`` adds TOML keys to the table."""
    return batch_toml(
        source("rig-w", "Test rig, invented workbook campaign for the test suite"),
        [vp_table(file="rig.xlsx", sheet=sheet, u_T_K=0.01, u_p_rel=0.001,
                  **tomllib.loads(extra))], format_version=None)


# argon vapour pressures near the normal boiling point (approximate values, test data only),
# the same rows as tests/conftest.py SIMPLE_CSV
GOOD = [["T", "p"], [85.0, 78.9], [87.3, 101.3], [90.0, 133.6]]


class Formula:
    """A formula cell with the value a spreadsheet program cached for it."""

    def __init__(self, formula: str, cached):
        self.formula, self.cached = formula, cached


def workbook(sheets: dict[str, list[list]], start: str = "A1") -> bytes:
    """An .xlsx with ``sheets`` (name -> rows), each written from cell ``start``."""
    buf = io.BytesIO()
    book = xlsxwriter.Workbook(buf, {"in_memory": True})
    date = book.add_format({"num_format": "yyyy-mm-dd"})
    r0, c0 = int(start[1:]) - 1, column_index(start[0])
    for name, rows in sheets.items():
        ws = book.add_worksheet(name)
        for i, row in enumerate(rows):
            for j, v in enumerate(row):
                r, c = r0 + i, c0 + j
                if isinstance(v, Formula):
                    ws.write_formula(r, c, v.formula, None, v.cached)
                elif isinstance(v, datetime.datetime):
                    ws.write_datetime(r, c, v, date)
                elif isinstance(v, bool):
                    ws.write_boolean(r, c, v)
                elif isinstance(v, (int, float)):
                    ws.write_number(r, c, v)
                elif v is not None:
                    ws.write_string(r, c, v)
    book.close()
    return buf.getvalue()


def ingest(raw_root, store_path, sheets, sheet="VLE", extra="", start="A1"):
    """Write batch b1 with rig.xlsx and ingest raw/; the result of the run."""
    write_batch(raw_root, "b1", workbook_batch(sheet, extra),
                {"rig.xlsx": workbook(sheets, start)})
    with open_store(store_path) as s:
        return run_ingest(s.con, [raw_root])


def query(store_path, sql, params=None):
    with open_store(store_path, read_only=True) as s:
        return s.con.execute(sql, params or []).fetchall()


def quarantined(store_path):
    return query(store_path, "SELECT row_number, column_name, raw_text, reason_code, cell_ref, "
                             "message FROM quarantine ORDER BY row_number")


def error_of(result) -> str:
    assert [b.status for b in result.batches] == ["error"], result.asstr()
    return result.batches[0].error


# --------------------------------------------------------------------------- cells
@pytest.mark.parametrize("index,letters", [(0, "A"), (25, "Z"), (26, "AA"), (701, "ZZ"),
                                           (702, "AAA"), (16383, "XFD")])
def test_column_letters_round_trip(index, letters):
    """Column indexes and spreadsheet letters convert both ways (XFD is the last xlsx column,
    common practice)."""
    assert column_letter(index) == letters and column_index(letters) == index


def test_sheet_names_are_quoted_as_in_formulas():
    """A plain sheet name stands bare; one with a space or quote is quoted, quotes doubled."""
    assert sheet_prefix("VLE") == "VLE!"
    assert sheet_prefix("Rig B") == "'Rig B'!"
    assert sheet_prefix("Bob's") == "'Bob''s'!"


# --------------------------------------------------------------------------- good workbooks
def test_workbook_rows_load_like_the_same_csv(raw_root, store_path, tmp_path):
    """A worksheet gives the same observations as the same rows in a CSV file, plus the cells
    of T and of the value."""
    assert not ingest(raw_root, store_path, {"VLE": GOOD}).errors
    got = query(store_path, "SELECT row_number, T_K, value_si, u_value_si, T_original, "
                            "value_original, T_cell_ref, value_cell_ref FROM observation_history "
                            "ORDER BY row_number")
    csv_root, csv_store = tmp_path / "csv-raw", tmp_path / "csv.duckdb"
    csv_root.mkdir()
    (csv_root / "fluids.toml").write_text((raw_root / "fluids.toml").read_text())
    write_batch(csv_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    with open_store(csv_store) as s:
        run_ingest(s.con, [csv_root])
    want = query(csv_store, "SELECT row_number, T_K, value_si, u_value_si, T_original, "
                            "value_original FROM observation_history ORDER BY row_number")
    # a number cell's text is its shortest round-trip form: here the CSV's own text
    assert [g[:6] for g in got] == want
    assert [g[6:] for g in got] == [("VLE!A2", "VLE!B2"), ("VLE!A3", "VLE!B3"),
                                    ("VLE!A4", "VLE!B4")]
    assert query(csv_store, "SELECT T_cell_ref, value_cell_ref FROM observation LIMIT 1") == [
        (None, None)]


def test_formula_cells_read_as_their_cached_values(raw_root, store_path):
    """A formula cell is read as the value the spreadsheet cached, never recomputed."""
    rows = [["T", "p_bar", "p"], [85.0, 0.789, Formula("=B2*100", 78.9)],
            [87.3, 1.013, Formula("=B3*100", 101.3)]]
    assert not ingest(raw_root, store_path, {"VLE": rows}, extra='extra_columns = "ignore"').errors
    assert query(store_path, "SELECT value_original, value_si, value_cell_ref FROM observation_history "
                             "ORDER BY row_number") == [("78.9", 78900.0, "VLE!C2"),
                                                        ("101.3", 101300.0, "VLE!C3")]


def test_header_row_and_blank_rows_keep_the_spreadsheet_numbering(raw_root, store_path):
    """With the header on row 3 and a blank row inside the data, row numbers count from the
    header (blank rows count, as blank CSV lines do) and cells name the sheet's own rows."""
    rows = [["Rig W, campaign notes"], [], GOOD[0], GOOD[1], [], GOOD[2], GOOD[3]]
    result = ingest(raw_root, store_path, {"VLE": rows}, extra="header_row = 3")
    assert not result.errors and result.batches[0].rows == (3, 3, 0)
    assert query(store_path, "SELECT row_number, T_cell_ref, value_cell_ref FROM observation "
                             "ORDER BY row_number") == [(1, "VLE!A4", "VLE!B4"),
                                                        (3, "VLE!A6", "VLE!B6"),
                                                        (4, "VLE!A7", "VLE!B7")]


def test_cell_range_reads_only_the_range(raw_root, store_path):
    """With range = "B2:C5" the header is B2:C2, the data B3:C5; a note beside the range and a
    summary row below it are not read."""
    rows = [GOOD[0] + [None, "note: outside the range"]] + [r + [None, "x"] for r in GOOD[1:]]
    rows += [[None], ["mean", Formula("=AVERAGE(C3:C5)", 104.6)]]
    result = ingest(raw_root, store_path, {"VLE": rows}, extra='range = "B2:C5"', start="B2")
    assert not result.errors and result.batches[0].rows == (3, 3, 0)
    assert query(store_path, "SELECT T_cell_ref, value_cell_ref, value_si FROM observation "
                             "ORDER BY row_number") == [("VLE!B3", "VLE!C3", 78900.0),
                                                        ("VLE!B4", "VLE!C4", 101300.0),
                                                        ("VLE!B5", "VLE!C5", 133600.0)]
    assert query(store_path, "SELECT path FROM raw_file WHERE role = 'table'") == [
        ("b1/rig.xlsx#VLE!B2:C5",)]


def test_quoted_sheet_names_in_cells(raw_root, store_path):
    """A sheet named 'Rig B' gives cells like 'Rig B'!B2, as a formula would name them."""
    assert not ingest(raw_root, store_path, {"Rig B": GOOD}, sheet="Rig B").errors
    assert query(store_path, "SELECT value_cell_ref FROM observation ORDER BY row_number "
                             "LIMIT 1") == [("'Rig B'!B2",)]


def test_two_sheets_of_one_workbook_are_two_tables_with_one_hash(raw_root, store_path):
    """Two [[table]] entries on two sheets of one workbook load as two tables sharing the
    SHA-256 of the workbook bytes; a second ingest is a no-op; a changed workbook supersedes
    both."""
    second = workbook_batch("Rig B", "").split("[[table]]", 1)[1]
    data = workbook({"VLE": GOOD, "Rig B": [GOOD[0], [95.0, 213.0]]})
    write_batch(raw_root, "b1", workbook_batch("VLE", "") + "[[table]]" + second,
                {"rig.xlsx": data})
    with open_store(store_path) as s:
        result = run_ingest(s.con, [raw_root])
    assert not result.errors, result.asstr()
    files = query(store_path, "SELECT path, sha256, rows_loaded FROM raw_file_current "
                              "WHERE role = 'table' ORDER BY path")
    sha = hashlib.sha256(data).hexdigest()
    assert files == [("b1/rig.xlsx#Rig B", sha, 1), ("b1/rig.xlsx#VLE", sha, 3)]
    with open_store(store_path) as s:
        assert not run_ingest(s.con, [raw_root]).changed
    (raw_root / "b1" / "rig.xlsx").write_bytes(workbook({"VLE": GOOD[:3], "Rig B": GOOD[:2]}))
    with open_store(store_path) as s:
        assert not run_ingest(s.con, [raw_root]).errors
    assert query(store_path, "SELECT path, rows_loaded, superseded_by IS NULL FROM raw_file "
                             "WHERE role = 'table' ORDER BY file_id") == [
        ("b1/rig.xlsx#VLE", 3, False), ("b1/rig.xlsx#Rig B", 1, False),
        ("b1/rig.xlsx#VLE", 2, True), ("b1/rig.xlsx#Rig B", 1, True)]


# --------------------------------------------------------------------------- quarantined cells
@pytest.mark.parametrize("error", ["#DIV/0!", "#N/A", "#VALUE!", "#REF!", "#NUM!"])
def test_error_cells_are_quarantined_naming_the_cell(raw_root, store_path, error):
    """A cell holding an error value (cached result of a failed formula) is quarantined as
    error-cell; the message and cell_ref name the cell."""
    rows = GOOD[:2] + [[87.3, Formula("=1/0", error)]] + GOOD[3:]
    result = ingest(raw_root, store_path, {"VLE": rows})
    assert result.batches[0].rows == (3, 2, 1)
    (row, column, raw, code, cell, message), = quarantined(store_path)
    assert (row, column, raw, code, cell) == (2, "p", error, "error-cell", "VLE!B3")
    assert message == f"b1/rig.xlsx#VLE, cell VLE!B3 (row 2, column 'p'): error-cell (error value {error})"


@pytest.mark.parametrize("value,what,shown", [
    (datetime.datetime(2026, 1, 21), "a date", "2026-01-21"),
    (True, "a boolean", "TRUE"),
    ("101.3", "text", "'101.3'"),
    ("n.m.", "text", "'n.m.'"),
])
def test_dates_booleans_and_text_in_a_number_column_are_not_coerced(raw_root, store_path, value,
                                                                    what, shown):
    """A date, a boolean or text (even a number stored as text) in a number column is
    quarantined as wrong-cell-type naming the cell, never converted."""
    rows = GOOD[:2] + [[87.3, value]] + GOOD[3:]
    result = ingest(raw_root, store_path, {"VLE": rows})
    assert result.batches[0].rows == (3, 2, 1)
    (row, column, _, code, cell, message), = quarantined(store_path)
    assert (row, column, code, cell) == (2, "p", "wrong-cell-type", "VLE!B3")
    assert message.startswith(f"b1/rig.xlsx#VLE, cell VLE!B3 (row 2, column 'p'): "
                              f"wrong-cell-type ({what} {shown} in a number column")


def test_a_date_in_the_temperature_column_names_its_cell(raw_root, store_path):
    """A run date typed into the T column is quarantined with the T cell (A3)."""
    rows = GOOD[:2] + [[datetime.datetime(2026, 1, 21), 101.3]] + GOOD[3:]
    ingest(raw_root, store_path, {"VLE": rows})
    assert [(r[1], r[3], r[4]) for r in quarantined(store_path)] == [
        ("T", "wrong-cell-type", "VLE!A3")]


def test_normaliser_faults_name_the_cell(raw_root, store_path):
    """Faults found by the shared normaliser (a negative pressure, an empty required cell, a
    declared null value) name the workbook cell too."""
    rows = GOOD + [[91.0, -4.0], [92.0, None], [93.0, "-"]]
    result = ingest(raw_root, store_path, {"VLE": rows}, extra='null_values = ["-"]')
    assert result.batches[0].rows == (6, 3, 3)
    got = [(r[0], r[3], r[4], r[5]) for r in quarantined(store_path)]
    assert got == [
        (4, "non-positive-pressure", "VLE!B5",
         "b1/rig.xlsx#VLE, cell VLE!B5 (row 4, column 'p'): non-positive-pressure (cell -4.0)"),
        (5, "missing-value", "VLE!B6",
         "b1/rig.xlsx#VLE, cell VLE!B6 (row 5, column 'p'): missing-value (cell empty)"),
        (6, "missing-value", "VLE!B7",
         "b1/rig.xlsx#VLE, cell VLE!B7 (row 6, column 'p'): missing-value (cell -)")]


def test_formulas_without_a_cached_value_are_not_read_as_empty(raw_root, store_path):
    """A formula the file holds no value for (openpyxl writes them so: it does not calculate)
    is quarantined as formula-without-value naming the cell and the formula, not taken as an
    empty cell; a formula with a cached value in the same file still reads."""
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "VLE"
    for row in [GOOD[0], GOOD[1], [87.3, "=B2*1.284"], GOOD[3]]:
        sheet.append(row)
    buf = io.BytesIO()
    book.save(buf)
    write_batch(raw_root, "b1", workbook_batch("VLE", ""), {"rig.xlsx": buf.getvalue()})
    with open_store(store_path) as s:
        result = run_ingest(s.con, [raw_root])
    assert result.batches[0].rows == (3, 2, 1)
    (row, column, raw, code, cell, message), = quarantined(store_path)
    assert (row, column, raw, code, cell) == (2, "p", "=B2*1.284", "formula-without-value",
                                              "VLE!B3")
    assert message.startswith("b1/rig.xlsx#VLE, cell VLE!B3 (row 2, column 'p'): "
                              "formula-without-value (formula =B2*1.284 has no cached value")


def test_error_cell_in_an_ignored_column_does_not_touch_the_row(raw_root, store_path):
    """An error value in a column the table does not map (extra_columns = "ignore") leaves
    the row loaded."""
    rows = [GOOD[0] + ["check"]] + [r + [Formula("=1/0", "#DIV/0!")] for r in GOOD[1:]]
    result = ingest(raw_root, store_path, {"VLE": rows}, extra='extra_columns = "ignore"')
    assert result.batches[0].rows == (3, 3, 0)


# --------------------------------------------------------------------------- refused batches
@pytest.mark.parametrize("sheets,sheet,extra,match", [
    ({"VLE": GOOD}, "Data", "", r"key 'sheet': sheet 'Data' is not in the workbook \(its sheets: \['VLE'\]\)"),
    ({"VLE": GOOD}, "VLE", "header_row = 9",
     r"key 'header_row': header row 9 is below the last row with data \(4\) of sheet 'VLE'"),
    ({"VLE": GOOD}, "VLE", 'range = "A2:B4"\nheader_row = 1',
     r"key 'header_row': header row 1 is outside the range A2:B4 \(rows 2-4\)"),
    ({"VLE": []}, "VLE", "", r"sheet 'VLE' is empty \(no header, no rows\)"),
    ({"VLE": GOOD[:1]}, "VLE", "", r"sheet 'VLE' has a header \(row 1\) but no data rows"),
    ({"VLE": [["T", "pressure"], [85.0, 78.9]]}, "VLE", "",
     r"column 'p' named for pressure is not in the header \['T', 'pressure'\]"),
    ({"VLE": [["T", "p", "T"], [85.0, 78.9, 1.0]]}, "VLE", "",
     r"header repeats column 'T' \(cells VLE!A1, VLE!C1\)"),
    ({"VLE": [["T", "p"], [85.0, 78.9, "checked"]]}, "VLE", "",
     r"column 'C': column C holds values \(cell VLE!C2\) but its header cell VLE!C1 is empty"),
])
def test_sheet_problems_refuse_the_batch_naming_sheet_and_cells(raw_root, store_path, sheets,
                                                                sheet, extra, match):
    """A missing sheet, a header row out of the sheet or the range, an empty or header-only
    sheet, a missing, repeated or unnamed column refuse the batch with a message naming the
    file and the sheet, key or cells; the store keeps nothing of it."""
    message = error_of(ingest(raw_root, store_path, sheets, sheet=sheet, extra=extra))
    assert message.startswith(f"b1/rig.xlsx#{sheet}")
    assert re.search(match, message), message
    assert query(store_path, "SELECT count(*) FROM raw_file") == [(0,)]


def test_bytes_that_are_not_a_workbook_refuse_the_batch(raw_root, store_path):
    """A file named .xlsx that is not a workbook is refused with one clear message."""
    write_batch(raw_root, "b1", workbook_batch("VLE", ""), {"rig.xlsx": SIMPLE_CSV})
    with open_store(store_path) as s:
        message = error_of(run_ingest(s.con, [raw_root]))
    assert message.startswith("b1/rig.xlsx#VLE: cannot be read as a workbook (.xlsx)")


@pytest.mark.parametrize("manifest,key", [
    (workbook_batch("VLE", "").replace('sheet = "VLE"\n', ""), "table[0]"),
    (workbook_batch("VLE", 'delimiter = ";"'), "table[0].delimiter"),
    (SIMPLE_BATCH.format(source="rig-a").replace('file = "vp.csv"', 'file = "vp.csv"\nsheet = "A"'),
     "table[0].sheet"),
    (workbook_batch("VLE", 'range = "B2"'), "table[0].range"),
    (workbook_batch("VLE", "").replace("rig.xlsx", "rig.ods"), "table[0].file"),
])
def test_contract_refuses_misplaced_workbook_keys(raw_root, store_path, manifest, key):
    """batch.toml is refused, naming the key, for a workbook without sheet, CSV dialect keys on
    a workbook, workbook keys on a CSV table, a malformed range, or an .ods file."""
    write_batch(raw_root, "b1", manifest, {"rig.xlsx": workbook({"VLE": GOOD}),
                                           "vp.csv": SIMPLE_CSV})
    with open_store(store_path) as s:
        message = error_of(run_ingest(s.con, [raw_root]))
    assert f"key '{key}'" in message, message
