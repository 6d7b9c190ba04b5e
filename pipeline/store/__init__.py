"""The DuckDB store: opening, locking, and the numbered migration ladder."""

from pipeline.store.connection import (
    DEFAULT_STORE,
    STORE_ENV,
    Store,
    open_store,
    resolve_store_path,
)
from pipeline.store.migrations import MIGRATIONS, SCHEMA_VERSION, migrate

__all__ = ["DEFAULT_STORE", "STORE_ENV", "Store", "open_store", "resolve_store_path",
           "MIGRATIONS", "SCHEMA_VERSION", "migrate"]
