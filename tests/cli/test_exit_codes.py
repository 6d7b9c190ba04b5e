"""Exit codes for what is not a bug: the machine's problems (74), Ctrl-C (130), a busy store (75),
an unknown fluid (2) -- never an internal error (issue 13, cases 11 and 12).

The disk-full and read-only tests mount a small tmpfs or a read-only bind mount in a private
mount namespace (``unshare -m``); where that is not allowed they are skipped (a non-root
user gets the read-only case from a chmod instead).
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from pipeline.cli import main
from pipeline.crashpoints import KILL_ENV, SIGNAL_ENV
from pipeline.errors import EXIT_BUSY, EXIT_ENVIRONMENT, EXIT_INTERRUPTED
from pipeline.store import open_store
from pipeline.verify import verify
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch

REPO = Path(__file__).resolve().parents[2]
CLI = [sys.executable, "-m", "pipeline.cli"]


def _sigint_as_on_a_terminal() -> None:
    """A job started in the background of a shell without job control ignores SIGINT, and
    so would the command it starts; a user's Ctrl-C reaches a command whose SIGINT is not."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def cli(*argv, env=None, timeout=300) -> subprocess.CompletedProcess:
    return subprocess.run([*CLI, *map(str, argv)], capture_output=True, text=True, cwd=REPO,
                          env={**os.environ, **(env or {})}, timeout=timeout,
                          preexec_fn=_sigint_as_on_a_terminal if os.name == "posix" else None)


def big_csv(rows: int) -> str:
    """Argon-like vapour pressures (test data only): a file of a few MB."""
    step = 60.0 / rows
    return "T,p\n" + "".join(f"{84.0 + i * step:.7f},{70.0 + i * 0.01:.7f}\n"
                             for i in range(rows))


def runs(store: Path) -> list[tuple]:
    with open_store(store, read_only=True) as s:
        return s.con.execute("SELECT kind, status, finished_at IS NOT NULL FROM run "
                             "ORDER BY started_at, rowid").fetchall()


# -- Ctrl-C ----------------------------------------------------------------------------------
@pytest.mark.skipif(not hasattr(signal, "SIGINT") or os.name != "posix", reason="POSIX signals")
def test_ctrl_c_during_ingest_exits_130_and_marks_the_run_interrupted(raw_root, store_path):
    """Case 12: SIGINT after the first batch: exit 130 (it was 2, an input error), the run row ends 'interrupted', the committed batch is whole and verify passes."""
    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    write_batch(raw_root, "b", SIMPLE_BATCH.format(source="rig-b"), {"vp.csv": SIMPLE_CSV})
    proc = cli("ingest", raw_root, "--store", store_path, "-q",
               env={KILL_ENV: "ingest:batch-done", SIGNAL_ENV: "INT"})
    assert proc.returncode == EXIT_INTERRUPTED, proc.stderr
    assert proc.stderr.strip().endswith("fluidledger ingest: interrupted")
    assert "Traceback" not in proc.stderr
    assert runs(store_path) == [("ingest", "interrupted", True)]
    with open_store(store_path, read_only=True) as s:
        assert s.con.execute("SELECT DISTINCT batch FROM raw_file").fetchall() == [("a",)]
    assert verify(store_path).ok


@pytest.mark.skipif(os.name != "posix", reason="POSIX signals")
def test_ctrl_c_during_the_nightly_marks_both_runs_interrupted(raw_root, store_path, tmp_path):
    """Case 12: SIGINT inside the nightly's ingest stage: exit 130; the nightly run and its ingest run both end 'interrupted', none stays 'running'."""
    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    proc = cli("nightly", "--raw", raw_root, "--reports", tmp_path / "reports", "--store",
               store_path, "-q", env={KILL_ENV: "ingest:batch-done", SIGNAL_ENV: "INT"})
    assert proc.returncode == EXIT_INTERRUPTED, proc.stderr
    assert sorted(runs(store_path)) == [("ingest", "interrupted", True),
                                        ("nightly", "interrupted", True)]


def test_an_interrupted_fit_is_marked_interrupted(raw_root, store_path, capsys, monkeypatch):
    """Case 12: Ctrl-C while fitting (KeyboardInterrupt): exit 130, the fit run ends 'interrupted'."""
    import pipeline.fitting.stage as fit_stage

    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    assert main(["ingest", str(raw_root), "--store", str(store_path), "-q"]) == 0

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(fit_stage, "_fit_all", interrupted)
    monkeypatch.setattr(fit_stage, "_prepare", lambda *a, **k: type("J", (), {"series": 1})())
    assert main(["fit", "--store", str(store_path)]) == EXIT_INTERRUPTED
    assert "fluidledger fit: interrupted" in capsys.readouterr().err
    assert runs(store_path)[-1] == ("fit", "interrupted", True)


# -- messages of case 12 ---------------------------------------------------------------------
def test_fit_with_an_unknown_fluid_exits_2_like_check(raw_root, store_path, capsys):
    """Case 12: `fit --fluid nosuch` exits 2 naming the fluids the store holds (it exited 0), as `check` does."""
    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    assert main(["ingest", str(raw_root), "--store", str(store_path), "-q"]) == 0
    capsys.readouterr()
    assert main(["fit", "--fluid", "nosuch", "--store", str(store_path)]) == 2
    err = capsys.readouterr().err
    assert "unknown fluid(s) nosuch; the store holds: argon, water" in err
    assert main(["check", "--fluid", "nosuch", "--store", str(store_path)]) == 2


def test_the_busy_message_fits_a_reader_holding_the_store(store_path):
    """Case 12: while a reader holds the store, a writer is told another process has it open (reading or writing), not that it is being written."""
    open_store(store_path).close()
    holder = subprocess.Popen([sys.executable, "-c", textwrap.dedent(f"""
        import duckdb, sys, time
        con = duckdb.connect({str(store_path)!r}, read_only=True)
        print('ready', flush=True)
        time.sleep(60)
    """)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        proc = cli("ingest", store_path.parent, "--store", store_path)
    finally:
        holder.kill()
        holder.wait()
    assert proc.returncode == EXIT_BUSY
    assert "another process has it open" in proc.stderr and "reading or writing" in proc.stderr


# -- the machine's problems: exit 74 ------------------------------------------------------------
def test_a_truncated_store_is_an_environment_error_naming_the_path(raw_root, tmp_path, capsys):
    """Case 11: a store cut short (a copy interrupted, a full disk) exits 74 naming the store and what to do, never 3 or a traceback."""
    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": big_csv(20_000)})
    store = tmp_path / "s.duckdb"
    assert main(["ingest", str(raw_root), "--store", str(store), "-q"]) == 0
    size = store.stat().st_size
    for cut in (100, size // 3, size // 2):
        broken = tmp_path / f"cut-{cut}.duckdb"
        shutil.copyfile(store, broken)
        os.truncate(broken, cut)
        for argv in (["ingest", str(raw_root)], ["status"], ["fit"]):
            capsys.readouterr()
            code = main([*argv, "--store", str(broken), "-q"])
            err = capsys.readouterr().err
            assert code == EXIT_ENVIRONMENT, (cut, argv, err)
            assert str(broken) in err and "internal error" not in err and "Traceback" not in err
            assert "truncated" in err or "corrupt" in err, err


def _namespace_shell(script: str) -> subprocess.CompletedProcess | None:
    """Run ``script`` with sh in a private mount namespace; None when not allowed here."""
    if shutil.which("unshare") is None:
        return None
    probe = subprocess.run(["unshare", "-m", "true"], capture_output=True)
    if probe.returncode != 0:
        return None
    return subprocess.run(["unshare", "-m", "sh", "-c", script], capture_output=True, text=True,
                          cwd=REPO, timeout=600)


def test_a_full_disk_is_an_environment_error_and_the_store_keeps_its_batches(raw_root, tmp_path):
    """Case 11: a batch that does not fit on the disk: exit 74 naming the store and 'disk is full'; the store keeps what it held, and verify passes."""
    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    big = tmp_path / "later"
    write_batch(big, "b", SIMPLE_BATCH.format(source="rig-b"), {"vp.csv": big_csv(200_000)})
    disk = tmp_path / "disk"
    disk.mkdir()
    py = f"{sys.executable} -m pipeline.cli"
    script = (f"mount -t tmpfs -o size=3m tmpfs {disk} && "
              f"{py} ingest {raw_root} --store {disk}/s.duckdb -q; echo first=$?; "
              f"mv {big}/b {raw_root}/b && "
              f"{py} ingest {raw_root} --store {disk}/s.duckdb -q; echo second=$?; "
              f"rm -r {raw_root}/b; "
              f"{py} verify --store {disk}/s.duckdb --no-releases -q; echo verify=$?; "
              f"{py} query 'SELECT DISTINCT batch FROM raw_file' --csv --store {disk}/s.duckdb")
    proc = _namespace_shell(script)
    if proc is None:
        pytest.skip("no private mount namespace (unshare -m) here: run as root to cover it")
    assert "first=0" in proc.stdout and "second=74" in proc.stdout, proc.stdout + proc.stderr
    assert f"{disk}/s.duckdb" in proc.stderr and "the disk is full" in proc.stderr
    assert "internal error" not in proc.stderr
    assert "verify=0" in proc.stdout and proc.stdout.strip().endswith("batch\na")


@pytest.mark.parametrize("what", ["store", "reports"])
def test_a_read_only_folder_is_an_environment_error_naming_the_path(raw_root, tmp_path, what):
    """Case 11: a store folder or reports folder that cannot be written: exit 74 naming it, never 3."""
    write_batch(raw_root, "a", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    locked = tmp_path / "locked"
    locked.mkdir()
    store = (locked if what == "store" else tmp_path) / "s.duckdb"
    argv = ["nightly", "--raw", raw_root, "--reports", (locked if what == "reports"
                                                        else tmp_path) / "reports",
            "--store", store, "-q"]
    if os.geteuid() != 0:
        locked.chmod(0o555)
        try:
            proc = cli(*argv)
        finally:
            locked.chmod(0o755)
    else:
        py = f"{sys.executable} -m pipeline.cli"
        proc = _namespace_shell(f"mount --bind {locked} {locked} && mount -o remount,bind,ro "
                                f"{locked} && {py} " + " ".join(map(str, argv)))
        if proc is None:
            pytest.skip("root without a private mount namespace cannot make a read-only folder")
    assert proc.returncode == EXIT_ENVIRONMENT, proc.stderr
    assert str(locked) in proc.stderr and "internal error" not in proc.stderr
    assert "read-only" in proc.stderr or "permission denied" in proc.stderr
