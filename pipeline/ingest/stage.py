"""The ingest stage: raw batches -> store, one transaction per batch, nothing lost.

Recipe for each batch folder (``<raw>/<batch>/batch.toml``):
1. read every file of the batch once (regular files only, :mod:`pipeline.ingest.rawread`) and
   validate batch.toml against ``schemas/batch.schema.json`` before reading any row;
2. hash those bytes (SHA-256) and compare with the current versions in ``raw_file``: unchanged
   content read the same way is skipped, so a second ingest is a no-op;
3. in ONE transaction: supersede changed or removed files (old rows stay as history), stage
   each changed CSV from the same bytes that were hashed, with a pinned dialect, normalise it,
   insert observations and quarantine rows, record the file with rows_read = rows_loaded +
   rows_quarantined; any error rolls the whole batch back, leaving the store exactly as before.

Consecutive batches whose changed tables are small CSV files load together, in one
transaction with shared passes (:mod:`pipeline.ingest.grouped`), leaving the store exactly as
loading them one at a time would; a group that fails is rolled back and its batches loaded
one at a time.

Batches are isolated: whatever goes wrong inside one batch (a refused manifest, a file that is
a FIFO, even an unexpected exception) refuses that batch with a message naming it, and the
next batch is ingested. Only a problem of the machine (disk full, a store that cannot be
written: :func:`pipeline.errors.environment_problem`) or Ctrl-C stops the run; the run row
then ends ``interrupted`` (Ctrl-C) or ``error``.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import secrets
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import duckdb

from pipeline import __version__
from pipeline.errors import (
    BatchError,
    FluidLedgerError,
    environment_problem,
    is_interrupt,
)
from pipeline.ingest import grouped
from pipeline.ingest.contract import (
    BatchManifest,
    Fluid,
    TableSpec,
    canonical_hash,
    load_batch,
    load_fluids,
)
from pipeline.ingest.declarations import check_declarations
from pipeline.ingest.discover import (
    absolute,
    batch_problem,
    discover_batches,
    manifest_problem,
    real_folder,
    table_file,
)
from pipeline.ingest.points import constant_row, fixed_point_row
from pipeline.ingest.rawread import MAX_TOML_BYTES, read_regular
from pipeline.ingest.results import BatchResult, FileResult, IngestResult
from pipeline.ingest.normalise import normalise  # noqa: F401 - the group loader calls stage.normalise
from pipeline.ingest.reader import stage_csv
from pipeline.ingest.tableload import (
    cell_sql,
    load_staged,
    memory_budget,
    raw_text_sql,
    restore_memory,
)
from pipeline.ingest.workbook import is_workbook, stage_workbook, table_path
from pipeline.store.runs import end_run

log = logging.getLogger(__name__)
REMOVED = 0  # raw_file.superseded_by for a file that disappeared from raw/


def utcnow() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None)


def new_run_id(kind: str) -> str:
    return f"{kind}-{utcnow():%Y%m%dT%H%M%S}-{secrets.token_hex(3)}"


@dataclass
class _Plan:
    """What one batch holds now, hashed, before anything is written."""

    batch: str
    manifest: BatchManifest
    manifest_path: str
    manifest_sha: str
    manifest_bytes: int
    tables: list[tuple[int, TableSpec, str, Path, bytes, str, str]]  # i, spec, rel, abs, data, sha, map


def plan_batch(root: Path, batch_dir: Path, fluids: dict[str, Fluid]) -> _Plan:
    """Validate a batch and read and hash its files, each once (reads, never writes)."""
    problem = batch_problem(root, batch_dir)
    if problem:
        raise BatchError(problem, file=_label(root, batch_dir))
    rel_batch = batch_dir.relative_to(root).as_posix() if batch_dir != root else batch_dir.name
    manifest_file = batch_dir / "batch.toml"
    label = _label(root, manifest_file)
    problem = manifest_problem(root, manifest_file)
    if problem:
        raise BatchError(problem, file=label)
    data = read_regular(manifest_file, label, limit=MAX_TOML_BYTES)
    manifest, doc = load_batch(manifest_file, data=data, label=label)
    for i, t in enumerate(manifest.table):
        _known_fluid(t.fluid, fluids, label, f"table[{i}].fluid")
    for kind, entries in (("fixed_point", manifest.fixed_point), ("constant", manifest.constant)):
        for i, e in enumerate(entries):
            _known_fluid(e.fluid, fluids, label, f"{kind}[{i}].fluid")
    check_declarations(manifest, fluids, label)
    names = [table_path(t.file, t) for t in manifest.table]
    if len(set(names)) != len(names):
        raise BatchError("the same file is mapped by two [[table]] entries (the tables of one "
                         "workbook need different sheets or ranges)", file=label)
    tables, read = [], {}
    for i, spec in enumerate(manifest.table):
        path = table_file(batch_dir, spec.file, label)
        # Read once: hashed and parsed from the same bytes; the tables of a workbook share them.
        if path not in read:
            content = read_regular(path, _label(root, batch_dir / spec.file))
            read[path] = (content, hashlib.sha256(content).hexdigest())
        content, sha = read[path]
        mapping = canonical_hash({"table": doc["table"][i], "source": doc["source"]})
        tables.append((i, spec, table_path(_label(root, batch_dir / spec.file), spec), path,
                       content, sha, mapping))
    return _Plan(rel_batch, manifest, label, hashlib.sha256(data).hexdigest(), len(data), tables)


def _label(root: Path, path: Path) -> str:
    try:
        return path.relative_to(root).as_posix()
    except ValueError:
        return path.as_posix()


def _known_fluid(fluid: str, fluids: dict[str, Fluid], label: str, key: str) -> None:
    if fluid not in fluids:
        raise BatchError(f"fluid '{fluid}' is not in fluids.toml (known: {sorted(fluids)})",
                         file=label, key=key)


@dataclass
class Pending:
    """A planned batch with changes to load: what is current in the store, what is not."""

    plan: _Plan
    current: dict[str, tuple[int, str, str]]
    unchanged: set[str]
    removed: list[str]


class Ingestor:
    """Loads batches into an open store connection (one transaction per batch)."""

    def __init__(self, con: duckdb.DuckDBPyConnection, root: Path, fluids: dict[str, Fluid],
                 run_id: str):
        self.con, self.root, self.fluids, self.run_id = con, root, fluids, run_id
        self._current_files: dict | None = None     # see _current
        self._memory_before: str | None = None      # see tableload.memory_budget

    # -- what is in the store -------------------------------------------------------------
    def _current(self, batch: str) -> dict[str, tuple[int, str, str]]:
        """The current files of a batch: path -> (file_id, sha256, mapping_sha256). Read for
        every batch at once and kept until the next load writes to the store."""
        if self._current_files is None:
            self._current_files = {}
            for b, path, fid, sha, mapping in self.con.execute(
                    "SELECT batch, path, file_id, sha256, mapping_sha256 FROM raw_file "
                    "WHERE superseded_by IS NULL").fetchall():
                self._current_files.setdefault(b, {})[path] = (fid, sha, mapping)
        return dict(self._current_files.get(batch, {}))

    def _tables_like(self, plan: _Plan) -> dict[str, str]:
        """Current tables (path -> SHA-256) whose content is that of one of the batch's files:
        read once per batch, then kept up to date as the batch's files are loaded."""
        shas = sorted({sha for *_, sha, _ in plan.tables})
        return dict(self.con.execute(
            "SELECT path, sha256 FROM raw_file WHERE list_contains(?, sha256) AND role = 'table' "
            "AND superseded_by IS NULL", [shas]).fetchall())

    @staticmethod
    def _duplicate_of(tables: dict[str, str], sha: str, path: str, file: str) -> str | None:
        """A current table of the same content from another file (the worksheets of one
        workbook share its hash and are not duplicates of each other)."""
        twins = sorted(p for p, s in tables.items() if s == sha and p != path and p != file
                       and not p.startswith(file + "#"))
        return twins[0] if twins else None

    # -- one batch ------------------------------------------------------------------------
    def ingest(self, batch_dir: Path) -> BatchResult:
        """Ingest one batch; any problem inside it refuses it (see the module docstring)."""
        prepared = self.prepare(batch_dir)
        return prepared if isinstance(prepared, BatchResult) else self.load_alone(prepared)

    def prepare(self, batch_dir: Path) -> BatchResult | Pending:
        """Plan a batch (reads, never writes): its result when it is refused or unchanged,
        else what loading it needs."""
        batch_dir = real_folder(batch_dir)
        rel = _label(self.root, batch_dir)
        try:
            plan = plan_batch(self.root, batch_dir, self.fluids)
        except FluidLedgerError as err:
            return BatchResult(rel, "error", error=str(err))
        except Exception as err:  # noqa: BLE001 - isolated: this batch is refused, not the run
            return _internal(rel, err)
        current = self._current(plan.batch)
        wanted = {plan.manifest_path: (plan.manifest_sha, plan.manifest_sha)}
        wanted.update({rel: (sha, mapping) for _, _, rel, _, _, sha, mapping in plan.tables})
        unchanged = {p for p, (sha, mapping) in wanted.items()
                     if p in current and current[p][1:] == (sha, mapping)}
        removed = [p for p in current if p not in wanted]
        if len(unchanged) == len(wanted) and not removed:
            return BatchResult(plan.batch, "unchanged",
                               [FileResult(p, "unchanged") for p in sorted(wanted)])
        return Pending(plan, current, unchanged, removed)

    def load_alone(self, pending: Pending) -> BatchResult:
        """Load one prepared batch in its own transaction."""
        plan = pending.plan
        self._current_files = None
        self.con.execute("BEGIN TRANSACTION")
        try:
            result = self._load(plan, pending.current, pending.unchanged, pending.removed)
            self.con.execute("COMMIT")
            return result
        except FluidLedgerError as err:
            _rollback(self.con)
            return BatchResult(plan.batch, "error", error=str(err))
        except Exception as err:  # noqa: BLE001 - isolated like an input error, but internal
            _rollback(self.con)
            return _internal(plan.batch, err)
        except BaseException:
            _rollback(self.con)
            raise
        finally:
            restore_memory(self)

    def _load(self, plan: _Plan, current, unchanged: set[str], removed: list[str]) -> BatchResult:
        self._next_obs = None        # the next free obs_id, read once per batch
        result = BatchResult(plan.batch, "loaded")
        for i, spec, rel, path, content, sha, file_id in self.begin(plan, current, unchanged,
                                                                    removed, result):
            result.files.append(self._load_table(file_id, rel, path, content, sha, spec, plan))
        return result

    def begin(self, plan: _Plan, current, unchanged: set[str], removed: list[str],
              result: BatchResult):
        """Write a batch's source, retirements and manifest entries into ``result``; then
        yield each changed table with its new ``raw_file`` row's id, in order, for the
        caller to load (an unchanged table is noted in ``result`` in its place)."""
        self._upsert_source(plan)
        for path in removed:
            self._supersede(current[path][0], REMOVED)
        if plan.manifest_path not in unchanged:
            result.files.append(self._load_manifest(plan, current.get(plan.manifest_path)))
        else:
            result.files.append(FileResult(plan.manifest_path, "unchanged"))
        changed = any(t[2] not in unchanged for t in plan.tables)
        tables = self._tables_like(plan) if changed else {}
        for i, spec, rel, path, content, sha, mapping in plan.tables:
            if rel in unchanged:
                result.files.append(FileResult(rel, "unchanged"))
                continue
            twin = self._duplicate_of(tables, sha, rel, rel.removesuffix(table_path("", spec)))
            if twin is not None:
                raise BatchError(f"has the same content (SHA-256 {sha[:12]}…) as the already "
                                 f"ingested file '{twin}'; a duplicated file is refused", file=rel)
            old = current.get(rel)
            file_id = self._new_file(rel, plan, "table", sha, mapping, len(content), spec, i)
            if old is not None:
                self._supersede(old[0], file_id)
            tables[rel] = sha          # the new version is current; the old one no more
            yield i, spec, rel, path, content, sha, file_id

    def _upsert_source(self, plan: _Plan) -> None:
        s = plan.manifest.source
        row = self.con.execute("SELECT batch FROM source WHERE source_id = ?", [s.id]).fetchone()
        if row and row[0] != plan.batch:
            live = self.con.execute("SELECT count(*) FROM raw_file WHERE batch = ? AND "
                                    "superseded_by IS NULL", [row[0]]).fetchone()[0]
            if live:
                raise BatchError(f"source id '{s.id}' is already declared by batch '{row[0]}'",
                                 file=plan.manifest_path, key="source.id")
        self.con.execute(
            "INSERT OR REPLACE INTO source VALUES (?, ?, ?, ?, ?, ?, ?)",
            [s.id, s.kind, s.citation, s.doi or None, s.license or None, plan.batch, self.run_id])

    def _new_file(self, rel, plan, role, sha, mapping, size, spec=None, index=None) -> int:
        return self.con.execute(
            "INSERT INTO raw_file VALUES (nextval('file_id_seq'), ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, "
            "?, 0, 0, 0, ?, ?, NULL, NULL) RETURNING file_id",
            [sha, mapping, rel, plan.batch, role, plan.manifest.source.id, index,
             spec.fluid if spec else None, spec.boundary if spec else None,
             spec.solid_phase if spec else None, size, self.run_id, utcnow()]).fetchall()[0][0]

    def _supersede(self, old_id: int, new_id: int) -> None:
        self.con.execute("UPDATE raw_file SET superseded_by = ?, superseded_run_id = ? "
                         "WHERE file_id = ?", [new_id, self.run_id, old_id])

    def _count(self, file_id: int, read: int, loaded: int, quarantined: int) -> None:
        if read != loaded + quarantined:
            raise BatchError(f"row accounting failed: {read} read != {loaded} loaded + "
                             f"{quarantined} quarantined")
        self.con.execute("UPDATE raw_file SET rows_read = ?, rows_loaded = ?, rows_quarantined = ? "
                         "WHERE file_id = ?", [read, loaded, quarantined, file_id])

    # -- manifest entries -----------------------------------------------------------------
    def _load_manifest(self, plan: _Plan, old) -> FileResult:
        label = plan.manifest_path
        file_id = self._new_file(label, plan, "manifest", plan.manifest_sha, plan.manifest_sha,
                                 plan.manifest_bytes)
        if old is not None:
            self._supersede(old[0], file_id)
        source = plan.manifest.source.id
        common = [source, file_id, plan.manifest_sha, label]
        loaded = quarantined = 0
        entries = [(fixed_point_row, e, "fixed_point") for e in plan.manifest.fixed_point]
        entries += [(constant_row, e, "constant") for e in plan.manifest.constant]
        counters = {"fixed_point": 0, "constant": 0}
        for build, spec, kind in entries:
            counters[kind] += 1
            row, rejected = build(spec, counters[kind], self.fluids[spec.fluid].molar_mass_kg_mol,
                                  label)
            if rejected is not None:
                self._quarantine(file_id, plan.manifest_sha, label, rejected.entry, rejected.key,
                                 rejected.raw, rejected.code, rejected.message)
                quarantined += 1
                continue
            if kind == "fixed_point":
                self.con.execute(
                    "INSERT INTO fixed_point VALUES (nextval('fp_id_seq'), ?, ?, ?, ?, ?, ?, ?, ?, "
                    "?, ?, ?, ?, ?, ?, ?, ?)",
                    [spec.fluid, row["kind"], row["phases"], row["T_K"], row["u_T_K"], row["p_Pa"],
                     row["u_p_Pa"], row["rho_kg_m3"], row["u_rho_kg_m3"], *common,
                     row["entry_number"], row["original_json"], self.run_id])
            else:
                self.con.execute(
                    "INSERT INTO stated_constant VALUES (nextval('const_id_seq'), ?, ?, ?, ?, ?, "
                    "?, ?, ?, ?, ?, ?, ?)",
                    [spec.fluid, row["name"], row["value_si"], row["u_si"], row["si_unit"], *common,
                     row["entry_number"], row["original_json"], self.run_id])
            loaded += 1
        self._count(file_id, loaded + quarantined, loaded, quarantined)
        return FileResult(label, "loaded", loaded + quarantined, loaded, quarantined)

    def _quarantine(self, file_id, sha, label, row, column, raw, code, message,
                    cell: str | None = None) -> None:
        self.con.execute("INSERT INTO quarantine VALUES (nextval('q_id_seq'), ?, ?, ?, ?, ?, ?, ?, "
                         "?, ?, ?)", [file_id, sha, label, row, column, raw, code, message,
                                      self.run_id, cell])

    # -- CSV tables -----------------------------------------------------------------------
    def _load_table(self, file_id, rel, path, content, sha, spec: TableSpec, plan) -> FileResult:
        needed = {"temperature": spec.temperature.column}
        needed.update({q: c.column for q, c in spec.value_columns().items()})
        needed.update({f"uncertainty of {q}": u.column for q, u in spec.uncertainty.items()
                       if u.column})
        with memory_budget(self, len(content)):
            return self._load_staged(file_id, rel, content, sha, spec, needed)

    def _load_staged(self, file_id, rel, content, sha, spec: TableSpec, needed) -> FileResult:
        if is_workbook(spec.file):
            staged = stage_workbook(self.con, content, spec, rel, needed, "fl_stage")
            rejects = [(row, column, raw, code, f"cell {staged.cell(column, row)} (row {row}, "
                        f"column '{column}'): {code} ({message})", staged.cell(column, row))
                       for row, column, raw, code, message in staged.rejects]
        else:
            staged = stage_csv(self.con, content, spec, rel, needed, "fl_stage")
            rejects = [(row, column, raw, "bad-row-shape", f"row {row}" + (
                f", column '{column}'" if column else "") + f": {message}", None)
                for row, column, raw, message in staged.rejects]
        loaded, quarantined = load_staged(self, file_id, rel, sha, spec, staged, rejects)
        self._count(file_id, staged.rows_read, loaded, quarantined)
        self.con.execute("DROP TABLE fl_stage")
        return FileResult(rel, "loaded", staged.rows_read, loaded, quarantined)

    # the SQL of a faulty row's text and cell, shared with the group loader
    _raw_text = staticmethod(raw_text_sql)
    _cell = staticmethod(cell_sql)


def _rollback(con) -> None:
    """Roll the batch's transaction back; a failed COMMIT has already ended it."""
    try:
        con.execute("ROLLBACK")
    except duckdb.Error:
        pass


def _internal(batch: str, err: Exception) -> BatchResult:
    """The batch refused because of an unexpected exception; a problem of the machine or
    Ctrl-C is no batch's fault and stops the run instead (re-raised)."""
    if is_interrupt(err) or environment_problem(err) is not None:
        raise err
    log.debug("internal error while ingesting batch %s", batch, exc_info=True)  # --verbose
    text = " ".join(str(err).split())[:300]
    return BatchResult(batch, "error", internal=True,
                       error=f"{batch}: internal error while ingesting this batch "
                             f"({type(err).__name__}: {text}); the batch was left out, the "
                             "others went on")


def _upsert_fluids(con, fluids: dict[str, Fluid], run_id: str) -> None:
    """Every fluid of fluids.toml written with this run's id, in one statement (a statement
    per fluid cost 1.4 s of a 1,000-fluid nightly with nothing else to do); the columns go
    as list parameters, so no Arrow table (whose first use costs imports) is needed."""
    f = list(fluids.values())
    con.execute("BEGIN TRANSACTION")
    con.execute(
        "INSERT OR REPLACE INTO fluid SELECT unnest($id), unnest($name), unnest($formula), "
        "unnest($cas_rn), unnest($molar_mass), $run_id",
        {"id": [x.id for x in f], "name": [x.name for x in f],
         "formula": [x.formula or None for x in f], "cas_rn": [x.cas_rn or None for x in f],
         "molar_mass": [float(x.molar_mass_kg_mol) for x in f], "run_id": run_id})
    con.execute("COMMIT")


def find_fluids_file(paths: list[Path]) -> Path:
    """``fluids.toml`` in the first path or one of its parents."""
    for start in paths:
        for folder in [start, *absolute(start).parents]:
            if os.path.lexists(folder / "fluids.toml"):
                return absolute(folder / "fluids.toml")
    raise BatchError("fluids.toml not found in the raw folder or its parents",
                     file=str(paths[0] / "fluids.toml"))


def run_ingest(con: duckdb.DuckDBPyConnection, paths: list[Path], *, fluids_file: Path | None = None,
               progress=None, run_id: str | None = None) -> IngestResult:
    """Ingest every batch under ``paths``; a path that is the raw root also retires batches
    that disappeared from it. Relative, ``..`` and absolute paths name the same batches."""
    run_id = run_id or new_run_id("ingest")
    for p in paths:
        if not os.path.lexists(p):
            raise BatchError("path does not exist", file=str(p))
    paths = [absolute(Path(p)) for p in paths]
    fluids_path = absolute(Path(fluids_file)) if fluids_file else find_fluids_file(paths)
    fluids = load_fluids(fluids_path)
    root = fluids_path.parent.resolve()
    con.execute("INSERT INTO run VALUES (?, 'ingest', ?, NULL, ?, ?, 'running', NULL)",
                [run_id, utcnow(), __version__, json.dumps(
                    {"paths": [str(p) for p in paths]}, sort_keys=True)])
    try:
        _upsert_fluids(con, fluids, run_id)
        batches = [b for p in paths for b in discover_batches(p)]
        results = grouped.ingest_batches(Ingestor(con, root, fluids, run_id), batches,
                                         progress)
        removed = _retire_missing(con, root, paths, {r.batch for r in results}, run_id)
    except BaseException as err:
        end_run(con, run_id, err)
        raise
    result = IngestResult(run_id, results, removed)
    status = "error" if result.errors else ("ok" if result.changed else "no-changes")
    con.execute("UPDATE run SET finished_at = ?, status = ?, summary_json = ? WHERE run_id = ?",
                [utcnow(), status, json.dumps(result.asdict(), sort_keys=True), run_id])
    return result


def _retire_missing(con, root: Path, paths: list[Path], seen: set[str], run_id: str) -> list[str]:
    """When the raw root itself was ingested, supersede files of batches no longer present."""
    if not any(os.path.samefile(p, root) for p in paths if p.exists()):
        return []
    gone = con.execute("SELECT file_id, path, batch FROM raw_file WHERE superseded_by IS NULL"
                       ).fetchall()
    gone = [(fid, path) for fid, path, batch in gone if batch not in seen
            and not (root / batch / "batch.toml").is_file()]
    if not gone:
        return []
    con.execute("BEGIN TRANSACTION")
    for fid, _ in gone:
        con.execute("UPDATE raw_file SET superseded_by = ?, superseded_run_id = ? WHERE file_id = ?",
                    [REMOVED, run_id, fid])
    con.execute("COMMIT")
    return sorted(path for _, path in gone)
