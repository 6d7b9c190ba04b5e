"""Loading one staged table: original cells kept as numbers, their text only where it differs."""

from __future__ import annotations

import duckdb

from pipeline.ingest.stage import run_ingest
from pipeline.ingest.tableload import CANONICAL_TEXT
from pipeline.store import open_store
from tests.conftest import SIMPLE_BATCH, write_batch


def ingest(store_path, root):
    with open_store(store_path) as s:
        return run_ingest(s.con, [root])


def test_a_cell_keeps_its_text_only_where_the_number_does_not_render_as_written(raw_root,
                                                                               store_path):
    """A cell written the way DuckDB renders its number ('85.0', '101.3') is kept as the number
    alone; trailing zeros, spaces, exponents, a plus sign and leading zeros keep their text;
    observation_history gives every cell back exactly as written."""
    cells = [("85.0", "78.9"), ("87.30", "101.3"), (" 88.5", "1.013e2"), ("+89.0", "0110.5"),
             ("9.05e1", "120.0 ")]
    csv = "T,p\n" + "".join(f"{t},{p}\n" for t, p in cells)
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"), {"vp.csv": csv})
    assert not ingest(store_path, raw_root).errors
    with open_store(store_path, read_only=True) as s:
        stored = s.con.execute("SELECT T_original, value_original, T_parsed, value_parsed "
                               "FROM observation ORDER BY row_number").fetchall()
        shown = s.con.execute("SELECT T_original, value_original FROM observation_history "
                              "ORDER BY row_number").fetchall()
    assert shown == cells
    assert stored == [(None, None, 85.0, 78.9), ("87.30", None, 87.3, 101.3),
                      (" 88.5", "1.013e2", 88.5, 101.3), ("+89.0", "0110.5", 89.0, 110.5),
                      ("9.05e1", "120.0 ", 90.5, 120.0)]


def test_a_decimal_comma_cell_keeps_its_text(raw_root, store_path):
    """With decimal = ",", a cell like '85,0' never renders as written (DuckDB writes '85.0'),
    so its text is kept and shown as written."""
    manifest = SIMPLE_BATCH.format(source="rig-a").replace(
        'file = "vp.csv"', 'file = "vp.csv"\ndelimiter = ";"\ndecimal = ","')
    write_batch(raw_root, "b1", manifest, {"vp.csv": "T;p\n85,0;78,9\n87,3;101,3\n"})
    assert not ingest(store_path, raw_root).errors
    with open_store(store_path, read_only=True) as s:
        assert s.con.execute("SELECT h.T_original, h.value_original, o.T_parsed FROM "
                             "observation_history h JOIN observation o USING (obs_id) "
                             "ORDER BY obs_id").fetchall() == [
            ("85,0", "78,9", 85.0), ("87,3", "101,3", 87.3)]


def test_the_canonical_rendering_is_the_shortest_round_trip_text():
    """The rule the store relies on (CAST(double AS VARCHAR)) gives the shortest text that reads
    back as the same double, for the shapes of numbers tables hold; a DuckDB upgrade that
    changed it would change which texts are kept, and fail here first."""
    con = duckdb.connect()
    values = [85.0, -150.1, 0.1, 101.325, 1e20, 1e-07, 123456789.0, 12.34567, 6.02214076e23,
              273.16, 1234567890123456.0, -0.0, 5e-324, 1.7976931348623157e308]
    texts = [con.execute(f"SELECT {CANONICAL_TEXT.format('?::DOUBLE')}", [v]).fetchone()[0]
             for v in values]
    assert texts == ["85.0", "-150.1", "0.1", "101.325", "1e+20", "1e-07", "123456789.0",
                     "12.34567", "6.02214076e+23", "273.16", "1234567890123456.0", "-0.0",
                     "5e-324", "1.7976931348623157e+308"]
    assert [float(t) for t in texts] == values


def test_a_large_table_loads_under_the_memory_budget_and_the_limit_is_set_back(
        raw_root, store_path, monkeypatch):
    """A table file over the size threshold loads under DuckDB's lowered memory limit (seen
    from inside the load) with the same rows; the connection's own limit is back afterwards,
    also after a batch that failed inside the budget."""
    from pipeline.ingest import tableload

    monkeypatch.setattr(tableload, "LARGE_TABLE_BYTES", 10)
    seen = []
    original = tableload._insert_observations

    def watching(ing, *args):
        seen.append(ing.con.execute("SELECT current_setting('memory_limit')").fetchone()[0])
        if len(seen) == 2:
            raise OSError("injected after the budget was set")
        return original(ing, *args)

    monkeypatch.setattr(tableload, "_insert_observations", watching)
    write_batch(raw_root, "b1", SIMPLE_BATCH.format(source="rig-a"),
                {"vp.csv": "T,p\n85.0,78.9\n87.3,101.3\n"})
    with open_store(store_path) as s:
        before = s.con.execute("SELECT current_setting('memory_limit')").fetchone()[0]
        assert not run_ingest(s.con, [raw_root]).errors
        assert s.con.execute("SELECT current_setting('memory_limit')").fetchone()[0] == before
        assert s.con.execute("SELECT count(*) FROM observation").fetchone()[0] == 2
        write_batch(raw_root, "b2", SIMPLE_BATCH.format(source="rig-b"),
                    {"vp.csv": "T,p\n88.0,110.0\n"})
        try:
            run_ingest(s.con, [raw_root])
        except OSError:
            pass
        assert s.con.execute("SELECT current_setting('memory_limit')").fetchone()[0] == before
    assert seen[0] == seen[1] != before
    assert seen[0] in ("190.7 MiB", "200.0 MB")


def test_small_batches_load_together_without_falling_back(raw_root, store_path, caplog):
    """Two small good batches load in one group: the group loader never reports a failed
    group (a failure would still give the same store, one batch at a time, only slower)."""
    import logging

    for name, p in (("a", "78.9"), ("b", "79.0")):
        write_batch(raw_root, name, SIMPLE_BATCH.format(source=f"rig-{name}"),
                    {"vp.csv": f"T,p\n85.0,{p}\n87.3,101.3\n"})
    with caplog.at_level(logging.DEBUG, logger="pipeline.ingest.grouped"):
        assert not ingest(store_path, raw_root).errors
    assert "failed" not in caplog.text
    with open_store(store_path, read_only=True) as s:
        assert s.con.execute("SELECT count(*) FROM observation").fetchone()[0] == 4
