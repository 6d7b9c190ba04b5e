"""Injection: text from batch folders can never change the SQL that runs.

Ids (source, fluid) are refused by the schema's slug pattern with a message naming the key;
text that the schema lets through -- CSV header names (ignored extra columns, or mapped ones
within the column-name pattern), citations, null values, folder names -- reaches SQL only as
parameters or quoted identifiers. After every attempt the store still holds every table, a
sentinel batch loaded beforehand is unchanged, and ``verify`` finds nothing.
"""

from __future__ import annotations

import shutil

import pytest

from pipeline.cli import main
from pipeline.store import open_store
from pipeline.verify import expected_schema, verify
from tests.conftest import FLUIDS_TOML, SIMPLE_BATCH, SIMPLE_CSV, write_batch

HOSTILE = [
    "'); DROP TABLE observation; --",
    "\"; DROP TABLE raw_file; --",
    "x' OR '1'='1",
    "a\"b",
    "p) FROM raw_file; --",
    "$path",
    "?",
    "\\'; DELETE FROM source; --",
]
ROW_TABLES = ("raw_file", "observation", "quarantine", "source", "fluid", "run")


def batch(source: str = "rig-hostile") -> str:
    return SIMPLE_BATCH.format(source=source)


SENTINEL_CSV = SIMPLE_CSV + "91.0,abc\n"


@pytest.fixture(scope="module")
def sentinel_store(tmp_path_factory):
    """A store holding one clean batch (with one quarantined row), built once and copied."""
    base = tmp_path_factory.mktemp("sentinel")
    root = base / "raw"
    root.mkdir()
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    write_batch(root, "sentinel", batch("sentinel-rig"), {"vp.csv": SENTINEL_CSV})
    store = base / "store.duckdb"
    assert main(["ingest", str(root), "--store", str(store), "-q"]) == 0
    with open_store(store, read_only=True) as s:
        before = s.con.execute(
            "SELECT row_number, T_K, value_si FROM observation_current "
            "WHERE file_path = 'sentinel/vp.csv' ORDER BY 1").fetchall()
    assert len(before) == 3
    return store, before


@pytest.fixture
def sentinel(raw_root, store_path, sentinel_store):
    """The sentinel batch in raw_root and the store; returns a check that both are intact."""
    template, before = sentinel_store
    write_batch(raw_root, "sentinel", batch("sentinel-rig"), {"vp.csv": SENTINEL_CSV})
    shutil.copyfile(template, store_path)

    def intact() -> None:
        with open_store(store_path, read_only=True) as s:
            tables = {r[0] for r in s.con.execute(
                "SELECT table_name FROM duckdb_tables() WHERE schema_name = 'main'").fetchall()}
            assert {t for t in expected_schema() if "." not in t} <= tables
            for table in ROW_TABLES:
                assert s.con.execute(f"SELECT count(*) FROM {table}").fetchone()[0] > 0, table
            assert s.con.execute(
                "SELECT row_number, T_K, value_si FROM observation_current "
                "WHERE file_path = 'sentinel/vp.csv' ORDER BY 1").fetchall() == before
        result = verify(store_path)
        assert result.ok, result.asstr()

    return intact


def ingest(raw_root, store_path, capsys) -> tuple[int, str, str]:
    code = main(["ingest", str(raw_root), "--store", str(store_path)])
    out, err = capsys.readouterr()
    assert "Traceback" not in out + err and "internal error" not in err, err
    return code, out, err


@pytest.mark.parametrize("hostile", HOSTILE[:5])
@pytest.mark.parametrize("key", ["source.id", "table[0].fluid"])
def test_hostile_ids_are_refused_by_the_slug_pattern(raw_root, store_path, capsys, sentinel,
                                                     hostile, key):
    """A source or fluid id with quotes or SQL is refused naming its key; the store is intact."""
    text = batch()
    if key == "source.id":
        text = text.replace('id = "rig-hostile"', f"id = {toml_string(hostile)}")
    else:
        text = text.replace('fluid = "argon"', f"fluid = {toml_string(hostile)}")
    write_batch(raw_root, "attack", text, {"vp.csv": SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert f"attack/batch.toml, key '{key}': does not match batch.schema.json" in err
    sentinel()


@pytest.mark.parametrize("hostile", HOSTILE[:3])
def test_hostile_fluid_ids_in_fluids_toml_are_refused(raw_root, store_path, capsys, sentinel,
                                                      hostile):
    """fluids.toml with a hostile fluid id is refused before anything is written."""
    (raw_root / "fluids.toml").write_text(
        FLUIDS_TOML.replace('id = "argon"', f"id = {toml_string(hostile)}"), encoding="utf-8")
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert "fluids.toml, key 'fluid[1].id': does not match fluids.schema.json" in err
    (raw_root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    sentinel()


@pytest.mark.parametrize("hostile", HOSTILE[:2] + HOSTILE[3:6])
def test_hostile_header_names_in_ignored_columns_load_safely(raw_root, store_path, capsys,
                                                              sentinel, hostile):
    """A CSV header full of SQL in an ignored extra column loads the data and nothing else."""
    manifest = batch().replace("[table.uncertainty]", 'extra_columns = "ignore"\n[table.uncertainty]')
    quoted = '"' + hostile.replace('"', '""') + '"'
    csv_text = f"T,p,{quoted}\n85.0,78.9,1\n87.3,101.3,2\n"
    write_batch(raw_root, "attack", manifest, {"vp.csv": csv_text})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    assert "ingest: 1 batch(es) loaded (2 rows read, 2 loaded, 0 quarantined)" in out
    sentinel()


@pytest.mark.parametrize("column", ["DROP TABLE observation", "p) FROM raw_file", "select",
                                    "p (kPa) / abs.-1", "num_pressure", "fault"])
def test_mapped_columns_within_the_pattern_load_safely(raw_root, store_path, capsys, sentinel,
                                                       column):
    """Mapped column names the schema allows -- SQL words, parentheses, internal-looking names --
    are quoted identifiers: the values load exactly."""
    manifest = batch().replace('column = "p"', f'column = "{column}"')
    write_batch(raw_root, "attack", manifest, {"vp.csv": SIMPLE_CSV.replace("T,p", f"T,{column}")})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    with open_store(store_path, read_only=True) as s:
        got = s.con.execute("SELECT row_number, value_si, value_column FROM observation_current "
                            "WHERE file_path = 'attack/vp.csv' ORDER BY 1").fetchall()
    assert [(r, round(v, 6), c) for r, v, c in got] == [
        (1, 78900.0, column), (2, 101300.0, column), (3, 133600.0, column)]
    sentinel()


@pytest.mark.parametrize("column", ["p'); DROP TABLE observation; --", 'p"', "p;x", "$p"])
def test_mapped_columns_outside_the_pattern_are_refused(raw_root, store_path, capsys, sentinel,
                                                        column):
    """A mapped column name with quotes or semicolons is refused by the schema naming its key."""
    manifest = batch().replace('column = "p"', f"column = {toml_string(column)}")
    write_batch(raw_root, "attack", manifest, {"vp.csv": SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert "attack/batch.toml, key 'table[0].pressure.column'" in err
    sentinel()


@pytest.mark.parametrize("name", ["row_number", "ORD"])
def test_header_names_reserved_by_the_reader_are_refused(raw_root, store_path, capsys, sentinel,
                                                         name):
    """A CSV column named like the reader's own row-number columns is refused, not misread."""
    manifest = batch().replace("[table.uncertainty]", 'extra_columns = "ignore"\n[table.uncertainty]')
    write_batch(raw_root, "attack", manifest, {"vp.csv": f"T,p,{name}\n85.0,78.9,7\n"})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2
    assert f"attack/vp.csv, row 0, column '{name}': column name(s) ['{name}'] are reserved" in err
    sentinel()


def test_hostile_texts_in_free_fields_are_stored_verbatim(raw_root, store_path, capsys, sentinel):
    """Citations, null values, comment characters and cells with SQL are data, stored as written."""
    citation = "Invented lab'); DROP TABLE source; -- report \"7\""
    null = '"); DROP TABLE observation; --'
    manifest = batch().replace('citation = "Test rig, invented campaign for the test suite"',
                               f"citation = {toml_string(citation)}").replace(
        "[table.uncertainty]", f"null_values = [{toml_string(null)}]\n"
                               "comment = \"'\"\n[table.uncertainty]")
    csv_text = ("T,p\n'; DROP TABLE raw_file; --\n85.0,78.9\n87.3,'); DROP TABLE observation; --\n"
                "90.0,\"1); DELETE FROM quarantine; --\"\n"
                '91.0,"""); DROP TABLE observation; --"\n')
    write_batch(raw_root, "attack", manifest, {"vp.csv": csv_text})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    assert "ingest: 1 batch(es) loaded (4 rows read, 1 loaded, 3 quarantined)" in out
    with open_store(store_path, read_only=True) as s:
        assert s.con.execute("SELECT citation FROM source WHERE source_id = 'rig-hostile'"
                             ).fetchone()[0] == citation
        q = s.con.execute("SELECT row_number, reason_code, raw_text FROM quarantine_current "
                          "WHERE file_path = 'attack/vp.csv' ORDER BY 1").fetchall()
    assert q == [(3, "bad-row-shape", "87.3,'); DROP TABLE observation; --"),
                 (4, "not-a-number", "90.0,1); DELETE FROM quarantine; --"),
                 (5, "missing-value", f"91.0,{null}")]
    sentinel()


def test_hostile_batch_folder_names_are_parameters(raw_root, store_path, capsys, sentinel):
    """A batch folder whose name holds quotes and SQL loads under that exact name."""
    folder = "lab'; DROP TABLE source; --"
    write_batch(raw_root, folder, batch(), {"vp.csv": SIMPLE_CSV})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 0, err
    with open_store(store_path, read_only=True) as s:
        paths = s.con.execute("SELECT path FROM raw_file_current WHERE batch = ? ORDER BY 1",
                              [folder]).fetchall()
    assert paths == [(f"{folder}/batch.toml",), (f"{folder}/vp.csv",)]
    sentinel()


def toml_string(text: str) -> str:
    """A TOML basic string holding ``text`` exactly."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'
