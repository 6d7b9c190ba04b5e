"""Plain CSV files split in Python stage exactly the rows DuckDB's strict reader stages (issue 14)."""

from __future__ import annotations

import tomllib
from pathlib import Path

import duckdb
import pytest
from hypothesis import event, given, settings
from hypothesis import strategies as st

from pipeline.errors import BatchError
from pipeline.ingest.contract import TableSpec, load_batch
from pipeline.ingest.grouped import needed_columns
from pipeline.ingest.plaincsv import split_plain
from pipeline.ingest.reader import stage_csv

CORPUS = Path(__file__).resolve().parents[1] / "bad_inputs"


def _spec(**dialect) -> TableSpec:
    return TableSpec.model_validate({
        "file": "vp.csv", "fluid": "argon", "boundary": "liquid-vapour",
        "temperature": {"column": "T", "unit": "K"}, "pressure": {"column": "p", "unit": "kPa"},
        "extra_columns": "ignore", **dialect})


def _outcome(read, data: bytes, spec: TableSpec):
    """What a reader makes of a file: its refusal message, or (rows read, rejects, staged rows
    of the mapped columns in row order); None when the split declines the file."""
    needed = needed_columns(spec)
    columns = list(dict.fromkeys(needed.values()))
    try:
        staged = read(data, spec, needed, columns)
    except BatchError as err:
        return ("refused", str(err))
    return staged


def _by_duckdb(data, spec, needed, columns):
    con = duckdb.connect()
    try:
        staged = stage_csv(con, data, spec, "vp.csv", needed, "fl_t")
        select = ", ".join('"' + c + '"' for c in columns)
        rows = con.execute(f"SELECT row_number, {select} FROM fl_t ORDER BY row_number"
                           ).fetchall()
    finally:
        con.close()
    return staged.rows_read, tuple(staged.rejects), rows


def _by_split(data, spec, needed, columns):
    plain = split_plain(data, spec, "vp.csv", needed)
    if plain is None:
        return None
    rows = [(int(n), *cells) for n, *cells in zip(plain.row_numbers,
                                                  *(plain.cells[c] for c in columns))]
    return plain.rows_read, plain.rejects, rows


# cells and lines made of what matters to a CSV reader: numbers, blanks, non-ASCII letters,
# now and then a quote, a comment character, NUL or a lone carriage return; rows of the
# header's width mostly, blank and comment lines, LF or CRLF breaks
COMMON = ["85.0", "78.9", "1e5", "-3", "", " ", " 7 ", "x", "é", "n.m."]
CELLS = st.sampled_from(COMMON * 6 + ['"', "'", "#", "\x00", "\r", "1,5", "a\tb", "a;b",
                                      '"85.0"', '""', "'7'", '"a,b"', '"x"y', '"a""b"', ' "1"'])
HEADERS = {"T{d}p": 2, "p{d}T": 2, " T{d}p": 2, "T{d}p{d}note": 3, "T{d}p{d}": 3,
           '"T"{d}"p"': 2, "'T'{d}p": 2}


@st.composite
def _lines(draw, width: int):
    """A data line of ``width`` cells (mostly), of another width, or blank or comment."""
    kind = draw(st.sampled_from(["row"] * 8 + ["ragged", "other"]))
    if kind == "row":
        return tuple(draw(st.lists(CELLS, min_size=width, max_size=width)))
    if kind == "ragged":
        return tuple(draw(st.lists(CELLS, min_size=1, max_size=width + 1)))
    return draw(st.sampled_from(["", "# a comment", "#", "  ", "\r"]))


def _file(header: str, lines: list, delimiter: str, crlf: bool, last_break: bool) -> str:
    text = [header] + [delimiter.join(c) if isinstance(c, tuple) else c for c in lines]
    return ("\r\n" if crlf else "\n").join(text) + (("\r\n" if crlf else "\n")
                                                   if last_break else "")


@settings(max_examples=200, deadline=None)
@given(header=st.sampled_from(sorted(HEADERS)), data=st.data(), crlf=st.booleans(),
       last_break=st.booleans(),
       dialect=st.sampled_from([{}, {"comment": "#"}, {"delimiter": ";"}, {"quote": "'"},
                                {"encoding": "latin-1"}, {"delimiter": "\t"}]))
def test_a_plain_file_splits_into_the_rows_duckdb_stages(header, data, crlf, last_break,
                                                          dialect):
    """On generated files of numbers, blanks, delimiters, quotes, comment characters and every kind of line break, the split either declines the file or gives the rows, row numbers, cells (empty = NULL) and count DuckDB's reader gives; a file refused before any row is read is refused by both with the same message."""
    spec = _spec(**dialect)
    delimiter = dialect.get("delimiter", ",")
    lines = data.draw(st.lists(_lines(HEADERS[header]), min_size=1, max_size=12))
    text = _file(header.format(d=delimiter), lines, delimiter, crlf, last_break)
    raw = text.encode("latin-1" if "encoding" in dialect else "utf-8", errors="replace")
    split = _outcome(_by_split, raw, spec)
    event("declined" if split is None else "refused" if split[0] == "refused" else "split")
    if split is not None:
        assert split == _outcome(_by_duckdb, raw, spec)


def test_common_files_are_plain_and_odd_ones_are_left_to_duckdb():
    """A file of numbers with LF or CRLF breaks, blank and comment lines, whole fields quoted, is split; a quote inside a field or around a delimiter, a lone carriage return, an inline comment, a short row or a quote on a comment line leaves the file to DuckDB."""
    plain = [b"T,p\n85.0,78.9\n87.3,101.3\n", b"T,p\r\n85.0,78.9\r\n\r\n87.3,\r\n",
             b"# rig B\nT,p\n85.0,78.9\n# drift\n\n90.0,133.6",
             b'"T","p"\n"85.0","78.9"\n87.3,""\n']
    for data in plain:
        assert _by_split(data, _spec(comment="#"), needed_columns(_spec()), ["T", "p"]) == \
            _by_duckdb(data, _spec(comment="#"), needed_columns(_spec()), ["T", "p"])
    odd = [b'T,p\n"85.0"7,78.9\n', b'T,p\n"8,5",78.9\n', b"T,p\n85.0,78.9\r87.3,1\n",
           b"T,p\n85.0,78.9#x\n", b"T,p\n85.0\n", b'T,p\n# a "note\n85.0,78.9\n']
    for data in odd:
        assert split_plain(data, _spec(comment="#"), "vp.csv", needed_columns(_spec())) is None


def _corpus_tables():
    """The CSV tables of the corpus whose batch.toml the ingest accepts (a refused manifest
    never reaches a reader)."""
    from pipeline.ingest.contract import Fluid
    from pipeline.ingest.declarations import check_declarations
    from tests.conftest import FLUIDS_TOML

    fluids = {f["id"]: Fluid.model_validate(f) for f in tomllib.loads(FLUIDS_TOML)["fluid"]}
    for case in sorted(p for p in CORPUS.iterdir() if (p / "batch.toml").is_file()):
        if tomllib.loads((case / "expected.toml").read_text("utf-8")).get("setup"):
            continue
        try:
            manifest, _ = load_batch(case / "batch.toml")
            check_declarations(manifest, fluids, "batch.toml")
        except (BatchError, KeyError):
            continue
        for spec in manifest.table:
            path = case / spec.file
            if path.suffix != ".xlsx" and path.is_file() and not path.is_symlink():
                yield pytest.param(path.read_bytes(), spec, id=f"{case.name}/{spec.file}")


@pytest.mark.parametrize(("data", "spec"), list(_corpus_tables()))
def test_the_bad_input_corpus_splits_as_duckdb_reads_it(data, spec):
    """Every CSV table of the bad-input corpus is either declined by the split or split into exactly what DuckDB stages, refusals and their messages included."""
    split = _outcome(_by_split, data, spec)
    if split is not None:
        assert split == _outcome(_by_duckdb, data, spec)
