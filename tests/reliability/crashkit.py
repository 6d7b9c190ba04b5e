"""Kill-and-recover helpers for the crash-safety tests (ingest, publish).

``kill_cli(argv, store, trigger)`` runs ``python -m pipeline.cli ARGV --store STORE -q`` from the
repository root and SIGKILLs it the first time ``trigger(probe)`` holds (a :class:`Probe`
carries the store and WAL sizes); ``env`` adds variables, e.g. ``FLUIDLEDGER_KILL_AT`` naming
one of :data:`pipeline.crashpoints.CRASH_POINTS`, where the process kills itself.
``assert_store_recovers(store)`` opens the store writable and runs ``fluidledger verify``;
``snapshot(store)`` gives comparable content (load ids and times aside).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from pipeline.cli import main
from pipeline.store import open_store
from pipeline.verify import verify

REPO = Path(__file__).resolve().parents[2]
# columns that identify a load rather than describe content: ignored when comparing stores
VOLATILE = {"obs_id", "file_id", "fp_id", "const_id", "q_id", "ingest_run_id", "updated_run_id",
            "ingested_at", "superseded_by", "superseded_run_id"}


def _content(con, view: str, order: bool) -> tuple:
    cols = [r[0] for r in con.execute(f"DESCRIBE {view}").fetchall() if r[0] not in VOLATILE]
    select = ", ".join(f'"{c}"' for c in cols)
    if order:
        return tuple(con.execute(f"SELECT {select} FROM {view} ORDER BY ALL").fetchall())
    n, digest = con.execute(f"SELECT count(*), sum(hash({select})::HUGEINT) FROM {view}"
                            ).fetchone()
    return (n, int(digest or 0))


def snapshot(store: Path) -> dict:
    """Comparable content of a store: current files, sources, and digests of current rows."""
    with open_store(store, read_only=True) as s:
        con = s.con
        return {
            "raw_file_current": _content(con, "raw_file_current", order=True),
            "source": _content(con, "source", order=True),
            "observation_current": _content(con, "observation_current", order=False),
            "quarantine_current": _content(con, "quarantine_current", order=True),
            "fixed_point_current": _content(con, "fixed_point_current", order=True),
        }


def assert_store_recovers(store: Path, releases: Path | None = None) -> None:
    """The store opens writable (migrating if needed) and ``fluidledger verify`` passes (with
    the release manifests under ``releases`` when given)."""
    if store.exists():
        open_store(store).close()
        where = ["--releases", str(releases)] if releases is not None else ["--no-releases"]
        code = main(["verify", "--store", str(store), *where, "-q"])
        assert code == 0, verify(store, releases_root=releases).asstr()


@dataclass
class Probe:
    """What a trigger may look at while the process runs (sizes in bytes, -1 when absent)."""

    elapsed_s: float
    db_bytes: int
    wal_bytes: int
    creating: bool      # a new store is being built under its temporary name


@dataclass
class KillOutcome:
    killed: bool
    returncode: int
    elapsed_s: float
    probe: Probe
    stderr: str = ""     # the tail of the process's stderr, to explain an early exit


def file_size(path: Path) -> int:
    try:
        return path.stat().st_size
    except FileNotFoundError:
        return -1


def kill_cli(argv: list[str], store: Path, trigger: Callable[[Probe], bool], *,
             timeout_s: float = 120.0, env: dict[str, str] | None = None) -> KillOutcome:
    """Run ``fluidledger ARGV --store STORE -q`` and SIGKILL it when ``trigger`` first holds
    (``env`` adds environment variables; a process that kills itself ends as killed too)."""
    env = {**os.environ, "PYTHONPATH": str(REPO), **(env or {})}
    with tempfile.TemporaryFile() as err:
        proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", *argv, "--store",
                                 str(store), "-q"], cwd=REPO, env=env,
                                stdout=subprocess.DEVNULL, stderr=err)
        wal = store.with_name(store.name + ".wal")
        start = time.monotonic()
        try:
            while True:
                probe = Probe(time.monotonic() - start, file_size(store), file_size(wal),
                              any(store.parent.glob(f".{store.name}.creating-*")))
                if proc.poll() is not None:
                    err.seek(0)
                    tail = err.read()[-2000:].decode("utf-8", "replace")
                    return KillOutcome(proc.returncode == -signal.SIGKILL, proc.returncode,
                                       probe.elapsed_s, probe, tail)
                if trigger(probe):
                    os.kill(proc.pid, signal.SIGKILL)
                    proc.wait()
                    return KillOutcome(True, proc.returncode, probe.elapsed_s, probe)
                if probe.elapsed_s > timeout_s:
                    raise AssertionError(f"{argv} ran past {timeout_s} s")
                time.sleep(0.001)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()


def exists(probe: Probe) -> bool:
    """Trigger as soon as the store file exists."""
    return probe.db_bytes > 0


def creating(probe: Probe) -> bool:
    """Trigger while a new store is being built under its temporary name."""
    return probe.creating


def grown_to(fraction: float, final_bytes: int) -> Callable[[Probe], bool]:
    """Trigger once the store file reaches ``fraction`` of the size an uninterrupted run ends at."""
    return lambda probe: probe.db_bytes >= fraction * final_bytes


def after_commit(wal_bytes: int, db_bytes: int) -> Callable[[Probe], bool]:
    """Trigger once the WAL holds a commit's bytes and the store file grows past the size it had
    then: the process has moved on to the next batch, so the commit is complete."""
    return lambda probe: probe.wal_bytes >= wal_bytes and probe.db_bytes > db_bytes


