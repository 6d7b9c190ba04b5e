"""Open the working store: path resolution, the single-writer lock, migrations.

DuckDB lets one process write a database file or many processes read it, never both. A
second writer gets :class:`StoreBusyError` (exit code 75) naming the holder's PID where
DuckDB reports it, instead of a traceback or a hang.
"""

from __future__ import annotations

import contextlib
import os
import re
from dataclasses import dataclass
from pathlib import Path

import duckdb

from pipeline.errors import StoreBusyError, StoreError, StoreFileError, environment_problem
from pipeline.store.migrations import migrate

DEFAULT_STORE = Path("curated") / "fluidledger.duckdb"
STORE_ENV = "FLUIDLEDGER_STORE"
_PID = re.compile(r"PID (\d+)")


def resolve_store_path(cli_value: str | os.PathLike | None = None) -> Path:
    """``--store`` wins, then ``$FLUIDLEDGER_STORE``, then ``curated/fluidledger.duckdb``."""
    if cli_value:
        return Path(cli_value)
    env = os.environ.get(STORE_ENV)
    return Path(env) if env else DEFAULT_STORE


@dataclass
class Store:
    """An open store connection with its path; use as a context manager."""

    path: Path
    con: duckdb.DuckDBPyConnection
    read_only: bool

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        try:
            self.con.close()
        except duckdb.Error:
            pass


def _is_lock_error(err: Exception) -> bool:
    text = str(err)
    return "Could not set lock" in text or "Conflicting lock" in text or "lock on file" in text


def _create(target: Path) -> None:
    """Create a new store atomically: build and migrate it under a temporary name, then link it
    into place. A process killed while DuckDB writes a new file's first blocks would otherwise
    leave a partial file that no later open can read; this way ``target`` is either absent
    or complete. A store created meanwhile by another process is kept (link never replaces)."""
    tmp = target.with_name(f".{target.name}.creating-{os.getpid()}")
    try:
        for leftover in (tmp, tmp.with_name(tmp.name + ".wal")):
            leftover.unlink(missing_ok=True)
        con = duckdb.connect(str(tmp))
        try:
            migrate(con)
        finally:
            con.close()
        try:
            os.link(tmp, target)
        except FileExistsError:
            pass
        except OSError:  # a file system without hard links
            if not target.exists():
                os.replace(tmp, target)
    except (duckdb.Error, OSError) as err:
        problem = environment_problem(err, str(target))
        if problem is not None:
            raise StoreFileError(f"cannot create store {target}: {problem.detail}") from None
        raise StoreError(f"cannot create store {target}: {err}") from None
    finally:
        with contextlib.suppress(OSError):     # a read-only folder refuses even this
            tmp.unlink(missing_ok=True)


def _unreadable(target: Path, err: Exception) -> StoreError:
    """The error for a store DuckDB cannot open: a problem of the file or the machine (exit
    74) when DuckDB reports one (truncated, corrupt, permission), else a store error."""
    problem = environment_problem(err, str(target))
    if problem is None:
        return StoreError(f"cannot open store {target}: {err}")
    return StoreFileError(f"cannot open store {target}: {problem.detail}")


def open_store(path: str | os.PathLike | None = None, *, read_only: bool = False,
               create: bool = True) -> Store:
    """Open (and migrate, when writable) the store at ``path`` (see :func:`resolve_store_path`)."""
    target = resolve_store_path(path)
    if read_only and not target.exists():
        raise StoreError(f"store {target} does not exist; run 'fluidledger ingest' first")
    if not create and not target.exists():
        raise StoreError(f"store {target} does not exist")
    if not read_only:
        target.parent.mkdir(parents=True, exist_ok=True)
        if not target.exists():
            _create(target)
    try:
        con = duckdb.connect(str(target), read_only=read_only)
    except duckdb.IOException as err:
        if _is_lock_error(err):
            m = _PID.search(str(err))
            holder = f" (held by PID {m.group(1)})" if m else ""
            raise StoreBusyError(f"store {target} is busy{holder}: another process has it open "
                                 "(a FluidLedger run, 'fluidledger query' or a DuckDB client, "
                                 "reading or writing); retry later") from None
        raise _unreadable(target, err) from None
    except duckdb.Error as err:
        raise _unreadable(target, err) from None
    if not read_only:
        migrate(con)
    return Store(path=target, con=con, read_only=read_only)
