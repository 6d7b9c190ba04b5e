"""Crash safety: an ingest killed at any point leaves a store that opens, verifies and converges.

An ingest of a moderately large raw folder (3 batches x ``FLUIDLEDGER_CRASH_ROWS`` rows, default
150 000) runs in a subprocess and is killed with SIGKILL at kill points chosen by *progress*, not
by wall time, so they land in the same phases on slow and fast machines: while a new store is
migrated, as soon as the store file exists, half-way through writing batch 1, between batches 1
and 2, half-way through batch 3 (all measured on a reference run's store/WAL sizes), and during
the final checkpoint. After each kill the
store must open, ``fluidledger verify`` must pass, and a rerun must end with the same content as
an uninterrupted run (ids and run ids aside). DuckDB's ``debug_checkpoint_abort`` setting
(``before_header``, ``before_truncate``, ``after_free_list_write``) simulates a crash inside a
checkpoint after an ingest.

Reusable for other stages (e.g. a publish kill test)::

    outcome = kill_cli(["publish", ...], store, trigger=grown_to(0.5, final_size))
    assert outcome.killed
    assert_store_recovers(store)        # opens, migrates, verify finds nothing

``kill_cli`` runs ``python -m pipeline.cli ARGV --store STORE -q`` from the repository root and
SIGKILLs it the first time ``trigger(probe)`` is true; ``snapshot(store)`` gives comparable content.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import tempfile
import textwrap
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pytest

from pipeline.cli import main
from pipeline.store import open_store
from pipeline.verify import verify
from tests.conftest import FLUIDS_TOML

REPO = Path(__file__).resolve().parents[2]
ROWS = int(os.environ.get("FLUIDLEDGER_CRASH_ROWS", "150000"))
BATCHES = 3
BAD_EVERY = 9973  # every so many rows a cell that must be quarantined
# columns that identify a load rather than describe content: ignored when comparing stores
VOLATILE = {"obs_id", "file_id", "fp_id", "const_id", "q_id", "ingest_run_id", "updated_run_id",
            "ingested_at", "superseded_by", "superseded_run_id"}

BATCH_TOML = """format_version = 1

[source]
id = "crash-rig-{b}"
kind = "measurement"
citation = "Invented crash-test campaign {b}, rig K"

[[table]]
file = "vp.csv"
fluid = "argon"
boundary = "liquid-vapour"
temperature = {{ column = "T", unit = "K" }}
pressure = {{ column = "p", unit = "kPa" }}
[table.uncertainty]
temperature = {{ value = 0.005, unit = "K" }}
pressure = {{ relative = 0.001 }}

[[fixed_point]]
fluid = "argon"
kind = "critical"
T = {{ value = 150.7, unit = "K", u = 0.01 }}
p = {{ value = 4.86, unit = "MPa", u = 0.005 }}
"""


def write_big_raw(root: Path, *, batches: int = BATCHES, rows: int = ROWS) -> Path:
    """A raw root of ``batches`` batches with ``rows`` invented vapour-pressure rows each."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    for b in range(batches):
        folder = root / f"campaign-{b}"
        folder.mkdir()
        (folder / "batch.toml").write_text(BATCH_TOML.format(b=b), encoding="utf-8")
        rng = np.random.default_rng(1000 + b)
        T = 84.0 + 66.0 * rng.random(rows)
        p = 101.3 * np.exp(9.7 * (1.0 - 87.3 / T))          # smooth invented curve [kPa]
        cells = np.char.mod("%.3f", p)
        cells[BAD_EVERY // (b + 1)::BAD_EVERY] = "n/a"        # not-a-number rows
        lines = np.char.add(np.char.add(np.char.mod("%.5f", T), ","), cells)
        (folder / "vp.csv").write_text("T,p\n" + "\n".join(lines.tolist()) + "\n",
                                       encoding="utf-8")
    return root


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


def assert_store_recovers(store: Path) -> None:
    """The store opens writable (migrating if needed) and ``fluidledger verify`` passes."""
    if store.exists():
        open_store(store).close()
        code = main(["verify", "--store", str(store), "--no-releases", "-q"])
        assert code == 0, verify(store).asstr()


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


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except FileNotFoundError:
        return -1


def kill_cli(argv: list[str], store: Path, trigger: Callable[[Probe], bool], *,
             timeout_s: float = 120.0) -> KillOutcome:
    """Run ``fluidledger ARGV --store STORE -q`` and SIGKILL it when ``trigger`` first holds."""
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    with tempfile.TemporaryFile() as err:
        proc = subprocess.Popen([sys.executable, "-m", "pipeline.cli", *argv, "--store",
                                 str(store), "-q"], cwd=REPO, env=env,
                                stdout=subprocess.DEVNULL, stderr=err)
        wal = store.with_name(store.name + ".wal")
        start = time.monotonic()
        try:
            while True:
                probe = Probe(time.monotonic() - start, _size(store), _size(wal),
                              any(store.parent.glob(f".{store.name}.creating-*")))
                if proc.poll() is not None:
                    err.seek(0)
                    tail = err.read()[-2000:].decode("utf-8", "replace")
                    return KillOutcome(False, proc.returncode, probe.elapsed_s, probe, tail)
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


@dataclass
class Reference:
    """An uninterrupted run: its snapshot and the store/WAL sizes at each batch commit."""

    raw: Path
    snapshot: dict
    final_bytes: int
    commits: list[tuple[int, int]]      # (store bytes, WAL bytes) right after each batch commit
    start_bytes: int                    # store bytes when loading began


@pytest.fixture(scope="module")
def big(tmp_path_factory) -> Reference:
    """The big raw root and its reference run, with the sizes marking each batch commit."""
    base = tmp_path_factory.mktemp("crash")
    raw = write_big_raw(base / "raw")
    store = base / "reference.duckdb"
    states: list[tuple[int, int]] = []

    def record(probe: Probe) -> bool:
        state = (probe.db_bytes, probe.wal_bytes)
        if not states or states[-1] != state:
            states.append(state)
        return False

    outcome = kill_cli(["ingest", str(raw)], store, trigger=record)
    assert not outcome.killed and outcome.returncode == 0, outcome.stderr
    setup_end = next(i for i, (_, w) in enumerate(states) if w > 0)
    start_bytes = states[setup_end][0]
    # a batch commit: the WAL grows after the store file grew with the batch's rows
    commits, grown = [], start_bytes
    for (db0, wal0), (db1, wal1) in zip(states[setup_end:], states[setup_end + 1:]):
        if wal1 > wal0 > 0 and db0 > grown:
            commits.append((db1, wal1))
            grown = db1
    return Reference(raw, snapshot(store), _size(store), commits, start_bytes)


def committed_batches(store: Path) -> int:
    if not store.exists():
        return 0
    with open_store(store) as s:
        return s.con.execute("SELECT count(DISTINCT batch) FROM raw_file").fetchone()[0]


def kill_points(ref: Reference) -> dict[str, Callable[[Probe], bool]]:
    """Named kill points, placed by the reference run's progress (not by wall time)."""
    (c1, w1), (c2, _), (c3, _) = ref.commits[:3]
    return {
        "during-creation": creating,                               # migrating a new store
        "store-created": exists,                                   # run row and fluids next
        "inside-batch-1": grown_to(0.5, ref.start_bytes + c1),     # half of batch 1 written
        "after-batch-1-commit": after_commit(w1, c1),              # batch 2 has begun
        "inside-batch-3": grown_to(0.5, c2 + c3),                  # half of batch 3 written
        "final-checkpoint": grown_to(0.5, c3 + ref.final_bytes),   # checkpoint before exit
    }


def test_reference_ingest_is_clean(big):
    """The uninterrupted run loads every row but the planted bad ones, which it quarantines."""
    assert len(big.snapshot["raw_file_current"]) == 2 * BATCHES
    n_obs, _ = big.snapshot["observation_current"]
    n_bad = len(big.snapshot["quarantine_current"])
    assert n_bad > 0 and n_obs + n_bad == BATCHES * ROWS
    assert len(big.commits) == BATCHES, big.commits


def test_killed_ingest_recovers_at_every_kill_point(big, tmp_path):
    """SIGKILL at each kill point leaves a verifiable store; a rerun reproduces the reference."""
    committed = {}
    for name, trigger in kill_points(big).items():
        store = tmp_path / f"{name}.duckdb"
        outcome = kill_cli(["ingest", str(big.raw)], store, trigger)
        assert outcome.killed, f"{name}: the ingest ended before the kill point: {outcome}"
        assert outcome.returncode == -signal.SIGKILL
        assert_store_recovers(store)
        committed[name] = committed_batches(store)
        assert main(["ingest", str(big.raw), "--store", str(store), "-q"]) == 0
        assert_store_recovers(store)
        assert snapshot(store) == big.snapshot, name
    # the kill points fell in order into different phases (exact phases can slip by a batch
    # on a loaded machine, so only the order and the ends are asserted)
    counts = list(committed.values())
    assert counts == sorted(counts), committed
    assert committed["during-creation"] == committed["store-created"] == 0, committed
    assert committed["final-checkpoint"] == BATCHES, committed
    assert any(0 < n < BATCHES for n in counts), committed


def test_repeated_kills_on_one_store_converge(big, tmp_path):
    """Killing the ingest twice on the same store, then rerunning, still gives the reference."""
    (_, _), (c2, _), (c3, _) = big.commits[:3]
    store = tmp_path / "repeated.duckdb"
    for trigger in (grown_to(0.5, big.start_bytes + big.commits[0][0]), grown_to(0.5, c2 + c3)):
        kill_cli(["ingest", str(big.raw)], store, trigger)
        assert_store_recovers(store)
    assert main(["ingest", str(big.raw), "--store", str(store), "-q"]) == 0
    assert snapshot(store) == big.snapshot


CHECKPOINT_CRASH = textwrap.dedent("""
    import os, sys
    import duckdb
    from pathlib import Path
    from pipeline.ingest.stage import run_ingest
    from pipeline.store import open_store

    store = open_store(sys.argv[1])
    result = run_ingest(store.con, [Path(sys.argv[2])])
    assert not result.errors, result.asstr()
    store.con.execute("SET debug_checkpoint_abort = '" + sys.argv[3] + "'")
    try:
        store.con.execute("CHECKPOINT")
    except duckdb.Error as err:
        print("checkpoint failed:", type(err).__name__, str(err).splitlines()[0], flush=True)
        os._exit(0)   # die like a crashed process: no close, no clean checkpoint
    print("checkpoint completed", flush=True)
    os._exit(0)
""")


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    """A small raw root (its commits stay in the WAL) and its uninterrupted snapshot."""
    base = tmp_path_factory.mktemp("checkpoint")
    raw = write_big_raw(base / "raw", rows=3000)
    store = base / "reference.duckdb"
    assert main(["ingest", str(raw), "--store", str(store), "-q"]) == 0
    return raw, snapshot(store)


@pytest.mark.parametrize("abort", ["before_header", "before_truncate", "after_free_list_write"])
def test_crash_inside_a_checkpoint_recovers(small, tmp_path, abort):
    """A checkpoint aborted by debug_checkpoint_abort, then a dead process, loses nothing."""
    raw, reference = small
    store = tmp_path / "store.duckdb"
    proc = subprocess.run([sys.executable, "-c", CHECKPOINT_CRASH, str(store), str(raw), abort],
                          cwd=REPO, env={**os.environ, "PYTHONPATH": str(REPO)},
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "checkpoint failed: FatalException" in proc.stdout
    assert "checkpoint aborted" in proc.stdout.lower()
    assert_store_recovers(store)
    assert snapshot(store) == reference
    before = snapshot(store)
    assert main(["ingest", str(raw), "--store", str(store), "-q"]) == 0
    assert snapshot(store) == before
    with open_store(store, read_only=True) as s:
        statuses = s.con.execute("SELECT status FROM run ORDER BY started_at").fetchall()
    assert statuses == [("ok",), ("no-changes",)]


def test_copied_store_files_alone_are_enough_to_recover(small, tmp_path):
    """A store copied with its WAL while no process holds it recovers from those two files."""
    raw, reference = small
    store = tmp_path / "store.duckdb"
    proc = subprocess.run([sys.executable, "-c", CHECKPOINT_CRASH, str(store), str(raw),
                           "before_header"], cwd=REPO, env={**os.environ, "PYTHONPATH": str(REPO)},
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    moved = tmp_path / "moved"
    moved.mkdir()
    for suffix in ("", ".wal"):
        shutil.copy2(str(store) + suffix, moved / f"store.duckdb{suffix}")
    assert_store_recovers(moved / "store.duckdb")
    assert snapshot(moved / "store.duckdb") == reference
