"""Integrity of a store and of its releases: the rules the stages promise, checked from outside.

``verify_store(con)`` runs a catalogue of named SQL rules over an open (read-only) store; each
rule selects the rows that break it, so a finding names the rule, how many rows break it and a
few of them. The rules are data (:data:`STORE_RULES`): foreign keys, the per-file accounting
invariant ``rows_read = rows_loaded + rows_quarantined`` against the rows actually stored,
file-version chains, the schema version, and a full read of every table (DuckDB checks block
checksums as it reads). ``verify_release_manifests(root)`` recomputes the SHA-256 of every file
listed in ``<root>/<release>/manifest.json`` (``{"files": [{"path": ..., "sha256": ...}]}``), and
``verify_published_file`` compares ``<root>/published.duckdb`` with the store's latest
publication into it.

Nothing here writes: the store is opened read-only, so a verify may run beside readers, never
beside a writer (DuckDB's lock refuses it as busy).
"""

from __future__ import annotations

import functools
import hashlib
import json
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path

import duckdb

from pipeline.errors import StoreBusyError, StoreError
from pipeline.store import SCHEMA_VERSION, migrate, open_store

MANIFEST_NAME = "manifest.json"
SAMPLE_LIMIT = 5
_HASH_CHUNK = 1 << 20


@dataclass(frozen=True)
class Finding:
    """One broken rule: its id, what it expects, how many rows break it and a few of them."""

    rule: str
    message: str
    count: int = 1
    samples: tuple[str, ...] = ()

    def asstr(self) -> str:
        more = f" (e.g. {'; '.join(self.samples)})" if self.samples else ""
        return f"{self.rule}: {self.message} [{self.count}]{more}"


@dataclass(frozen=True)
class Rule:
    """A store rule: the SQL selects one text column ``subject`` per offending row.

    ``needs`` names the tables (``table``) and columns (``table.column``) the rule reads; a rule
    whose needs are absent from the store's schema does not apply to it and is not run.
    """

    id: str
    expects: str
    needs: tuple[str, ...]
    sql: str


@dataclass
class VerifyResult:
    """What a verify looked at and what it found; ``ok`` when nothing was found."""

    store: str
    schema_version: int | None = None
    rules_run: list[str] = field(default_factory=list)
    releases: list[str] = field(default_factory=list)
    files_hashed: int = 0
    files_unchanged: int = 0
    counts: dict[str, int] = field(default_factory=dict)
    findings: list[Finding] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    #: path -> :func:`file_stamp` of every release file found intact (for the next verify)
    stamps: dict[str, list] = field(default_factory=dict, repr=False)

    @property
    def ok(self) -> bool:
        return not self.findings

    def asdict(self) -> dict:
        out = asdict(self)
        out.pop("stamps")
        out["ok"] = self.ok
        return out

    def asstr(self) -> str:
        lines = [f"store {self.store} (schema version {self.schema_version}): "
                 f"{len(self.rules_run)} rules checked"
                 + (f", {len(self.releases)} release(s) with {self.files_hashed} files hashed"
                    + (f" and {self.files_unchanged} proved unchanged since they were hashed"
                       if self.files_unchanged else "") if self.releases else "")]
        if self.counts:
            lines.append("  " + ", ".join(f"{n} {t}" for t, n in self.counts.items()))
        lines += [f"  note: {n}" for n in self.notes]
        lines += [f"  FINDING {f.asstr()}" for f in self.findings]
        lines.append("verify: OK" if self.ok else f"verify: {len(self.findings)} finding(s)")
        return "\n".join(lines)


# --- the store rules (data) ----------------------------------------------------------------

def _fk(child: str, key: str, column: str, parent: str, parent_column: str) -> Rule:
    """Every ``child.column`` that is not NULL names an existing ``parent`` row."""
    return Rule(
        f"fk.{child}.{column}", f"{child}.{column} refers to an existing {parent}.{parent_column}",
        (f"{child}.{column}", f"{parent}.{parent_column}"),
        f"SELECT '{child} ' || {key} || ': {column}=' || CAST(c.{column} AS VARCHAR) AS subject "
        f"FROM {child} c WHERE c.{column} IS NOT NULL AND NOT EXISTS "
        f"(SELECT 1 FROM {parent} p WHERE p.{parent_column} = c.{column}) ORDER BY 1")


def _unique(table: str, key: str) -> Rule:
    """``key`` identifies one row of ``table`` (for tables whose key is not a declared PRIMARY KEY)."""
    return Rule(f"unique.{table}.{key}", f"{table}.{key} is unique", (f"{table}.{key}",),
                f"SELECT '{table} {key}=' || {key} || ' (' || count(*) || ' rows)' AS subject "
                f"FROM {table} GROUP BY {key} HAVING count(*) > 1 ORDER BY 1")


def _same_origin(child: str, key: str) -> Rule:
    """A row's copy of its file's hash and path equals the raw_file row it points to."""
    return Rule(
        f"provenance.{child}", f"{child}.file_sha256 and file_path equal those of its raw_file",
        (f"{child}.file_sha256", f"{child}.file_path", "raw_file"),
        f"SELECT '{child} ' || {key} || ': file ' || f.file_id || ' is ' || f.path AS subject "
        f"FROM {child} c JOIN raw_file f ON f.file_id = c.file_id "
        "WHERE c.file_sha256 <> f.sha256 OR c.file_path <> f.path ORDER BY 1")


_ACTUAL = """
WITH obs AS (SELECT file_id, count(DISTINCT row_number) AS n FROM observation GROUP BY ALL),
     fp AS (SELECT file_id, count(*) AS n FROM fixed_point GROUP BY ALL),
     sc AS (SELECT file_id, count(*) AS n FROM stated_constant GROUP BY ALL),
     q AS (SELECT file_id, count(*) AS n FROM quarantine GROUP BY ALL)
SELECT f.file_id, f.path, f.role, f.rows_loaded, f.rows_quarantined,
       CASE WHEN f.role = 'manifest' THEN coalesce(fp.n, 0) + coalesce(sc.n, 0)
            ELSE coalesce(obs.n, 0) END AS loaded,
       coalesce(q.n, 0) AS quarantined
FROM raw_file f LEFT JOIN obs USING (file_id) LEFT JOIN fp USING (file_id)
LEFT JOIN sc USING (file_id) LEFT JOIN q USING (file_id)
"""

_ROW_TABLES = ("raw_file", "observation", "fixed_point", "stated_constant", "quarantine")

STORE_RULES: tuple[Rule, ...] = (
    _fk("observation", "obs_id", "file_id", "raw_file", "file_id"),
    _fk("fixed_point", "fp_id", "file_id", "raw_file", "file_id"),
    _fk("stated_constant", "const_id", "file_id", "raw_file", "file_id"),
    _fk("quarantine", "q_id", "file_id", "raw_file", "file_id"),
    _fk("raw_column", "file_id || '/' || quantity", "file_id", "raw_file", "file_id"),
    _fk("raw_file", "file_id", "source_id", "source", "source_id"),
    _fk("raw_file", "file_id", "fluid_id", "fluid", "fluid_id"),
    _fk("raw_file", "file_id", "ingest_run_id", "run", "run_id"),
    _fk("observation", "obs_id", "fluid_id", "fluid", "fluid_id"),
    _fk("observation", "obs_id", "source_id", "source", "source_id"),
    _fk("fixed_point", "fp_id", "fluid_id", "fluid", "fluid_id"),
    _fk("stated_constant", "const_id", "fluid_id", "fluid", "fluid_id"),
    _fk("fit_residual", "fit_id || '/' || obs_id", "fit_id", "fit", "fit_id"),
    _fk("fit_residual", "fit_id || '/' || obs_id", "obs_id", "observation", "obs_id"),
    _fk("check_result", "check_id || '/' || fluid_id", "run_id", "run", "run_id"),
    _fk("release_publication", "publication_seq", "release_id", "release", "release_id"),
    _fk("release_constant", "value_id", "release_id", "release", "release_id"),
    _fk("release_curve", "value_id", "release_id", "release", "release_id"),
    _fk("release_provenance", "value_id", "release_id", "release", "release_id"),
    _fk("release_provenance", "value_id", "fit_id", "fit", "fit_id"),
    _unique("observation", "obs_id"),
    _same_origin("observation", "obs_id"),
    _same_origin("quarantine", "q_id"),
    _same_origin("fixed_point", "fp_id"),
    _same_origin("stated_constant", "const_id"),
    Rule("provenance.raw_column", "every observation's file describes its temperature column "
         "and its value column in raw_column (else the observation views drop the row)",
         ("observation", "raw_column"),
         "SELECT 'observation ' || o.obs_id || ': file ' || o.file_id || ', ' || o.quantity "
         "AS subject FROM observation o WHERE NOT EXISTS (SELECT 1 FROM raw_column c WHERE "
         "c.file_id = o.file_id AND c.quantity = 'temperature') OR NOT EXISTS (SELECT 1 FROM "
         "raw_column c WHERE c.file_id = o.file_id AND c.quantity = o.quantity) ORDER BY 1"),
    Rule("accounting.sum", "rows_read = rows_loaded + rows_quarantined for every file",
         ("raw_file",),
         "SELECT path || ' (file ' || file_id || '): ' || rows_read || ' read, ' || rows_loaded "
         "|| ' loaded, ' || rows_quarantined || ' quarantined' AS subject FROM raw_file "
         "WHERE rows_read <> rows_loaded + rows_quarantined ORDER BY file_id"),
    Rule("accounting.loaded", "rows_loaded equals the rows stored for the file (distinct "
         "observation row numbers; fixed points and constants for a batch.toml)", _ROW_TABLES,
         f"SELECT path || ' (file ' || file_id || '): rows_loaded ' || rows_loaded || ', stored ' "
         f"|| loaded AS subject FROM ({_ACTUAL}) WHERE rows_loaded <> loaded ORDER BY file_id"),
    Rule("accounting.quarantined", "rows_quarantined equals the quarantine rows of the file",
         _ROW_TABLES,
         f"SELECT path || ' (file ' || file_id || '): rows_quarantined ' || rows_quarantined || "
         f"', stored ' || quarantined AS subject FROM ({_ACTUAL}) "
         "WHERE rows_quarantined <> quarantined ORDER BY file_id"),
    Rule("accounting.disjoint", "no CSV row is both loaded and quarantined",
         ("raw_file", "observation", "quarantine"),
         "SELECT DISTINCT f.path || ' row ' || q.row_number AS subject FROM quarantine q "
         "JOIN raw_file f ON f.file_id = q.file_id AND f.role = 'table' JOIN observation o "
         "ON o.file_id = q.file_id AND o.row_number = q.row_number ORDER BY 1"),
    Rule("versions.superseded_by", "superseded_by names an existing other file version, or 0 "
         "for a removed file", ("raw_file",),
         "SELECT f.path || ' (file ' || f.file_id || '): superseded_by ' || f.superseded_by "
         "AS subject FROM raw_file f WHERE f.superseded_by IS NOT NULL AND f.superseded_by <> 0 "
         "AND (f.superseded_by = f.file_id OR NOT EXISTS (SELECT 1 FROM raw_file n "
         "WHERE n.file_id = f.superseded_by)) ORDER BY f.file_id"),
    Rule("versions.one_current", "at most one current version of each path", ("raw_file",),
         "SELECT path || ': ' || count(*) || ' current versions (files ' || "
         "string_agg(CAST(file_id AS VARCHAR), ', ' ORDER BY file_id) || ')' AS subject "
         "FROM raw_file WHERE superseded_by IS NULL GROUP BY path HAVING count(*) > 1 ORDER BY 1"),
    Rule("versions.successor_path", "a file is superseded by a version of the same path",
         ("raw_file",),
         "SELECT f.path || ' (file ' || f.file_id || ') superseded by ' || n.path || ' (file ' "
         "|| n.file_id || ')' AS subject FROM raw_file f JOIN raw_file n "
         "ON n.file_id = f.superseded_by WHERE n.path <> f.path ORDER BY 1"),
    Rule("schema.version", f"schema_version holds versions 1..{SCHEMA_VERSION} (the current one)",
         ("schema_version",),
         "SELECT 'versions ' || coalesce(string_agg(CAST(version AS VARCHAR), ',' "
         "ORDER BY version), 'none') AS subject FROM schema_version "
         f"HAVING coalesce(max(version), 0) <> {SCHEMA_VERSION} "
         f"OR count(DISTINCT version) <> {SCHEMA_VERSION} OR min(version) <> 1"),
)

def _schema(con: duckdb.DuckDBPyConnection) -> set[str]:
    """Names of the store's tables and of their columns (``table.column``)."""
    names = {r[0] for r in con.execute(
        "SELECT table_name FROM duckdb_tables() WHERE schema_name = 'main'").fetchall()}
    names |= {f"{t}.{c}" for t, c in con.execute(
        "SELECT table_name, column_name FROM duckdb_columns() WHERE schema_name = 'main'"
    ).fetchall()}
    return names


@functools.cache
def expected_schema() -> frozenset[str]:
    """Tables and ``table.column`` names of a store built by the migration ladder today."""
    con = duckdb.connect(":memory:")
    try:
        migrate(con)
        return frozenset(_schema(con))
    finally:
        con.close()


def run_rule(con: duckdb.DuckDBPyConnection, rule: Rule) -> Finding | None:
    """Run one rule; a finding with the count and a sample of offending rows, or None."""
    count = con.execute(f"SELECT count(*) FROM ({rule.sql})").fetchone()[0]
    if not count:
        return None
    samples = tuple(r[0] for r in con.execute(f"SELECT subject FROM ({rule.sql}) LIMIT "
                                              f"{SAMPLE_LIMIT}").fetchall())
    return Finding(rule.id, f"expected {rule.expects}", int(count), samples)


def rules_named(*prefixes: str) -> tuple[Rule, ...]:
    """The store rules whose id starts with one of ``prefixes`` (e.g. ``"accounting."``)."""
    return tuple(r for r in STORE_RULES if r.id.startswith(prefixes))


def _read_everything(con: duckdb.DuckDBPyConnection, have: set[str], result: VerifyResult) -> None:
    """Compare the schema with the migration ladder's and read every table back in full."""
    missing = sorted(expected_schema() - have)
    if missing:
        result.findings.append(Finding("schema.objects", "expected every table and column of "
                                       f"schema version {SCHEMA_VERSION}", len(missing),
                                       tuple(missing[:SAMPLE_LIMIT])))
    if "schema_version" in have:
        result.schema_version = con.execute(
            "SELECT coalesce(max(version), 0) FROM schema_version").fetchone()[0]
    for table in sorted(t for t in have & expected_schema() if "." not in t):
        try:  # read every column of every row: DuckDB validates block checksums on read
            n = con.execute(f"SELECT count(*), bit_xor(hash(t)) FROM {table} t").fetchone()[0]
            result.counts[table] = int(n)
        except duckdb.Error as err:
            result.findings.append(Finding("storage.readable", "expected every table to read "
                                           "back in full", 1, (f"{table}: {err}",)))


def verify_store(con: duckdb.DuckDBPyConnection, result: VerifyResult, *,
                 rules: tuple[Rule, ...] = STORE_RULES, read_all: bool = True,
                 running: tuple[str, ...] = ()) -> VerifyResult:
    """Run ``rules`` (default: every store rule) over ``con``; record findings, notes and counts.

    ``read_all=False`` skips the schema comparison, the full read of every table and the notes
    (for callers that check a few rules often, such as the fuzz tests). ``running`` names runs
    that are still going (the caller's own), so they are not noted as interrupted.
    """
    have = _schema(con)
    if read_all:
        _read_everything(con, have, result)
    for rule in rules:
        if not set(rule.needs) <= have:
            continue
        result.rules_run.append(rule.id)
        try:
            found = run_rule(con, rule)
        except duckdb.Error as err:
            found = Finding(rule.id, f"rule could not run: {str(err).splitlines()[0]}")
        if found is not None:
            result.findings.append(found)
    if read_all and "run" in have:
        for run_id, kind in con.execute(
                "SELECT run_id, kind FROM run WHERE finished_at IS NULL ORDER BY started_at"
        ).fetchall():
            if run_id in running:
                continue
            result.notes.append(f"{kind} run {run_id} never finished (process interrupted); "
                                "its committed batches are complete, the rest was rolled back")
    return result


# --- releases ----------------------------------------------------------------------------

def sha256_file(path: Path) -> str:
    """SHA-256 (hex) of a file's bytes, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        while chunk := handle.read(_HASH_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


def find_release_manifests(root: Path) -> list[Path]:
    """``<root>/<release>/manifest.json`` files, sorted (``root`` itself may be a release)."""
    root = Path(root)
    if (root / MANIFEST_NAME).is_file():
        return [root / MANIFEST_NAME]
    if not root.is_dir():
        return []
    return sorted(p for p in root.glob(f"*/{MANIFEST_NAME}") if p.is_file())


def _manifest_entries(manifest: Path) -> tuple[list[tuple[int, str, str]], list[Finding]]:
    """(index, path, sha256) of every well-formed entry, and findings for the rest."""
    label = manifest.parent.name + "/" + MANIFEST_NAME
    try:
        doc = json.loads(manifest.read_text("utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        return [], [Finding("release.manifest", f"{label} is not readable JSON: {err}")]
    files = doc.get("files") if isinstance(doc, dict) else None
    if not isinstance(files, list):
        return [], [Finding("release.manifest", f"{label} has no \"files\" list")]
    entries, bad = [], []
    for i, entry in enumerate(files):
        ok = (isinstance(entry, dict) and isinstance(entry.get("path"), str) and entry["path"]
              and isinstance(entry.get("sha256"), str))
        if not ok:
            bad.append(f"files[{i}]")
            continue
        entries.append((i, entry["path"], entry["sha256"].lower()))
    findings = [Finding("release.manifest", f"{label}: entries need a \"path\" and a \"sha256\" "
                        "string", len(bad), tuple(bad[:SAMPLE_LIMIT]))] if bad else []
    return entries, findings


def file_stamp(path: Path, sha256: str) -> list:
    """What identifies a file's bytes once they were hashed to ``sha256``: that digest, the
    size, device and inode, and the modification and status-change times in ns.

    Any write to the file through the file system moves its mtime and ctime, a chmod or
    ``os.utime`` moves its ctime (which no caller can set back), a replaced file is another
    inode: so a file whose stamp equals the one recorded when it was hashed still holds the
    bytes that were hashed (short of writes to the raw device or a clock set back)."""
    st = os.stat(path)
    return [sha256, st.st_size, st.st_dev, st.st_ino, st.st_mtime_ns, st.st_ctime_ns]


def verify_release_manifests(root: str | os.PathLike, *,
                             stamps: dict[str, list] | None = None,
                             intact: dict[str, list] | None = None
                             ) -> tuple[list[Finding], list[str], int]:
    """Recompute the SHA-256 of every file each release manifest under ``root`` lists.

    Parameters
    ----------
    root : path
        Folder holding release folders (``<root>/<release>/manifest.json``), or one release
        folder. Manifest paths are relative to the release folder.
    stamps : mapping, optional
        Resolved path -> :func:`file_stamp` recorded when the file was last hashed (by a
        verify, or by the publish that wrote and read it back). A file whose stamp is that
        record, with the manifest's SHA-256 in it, is proved unchanged and not read again.
    intact : dict, optional
        Filled with the stamp of every listed file found intact (hashed or proved unchanged).

    Returns
    -------
    (findings, releases, files_hashed)
        One finding per manifest problem or per listed file that is missing, leaves the release
        folder, or whose bytes no longer hash to the listed SHA-256; the release names found;
        how many files were hashed (files proved unchanged are not counted).
    """
    findings: list[Finding] = []
    releases: list[str] = []
    hashed = 0
    stamps = stamps or {}
    for manifest in find_release_manifests(Path(root)):
        release_dir = manifest.parent.resolve()
        release = manifest.parent.name
        releases.append(release)
        entries, problems = _manifest_entries(manifest)
        findings += problems
        for i, rel, expected in entries:
            target = (release_dir / rel)
            where = f"{release}/{rel} (files[{i}])"
            if Path(rel).is_absolute() or not target.resolve().is_relative_to(release_dir):
                findings.append(Finding("release.path", f"{where} leaves the release folder"))
                continue
            if not target.is_file():
                findings.append(Finding("release.missing", f"{where} is listed but missing"))
                continue
            key = str(target.resolve())
            before = file_stamp(target, expected)
            if stamps.get(key) == before:
                if intact is not None:
                    intact[key] = before
                continue
            actual = sha256_file(target)
            hashed += 1
            if actual != expected:
                findings.append(Finding("release.hash", f"{where}: SHA-256 is {actual}, the "
                                        f"manifest says {expected}"))
            elif intact is not None and file_stamp(target, actual) == before:
                intact[key] = before
    return findings, releases, hashed


# --- the whole verify ---------------------------------------------------------------------

def verify(store_path: str | os.PathLike | None, *, releases_root: str | os.PathLike | None = None
           ) -> VerifyResult:
    """Open the store read-only, run every store rule, then check release manifests.

    A missing store or a store held by a writer raises :class:`StoreError` (a usage problem);
    a store file DuckDB cannot open is reported as a ``storage.open`` finding.
    """
    path = Path(store_path) if store_path is not None else None
    try:
        store = open_store(path, read_only=True)
    except StoreBusyError:
        raise
    except StoreError as err:
        if "does not exist" in str(err):
            raise
        result = VerifyResult(store=str(path))
        result.findings.append(Finding("storage.open", f"expected a readable store: {err}"))
        return result
    with store:
        return verify_connection(store.con, str(store.path), releases_root)


def verify_connection(con: duckdb.DuckDBPyConnection, store_label: str,
                      releases_root: str | os.PathLike | None = None, *,
                      running: tuple[str, ...] = (),
                      stamps: dict[str, list] | None = None,
                      published_checked: bool = False) -> VerifyResult:
    """Every store rule over an open connection, then (with ``releases_root``) the release
    manifests there and the releases the store lists as published there.

    Only reads; the nightly job runs it on its own (writable) connection, naming its own run
    in ``running``, and passes the ``stamps`` of the release files found intact before (see
    :func:`verify_release_manifests`: those proved unchanged are not hashed again); the
    stamps of the files found intact now are in ``result.stamps``. ``published_checked``:
    the caller has just found the published file intact (:func:`~pipeline.publish.integrity.
    repair_published`), so it is not compared again.
    """
    result = verify_store(con, VerifyResult(store=store_label), running=running)
    if releases_root is not None:
        found, releases, hashed = verify_release_manifests(releases_root, stamps=stamps,
                                                           intact=result.stamps)
        result.findings += found + verify_listed_releases(published_releases(con), releases_root)
        if not published_checked:
            result.findings += verify_published_file(con, releases_root, result.notes)
        result.releases, result.files_hashed = releases, hashed
        result.files_unchanged = sum(stamps.get(k) == v for k, v in result.stamps.items()) \
            if stamps else 0
    return result


def verify_published_file(con: duckdb.DuckDBPyConnection, root: str | os.PathLike,
                          notes: list[str] | None = None) -> list[Finding]:
    """``<root>/published.duckdb`` holds what the store's latest publication into it holds:
    the release rows, views and macros (:mod:`pipeline.publish.integrity`). A file that is an
    earlier publication (a publish stopped before its swap) is a note in ``notes``."""
    if not {"release", "release_publication"} <= _schema(con):
        return []
    from pipeline.publish.integrity import check_published
    from pipeline.publish.published import PUBLISHED_NAME

    found = check_published(con, Path(root) / PUBLISHED_NAME)
    if notes is not None and found.stale:
        notes.append(found.stale)
    if not found.differences:
        return []
    diffs = found.differences
    return [Finding("release.published", f"expected {PUBLISHED_NAME} to hold the release "
                    "rows, views and macros of the store's latest publication (the nightly "
                    "job rebuilds it)", len(diffs), tuple(diffs[:SAMPLE_LIMIT]))]


def published_releases(con: duckdb.DuckDBPyConnection) -> list[tuple[str, str, str]]:
    """(release_id, fingerprint, export_dir of its latest publication) of every release the
    store lists as published (empty for a store without the release tables)."""
    if not {"release", "release_publication"} <= _schema(con):
        return []
    return con.execute(
        "SELECT r.release_id, r.fingerprint, arg_max(p.export_dir, p.publication_seq) "
        "FROM release r JOIN release_publication p USING (release_id) "
        "GROUP BY ALL ORDER BY 1").fetchall()


def verify_listed_releases(published: list[tuple[str, str, str]],
                           root: str | os.PathLike) -> list[Finding]:
    """Every release the store says it published into ``root`` has its folder there, with a
    manifest naming that release and the store's fingerprint of it.

    A release last published into another folder must be missing here only if ``root`` has
    no folder of its name (a store and its releases copied elsewhere keep their recorded
    paths; a folder of the release's name is still checked). A folder the store does not list
    is no finding: a publish killed after renaming its folder into place and before committing
    leaves one, and its rerun adopts it.
    """
    root = Path(root).resolve()
    missing, wrong = [], []
    for release_id, fingerprint, export_dir in published:
        folder = root / release_id
        if Path(export_dir).resolve() != folder and not folder.exists():
            continue
        try:
            doc = json.loads((folder / MANIFEST_NAME).read_text("utf-8"))
        except FileNotFoundError:
            missing.append(release_id)
            continue
        except (OSError, UnicodeDecodeError, json.JSONDecodeError):
            continue            # reported by verify_release_manifests
        if not isinstance(doc, dict) or (doc.get("release_id"), doc.get("fingerprint")) != \
                (release_id, fingerprint):
            wrong.append(release_id)
    findings = []
    if missing:
        findings.append(Finding("release.listed", "every release the store lists as published "
                                "here has its folder and manifest", len(missing),
                                tuple(missing[:SAMPLE_LIMIT])))
    if wrong:
        findings.append(Finding("release.fingerprint", "each release folder's manifest names "
                                "the release and the fingerprint the store holds for it",
                                len(wrong), tuple(wrong[:SAMPLE_LIMIT])))
    return findings
