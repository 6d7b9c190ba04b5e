"""Ingest stage: accounting, idempotency, supersession, atomicity, quarantine."""

from __future__ import annotations

import duckdb
import pytest

from pipeline.ingest import stage, tableload
from pipeline.ingest.stage import run_ingest
from pipeline.store import open_store
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch

TABLES = ["raw_file", "raw_column", "observation", "fixed_point", "stated_constant", "quarantine", "source"]


def snapshot(con: duckdb.DuckDBPyConnection) -> dict:
    """Every row of every ingest table, for before/after comparisons."""
    return {t: sorted(con.execute(f"SELECT * FROM {t}").fetchall(), key=repr) for t in TABLES}


def ingest(store_path, root):
    with open_store(store_path) as s:
        return run_ingest(s.con, [root])


def test_accounting_invariant_holds_for_every_file(raw_root, store_path):
    """rows_read = rows_loaded + rows_quarantined for every ingested file."""
    csv = SIMPLE_CSV + "91.0,abc\n92.0,\n0,5\n93.0,-4\n94.0,nan\n"
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": csv})
    result = ingest(store_path, raw_root)
    assert not result.errors
    with open_store(store_path) as s:
        rows = s.con.execute("SELECT rows_read, rows_loaded, rows_quarantined FROM raw_file "
                             "WHERE role = 'table'").fetchall()
    assert rows == [(8, 3, 5)]


def test_quarantine_reasons_name_file_row_and_column(raw_root, store_path):
    """Each bad cell is quarantined with its reason code and a message naming file/row/column."""
    csv = "T,p\n85.0,78.9\n91.0,abc\n92.0,\n0,5\n93.0,-4\n94.0,nan\n95.0,1e308\n"
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": csv})
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        got = s.con.execute("SELECT row_number, column_name, reason_code, message FROM quarantine "
                            "ORDER BY row_number").fetchall()
    assert [(r, c, code) for r, c, code, _ in got] == [
        (2, "p", "not-a-number"), (3, "p", "missing-value"), (4, "T", "non-positive-temperature"),
        (5, "p", "non-positive-pressure"), (6, "p", "non-finite"), (7, "p", "out-of-physical-range")]
    assert got[0][3] == "b1/vp.csv, row 2, column 'p': not-a-number (cell abc)"


def test_second_ingest_is_a_no_op(raw_root, store_path):
    """Ingesting the same content again changes nothing."""
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        before = snapshot(s.con)
    again = ingest(store_path, raw_root)
    assert not again.changed and [b.status for b in again.batches] == ["unchanged"]
    with open_store(store_path) as s:
        assert snapshot(s.con) == before


def test_changed_file_supersedes_old_version(raw_root, store_path):
    """A changed CSV replaces its rows in the current view; the old rows stay as history."""
    folder = write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    ingest(store_path, raw_root)
    (folder / "vp.csv").write_text(SIMPLE_CSV + "95.0,213.0\n")
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        assert s.con.execute("SELECT count(*) FROM observation").fetchone()[0] == 7
        assert s.con.execute("SELECT count(*) FROM observation_current").fetchone()[0] == 4
        old = s.con.execute("SELECT superseded_by FROM raw_file WHERE role = 'table' "
                            "ORDER BY file_id").fetchall()
    assert old[0][0] is not None and old[1][0] is None


def test_removed_batch_leaves_the_current_view(raw_root, store_path):
    """A batch folder deleted from raw/ is retired: its rows leave the current view."""
    folder = write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": SIMPLE_CSV})
    ingest(store_path, raw_root)
    for f in folder.iterdir():
        f.unlink()
    folder.rmdir()
    result = ingest(store_path, raw_root)
    assert result.removed == ["b1/batch.toml", "b1/vp.csv"]
    with open_store(store_path) as s:
        assert s.con.execute("SELECT count(*) FROM observation_current").fetchone()[0] == 0
        assert s.con.execute("SELECT count(*) FROM observation").fetchone()[0] == 3


def test_failure_part_way_leaves_store_exactly_as_before(raw_root, store_path, monkeypatch):
    """An error while loading the second table of a batch rolls the whole batch back."""
    one = SIMPLE_BATCH.format(source="rig-a")
    two = one + "[[table]]" + one.split("[[table]]")[1].replace("vp.csv", "vp2.csv")
    write_batch(raw_root, "b0", SIMPLE_BATCH.format(source="rig-0"),
                {"vp.csv": SIMPLE_CSV.replace("90.0", "89.0")})
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        before = snapshot(s.con)
    write_batch(raw_root, "b1", two, {"vp.csv": SIMPLE_CSV, "vp2.csv": SIMPLE_CSV.replace("85.0", "86.0")})
    calls = {"n": 0}
    original = tableload._insert_observations

    def failing(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OSError("disk full (injected)")
        return original(*args, **kwargs)

    monkeypatch.setattr(tableload, "_insert_observations", failing)
    with pytest.raises(OSError, match="injected"):
        ingest(store_path, raw_root)
    assert calls["n"] == 2
    with open_store(store_path) as s:
        assert snapshot(s.con) == before


def test_ipts68_temperatures_are_converted_and_originals_kept(raw_root, store_path):
    """An IPTS-68 column is converted to ITS-90; the original text, unit and scale stay."""
    manifest = SIMPLE_BATCH.format(source="rig-a").replace('unit = "K" }', 'unit = "K", scale = "IPTS-68" }', 1)
    write_batch(raw_root, "b1", manifest, {"vp.csv": "T,p\n83.798,68.9\n"})
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        T, orig, scale = s.con.execute("SELECT T_K, T_original, T_scale FROM observation_current").fetchone()
    # argon triple point: 83.798 K (IPTS-68) = 83.8058 K (ITS-90), Preston-Thomas (1990)
    assert T == pytest.approx(83.8058, abs=1e-3)
    assert (orig, scale) == ("83.798", "IPTS-68")


def test_expanded_uncertainty_is_divided_by_coverage(raw_root, store_path):
    """A k=2 uncertainty column is stored as a standard uncertainty (k=1), in SI."""
    manifest = SIMPLE_BATCH.format(source="rig-a").replace(
        'pressure = { relative = 0.001 }', 'pressure = { column = "U_p", unit = "Pa", coverage = 2 }')
    write_batch(raw_root, "b1", manifest, {"vp.csv": "T,p,U_p\n87.3,101.3,40\n"})
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        value, u = s.con.execute("SELECT value_si, u_value_si FROM observation").fetchone()
    assert value == pytest.approx(101300.0) and u == pytest.approx(20.0)


def test_row_numbers_survive_blank_and_rejected_lines(raw_root, store_path):
    """Row numbers count file lines after the header even around blank and malformed lines."""
    csv = "T,p\n85.0,78.9\n\n86.0,1,2\n87.3,101.3\n"
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": csv})
    ingest(store_path, raw_root)
    with open_store(store_path) as s:
        obs = s.con.execute("SELECT row_number FROM observation ORDER BY 1").fetchall()
        q = s.con.execute("SELECT row_number, reason_code FROM quarantine").fetchall()
    assert obs == [(1,), (4,)] and q == [(3, "bad-row-shape")]
