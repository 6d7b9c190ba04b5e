"""Named crash points: places where the crash-safety tests make the process die with SIGKILL.

Some windows of a stage are too short to hit by watching the process from outside (between
renaming a release folder into place and committing the store, say). Each such place calls
:func:`crash_point` with a name; when the environment variable ``FLUIDLEDGER_KILL_AT`` holds
that name, the process sends itself SIGKILL there - a real, unhandled kill: no ``finally``
block, no ``atexit`` handler and no DuckDB close runs. Without the variable the call costs one
dictionary lookup.

Names (``<stage>:<place>``) are listed in :data:`CRASH_POINTS`; tests/reliability uses them.
``FLUIDLEDGER_KILL_SIGNAL=INT`` sends SIGINT instead (what Ctrl-C sends), for the tests of an
interrupted run.
"""

from __future__ import annotations

import os
import signal

KILL_ENV = "FLUIDLEDGER_KILL_AT"
SIGNAL_ENV = "FLUIDLEDGER_KILL_SIGNAL"

CRASH_POINTS = {
    "ingest:batch-done": "one batch committed (alone or with its group of small "
                         "batches) or refused; the batches after its group not yet started",
    "publish:exports-written": "release folder written and validated under its temporary name",
    "publish:file-built": "next published file built beside the current one",
    "publish:folder-renamed": "release folder renamed into place, store not yet committed",
    "publish:store-committed": "release committed in the store, published file not yet swapped",
    "publish:swapped": "published file swapped in, run row not yet finished",
}


def crash_point(name: str) -> None:
    """Die with SIGKILL (or the signal ``FLUIDLEDGER_KILL_SIGNAL`` names) here when
    ``FLUIDLEDGER_KILL_AT`` names this point."""
    wanted = os.environ.get(KILL_ENV)
    if wanted is None:
        return
    if name not in CRASH_POINTS:       # a point the catalogue does not list is a bug
        raise AssertionError(f"unknown crash point {name!r}")
    if wanted == name:
        os.kill(os.getpid(), getattr(signal, "SIG" + os.environ.get(SIGNAL_ENV, "KILL")))
