"""The store: path resolution, comments on everything, the migration ladder, the write lock."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import duckdb
import pytest

from pipeline.errors import StoreBusyError
from pipeline.store import MIGRATIONS, SCHEMA_VERSION, open_store, resolve_store_path
from pipeline.store.migrations import current_version, migrate


def test_store_path_precedence(monkeypatch):
    """--store wins over $FLUIDLEDGER_STORE, which wins over the default."""
    monkeypatch.delenv("FLUIDLEDGER_STORE", raising=False)
    assert str(resolve_store_path()) == "curated/fluidledger.duckdb"
    monkeypatch.setenv("FLUIDLEDGER_STORE", "/tmp/env.duckdb")
    assert str(resolve_store_path()) == "/tmp/env.duckdb"
    assert str(resolve_store_path("/tmp/cli.duckdb")) == "/tmp/cli.duckdb"


def test_every_table_and_column_has_a_comment(store_path):
    """DESCRIBE tells a SQL user what every column means (COMMENT ON everything)."""
    with open_store(store_path) as s:
        tables = s.con.execute("SELECT table_name FROM duckdb_tables() WHERE comment IS NULL").fetchall()
        cols = s.con.execute("SELECT table_name, column_name FROM duckdb_columns() c "
                             "JOIN duckdb_tables() t USING (table_name) WHERE c.comment IS NULL").fetchall()
        views = s.con.execute("SELECT view_name FROM duckdb_views() WHERE NOT internal "
                              "AND comment IS NULL").fetchall()
    assert tables == [] and cols == [] and views == []


def test_migrations_are_a_contiguous_ladder():
    """Migration files are numbered 1..N without gaps."""
    assert [n for n, _, _ in MIGRATIONS] == list(range(1, SCHEMA_VERSION + 1))


@pytest.mark.parametrize("start", range(1, SCHEMA_VERSION))
def test_old_store_migrates_forward(store_path, start):
    """A store left at version k is brought to the newest version on open, keeping its rows."""
    con = duckdb.connect(str(store_path))
    con.execute("CREATE TABLE schema_version (version INTEGER, applied_at TIMESTAMP, description VARCHAR)")
    con.execute("DROP TABLE schema_version")
    for number, _, sql in MIGRATIONS[:start]:
        con.execute(sql) if number > 1 else con.execute(sql)
        con.execute("INSERT INTO schema_version VALUES (?, now(), 'fixture')", [number])
    con.execute("INSERT INTO fluid VALUES ('argon', 'argon', 'Ar', NULL, 0.039948, NULL)")
    con.close()
    with open_store(store_path) as s:
        assert current_version(s.con) == SCHEMA_VERSION
        assert s.con.execute("SELECT fluid_id FROM fluid").fetchall() == [("argon",)]
        assert migrate(s.con) == []


def test_cell_migrations_keep_old_rows_with_no_cells(store_path):
    """A version-4 store with an observation, a quarantined row and a release record gains the
    workbook cell columns (005, 006): old rows keep their values, their cells are NULL, and the
    views show the new columns."""
    con = duckdb.connect(str(store_path))
    for number, _, sql in MIGRATIONS[:4]:
        con.execute(sql)
        con.execute("INSERT INTO schema_version VALUES (?, now(), 'fixture')", [number])
    con.execute("INSERT INTO raw_file VALUES (1, 'aa', 'bb', 'b1/vp.csv', 'b1', 'table', 's', 0, "
                "'argon', 'liquid-vapour', '', 10, 1, 1, 0, 'r', now(), NULL, NULL)")
    con.execute("INSERT INTO raw_column VALUES (1, 'temperature', 'T', 'K', 'ITS-90', 'K', NULL),"
                " (1, 'pressure', 'p', 'kPa', NULL, 'Pa', NULL)")
    con.execute("INSERT INTO observation VALUES (7, 1, 1, 'pressure', 87.3, NULL, 101300.0, NULL, "
                "'87.3', '101.3')")
    con.execute("INSERT INTO quarantine VALUES (1, 1, 'aa', 'b1/vp.csv', 2, 'p', 'x', "
                "'not-a-number', 'm', 'r')")
    con.execute("INSERT INTO release_provenance VALUES ('r1', 'argon/x', 'argon', 'curve', "
                "'fitted', 'f', 'fit', [], [{'entity': 'observations', 'entity_id': '1', "
                "'source_id': 's', 'file_sha256': 'aa', 'file_path': 'b1/vp.csv', "
                "'row_numbers': [1], 'obs_ids': [7], 'value_si': NULL, 'u_si': NULL, "
                "'used': true, 'note': 'used'}], [], [])")
    con.close()
    with open_store(store_path) as s:
        assert current_version(s.con) >= 6
        assert s.con.execute("SELECT obs_id, value_si, T_cell_ref, value_cell_ref FROM "
                             "observation_current").fetchall() == [(7, 101300.0, None, None)]
        assert s.con.execute("SELECT reason_code, cell_ref FROM quarantine_current").fetchall() \
            == [("not-a-number", None)]
        assert s.con.execute("SELECT was_derived_from[1].row_numbers, was_derived_from[1].cells "
                             "FROM release_provenance").fetchall() == [([1], None)]


def test_migration_009_keeps_the_cell_texts_of_a_store_written_before(store_path, raw_root):
    """A version-8 store's observations keep their texts through migration 009 (the parsed
    numbers stay NULL) and observation_history shows them as before; a file ingested after
    it keeps only the texts that are not the canonical rendering of their numbers."""
    from pipeline.ingest.stage import run_ingest
    from tests.conftest import SIMPLE_BATCH, write_batch

    con = duckdb.connect(str(store_path))
    for number, _, sql in MIGRATIONS[:8]:
        con.execute(sql)
        con.execute("INSERT INTO schema_version VALUES (?, now(), 'fixture')", [number])
    con.execute("INSERT INTO raw_file VALUES (nextval('file_id_seq'), 'aa', 'bb', 'b0/vp.csv', "
                "'b0', 'table', 's', 0, 'argon', 'liquid-vapour', '', 10, 1, 1, 0, 'r', now(), "
                "NULL, NULL)")
    con.execute("INSERT INTO raw_column VALUES (1, 'temperature', 'T', 'K', 'ITS-90', 'K', NULL),"
                " (1, 'pressure', 'p', 'kPa', NULL, 'Pa', NULL)")
    con.execute("INSERT INTO observation VALUES (7, 1, 1, 'pressure', 87.3, NULL, 101300.0, NULL, "
                "'87.30', '101.3', NULL, NULL)")
    con.close()
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": "T,p\n85.0,78.90\n"})
    with open_store(store_path) as s:
        assert current_version(s.con) == 9
        assert not run_ingest(s.con, [raw_root / "b1"]).errors
        assert s.con.execute("SELECT obs_id, T_original, value_original, T_parsed, value_parsed "
                             "FROM observation ORDER BY obs_id").fetchall() == [
            (7, "87.30", "101.3", None, None), (8, None, "78.90", 85.0, 78.9)]
        assert s.con.execute("SELECT obs_id, T_original, value_original FROM observation_history "
                             "ORDER BY obs_id").fetchall() == [(7, "87.30", "101.3"),
                                                               (8, "85.0", "78.90")]


def test_second_writer_gets_busy_error(store_path):
    """While one process holds the store, a second writer gets 'busy, retry later' with the PID."""
    open_store(store_path).close()
    holder = subprocess.Popen([sys.executable, "-c", textwrap.dedent(f"""
        import duckdb, sys, time
        con = duckdb.connect({str(store_path)!r})
        print('ready', flush=True)
        time.sleep(30)
    """)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        with pytest.raises(StoreBusyError, match=rf"busy \(held by PID {holder.pid}\).*retry later"):
            open_store(store_path)
    finally:
        holder.kill()
        holder.wait()


def test_latest_check_run_breaks_a_same_second_tie_by_insertion_order(store_path):
    """Check runs started in the same second: the one inserted last is the latest, whatever
    its random run-id suffix (publish and decisions rest on it)."""
    from pipeline.store.runs import latest_check_run_id

    with open_store(store_path) as s:
        assert latest_check_run_id(s.con) is None
        for run_id in ("check-20261202T101010-ffffff", "check-20261202T101010-000000"):
            s.con.execute("INSERT INTO run VALUES (?, 'check', TIMESTAMP '2026-12-02 10:10:10', "
                          "TIMESTAMP '2026-12-02 10:10:10', '0', '{}', 'ok', NULL)", [run_id])
        assert latest_check_run_id(s.con) == "check-20261202T101010-000000"
