"""The run's own log file, beside what the console shows."""

from __future__ import annotations

import logging
from contextlib import contextmanager
from pathlib import Path

from pipeline.safetext import SafeFormatter


class _LogFilter(logging.Filter):
    """The run log keeps FluidLedger's own records and others' warnings."""

    def filter(self, record: logging.LogRecord) -> bool:
        own = record.name.startswith(("pipeline", "fluidledger"))
        return own or record.levelno >= logging.WARNING


@contextmanager
def run_log(path: Path, verbose: bool):
    """Copy log records to ``path`` (INFO, or DEBUG with ``verbose``) while the run lasts,
    without changing what the console shows."""
    root = logging.getLogger()
    level = logging.DEBUG if verbose else logging.INFO
    handler = logging.FileHandler(path, encoding="utf-8")
    handler.setLevel(level)
    handler.addFilter(_LogFilter())
    handler.setFormatter(SafeFormatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    old_root = root.level
    old = [(h, h.level) for h in root.handlers]
    for h, lvl in old:
        h.setLevel(max(lvl, old_root))
    root.setLevel(min(old_root, level))
    root.addHandler(handler)
    try:
        yield handler
    finally:
        root.removeHandler(handler)
        handler.close()
        root.setLevel(old_root)
        for h, lvl in old:
            h.setLevel(lvl)
