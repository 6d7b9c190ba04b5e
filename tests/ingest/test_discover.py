"""Finding batches: any spelling of a path, special files and symbolic links (issue 13, cases 2, 3, 8)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from pipeline.cli import main
from pipeline.ingest.discover import discover_batches
from pipeline.store import open_store
from tests.conftest import FLUIDS_TOML, SIMPLE_BATCH, SIMPLE_CSV, write_batch

GOOD = SIMPLE_BATCH.format(source="rig-a")
POSIX = pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs POSIX FIFOs and symlinks")


def ingest(store_path, capsys, *paths) -> tuple[int, str, str]:
    code = main(["ingest", "--verbose", *map(str, paths), "--store", str(store_path)])
    out, err = capsys.readouterr()
    return code, out, err


def batches(store_path) -> list[tuple]:
    with open_store(store_path, read_only=True) as s:
        return s.con.execute("SELECT DISTINCT batch, path FROM raw_file ORDER BY 2").fetchall()


@pytest.mark.parametrize("spelling", ["relative", "dot-dot", "absolute", "dot-slash"])
def test_relative_dotdot_and_absolute_batch_paths_are_the_same_batch(raw_root, store_path,
                                                                     capsys, monkeypatch,
                                                                     spelling):
    """Case 3: `ingest raw/<batch>` (relative, with .., ./ or absolute) loads the batch under the same name; a relative path exited 3 with an internal error."""
    write_batch(raw_root, "lab/b1", GOOD, {"vp.csv": SIMPLE_CSV})
    monkeypatch.chdir(raw_root.parent)
    path = {"relative": "raw/lab/b1", "dot-dot": "raw/lab/../lab/b1",
            "absolute": str(raw_root / "lab" / "b1"), "dot-slash": "./raw/lab/b1/"}[spelling]
    code, out, err = ingest(store_path, capsys, path)
    assert code == 0, err
    assert "loaded  lab/b1: 3 rows read, 3 loaded, 0 quarantined" in out
    assert batches(store_path) == [("lab/b1", "lab/b1/batch.toml"), ("lab/b1", "lab/b1/vp.csv")]
    for other in ("raw/lab/b1", str(raw_root / "lab" / "b1"), "raw/../raw/lab/b1", "raw"):
        code, out, _ = ingest(store_path, capsys, other)
        assert code == 0 and "unchanged  lab/b1" in out, (other, out)


@POSIX
def test_a_raw_folder_reached_through_a_link_names_its_batches_as_usual(tmp_path, capsys):
    """Case 3: `ingest link-to-raw` (a raw folder on a mounted share, say) loads its batches under their usual names; a second spelling finds them unchanged."""
    real = tmp_path / "share" / "raw"
    real.mkdir(parents=True)
    (real / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    write_batch(real, "lab/b1", GOOD, {"vp.csv": SIMPLE_CSV})
    (tmp_path / "raw").symlink_to(real, target_is_directory=True)
    store = tmp_path / "s.duckdb"
    code, out, err = ingest(store, capsys, tmp_path / "raw")
    assert code == 0 and "loaded  lab/b1: 3 rows read" in out, err
    code, out, _ = ingest(store, capsys, real / "lab" / "b1")
    assert code == 0 and "unchanged  lab/b1" in out


@POSIX
def test_a_batch_two_levels_below_a_linked_folder_is_reported(raw_root, store_path, capsys,
                                                              tmp_path):
    """Case 8: a linked folder holding batches deeper down is reported, never skipped without a word."""
    write_batch(tmp_path / "elsewhere", "campaign/b1", GOOD, {"vp.csv": SIMPLE_CSV})
    (raw_root / "shared").symlink_to(tmp_path / "elsewhere", target_is_directory=True)
    code, _, err = ingest(store_path, capsys, raw_root)
    assert code == 2 and "shared: the folder shared is a symbolic link to" in err


def test_a_batch_outside_the_raw_folder_is_refused_with_a_message(raw_root, store_path, capsys,
                                                                  tmp_path):
    """A batch folder that is not under the folder of fluids.toml is refused naming it, not a crash."""
    elsewhere = write_batch(tmp_path / "elsewhere", "b1", GOOD, {"vp.csv": SIMPLE_CSV})
    code = main(["ingest", "--verbose", str(elsewhere), "--fluids", str(raw_root / "fluids.toml"),
                 "--store", str(store_path)])
    err = capsys.readouterr().err
    assert code == 2 and "is not inside the raw folder" in err


@POSIX
def test_a_fifo_named_batch_toml_is_refused_without_hanging(raw_root, store_path):
    """Case 8: a FIFO named batch.toml (reading it blocks forever) is refused at once; the other batch loads."""
    write_batch(raw_root, "a-good", GOOD, {"vp.csv": SIMPLE_CSV})
    (raw_root / "b-fifo").mkdir()
    os.mkfifo(raw_root / "b-fifo" / "batch.toml")
    proc = subprocess.run([sys.executable, "-m", "pipeline.cli", "ingest", "--verbose", str(raw_root),
                           "--store", str(store_path)], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2, proc.stderr
    assert "b-fifo/batch.toml: is a named pipe (FIFO), not a regular file; refused" in proc.stderr
    assert "loaded  a-good: 3 rows read" in proc.stdout


@POSIX
def test_a_fifo_as_table_file_is_refused(raw_root, store_path, capsys):
    """Case 8: a table file that is a FIFO is refused naming it, never opened for a blocking read."""
    folder = write_batch(raw_root, "b1", GOOD, {})
    os.mkfifo(folder / "vp.csv")
    code, _, err = ingest(store_path, capsys, raw_root)
    assert code == 2 and "b1/vp.csv: is a named pipe (FIFO), not a regular file; refused" in err


@POSIX
def test_a_device_as_table_file_is_refused(raw_root, store_path, capsys):
    """Case 8: a character device (here /dev/zero's numbers) as a table file is refused naming it, never read."""
    import stat

    folder = write_batch(raw_root, "b1", GOOD, {})
    try:
        os.mknod(folder / "vp.csv", stat.S_IFCHR | 0o644, os.makedev(1, 5))
    except (PermissionError, OSError):
        pytest.skip("making a device node needs privileges")
    code, _, err = ingest(store_path, capsys, raw_root)
    assert code == 2 and "b1/vp.csv: is a character device, not a regular file; refused" in err


def test_a_directory_named_batch_toml_refuses_only_its_batch(raw_root, store_path, capsys):
    """Case 2: a directory named batch.toml refuses that batch with a message; it aborted the whole ingest."""
    write_batch(raw_root, "a-good", GOOD, {"vp.csv": SIMPLE_CSV})
    (raw_root / "b-dir" / "batch.toml").mkdir(parents=True)
    code, out, err = ingest(store_path, capsys, raw_root)
    assert code == 2
    assert "b-dir/batch.toml: is a directory, not a regular file; refused" in err
    assert "loaded  a-good: 3 rows read, 3 loaded, 0 quarantined" in out


@POSIX
def test_a_batch_toml_linked_outside_the_raw_folder_is_refused(raw_root, store_path, capsys,
                                                               tmp_path):
    """Case 8: a batch.toml that is a symbolic link leaving raw/ is refused with a message (it was read)."""
    outside = tmp_path / "outside.toml"
    outside.write_text(GOOD, encoding="utf-8")
    folder = write_batch(raw_root, "b1", GOOD, {"vp.csv": SIMPLE_CSV})
    (folder / "batch.toml").unlink()
    (folder / "batch.toml").symlink_to(outside)
    code, _, err = ingest(store_path, capsys, raw_root)
    assert code == 2
    assert f"b1/batch.toml: batch.toml is a symbolic link to {outside.resolve()}, outside the raw " \
           "folder; refused" in err
    assert batches(store_path) == []


@POSIX
def test_a_batch_toml_linked_inside_the_raw_folder_is_followed(raw_root, store_path, capsys):
    """Case 8: a batch.toml linked to a file inside raw/ is read through the link."""
    (raw_root / "shared").mkdir()
    (raw_root / "shared" / "rig-a.toml").write_text(GOOD, encoding="utf-8")
    folder = write_batch(raw_root, "b1", GOOD, {"vp.csv": SIMPLE_CSV})
    (folder / "batch.toml").unlink()
    (folder / "batch.toml").symlink_to(raw_root / "shared" / "rig-a.toml")
    code, out, err = ingest(store_path, capsys, raw_root)
    assert code == 0, err
    assert "loaded  b1: 3 rows read, 3 loaded, 0 quarantined" in out


@POSIX
@pytest.mark.parametrize("where", ["inside", "outside"])
def test_a_linked_batch_folder_is_reported_never_skipped(raw_root, store_path, capsys, tmp_path,
                                                         where):
    """Case 8: a batch folder that is a symbolic link (to inside or outside raw/) is listed and refused with a message; it was skipped without a word."""
    base = raw_root / "real" if where == "inside" else tmp_path / "real"
    target = write_batch(base, "b1", GOOD, {"vp.csv": SIMPLE_CSV})
    (raw_root / "linked").symlink_to(target, target_is_directory=True)
    assert raw_root / "linked" in discover_batches(raw_root)
    code, out, err = ingest(store_path, capsys, raw_root)
    assert code == 2
    assert (f"linked: the folder linked is a symbolic link to {target.resolve()} ({where} the raw "
            "folder)") in err
    if where == "inside":
        assert "loaded  real/b1: 3 rows read" in out


def test_discovery_lists_nested_batches_in_order(raw_root):
    """Nested batch folders are found in path order; the raw root itself is a batch when it holds batch.toml."""
    for name in ("z", "a/b", "a"):
        write_batch(raw_root, name, GOOD, {})
    assert [p.relative_to(raw_root).as_posix() for p in discover_batches(raw_root)] == \
        ["a", "a/b", "z"]
    assert discover_batches(raw_root / "a" / "b") == [raw_root / "a" / "b"]
    assert Path(raw_root / "a") in discover_batches(raw_root)
