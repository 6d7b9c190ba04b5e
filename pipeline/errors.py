"""One root error, one base per stage; every error carries facts and builds its own message.

The CLI turns a :class:`FluidLedgerError` into one line on stderr and its ``exit_code``;
anything else is an internal error (exit 3).
"""

from __future__ import annotations

EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_USAGE = 2
EXIT_INTERNAL = 3
EXIT_BUSY = 75  # EX_TEMPFAIL from sysexits.h: the store is held by another writer; retry later


class FluidLedgerError(Exception):
    """Root of every error the tool reports to a user (exit code 2 unless stated)."""

    exit_code = EXIT_USAGE

    def __init__(self, message: str, *, file: str | None = None, row: int | None = None,
                 column: str | None = None, key: str | None = None):
        self.file, self.row, self.column, self.key = file, row, column, key
        self.detail = message
        super().__init__(self._compose())

    def _compose(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column:
            where.append(f"column '{self.column}'")
        if self.key:
            where.append(f"key '{self.key}'")
        return (", ".join(where) + ": " if where else "") + self.detail


class ConfigError(FluidLedgerError):
    """A configuration file (thresholds, decisions, fluids) is malformed."""


class BatchError(FluidLedgerError):
    """A batch cannot be ingested as a whole (batch.toml invalid, file missing, path unsafe...)."""


class UnitError(BatchError):
    """A unit string is unknown, or has the wrong dimension for its column."""


class ScaleError(BatchError):
    """A temperature scale is unknown or has no implemented conversion to ITS-90."""


class StoreError(FluidLedgerError):
    """The store cannot be opened or is in an unexpected state."""


class StoreBusyError(StoreError):
    """Another process holds the store's write lock."""

    exit_code = EXIT_BUSY


class FitError(FluidLedgerError):
    """A correlation could not be fitted (reported as a skipped fit, never a traceback)."""


class CheckError(FluidLedgerError):
    """Check selection or configuration is invalid."""


class PublishError(FluidLedgerError):
    """A release could not be made (failed checks, invalid export...)."""
