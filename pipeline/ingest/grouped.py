"""Many small batches in few statements (issue 14): one transaction and shared passes.

Loading a small CSV file alone costs a fixed ~20 statements, most of the time the database
spends on it. Here consecutive batches whose changed tables are all small CSV files are
loaded together, in one transaction, with a handful of statements per group and per layout
instead of per file:

1. **Assembled in Python first** (:class:`_Group`), in the order the batch-alone path writes
   (so the same ids): each batch's source, retirements, manifest row, fixed points and
   constants (built by :mod:`pipeline.ingest.points`, one quarantined like alone), and its
   changed tables. Twins (a file with the content of another current table) and sources
   declared elsewhere are found from one query each; either makes the group fail (below).
2. **Ids in blocks**: ``file_id``, ``fp_id`` and ``const_id`` are drawn as one block of the
   sequence each and given out in that order.
3. **Staged without a statement per file**: a *plain* file (:mod:`pipeline.ingest.plaincsv`:
   no quote, no lone CR, rows of the header's width - nearly every small file) is split in
   Python from the bytes that were hashed, and the plain files of one *layout*
   (:func:`pipeline.ingest.normalise.layout`: the same mapped columns, units, scale,
   uncertainty rules and number style) reach DuckDB as ONE Arrow table, their ordinal in
   ``fl_file``. Any other file is staged by DuckDB (:func:`stage_csv`) exactly as alone and
   appended to its layout's table.
4. **One pass per layout**: normalised in one statement (duplicates counted within each
   file), counted in one query; the observations of every file of a layout go in one
   INSERT (ids file after file, as the batch-alone path allocates them).
5. **One statement per table for the group**: raw_column, fixed_point, stated_constant,
   raw_file (with its final counts), the retirements, the sources; each from an Arrow table.
   Quarantine rows keep the order of ids a batch alone gives them (a manifest's refused
   entries, then per file the reader's rejects and its faulty rows in row order); they are
   written per faulty file or entry, which is rare.

**Isolation.** Whatever goes wrong while a group loads (a refused file, a source declared by
two batches of the group or by another batch of the store, a twin file, any exception), the
group's transaction is rolled back, leaving the store as it was, and its batches are loaded
again as two groups, halves of it, down to groups of fewer than :data:`SPLIT_FROM` batches,
which load one at a time by the batch-alone path: that refuses only the faulty batch and
names it (or loads it, where the group was only cautious), and the other batches of a large
group still load in groups. A problem of the machine or Ctrl-C stops the run.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa

from pipeline.crashpoints import crash_point
from pipeline.errors import BatchError, environment_problem, is_interrupt
from pipeline.ingest.groupwrite import (
    RAW_COLUMN,
    block,
    insert_from,
    insert_points,
    write_files,
)
from pipeline.ingest.normalise import QUANTITY_KIND, ident, layout, uncertainty_sql
from pipeline.ingest.plaincsv import split_plain
from pipeline.ingest.points import constant_row, fixed_point_row
from pipeline.ingest.reader import stage_csv
from pipeline.ingest.results import BatchResult, FileResult
from pipeline.ingest.workbook import is_workbook

log = logging.getLogger(__name__)

#: Largest table file loaded in a group [bytes]; a larger one is loaded with its batch alone
SMALL_FILE_BYTES = 1 << 20
#: A failed group of this many batches or more is loaded again as two groups (halves); a
#: smaller one one batch at a time
SPLIT_FROM = 4
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
    names: set[str] = set()            # the batches in ``pending``
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
        names.clear()
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
        if prepared.plan.batch in names:
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
        names.add(prepared.plan.batch)
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
    except Exception as err:  # noqa: BLE001 - the batches are loaded again in halves
        _rollback(con)
        if is_interrupt(err) or environment_problem(err) is not None:
            raise
        log.debug("a group of %d batches failed (%s: %s); loading it again in halves",
                  len(pendings), type(err).__name__, err)
    except BaseException:
        _rollback(con)
        raise
    finally:
        _drop_temporary(con)
    _restore_sequences(con, before)
    if len(pendings) < SPLIT_FROM:
        return [ingestor.load_alone(p) for p in pendings]
    # halves: the faulty batch ends in a group of its own after a few halvings, and the
    # others still load in groups (a group that loads leaves what one at a time leaves)
    half = len(pendings) // 2
    return load_group(ingestor, pendings[:half]) + load_group(ingestor, pendings[half:])


#: The id sequences the ingest draws from
SEQUENCES = ("file_id_seq", "fp_id_seq", "const_id_seq", "q_id_seq")


def _sequences(con) -> dict[str, int]:
    """The value each id sequence gives next. (Not its ``last_value``: that is NULL for a
    sequence made again by :func:`_restore_sequences` and not drawn from since, which once
    made a second failed group start the sequence again at 1.)"""
    return dict(con.execute("SELECT sequence_name, coalesce(last_value + increment_by, "
                            "start_value) FROM duckdb_sequences() "
                            "WHERE list_contains(?, sequence_name)", [list(SEQUENCES)]
                            ).fetchall())


def _restore_sequences(con, before: dict[str, int]) -> None:
    """A rolled-back transaction keeps the values its sequences gave away (DuckDB's sequences
    are not transactional): start each again where it stood, so the batches loaded after a
    failed group get the ids they would have had without it."""
    now = _sequences(con)
    changed = [name for name in SEQUENCES if now.get(name) != before.get(name)]
    if not changed:
        return
    con.execute("BEGIN TRANSACTION")
    for name in changed:
        con.execute(f"DROP SEQUENCE {name}")
        con.execute(f"CREATE SEQUENCE {name} START {int(before[name])}")
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

    def __init__(self, k, index, result, rel, sha, spec, molar_mass, content):
        self.k, self.index, self.result, self.rel, self.sha = k, index, result, rel, sha
        self.spec = spec
        self.content = content
        self.file_id = None            # from the group's block of file ids
        self.layout = layout(spec, molar_mass)
        self.molar_mass = molar_mass
        self.slot = len(result.files)
        result.files.append(None)      # filled when the file's counts are known
        self.rows_read = self.loaded = self.bad = 0
        self.rejects: list = []
        self.last_rows: list = [None] * len(spec.value_columns())
        self.base = None


class _Group:
    """What a group writes, assembled in Python in the order the batch-alone path writes it
    (see :func:`_load_together`)."""

    def __init__(self, ing):
        self.ing = ing
        self.results: list[BatchResult] = []
        self.files: list[_File] = []
        self.new_files: list[list] = []      # raw_file rows, ids given later, counts last
        self.supersede: list[tuple[int, int | None]] = []   # (old id, index in new_files)
        self.points = {"fixed_point": [], "constant": []}   # (index in new_files, row)
        self.quarantine: list[tuple] = []    # in the order the batch-alone path writes
        self.sources: list[list] = []

    def add(self, p, tables: _Tables) -> None:
        """Plan one prepared batch (its retirements, manifest entries and tables); ``tables``
        (path -> SHA-256 of the current tables) is updated as the batch-alone path would."""
        ing, plan = self.ing, p.plan
        s = plan.manifest.source
        self.sources.append([s.id, s.kind, s.citation, s.doi or None, s.license or None,
                             plan.batch, ing.run_id])
        result = BatchResult(plan.batch, "loaded")
        self.results.append(result)
        for path in p.removed:
            self.supersede.append((p.current[path][0], None))
            tables.pop(path)
        if plan.manifest_path not in p.unchanged:
            result.files.append(self._manifest(plan, p.current.get(plan.manifest_path)))
        else:
            result.files.append(FileResult(plan.manifest_path, "unchanged"))
        for i, spec, rel, _, content, sha, mapping in plan.tables:
            if rel in p.unchanged:
                result.files.append(FileResult(rel, "unchanged"))
                continue
            twins = tables.twins(sha, rel)
            if twins:   # the batch-alone path refuses it and names the twin
                raise BatchError(f"has the same content as '{twins[0]}'", file=rel)
            index = self._new_file(rel, plan, "table", sha, mapping, len(content), spec, i,
                                   p.current.get(rel))
            tables.set(rel, sha)
            f = _File(len(self.files), index, result, rel, sha, spec,
                      ing.fluids[spec.fluid].molar_mass_kg_mol, content)
            self.files.append(f)
            self.quarantine.append(("table", f))

    def _new_file(self, rel, plan, role, sha, mapping, size, spec=None, index=None,
                  old=None) -> int:
        """A raw_file row (as ``Ingestor._new_file`` writes it), its id and counts to come;
        the old version's retirement."""
        from pipeline.ingest.stage import utcnow

        self.new_files.append([None, sha, mapping, rel, plan.batch, role,
                               plan.manifest.source.id, index,
                               spec.fluid if spec else None, spec.boundary if spec else None,
                               spec.solid_phase if spec else None, size, 0, 0, 0,
                               self.ing.run_id, utcnow(), None, None])
        if old is not None:
            self.supersede.append((old[0], len(self.new_files) - 1))
        return len(self.new_files) - 1

    def _manifest(self, plan, old) -> FileResult:
        """The manifest's raw_file row and its fixed points and constants (as
        ``Ingestor._load_manifest`` writes them)."""
        label = plan.manifest_path
        index = self._new_file(label, plan, "manifest", plan.manifest_sha, plan.manifest_sha,
                               plan.manifest_bytes, old=old)
        entries = [(fixed_point_row, e, "fixed_point") for e in plan.manifest.fixed_point]
        entries += [(constant_row, e, "constant") for e in plan.manifest.constant]
        counters = {"fixed_point": 0, "constant": 0}
        loaded = quarantined = 0
        for build, spec, kind in entries:
            counters[kind] += 1
            row, rejected = build(spec, counters[kind],
                                  self.ing.fluids[spec.fluid].molar_mass_kg_mol, label)
            if rejected is not None:
                self.quarantine.append(("entry", index, plan.manifest_sha, label, rejected))
                quarantined += 1
            else:
                self.points[kind].append((index, spec.fluid, plan.manifest.source.id,
                                          plan.manifest_sha, label, row))
                loaded += 1
        counts = self.new_files[index]
        counts[12:15] = [loaded + quarantined, loaded, quarantined]
        return FileResult(label, "loaded", loaded + quarantined, loaded, quarantined)


def _load_together(ing, pendings: list) -> list:
    """Load the group (see the module docstring): everything is first assembled in Python,
    then written in a few statements per group and per layout."""
    from pipeline.ingest import stage

    con = ing.con
    _check_sources(con, pendings)
    group = _Group(ing)
    tables = _Tables(con, pendings)
    for p in pendings:
        group.add(p, tables)
    first_id = block(con, "file_id_seq", len(group.new_files))
    for n, row in enumerate(group.new_files):
        row[0] = first_id + n
    for f in group.files:
        f.file_id = group.new_files[f.index][0]
    layouts = _stage(con, group.files)
    rules_of = {}
    for g, (key, members) in enumerate(layouts.items()):
        first = members[0]
        rules_of[key] = stage.normalise(con, f"fl_glayout_{g}", first.spec, first.molar_mass,
                                        f"fl_gnorm_{g}", by_file=True)
        quantities = list(first.spec.value_columns())
        by_k = {f.k: f for f in members}
        for k, loaded, bad, *last in con.execute(
                "SELECT fl_file, count(*) FILTER (WHERE fault IS NULL), count(*) FILTER "
                "(WHERE fault IS NOT NULL)" + "".join(
                    f", max(row_number) FILTER (WHERE fault IS NULL AND NOT empty_{q})"
                    for q in quantities) + f" FROM fl_gnorm_{g} GROUP BY fl_file").fetchall():
            by_k[k].loaded, by_k[k].bad, by_k[k].last_rows = loaded, bad, last
    # ids file after file, as the batch-alone path gives them
    next_obs = con.execute("SELECT coalesce(max(obs_id), 0) + 1 FROM observation").fetchall()[0][0]
    for f in group.files:
        f.base = next_obs
        n = len(f.last_rows)
        if any(last is not None for last in f.last_rows):
            next_obs = max(f.base + (last - 1) * n + qi for qi, last in enumerate(f.last_rows)
                           if last is not None) + 1
    _insert_columns(con, group.files, rules_of)
    for g, members in enumerate(layouts.values()):
        _insert_observations(con, g, members, rules_of[members[0].layout])
    insert_points(con, group)
    g_of = {key: g for g, key in enumerate(layouts)}
    for item in group.quarantine:
        if item[0] == "entry":
            _, index, sha, label, r = item
            ing._quarantine(group.new_files[index][0], sha, label, r.entry, r.key, r.raw,
                            r.code, r.message)
            continue
        f = item[1]
        for row, column, raw, code, message, cell in f.rejects:
            ing._quarantine(f.file_id, f.sha, f.rel, row, column, raw, code,
                            f"{f.rel}, {message}", cell)
        if f.bad:
            _quarantine_faults(ing, f, g_of[f.layout])
        quarantined = f.bad + len(f.rejects)
        if f.rows_read != f.loaded + quarantined:
            raise BatchError(f"row accounting failed: {f.rows_read} read != {f.loaded} "
                             f"loaded + {quarantined} quarantined", file=f.rel)
        group.new_files[f.index][12:15] = [f.rows_read, f.loaded, quarantined]
        f.result.files[f.slot] = FileResult(f.rel, "loaded", f.rows_read, f.loaded, quarantined)
    write_files(con, group)
    return group.results


def _check_sources(con, pendings: list) -> None:
    """Refuse the group (its batches then load in smaller groups and alone, which names the
    faulty one) when a source is declared by two of its batches, or by a batch of the store
    that is not the one declaring it now."""
    ids = [p.plan.manifest.source.id for p in pendings]
    if len(set(ids)) != len(ids):
        raise BatchError("a source is declared by two batches of the group")
    batch_of = {p.plan.manifest.source.id: p.plan.batch for p in pendings}
    for source_id, owner in con.execute("SELECT source_id, batch FROM source WHERE "
                                        "list_contains(?, source_id)", [ids]).fetchall():
        if owner != batch_of[source_id]:
            raise BatchError(f"source id '{source_id}' was declared by batch '{owner}'")


class _Tables:
    """The current tables whose content is that of one of the group's files (path -> SHA-256,
    and the paths of each SHA-256), kept as the group's batches change them."""

    def __init__(self, con, pendings: list):
        self.sha_of: dict[str, str] = {}
        self.paths_of: dict[str, set[str]] = {}
        shas = sorted({t[5] for p in pendings for t in p.plan.tables})
        if shas:
            for path, sha in con.execute(
                    "SELECT path, sha256 FROM raw_file WHERE list_contains(?, sha256) AND "
                    "role = 'table' AND superseded_by IS NULL", [shas]).fetchall():
                self.set(path, sha)

    def set(self, path: str, sha: str) -> None:
        self.pop(path)
        self.sha_of[path] = sha
        self.paths_of.setdefault(sha, set()).add(path)

    def pop(self, path: str) -> None:
        sha = self.sha_of.pop(path, None)
        if sha is not None:
            self.paths_of[sha].discard(path)

    def twins(self, sha: str, path: str) -> list[str]:
        """Other current tables with this content."""
        return sorted(self.paths_of.get(sha, set()) - {path})


def _stage(con, files: list[_File]) -> dict[str, list[_File]]:
    """Stage every file of the group into one table per layout (``fl_glayout_<g>``: the
    file's ordinal ``fl_file``, ``row_number`` and the mapped columns as text). Plain files
    (:mod:`pipeline.ingest.plaincsv`) are split in Python and reach DuckDB as one Arrow
    table per layout; any other file is staged by DuckDB (:func:`stage_csv`), as alone."""
    layouts: dict[str, list[_File]] = {}
    plain: dict[str, list] = {}
    made: set[str] = set()
    for f in files:
        needed = needed_columns(f.spec)
        columns = list(dict.fromkeys(needed.values()))
        if any(c.lower() in ("fl_file", "row_number") for c in columns):
            # the names of the layout table's own columns: such a file loads alone
            raise BatchError("a mapped column is named like a column of the group's tables",
                             file=f.rel)
        layouts.setdefault(f.layout, []).append(f)
        g = list(layouts).index(f.layout)
        staged = split_plain(f.content, f.spec, f.rel, needed)
        if staged is not None:
            f.rows_read = staged.rows_read
            plain.setdefault(f.layout, []).append((f, staged))
        else:
            staged = stage_csv(con, f.content, f.spec, f.rel, needed, "fl_gstage")
            f.rows_read = staged.rows_read
            f.rejects = [(row, column, raw, "bad-row-shape", f"row {row}" + (
                f", column '{column}'" if column else "") + f": {message}", None)
                for row, column, raw, message in staged.rejects]
            select = ", ".join(ident(c) for c in columns)
            if f.layout in made:
                con.execute(f"INSERT INTO fl_glayout_{g} SELECT {f.k}, row_number, {select} "
                            "FROM fl_gstage")
            else:
                con.execute(f"CREATE TEMP TABLE fl_glayout_{g} AS SELECT {f.k}::BIGINT AS "
                            f"fl_file, row_number::BIGINT AS row_number, {select} "
                            "FROM fl_gstage")
                made.add(f.layout)
        f.content = None               # the bytes are no longer needed
    for key, members in plain.items():
        g = list(layouts).index(key)
        columns = list(members[0][1].cells)
        arrays = {"fl_file": pa.array(np.concatenate([np.full(t.rows_read, f.k, np.int64)
                                                      for f, t in members])),
                  "row_number": pa.array(np.concatenate([t.row_numbers for _, t in members])
                                         .astype(np.int64))}
        for c in columns:
            arrays[c] = pa.array([v for _, t in members for v in t.cells[c]], pa.string())
        con.register("fl_gplain", pa.table(arrays))
        try:
            names = ", ".join(ident(c) for c in ("fl_file", "row_number", *columns))
            if key in made:
                con.execute(f"INSERT INTO fl_glayout_{g} SELECT {names} FROM fl_gplain")
            else:
                con.execute(f"CREATE TEMP TABLE fl_glayout_{g} AS SELECT {names} FROM fl_gplain")
        finally:
            con.unregister("fl_gplain")
    return layouts


def needed_columns(spec) -> dict[str, str]:
    """Role -> CSV column of every column a table maps (temperature, values, uncertainties)."""
    needed = {"temperature": spec.temperature.column}
    needed.update({q: c.column for q, c in spec.value_columns().items()})
    needed.update({f"uncertainty of {q}": u.column for q, u in spec.uncertainty.items()
                   if u.column})
    return needed


def _insert_columns(con, files: list[_File], rules_of: dict) -> None:
    """The raw_column rows of every file of the group, in one INSERT."""
    values = []
    for f in files:
        rules, t = rules_of[f.layout], f.spec.temperature
        rows = [("temperature", t.column, t.unit, t.scale, "K", rules.get("T"))]
        rows += [(q, cs.column, cs.unit, None, QUANTITY_KIND[q][1], rules.get(q))
                 for q, cs in f.spec.value_columns().items()]
        values += [[f.file_id, q, column, unit, scale, si_unit,
                    json.dumps(rule, sort_keys=True) if rule else None]
                   for q, column, unit, scale, si_unit, rule in rows]
    insert_from(con, "fl_gcolumns", RAW_COLUMN, values,
                 "INSERT INTO raw_column SELECT * FROM fl_gcolumns")


BASES = [("fl_file", pa.int64()), ("base", pa.int64()), ("file_id", pa.int64())]


def _insert_observations(con, g: int, group: list[_File], rules: dict) -> None:
    """Every observation of a layout's files in one INSERT; each file's ids from its base."""
    quantities = list(group[0].spec.value_columns())
    n, uT = len(quantities), uncertainty_sql("T", rules)
    bases = [[f.k, f.base, f.file_id] for f in group
             if any(last is not None for last in f.last_rows)]
    selects = [f"SELECT b.base + (row_number - 1) * {n} + {qi}, b.file_id, row_number, "
               f"'{q}', si_T, {uT}, si_{q}, {uncertainty_sql(q, rules)}, txt_T, txt_{q}, NULL, "
               f"NULL FROM fl_gnorm_{g} JOIN fl_gbases b USING (fl_file) "
               f"WHERE fault IS NULL AND NOT empty_{q}" for qi, q in enumerate(quantities)]
    insert_from(con, "fl_gbases", BASES, bases,
                 "INSERT INTO observation (obs_id, file_id, row_number, quantity, T_K, u_T_K, "
                 "value_si, u_value_si, T_original, value_original, T_cell_ref, value_cell_ref) "
                 + " UNION ALL ".join(selects))


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
