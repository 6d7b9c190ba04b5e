"""Many small batches in few statements (issue 14): one transaction and shared passes.

Loading a small CSV file alone costs a fixed ~20 statements, most of the time the database
spends on it; the largest of them, the normalise pass, is compiled anew for every file. Here
consecutive batches whose changed tables are all small CSV files are loaded together, in one
transaction:

1. each batch's source, retirements and manifest entries are written and each file is staged
   exactly as :meth:`Ingestor.begin` and :func:`stage_csv` do for a batch alone (same order, so
   the same ``file_id`` values);
2. the files of one *layout* (:func:`pipeline.ingest.normalise.layout`: the same mapped columns,
   units, scale, uncertainty rules and number style) are normalised in ONE statement, told
   apart by an ordinal ``fl_file``, duplicates counted within each file;
3. the row counts of every file come from one query per layout, the observations of every
   file of a layout go in one INSERT (ids allocated as the batch-alone path allocates them,
   file after file), the columns of every file in one INSERT, the counts in one UPDATE.
   Quarantine rows keep the order of ids a batch alone gives them (the reader's rejects of a
   file, then its faulty rows in row order); they are written per faulty file, which is rare.

**Isolation.** Whatever goes wrong while a group loads (a refused file, a source declared by
two batches of the group, any exception), the group's transaction is rolled back, leaving the
store as it was, and its batches are loaded again one at a time by the batch-alone path, which
refuses only the faulty batch and names it. A problem of the machine or Ctrl-C stops the run.
"""

from __future__ import annotations

import logging
from pathlib import Path

import duckdb

from pipeline.crashpoints import crash_point
from pipeline.errors import BatchError, environment_problem, is_interrupt
from pipeline.ingest.normalise import QUANTITY_KIND, ident, layout, uncertainty_sql
from pipeline.ingest.reader import stage_csv
from pipeline.ingest.results import BatchResult, FileResult
from pipeline.ingest.workbook import is_workbook

log = logging.getLogger(__name__)

#: Largest table file loaded in a group [bytes]; a larger one is loaded with its batch alone
SMALL_FILE_BYTES = 1 << 20
#: Bounds of one group: batches, table files, bytes held in memory
GROUP_BATCHES = 250
GROUP_FILES = 1000
GROUP_BYTES = 32 << 20


def groupable(pending) -> bool:
    """Whether a prepared batch may load in a group: its changed tables are small CSV files."""
    return all(not is_workbook(spec.file) and len(content) <= SMALL_FILE_BYTES
               for _, spec, rel, _, content, _, _ in pending.plan.tables
               if rel not in pending.unchanged)


def weight(pending) -> tuple[int, int]:
    """Table files and bytes a prepared batch adds to a group."""
    tables = [t for t in pending.plan.tables if t[2] not in pending.unchanged]
    return len(tables), sum(len(t[4]) for t in tables)


def ingest_batches(ingestor, batches: list[Path], progress) -> list:
    """Every batch's result, in order. Consecutive batches of small CSV files load together
    (:func:`load_group`); any other batch loads alone. ``progress(batch_dir)`` and the crash
    point ``ingest:batch-done`` follow each batch once it is committed (with its group) or
    refused."""
    results: list = []
    pending: list = []
    size = [0, 0]

    def done(slot: int, batch_dir: Path, result: BatchResult) -> None:
        results[slot] = result
        if progress:
            progress(batch_dir)
        crash_point("ingest:batch-done")

    def flush() -> None:
        if len(pending) == 1:
            loaded = [ingestor.load_alone(pending[0][2])]
        else:
            loaded = load_group(ingestor, [p for _, _, p in pending])
        for (slot, batch_dir, _), result in zip(pending, loaded):
            done(slot, batch_dir, result)
        pending.clear()
        size[:] = [0, 0]

    for batch_dir in batches:
        results.append(None)
        prepared = ingestor.prepare(batch_dir)
        if isinstance(prepared, BatchResult):
            done(len(results) - 1, batch_dir, prepared)
            continue
        if not groupable(prepared):
            if pending:
                flush()
            done(len(results) - 1, batch_dir, ingestor.load_alone(prepared))
            continue
        files, nbytes = weight(prepared)
        if any(p.plan.batch == prepared.plan.batch for _, _, p in pending):
            # the same batch named twice (two paths): the first must load before the second
            # is compared with the store
            flush()
            prepared = ingestor.prepare(batch_dir)
            if isinstance(prepared, BatchResult):
                done(len(results) - 1, batch_dir, prepared)
                continue
        if pending and (len(pending) >= GROUP_BATCHES or size[0] + files >
                        GROUP_FILES or size[1] + nbytes > GROUP_BYTES):
            flush()
        pending.append((len(results) - 1, batch_dir, prepared))
        size[0] += files
        size[1] += nbytes
    if pending:
        flush()
    return results


def load_group(ingestor, pendings: list) -> list:
    """Load prepared batches together (see the module docstring); their results in order."""
    from pipeline.ingest.stage import _rollback

    con = ingestor.con
    ingestor._current_files = None
    before = _sequences(con)
    con.execute("BEGIN TRANSACTION")
    try:
        results = _load_together(ingestor, pendings)
        con.execute("COMMIT")
        return results
    except Exception as err:  # noqa: BLE001 - the batches are loaded again one at a time
        _rollback(con)
        if is_interrupt(err) or environment_problem(err) is not None:
            raise
        log.debug("a group of %d batches failed (%s: %s); loading them one at a time",
                  len(pendings), type(err).__name__, err)
    except BaseException:
        _rollback(con)
        raise
    finally:
        _drop_temporary(con)
    _restore_sequences(con, before)
    return [ingestor.load_alone(p) for p in pendings]


#: The id sequences the ingest draws from
SEQUENCES = ("file_id_seq", "fp_id_seq", "const_id_seq", "q_id_seq")


def _sequences(con) -> dict[str, int | None]:
    """The last value each id sequence gave (None: none yet)."""
    return dict(con.execute("SELECT sequence_name, last_value FROM duckdb_sequences() "
                            "WHERE list_contains(?, sequence_name)", [list(SEQUENCES)]
                            ).fetchall())


def _restore_sequences(con, before: dict[str, int | None]) -> None:
    """A rolled-back transaction keeps the values its sequences gave away (DuckDB's sequences
    are not transactional): start each again where it stood, so the batches loaded one at a
    time get the ids they would have had without the failed group."""
    now = _sequences(con)
    changed = [name for name in SEQUENCES if now.get(name) != before.get(name)]
    if not changed:
        return
    con.execute("BEGIN TRANSACTION")
    for name in changed:
        con.execute(f"DROP SEQUENCE {name}")
        con.execute(f"CREATE SEQUENCE {name} START {int(before.get(name) or 0) + 1}")
    con.execute("COMMIT")


def _drop_temporary(con) -> None:
    """Drop the group's temporary tables (a connection already broken keeps its error)."""
    try:
        _drop(con)
    except duckdb.Error:
        pass


def _drop(con) -> None:
    names = [r[0] for r in con.execute(
        "SELECT table_name FROM duckdb_tables() WHERE temporary AND (table_name = 'fl_gstage' "
        "OR regexp_matches(table_name, '^fl_g(layout|norm)_[0-9]+$'))"
    ).fetchall()]
    if names:
        con.execute("; ".join(f"DROP TABLE {n}" for n in names))


class _File:
    """One changed table of the group, staged."""

    def __init__(self, k, result, file_id, rel, sha, spec, staged, rejects, molar_mass):
        self.k, self.result, self.file_id, self.rel, self.sha = k, result, file_id, rel, sha
        self.spec, self.staged, self.rejects = spec, staged, rejects
        self.layout = layout(spec, molar_mass)
        self.molar_mass = molar_mass
        self.slot = len(result.files)
        result.files.append(None)      # filled when the file's counts are known
        self.loaded = self.bad = 0
        self.last_rows: list = [None] * len(spec.value_columns())
        self.base = None


def _load_together(ing, pendings: list) -> list:
    from pipeline.ingest import stage

    con = ing.con
    results, files = [], []
    layouts: dict[str, list[_File]] = {}
    for p in pendings:
        result = BatchResult(p.plan.batch, "loaded")
        results.append(result)
        for i, spec, rel, path, content, sha, file_id in ing.begin(p.plan, p.current,
                                                                   p.unchanged, p.removed,
                                                                   result):
            k = len(files)
            staged = stage_csv(con, content, spec, rel, _needed(spec), "fl_gstage")
            rejects = [(row, column, raw, "bad-row-shape", f"row {row}" + (
                f", column '{column}'" if column else "") + f": {message}", None)
                for row, column, raw, message in staged.rejects]
            f = _File(k, result, file_id, rel, sha, spec, staged, rejects,
                      ing.fluids[spec.fluid].molar_mass_kg_mol)
            files.append(f)
            # the mapped columns of the files of one layout gather in one table
            columns = ", ".join(ident(c) for c in _needed(spec).values())
            if f.layout in layouts:
                g = list(layouts).index(f.layout)
                con.execute(f"INSERT INTO fl_glayout_{g} SELECT {k}, row_number, {columns} "
                            "FROM fl_gstage")
            else:
                g = len(layouts)
                con.execute(f"CREATE TEMP TABLE fl_glayout_{g} AS SELECT {k}::BIGINT AS "
                            f"fl_file, row_number, {columns} FROM fl_gstage")
            layouts.setdefault(f.layout, []).append(f)
    rules_of = {}
    for g, (key, group) in enumerate(layouts.items()):
        first = group[0]
        rules_of[key] = stage.normalise(con, f"fl_glayout_{g}", first.spec, first.molar_mass,
                                        f"fl_gnorm_{g}", by_file=True)
        quantities = list(first.spec.value_columns())
        by_k = {f.k: f for f in group}
        for k, loaded, bad, *last in con.execute(
                "SELECT fl_file, count(*) FILTER (WHERE fault IS NULL), count(*) FILTER "
                "(WHERE fault IS NOT NULL)" + "".join(
                    f", max(row_number) FILTER (WHERE fault IS NULL AND NOT empty_{q})"
                    for q in quantities) + f" FROM fl_gnorm_{g} GROUP BY fl_file").fetchall():
            by_k[k].loaded, by_k[k].bad, by_k[k].last_rows = loaded, bad, last
    # ids file after file, as the batch-alone path gives them
    next_obs = con.execute("SELECT coalesce(max(obs_id), 0) + 1 FROM observation").fetchall()[0][0]
    for f in files:
        f.base = next_obs
        n = len(f.last_rows)
        if any(last is not None for last in f.last_rows):
            next_obs = max(f.base + (last - 1) * n + qi for qi, last in enumerate(f.last_rows)
                           if last is not None) + 1
    _insert_columns(con, files, rules_of)
    for g, group in enumerate(layouts.values()):
        _insert_observations(con, g, group, rules_of[group[0].layout])
    counts = []
    for f in files:
        for row, column, raw, code, message, cell in f.rejects:
            ing._quarantine(f.file_id, f.sha, f.rel, row, column, raw, code,
                            f"{f.rel}, {message}", cell)
        if f.bad:
            _quarantine_faults(ing, f, list(layouts).index(f.layout))
        quarantined = f.bad + len(f.rejects)
        if f.staged.rows_read != f.loaded + quarantined:
            raise BatchError(f"row accounting failed: {f.staged.rows_read} read != {f.loaded} "
                             f"loaded + {quarantined} quarantined", file=f.rel)
        counts += [f.file_id, f.staged.rows_read, f.loaded, quarantined]
        f.result.files[f.slot] = FileResult(f.rel, "loaded", f.staged.rows_read, f.loaded,
                                            quarantined)
    if files:
        con.execute("UPDATE raw_file SET rows_read = v.r, rows_loaded = v.l, rows_quarantined = "
                    "v.q FROM (VALUES " + ", ".join(["(?, ?, ?, ?)"] * len(files)) +
                    ") AS v(id, r, l, q) WHERE raw_file.file_id = v.id", counts)
    return results


def _needed(spec) -> dict[str, str]:
    needed = {"temperature": spec.temperature.column}
    needed.update({q: c.column for q, c in spec.value_columns().items()})
    needed.update({f"uncertainty of {q}": u.column for q, u in spec.uncertainty.items()
                   if u.column})
    return needed


def _insert_columns(con, files: list[_File], rules_of: dict) -> None:
    """The raw_column rows of every file of the group, in one INSERT."""
    import json

    values = []
    for f in files:
        rules, t = rules_of[f.layout], f.spec.temperature
        rows = [("temperature", t.column, t.unit, t.scale, "K", rules.get("T"))]
        rows += [(q, cs.column, cs.unit, None, QUANTITY_KIND[q][1], rules.get(q))
                 for q, cs in f.spec.value_columns().items()]
        values += [(f.file_id, q, column, unit, scale, si_unit,
                    json.dumps(rule, sort_keys=True) if rule else None)
                   for q, column, unit, scale, si_unit, rule in rows]
    if values:
        con.execute("INSERT INTO raw_column VALUES " + ", ".join(["(?, ?, ?, ?, ?, ?, ?)"]
                                                                 * len(values)),
                    [v for row in values for v in row])


def _insert_observations(con, g: int, group: list[_File], rules: dict) -> None:
    """Every observation of a layout's files in one INSERT; each file's ids from its base."""
    quantities = list(group[0].spec.value_columns())
    n, uT = len(quantities), uncertainty_sql("T", rules)
    bases = [f for f in group if any(last is not None for last in f.last_rows)]
    if not bases:
        return
    params = [v for f in bases for v in (f.k, f.base, f.file_id)]
    selects = [f"SELECT b.base + (row_number - 1) * {n} + {qi}, b.file_id, row_number, "
               f"'{q}', si_T, {uT}, si_{q}, {uncertainty_sql(q, rules)}, txt_T, txt_{q}, NULL, "
               f"NULL FROM fl_gnorm_{g} JOIN fl_bases b USING (fl_file) "
               f"WHERE fault IS NULL AND NOT empty_{q}" for qi, q in enumerate(quantities)]
    con.execute("WITH fl_bases AS (SELECT * FROM (VALUES " + ", ".join(
        ["(?::BIGINT, ?::BIGINT, ?::BIGINT)"] * len(bases)) + ") AS v(fl_file, base, file_id)) "
        "INSERT INTO observation (obs_id, file_id, row_number, quantity, T_K, u_T_K, value_si, "
        "u_value_si, T_original, value_original, T_cell_ref, value_cell_ref) "
        + " UNION ALL ".join(selects), params)


def _quarantine_faults(ing, f: _File, g: int) -> None:
    """A file's faulty rows to quarantine, ids in row order (a block of the sequence)."""
    con = ing.con
    first, last = con.execute("SELECT min(v), max(v) FROM (SELECT nextval('q_id_seq') AS v "
                              "FROM range(?))", [f.bad]).fetchall()[0]
    if last - first + 1 != f.bad:
        raise AssertionError("quarantine ids are not one block")
    where = ("printf('row %d%s', row_number, CASE WHEN split_part(fault, '|', 2) <> '' THEN "
             "printf(', column ''%s''', split_part(fault, '|', 2)) ELSE '' END)")
    con.execute(
        "INSERT INTO quarantine SELECT ? + row_number() OVER (ORDER BY row_number) - 1, ?, ?, ?, "
        "row_number, nullif(split_part(fault, '|', 2), ''), raw, split_part(fault, '|', 1), "
        f"printf('%s, %s: %s (cell %s)', ?, {where}, split_part(fault, '|', 1), "
        "coalesce(cell, 'empty')), ?, NULL FROM ("
        f"SELECT *, {ing._raw_text(f.spec)} AS raw, {ing._cell(f.spec)} AS cell "
        f"FROM fl_gnorm_{g} WHERE fault IS NOT NULL AND fl_file = ?)",
        [first, f.file_id, f.sha, f.rel, f.rel, ing.run_id, f.k])
