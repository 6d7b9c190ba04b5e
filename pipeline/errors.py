"""One root error, one base per stage; every error carries facts and builds its own message.

The CLI turns a :class:`FluidLedgerError` into one line on stderr and its ``exit_code``;
a problem of the machine rather than of the input or the code (disk full, no permission,
read-only folder, truncated or corrupt store) is an :class:`EnvironmentProblem` (exit 74);
Ctrl-C exits 130; anything else is an internal error (exit 3).
"""

from __future__ import annotations

EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_USAGE = 2
EXIT_INTERNAL = 3
EXIT_ENVIRONMENT = 74  # EX_IOERR from sysexits.h: disk full, permission, corrupt store
EXIT_BUSY = 75  # EX_TEMPFAIL from sysexits.h: the store is held by another process; retry later
EXIT_INTERRUPTED = 130  # 128 + SIGINT, the shell's convention for a run stopped by Ctrl-C
#: Longest detail an error message carries; a longer one (a value quoted from a file) is cut
MAX_DETAIL = 2000


class FluidLedgerError(Exception):
    """Root of every error the tool reports to a user (exit code 2 unless stated)."""

    exit_code = EXIT_USAGE

    def __init__(self, message: str, *, file: str | None = None, row: int | None = None,
                 column: str | None = None, key: str | None = None):
        self.file, self.row, self.column, self.key = file, row, column, key
        if len(message) > MAX_DETAIL:
            message = message[:MAX_DETAIL] + f"... ({len(message) - MAX_DETAIL} more characters)"
        self.detail = message
        super().__init__(self._compose())

    def _compose(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column:
            where.append(f"column '{_cut(self.column)}'")
        if self.key:
            where.append(f"key '{_cut(self.key)}'")
        return (", ".join(where) + ": " if where else "") + self.detail


def _cut(name: str, limit: int = 200) -> str:
    """A column or key name from a file, cut to ``limit`` characters."""
    return name if len(name) <= limit else f"{name[:limit]}... ({len(name):,} characters)"


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


class EnvironmentProblem(FluidLedgerError):
    """The machine refused: disk full, no permission, read-only folder, a truncated or corrupt
    store (exit 74). The message names the path and what to do; the input is not at fault."""

    exit_code = EXIT_ENVIRONMENT


class StoreFileError(StoreError, EnvironmentProblem):
    """The store file cannot be read or written (truncated, corrupt, no permission, disk full,
    read-only folder)."""

    exit_code = EXIT_ENVIRONMENT


class FitError(FluidLedgerError):
    """A correlation could not be fitted (reported as a skipped fit, never a traceback)."""


class CheckError(FluidLedgerError):
    """Check selection or configuration is invalid."""


class PublishError(FluidLedgerError):
    """A release could not be made (failed checks, invalid export...)."""


_OS_HINTS = {
    "ENOSPC": "the disk is full: free space, then run again",
    "EDQUOT": "the disk quota is exhausted: free space, then run again",
    "EROFS": "the file system is read-only",
    "EACCES": "permission denied: check the owner and mode of the file and its folder",
    "EPERM": "operation not permitted: check the owner and mode of the file and its folder",
    "EIO": "the device reported an input/output error",
}
_DUCKDB_HINTS = (
    ("No space left", "the disk is full: free space, then run again (the store is as it was "
                      "before the interrupted transaction)"),
    ("Read-only file system", "the file system is read-only"),
    ("Permission denied", "permission denied: check the owner and mode of the store and its "
                          "folder"),
    ("Could not read enough bytes", "the store file is truncated: restore it from a backup "
                                    "('fluidledger verify' reports what can still be read)"),
    ("Corrupt", "the store file is corrupt: restore it from a backup"),
    ("not a valid DuckDB database", "the file is not a DuckDB store"),
    ("checksum", "the store file is corrupt: restore it from a backup"),
)


def is_interrupt(err: BaseException) -> bool:
    """Ctrl-C: a KeyboardInterrupt, or DuckDB's interrupted query (it traps SIGINT itself)."""
    return isinstance(err, KeyboardInterrupt) or type(err).__name__ == "InterruptException"


def environment_problem(err: BaseException, path: str | None = None) -> EnvironmentProblem | None:
    """The :class:`EnvironmentProblem` an OS or DuckDB error stands for, or None.

    ``path`` names the file in use (the store) when the error does not say which file.
    """
    import errno

    if isinstance(err, OSError) and not isinstance(err, (BrokenPipeError, FileNotFoundError)):
        name = errno.errorcode.get(err.errno or 0, "")
        hint = _OS_HINTS.get(name, "the operating system refused")
        where = err.filename or path
        return EnvironmentProblem(f"{err.strerror or err}: {hint}",
                                  file=str(where) if where else None)
    module = type(err).__module__ or ""
    if not module.startswith(("duckdb", "_duckdb")):
        return None
    text = str(err).splitlines()[0] if str(err) else type(err).__name__
    hint = next((h for key, h in _DUCKDB_HINTS if key in text), None)
    # a failed COMMIT reports the disk's refusal as a TransactionException, say
    if hint is not None or type(err).__name__ in (
            "IOException", "OutOfMemoryException", "PermissionException"):
        hint = hint or "the store's file could not be read or written"
        if type(err).__name__ == "OutOfMemoryException":
            hint = "DuckDB ran out of memory"
        return EnvironmentProblem(f"{text}; {hint}", file=path)
    return None
