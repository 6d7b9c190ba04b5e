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

The kill-and-recover helpers live in ``crashkit.py`` (shared with the publish kill test).
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import textwrap
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pytest

from pipeline.cli import main
from pipeline.store import open_store
from tests.storekit import FLUIDS_TOML, batch_toml, source, vp_table
from tests.reliability.crashkit import (REPO, Probe, after_commit, assert_store_recovers, creating,
                                        exists, file_size, grown_to, kill_cli, snapshot)

ROWS = int(os.environ.get("FLUIDLEDGER_CRASH_ROWS", "150000"))
BATCHES = 3
BAD_EVERY = 9973  # every so many rows a cell that must be quarantined

def batch_toml_of(b: int) -> str:
    """Crash-test campaign ``b``: an argon vapour-pressure table and a critical point."""
    return batch_toml(source(f"crash-rig-{b}", f"Invented crash-test campaign {b}, rig K"),
                      [vp_table(p_unit="kPa", u_T_K=0.005, u_p_rel=0.001)],
                      [{"fluid": "argon", "kind": "critical",
                        "T": {"value": 150.7, "unit": "K", "u": 0.01},
                        "p": {"value": 4.86, "unit": "MPa", "u": 0.005}}])




def write_big_raw(root: Path, *, batches: int = BATCHES, rows: int = ROWS) -> Path:
    """A raw root of ``batches`` batches with ``rows`` invented vapour-pressure rows each."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    for b in range(batches):
        folder = root / f"campaign-{b}"
        folder.mkdir()
        (folder / "batch.toml").write_text(batch_toml_of(b), encoding="utf-8")
        rng = np.random.default_rng(1000 + b)
        T = 84.0 + 66.0 * rng.random(rows)
        p = 101.3 * np.exp(9.7 * (1.0 - 87.3 / T))          # smooth invented curve [kPa]
        cells = np.char.mod("%.3f", p)
        cells[BAD_EVERY // (b + 1)::BAD_EVERY] = "n/a"        # not-a-number rows
        lines = np.char.add(np.char.add(np.char.mod("%.5f", T), ","), cells)
        (folder / "vp.csv").write_text("T,p\n" + "\n".join(lines.tolist()) + "\n",
                                       encoding="utf-8")
    return root


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
    return Reference(raw, snapshot(store), file_size(store), commits, start_bytes)


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
