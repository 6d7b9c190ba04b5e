"""Load one staged table (a CSV file or a worksheet) into the store, set-based, in one pass each.

The staged table (``fl_stage``: ``row_number`` and the cells as text, from
:func:`pipeline.ingest.reader.stage_csv` or :func:`pipeline.ingest.workbook.stage_workbook`)
of a large file (more than :data:`LARGE_FILE_ROWS` rows) is never copied into a normalised
table (a small one is, since compiling the generated query twice costs it more). Instead:

1. the row keys of duplicate rows go to a small table (a hash of the mapped cells, grouped
   once: set-based, and usually empty);
2. ONE ``INSERT ... SELECT`` parses the staged table, converts units and the temperature
   scale, and writes every observation of every quantity of the rows without a fault (the
   quantities of a row are a join with a small list, not one pass each);
3. the staged rows that gave no observation (an anti-join on the row number) are the faulty
   ones: only they are parsed again, and sent to quarantine with one block of ids in row
   order.

Original cells without a second text column on every row: an observation keeps the number
read from each cell (``T_parsed``, ``value_parsed``, in the file's unit and scale) and the
cell's text only where the text is not the canonical rendering of that number
(:data:`CANONICAL_TEXT`: DuckDB's ``CAST(number AS VARCHAR)``, the shortest text that reads
back as the same double). ``observation_history`` gives back the text as written either way
(migration 009); ``tests/ingest/test_ingest_equivalence.py`` holds it equal, cell for cell,
to what the former two text columns held.
"""

from __future__ import annotations

import json
from contextlib import contextmanager

import duckdb

from pipeline.ingest.normalise import (
    QUANTITY_KIND,
    duplicates_sql,
    normalise,
    normalised_query,
    uncertainty_sql,
)
from pipeline.ingest.workbook import is_workbook

#: Rows above which the observation insert is told it need not keep row order
LARGE_FILE_ROWS = 100_000
#: A table file from this size on loads under :data:`LARGE_TABLE_MEMORY` [bytes]
LARGE_TABLE_BYTES = 16 * 1024 * 1024
#: DuckDB's memory limit while a large table loads: its staged rows and hash tables spill to
#: the store's temporary folder instead of growing the process (2 M rows: peak RSS about
#: 700 -> 500 MiB, for up to about 13 % more CPU time; DEVELOPERS.md has the figures)
LARGE_TABLE_MEMORY = "200MB"
#: SQL of the canonical rendering of a parsed number; the cell's text is kept only when it
#: differs (the view observation_history of migration 009 uses the same expression)
CANONICAL_TEXT = "CAST({} AS VARCHAR)"


@contextmanager
def memory_budget(ing, size: int):
    """Load a table file of ``size`` bytes under :data:`LARGE_TABLE_MEMORY` when it is large;
    the connection's own limit is set back afterwards (by :func:`restore_memory`)."""
    if size < LARGE_TABLE_BYTES or ing._memory_before is not None:
        yield
        return
    limit = "SELECT current_setting('memory_limit')"
    before = ing.con.execute(limit).fetchall()[0][0]
    ing.con.execute("RESET memory_limit")    # the default is set back exactly, not from text
    ing._memory_before = "" if ing.con.execute(limit).fetchall()[0][0] == before else before
    ing.con.execute("SET memory_limit = ?", [LARGE_TABLE_MEMORY])
    try:
        yield
    finally:
        restore_memory(ing)


def restore_memory(ing) -> None:
    """The connection's memory limit as it was before :func:`memory_budget`. A transaction
    that failed takes no setting: the batch's loader calls this again after its rollback."""
    if ing._memory_before is None:
        return
    try:
        if ing._memory_before:
            ing.con.execute("SET memory_limit = ?", [ing._memory_before])
        else:
            ing.con.execute("RESET memory_limit")
    except duckdb.Error:
        return
    ing._memory_before = None


def kept_text(number: str, text: str) -> str:
    """SQL: the cell text ``text``, or NULL when it is the canonical rendering of ``number``."""
    return f"CASE WHEN {CANONICAL_TEXT.format(number)} = {text} THEN NULL ELSE {text} END"


def original_text(stored: str, parsed: str) -> str:
    """SQL: the cell's text as written, from the kept text and the parsed number."""
    return f"coalesce({stored}, {CANONICAL_TEXT.format(parsed)})"


def load_staged(ing, file_id: int, rel: str, sha: str, spec, staged, rejects: list) -> tuple[int, int]:
    """Quarantine the reader's ``rejects`` and the faulty rows of ``staged``, insert the
    observations of the others; returns (rows loaded, rows quarantined)."""
    con = ing.con
    molar_mass = ing.fluids[spec.fluid].molar_mass_kg_mol
    rows = con.execute(f"SELECT count(*) FROM {staged.table}").fetchall()[0][0]
    for row, column, raw, code, message, cell in rejects:
        ing._quarantine(file_id, sha, rel, row, column, raw, code, f"{rel}, {message}", cell)
    if rows <= LARGE_FILE_ROWS:
        # a small table: normalised once into a table (the large generated query compiled
        # once per file is what a small file costs), then inserted and quarantined from it
        rules = normalise(con, staged.table, spec, molar_mass, "fl_norm", parsed=True)
        _insert_columns(con, file_id, spec, rules)
        _insert_observations(ing, file_id, spec, rules, staged, "SELECT * FROM fl_norm")
        con.execute("CREATE OR REPLACE TEMP TABLE fl_faults AS SELECT * FROM fl_norm "
                    "WHERE fault IS NOT NULL")
        bad = con.execute("SELECT count(*) FROM fl_faults").fetchall()[0][0]
        if bad:
            _quarantine_faults(ing, file_id, sha, rel, spec, staged, bad)
        con.execute("DROP TABLE fl_norm; DROP TABLE fl_faults")
        return rows - bad, bad + len(rejects)
    con.execute(f"CREATE OR REPLACE TEMP TABLE fl_dups AS "
                f"{duplicates_sql(staged.table, spec, molar_mass)}")
    query, rules = normalised_query(staged.table, spec, molar_mass, "fl_dups", parsed=True)
    _insert_columns(con, file_id, spec, rules)
    _insert_observations(ing, file_id, spec, rules, staged, query)
    # the rows that gave no observation are the faulty ones: only they are parsed again
    con.execute(f"CREATE OR REPLACE TEMP TABLE fl_rest AS SELECT * FROM {staged.table} s "
                "WHERE NOT EXISTS (SELECT 1 FROM observation o WHERE o.file_id = ? AND "
                "o.row_number = s.row_number)", [file_id])
    faults, _ = normalised_query("fl_rest", spec, molar_mass, "fl_dups")
    con.execute(f"CREATE OR REPLACE TEMP TABLE fl_faults AS SELECT * FROM ({faults}) "
                "WHERE fault IS NOT NULL")
    bad, rest = con.execute("SELECT (SELECT count(*) FROM fl_faults), "
                            "(SELECT count(*) FROM fl_rest)").fetchall()[0]
    if bad != rest:
        raise AssertionError(f"{rest - bad} row(s) neither loaded nor faulty")
    if bad:
        _quarantine_faults(ing, file_id, sha, rel, spec, staged, bad)
    con.execute("DROP TABLE fl_dups; DROP TABLE fl_rest; DROP TABLE fl_faults")
    return rows - bad, bad + len(rejects)


def _insert_columns(con, file_id: int, spec, rules: dict) -> None:
    """The per-file facts of each mapped column, one ``raw_column`` row each, one statement."""
    t = spec.temperature
    columns = [("temperature", t.column, t.unit, t.scale, "K", rules.get("T"))]
    columns += [(q, cs.column, cs.unit, None, QUANTITY_KIND[q][1], rules.get(q))
                for q, cs in spec.value_columns().items()]
    con.execute(
        "INSERT INTO raw_column VALUES " + ", ".join(["(?, ?, ?, ?, ?, ?, ?)"] * len(columns)),
        [v for quantity, column, unit, scale, si_unit, rule in columns
         for v in (file_id, quantity, column, unit, scale, si_unit,
                   json.dumps(rule, sort_keys=True) if rule else None)])


def _quarantine_faults(ing, file_id, sha, rel, spec, staged, bad: int) -> None:
    """The faulty rows to quarantine with their reason and cell, ids one block in row order."""
    con = ing.con
    first, last = con.execute("SELECT min(v), max(v) FROM (SELECT nextval('q_id_seq') AS v "
                              "FROM range(?))", [bad]).fetchall()[0]
    if last - first + 1 != bad:
        raise AssertionError("quarantine ids are not one block")
    cell_ref, cell_params = cell_ref_sql(spec, staged)
    where = ("printf('row %d%s', row_number, CASE WHEN split_part(fault, '|', 2) <> '' THEN "
             "printf(', column ''%s''', split_part(fault, '|', 2)) ELSE '' END)")
    if cell_params:     # a workbook: the cell first, as the spreadsheet shows it
        where = (f"CASE WHEN cell_ref IS NULL THEN {where} ELSE printf('cell %s (row %d, "
                 "column ''%s'')', cell_ref, row_number, split_part(fault, '|', 2)) END")
    con.execute(
        "INSERT INTO quarantine SELECT ? + row_number() OVER (ORDER BY row_number) - 1, ?, ?, "
        "?, row_number, nullif(split_part(fault, '|', 2), ''), raw, split_part(fault, '|', 1), "
        f"printf('%s, %s: %s (cell %s)', ?, {where}, split_part(fault, '|', 1), "
        "coalesce(cell, 'empty')), ?, cell_ref FROM ("
        f"SELECT *, {raw_text_sql(spec)} AS raw, {cell_sql(spec)} AS cell, "
        f"{cell_ref} AS cell_ref FROM fl_faults)",
        [first, file_id, sha, rel, rel, ing.run_id, *cell_params])


def raw_text_sql(spec) -> str:
    """SQL of a faulty row's mapped cells joined with the file's delimiter."""
    keys = ["T"] + list(spec.value_columns())
    sep = spec.delimiter.replace("'", "''")
    return "concat_ws('" + sep + "', " + ", ".join(f"coalesce(txt_{k}, '')" for k in keys) + ")"


def cell_sql(spec) -> str:
    """SQL of the text of the cell named by a row's fault."""
    def lit(text: str) -> str:
        return "'" + text.replace("'", "''") + "'"

    arms = [f"WHEN split_part(fault, '|', 2) = {lit(spec.temperature.column)} THEN txt_T"]
    arms += [f"WHEN split_part(fault, '|', 2) = {lit(c.column)} THEN txt_{q}"
             for q, c in spec.value_columns().items()]
    arms += [f"WHEN split_part(fault, '|', 2) = {lit(u.column)} "
             f"THEN txt_u_{'T' if q == 'temperature' else q}"
             for q, u in spec.uncertainty.items() if u.column]
    return "CASE " + " ".join(arms) + " END"


def cell_ref_sql(spec, staged) -> tuple[str, list]:
    """SQL (and its parameters) of the workbook cell at fault; NULL for CSV."""
    if not is_workbook(spec.file):
        return "NULL", []
    columns = [spec.temperature.column] + [c.column for c in spec.value_columns().values()]
    columns += [u.column for u in spec.uncertainty.values() if u.column]
    arms, params = [], []
    for column in columns:
        arms.append("WHEN split_part(fault, '|', 2) = ? THEN concat(?, row_number + ?)")
        params += [column, staged.cell_prefix(column), staged.header_row]
    return "CASE " + " ".join(arms) + " END", params


def _insert_observations(ing, file_id, spec, rules, staged, query: str) -> None:
    """Every observation of the file in one ``INSERT ... SELECT`` over the staged table.

    Ids are allocated as a block after the current maximum (no sequence touched per row):
    row r's quantity i gets ``base + (r - 1) * n + i``, as before. A workbook's values keep
    their cells (``VLE!C14``): the column's prefix and the sheet row."""
    con = ing.con
    if ing._next_obs is None:
        ing._next_obs = con.execute(
            "SELECT coalesce(max(obs_id), 0) + 1 FROM observation").fetchall()[0][0]
    quantities = list(spec.value_columns().items())
    n = len(quantities)
    params: dict = {"base": ing._next_obs, "file_id": file_id}

    def per_quantity(template: str) -> str:
        """SQL picking ``template`` (with ``{q}`` and ``{i}``) for the row's quantity."""
        if n == 1:
            return template.format(q=quantities[0][0], i=0)
        return "CASE qi " + " ".join(f"WHEN {i} THEN {template.format(q=q, i=i)}"
                                     for i, (q, _) in enumerate(quantities)) + " END"

    for i, (q, _) in enumerate(quantities):
        params[f"q{i}"] = q
    if is_workbook(spec.file):
        params.update(t_cell=staged.cell_prefix(spec.temperature.column),
                      header_row=staged.header_row)
        for i, (_, cs) in enumerate(quantities):
            params[f"v_cell{i}"] = staged.cell_prefix(cs.column)
        cells = ("concat($t_cell, row_number + $header_row), "
                 + per_quantity("concat($v_cell{i}, row_number + $header_row)"))
    else:
        cells = "NULL, NULL"
    source = f"({query})"
    if n > 1:
        source += (" CROSS JOIN (VALUES " + ", ".join(f"({i})" for i in range(n))
                   + ") AS fl_quantities(qi)")
    uq = ("CASE qi " + " ".join(f"WHEN {i} THEN {uncertainty_sql(q, rules)}"
                               for i, (q, _) in enumerate(quantities)) + " END"
          if n > 1 else uncertainty_sql(quantities[0][0], rules))
    large = staged.rows_read > LARGE_FILE_ROWS
    if large:   # ids and row numbers are explicit: the rows need not keep their order
        con.execute("SET preserve_insertion_order = false")
    try:
        con.execute(
            "INSERT INTO observation (obs_id, file_id, row_number, quantity, T_K, u_T_K, "
            "value_si, u_value_si, T_original, value_original, T_cell_ref, value_cell_ref, "
            "T_parsed, value_parsed) "
            f"SELECT $base + (row_number - 1) * {n} + {per_quantity('{i}')}, $file_id, "
            f"row_number, {per_quantity('$q{i}')}, si_T, {uncertainty_sql('T', rules)}, "
            f"{per_quantity('si_{q}')}, {uq}, {kept_text('num_T', 'txt_T')}, "
            f"{per_quantity(kept_text('num_{q}', 'txt_{q}'))}, {cells}, num_T, "
            f"{per_quantity('num_{q}')} FROM {source} "
            f"WHERE fault IS NULL AND NOT {per_quantity('empty_{q}')}", params)
    except BaseException:
        if large:   # the setting back if the connection still takes statements; the error wins
            try:
                con.execute("RESET preserve_insertion_order")
            except duckdb.Error:
                pass
        raise
    if large:
        con.execute("RESET preserve_insertion_order")
    last = con.execute("SELECT max(obs_id) FROM observation WHERE file_id = ?",
                       [file_id]).fetchall()[0][0]
    if last is not None:
        ing._next_obs = last + 1
