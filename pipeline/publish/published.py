"""The published DuckDB file for readers, and read-only access to it (and to the store).

DuckDB lets one process write a database file or many processes read it, never both. Readers
are therefore served from ``published.duckdb``, a file the publish stage never opens for
writing: it builds each release into a *new* file (the release tables with the same DDL and
``COMMENT ON`` as the store's migration, the ``curated_*`` views, the ``fl_*`` macros),
checkpoints and closes it, and swaps it in with ``os.replace`` - an atomic rename. A reader
that opened the old file keeps reading its snapshot (the old inode); a new reader sees the new
release; nobody sees half a release, and no reader waits for the writer.

The file is written with a pinned storage version (:data:`STORAGE_VERSION`) so that DuckDB
clients from 1.2.0 on can open it (checked with the ``duckdb`` CLI 1.4.4 and 1.5.6 from PyPI and
the 2.0 Python package; DuckDB's storage versions are backward compatible from 1.0 on).
"""

from __future__ import annotations

import os
from pathlib import Path

import duckdb
import pyarrow as pa

from pipeline.errors import FluidLedgerError, StoreBusyError, StoreError
from pipeline.publish import sqlmacros
from pipeline.publish.exports import STORE_TABLES, arrow_table

STORAGE_VERSION = "v1.2.0"
"""Storage format of published files (DuckDB >= 1.2.0 reads it)."""
PUBLISHED_NAME = "published.duckdb"
READ_ONLY = 0o444
"""Mode of the published file and of every release file: nobody's to change."""
READ_STATEMENTS = frozenset({"SELECT", "EXPLAIN", "PRAGMA", "CALL"})
_RELEASE_DDL = "release"  # the migrations whose DDL the published file repeats: this one and
#                           those named "release <change>" after it (e.g. 006_release_cells)


class QueryRefused(FluidLedgerError):
    """A statement given to ``fluidledger query`` would write or reach outside the database."""


def release_ddl() -> str:
    """The DDL of the release tables and views: the store's ``NNN_release.sql`` migration and
    the later ``NNN_release_<change>.sql`` steps, in ladder order."""
    from pipeline.store.migrations import MIGRATIONS

    steps = [sql for _, name, sql in MIGRATIONS
             if name == _RELEASE_DDL or name.startswith(_RELEASE_DDL + " ")]
    if not any(name == _RELEASE_DDL for _, name, _ in MIGRATIONS):
        raise StoreError("the release migration is missing from the ladder")
    return "\n".join(steps)


def insert_release_rows(con: duckdb.DuckDBPyConnection,
                        tables: dict[str, list[dict] | pa.Table],
                        extra: dict[str, object] | None = None) -> None:
    """Insert the content rows (and the release row, completed by ``extra``) through Arrow
    (``tables``: dict rows or Arrow tables of the export schemas)."""
    for table, rows in tables.items():
        target = sqlmacros.ident(STORE_TABLES[table])
        data = rows if isinstance(rows, pa.Table) else arrow_table(table, rows)
        if table == "release":
            for name, value in (extra or {}).items():
                data = data.append_column(name, pa.array([value] * data.num_rows))
        columns = ", ".join(sqlmacros.ident(n) for n in data.column_names)
        con.register("fl_release_rows", data)
        try:
            con.execute(f"INSERT INTO {target} ({columns}) SELECT {columns} FROM fl_release_rows")
        finally:
            con.unregister("fl_release_rows")


def temporary_path(target: Path) -> Path:
    """Where the next published file is built: beside ``target`` (same file system)."""
    return Path(target).with_name(f".{Path(target).name}.{os.getpid()}.tmp")


def remove_leftovers(target: Path) -> list[Path]:
    """Remove temporary published files beside ``target`` whose writing process is gone
    (a publish killed while building one leaves ``.published.duckdb.<pid>.tmp``)."""
    from pipeline.publish.exports import remove_dead_leftovers

    target = Path(target)
    return remove_dead_leftovers(target.parent, f".{target.name}.", (".tmp.wal", ".tmp"),
                                 folders=False)


def build_published_file(target: Path, tables: dict[str, list[dict] | pa.Table],
                         release_extra: dict, publication: dict) -> Path:
    """Write a complete published file beside ``target``; returns the temporary file.

    The caller swaps it in with :func:`swap_in` once the store has committed the release.
    ``release_extra`` completes the release row (check_run_id, created_at, publish_run_id);
    ``publication`` is the release_publication row (its sequence number is 1 in the file;
    ``published_file`` defaults to ``target``).
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = temporary_path(target)
    for leftover in (tmp, tmp.with_name(tmp.name + ".wal")):
        leftover.unlink(missing_ok=True)
    try:
        con = duckdb.connect(str(tmp), config={"storage_compatibility_version": STORAGE_VERSION})
        try:
            con.execute("BEGIN TRANSACTION")
            con.execute(release_ddl())
            insert_release_rows(con, tables, release_extra)
            con.execute("INSERT INTO release_publication VALUES "
                        "(nextval('release_publication_seq'), ?, ?, ?, ?, ?)",
                        [publication["release_id"], publication["published_at"],
                         publication["publish_run_id"], publication["export_dir"],
                         publication.get("published_file", str(target))])
            sqlmacros.install_macros(con)
            sqlmacros.comment_view_columns(con, sqlmacros.CURATED_VIEWS)
            con.execute("COMMIT")
            con.execute("CHECKPOINT")
        finally:
            con.close()
        os.chmod(tmp, READ_ONLY)   # readers open it read-only; the verify checks its content
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    finally:
        tmp.with_name(tmp.name + ".wal").unlink(missing_ok=True)
    return tmp


def swap_in(tmp: Path, target: Path) -> None:
    """Atomically replace ``target`` by the finished file ``tmp`` (readers of the old keep it)."""
    os.replace(tmp, target)


def _lock_error(err: Exception) -> bool:
    text = str(err)
    return "Could not set lock" in text or "Conflicting lock" in text or "lock on file" in text


def open_read_only(path: str | os.PathLike) -> duckdb.DuckDBPyConnection:
    """A read-only connection that cannot reach files outside the database nor change that."""
    path = Path(path)
    if not path.exists():
        raise StoreError(f"{path} does not exist (run 'fluidledger publish' for the published "
                         "file, 'fluidledger ingest' for the store)")
    try:
        return duckdb.connect(str(path), read_only=True,
                              config={"enable_external_access": False,
                                      "lock_configuration": True})
    except duckdb.IOException as err:
        if _lock_error(err):
            raise StoreBusyError(f"{path} is busy: a FluidLedger process is writing it; retry "
                                 "later, or query the published file (--published)") from None
        raise StoreError(f"cannot open {path}: {err}") from None
    except duckdb.Error as err:
        raise StoreError(f"cannot open {path}: {err}") from None


def read_only_query(con: duckdb.DuckDBPyConnection, sql: str) -> tuple[list[str], list[tuple]]:
    """Run one or more read statements; the columns and rows of the last one.

    Only SELECT (including DESCRIBE, SHOW, SUMMARIZE, FROM-first queries), EXPLAIN, PRAGMA and
    CALL are accepted; anything else is refused before it runs (the read-only connection would
    refuse writes anyway).
    """
    try:
        statements = duckdb.extract_statements(sql)
    except duckdb.Error as err:
        raise QueryRefused(f"the SQL does not parse: {str(err).splitlines()[0]}") from None
    if not statements:
        raise QueryRefused("no SQL statement given")
    for st in statements:
        kind = st.type.name
        if kind not in READ_STATEMENTS:
            raise QueryRefused(f"only read statements are allowed ({', '.join(sorted(READ_STATEMENTS))}); "
                               f"refused a {kind} statement: {st.query.strip()[:60]}")
    columns: list[str] = []
    rows: list[tuple] = []
    try:
        for st in statements:
            cur = con.execute(st.query)
            columns = [d[0] for d in cur.description] if cur.description else []
            rows = cur.fetchall() if cur.description else []
    except duckdb.Error as err:
        raise QueryRefused(f"query failed: {str(err).splitlines()[0]}") from None
    return columns, rows
