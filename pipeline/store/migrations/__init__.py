"""Forward migrations of the store schema: a numbered ladder of SQL files.

``NNN_name.sql`` files in this folder are applied in order, each in its own transaction,
and recorded in ``schema_version``. A store at version k gets migrations k+1.. on open.
Never edit a released migration; add the next number.
"""

from __future__ import annotations

import re
from datetime import datetime, timezone
from importlib import resources

import duckdb

_NAME = re.compile(r"^(\d{3})_([a-z0-9_]+)\.sql$")


def _discover() -> list[tuple[int, str, str]]:
    found = []
    for entry in resources.files(__package__).iterdir():
        m = _NAME.match(entry.name)
        if m:
            found.append((int(m.group(1)), m.group(2).replace("_", " "), entry.read_text("utf-8")))
    found.sort()
    numbers = [n for n, _, _ in found]
    if numbers != list(range(1, len(numbers) + 1)):
        raise RuntimeError(f"migration ladder has gaps or duplicates: {numbers}")
    return found


MIGRATIONS = _discover()
SCHEMA_VERSION = MIGRATIONS[-1][0]


def current_version(con: duckdb.DuckDBPyConnection) -> int:
    """Schema version of an open store (0 for an empty database)."""
    exists = con.execute(
        "SELECT count(*) FROM information_schema.tables WHERE table_name = 'schema_version'"
    ).fetchone()[0]
    if not exists:
        return 0
    return con.execute("SELECT coalesce(max(version), 0) FROM schema_version").fetchone()[0]


def migrate(con: duckdb.DuckDBPyConnection) -> list[int]:
    """Apply every pending migration; returns the numbers applied."""
    have = current_version(con)
    if have > SCHEMA_VERSION:
        from pipeline.errors import StoreError

        raise StoreError(f"store schema version {have} is newer than this FluidLedger "
                         f"understands ({SCHEMA_VERSION}); upgrade FluidLedger")
    applied = []
    for number, description, sql in MIGRATIONS:
        if number <= have:
            continue
        con.execute("BEGIN TRANSACTION")
        try:
            con.execute(sql)
            con.execute("INSERT INTO schema_version VALUES (?, ?, ?)",
                        [number, datetime.now(timezone.utc).replace(tzinfo=None), description])
            con.execute("COMMIT")
        except Exception:
            con.execute("ROLLBACK")
            raise
        applied.append(number)
    return applied
