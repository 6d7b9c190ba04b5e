"""The CSV reader: the bytes hashed are the bytes parsed, bounded lines and headers, comment lines
above the header, mixed line endings (issues 13 and 12)."""

from __future__ import annotations

import hashlib

import pytest

import pipeline.ingest.stage as stage
from pipeline.cli import main
from pipeline.ingest.reader import MAX_COLUMNS, MAX_LINE_BYTES
from pipeline.store import open_store
from pipeline.verify import verify
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch

GOOD = SIMPLE_BATCH.format(source="rig-a")
COMMENTED = GOOD.replace('boundary = "liquid-vapour"', 'boundary = "liquid-vapour"\ncomment = "#"')
VERSION_B = "T,p\n85.0,11.1\n87.3,22.2\n90.0,33.3\n"   # same shape as SIMPLE_CSV, other values


def ingest(raw_root, store_path, capsys) -> tuple[int, str, str]:
    code = main(["ingest", "--verbose", str(raw_root), "--store", str(store_path)])
    out, err = capsys.readouterr()
    return code, out, err


def stored(store_path) -> tuple[list[tuple], list[str]]:
    """(row, kPa) of the current observations, and the SHA-256 of the current table file."""
    with open_store(store_path, read_only=True) as s:
        values = s.con.execute("SELECT row_number, round(value_si / 1000, 6) FROM "
                               "observation_current ORDER BY 1").fetchall()
        shas = [r[0] for r in s.con.execute("SELECT sha256 FROM raw_file WHERE role = 'table' "
                                            "AND superseded_by IS NULL").fetchall()]
    return values, shas


def test_a_file_rewritten_between_hash_and_parse_keeps_the_hashed_rows(raw_root, store_path,
                                                                      capsys, monkeypatch):
    """Case 1: a CSV rewritten after its bytes were read and hashed and before its rows are staged: the rows stored are those of the hashed bytes, so the next ingest sees the change and loads the new version."""
    folder = write_batch(raw_root, "b1", GOOD, {"vp.csv": SIMPLE_CSV})
    original = stage.stage_csv

    def rewrite_then_stage(*args, **kwargs):
        (folder / "vp.csv").write_text(VERSION_B, encoding="utf-8")   # the concurrent writer
        return original(*args, **kwargs)

    monkeypatch.setattr(stage, "stage_csv", rewrite_then_stage)
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    values, shas = stored(store_path)
    assert values == [(1, 78.9), (2, 101.3), (3, 133.6)]
    assert shas == [hashlib.sha256(SIMPLE_CSV.encode()).hexdigest()]
    monkeypatch.setattr(stage, "stage_csv", original)
    code, out, _ = ingest(raw_root, store_path, capsys)
    assert code == 0 and "loaded  b1: 3 rows read, 3 loaded, 0 quarantined" in out
    values, shas = stored(store_path)
    assert values == [(1, 11.1), (2, 22.2), (3, 33.3)]
    assert shas == [hashlib.sha256(VERSION_B.encode()).hexdigest()]
    assert verify(store_path).ok


def test_a_csv_with_a_declared_comment_line_above_the_header_loads(raw_root, store_path, capsys):
    """Issue 12: with comment = "#" declared, comment and blank lines above the header are skipped; rows are still numbered from the line after the header."""
    body = "# rig B, campaign 7\n# T in K, p in kPa\n\nT,p\n85.0,78.9\n# drift check\n87.3,x\n90.0,133.6\n"
    write_batch(raw_root, "b1", COMMENTED, {"vp.csv": body})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    assert "loaded  b1: 3 rows read, 2 loaded, 1 quarantined" in out
    values, _ = stored(store_path)
    assert values == [(1, 78.9), (4, 133.6)]
    with open_store(store_path, read_only=True) as s:
        q = s.con.execute("SELECT row_number, column_name, reason_code FROM quarantine").fetchall()
    assert q == [(3, "p", "not-a-number")]


def test_a_comment_line_above_the_header_without_a_declared_comment_is_refused(raw_root,
                                                                               store_path,
                                                                               capsys):
    """Without `comment` declared the first line is the header, so a note above it is refused naming the columns it expected."""
    write_batch(raw_root, "b1", GOOD, {"vp.csv": "# rig B\n" + SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and "column 'T' named for temperature is not in the header" in err


def test_a_file_of_comment_lines_only_is_refused(raw_root, store_path, capsys):
    """A file holding only comment and blank lines has no header: refused naming the file."""
    write_batch(raw_root, "b1", COMMENTED, {"vp.csv": "# nothing yet\n\n# later\n"})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and "b1/vp.csv: file holds only comment and blank lines" in err


@pytest.mark.parametrize("eol", ["crlf-then-lf", "lf-then-crlf", "alternating"])
def test_mixed_line_endings_load_every_row(raw_root, store_path, capsys, eol):
    """Case 12: a file mixing CRLF and LF lines (two files pasted together) loads every row; it gave the CSV parser's internal error."""
    lines = ["T,p", "85.0,78.9", "87.3,101.3", "90.0,133.6"]
    ends = {"crlf-then-lf": ["\r\n", "\r\n", "\n", "\n"], "lf-then-crlf": ["\n", "\n", "\r\n", "\r\n"],
            "alternating": ["\r\n", "\n", "\r\n", "\n"]}[eol]
    write_batch(raw_root, "b1", GOOD, {"vp.csv": "".join(a + b for a, b in zip(lines, ends))})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    assert stored(store_path)[0] == [(1, 78.9), (2, 101.3), (3, 133.6)]


def test_a_huge_cell_is_refused_naming_its_row(raw_root, store_path, capsys):
    """Case 12: a 5 MB cell is refused with its row and the line limit; it gave 'reader accounting mismatch' without a row."""
    body = "T,p\n85.0,78.9\n87.3," + "1" * 5_000_000 + "\n90.0,133.6\n"
    write_batch(raw_root, "b1", GOOD, {"vp.csv": body})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert (f"b1/vp.csv, row 2: line of 5,000,005 bytes, over the limit of {MAX_LINE_BYTES:,} "
            "bytes per line") in err
    assert len(err) < 1000


def test_a_header_wider_than_the_limit_is_refused(raw_root, store_path, capsys):
    """Case 9: a header of more than MAX_COLUMNS columns is refused with the count and the limit."""
    header = "T,p," + ",".join(f"c{i}" for i in range(2 * MAX_COLUMNS))
    write_batch(raw_root, "b1", GOOD.replace("[table.uncertainty]",
                                             'extra_columns = "ignore"\n[table.uncertainty]'),
                {"vp.csv": header + "\n85.0,78.9\n"})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert f"b1/vp.csv, row 0: header has {2 * MAX_COLUMNS + 2:,} columns; the limit is " \
           f"{MAX_COLUMNS:,}" in err


def test_a_header_of_a_million_columns_is_refused_at_once(raw_root, store_path, capsys):
    """Case 9: a header of 10^6 columns (it ran for minutes) is refused before any parsing, naming the limit."""
    header = "T,p," + ",".join("x" for _ in range(10 ** 6))
    write_batch(raw_root, "b1", GOOD, {"vp.csv": header + "\n85.0,78.9\n"})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert f"b1/vp.csv, row 0: header has more than {MAX_COLUMNS:,} columns" in err
    assert len(err) < 1000
