"""Readers of the published file: never half a release, never blocked; read-only queries."""

from __future__ import annotations

import json
import subprocess
import sys
import time

import pytest

from pipeline.cli import main

READER = r"""
import json, os, sys, time
import duckdb
path, stop = sys.argv[1], sys.argv[2]
seen, bad, errors, reads = [], [], [], 0
while True:
    try:
        con = duckdb.connect(path, read_only=True)
        rid, n, expected, ids = con.execute(
            "SELECT (SELECT release_id FROM curated_release), "
            "(SELECT count(*) FROM curated_constants), "
            "(SELECT n_constants FROM curated_release), "
            "(SELECT count(DISTINCT release_id) FROM release_constant)").fetchone()
        con.close()
        reads += 1
        if n != expected or ids != 1:
            bad.append([rid, n, expected, ids])
        if not seen or seen[-1] != rid:
            seen.append(rid)
        if reads == 1:
            print("ready", flush=True)
    except Exception as err:
        errors.append(f"{type(err).__name__}: {err}")
        if len(errors) > 50:
            break
    if os.path.exists(stop):
        break
print(json.dumps({"reads": reads, "seen": seen, "bad": bad, "errors": errors[:5]}), flush=True)
"""

SNAPSHOT = r"""
import sys
import duckdb
con = duckdb.connect(sys.argv[1], read_only=True)
print(con.execute("SELECT release_id FROM curated_release").fetchone()[0], flush=True)
sys.stdin.readline()
print(con.execute("SELECT release_id, (SELECT count(*) FROM curated_constants) "
                  "FROM curated_release").fetchone(), flush=True)
"""


def _publish(store, out, name) -> None:
    assert main(["publish", "--store", str(store), "--out", str(out), "--allow-failures",
                 "--release", name, "-q"]) == 0


def test_concurrent_readers_see_whole_releases(demo_store, tmp_path):
    """Three reader processes loop over the published file while two publishes swap new
    releases in: no read fails, waits on a lock, or mixes releases."""
    out, stop = tmp_path / "out", tmp_path / "stop"
    _publish(demo_store, out, "one")
    readers = [subprocess.Popen([sys.executable, "-I", "-c", READER, str(out / "published.duckdb"),
                                 str(stop)], stdout=subprocess.PIPE, text=True, cwd=tmp_path)
               for _ in range(3)]
    try:
        for r in readers:
            assert r.stdout.readline().strip() == "ready"
        _publish(demo_store, out, "two")
        _publish(demo_store, out, "three")
        time.sleep(0.3)
    finally:
        stop.touch()
    results = [json.loads(r.communicate(timeout=60)[0].strip().splitlines()[-1]) for r in readers]
    for res in results:
        assert res["errors"] == [] and res["bad"] == []
        assert res["seen"][0] == "one" and res["seen"][-1] == "three"
        assert res["seen"] == sorted(set(res["seen"]), key=["one", "two", "three"].index)
        assert res["reads"] > 10


def test_an_open_reader_keeps_its_snapshot(demo_store, tmp_path):
    """A reader that opened the file before a publish keeps reading its release; a new reader
    sees the new one."""
    out = tmp_path / "out"
    _publish(demo_store, out, "old")
    reader = subprocess.Popen([sys.executable, "-I", "-c", SNAPSHOT, str(out / "published.duckdb")],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert reader.stdout.readline().strip() == "old"
        _publish(demo_store, out, "new")
        reader.stdin.write("\n")
        reader.stdin.flush()
        assert reader.stdout.readline().startswith("('old', ")
    finally:
        reader.communicate(timeout=30)
    fresh = subprocess.run([sys.executable, "-I", "-c", SNAPSHOT, str(out / "published.duckdb")],
                           input="\n", capture_output=True, text=True, timeout=60)
    assert fresh.stdout.splitlines()[0] == "new"


def test_query_prints_csv_from_the_published_file(published_demo, capsys):
    """fluidledger query --published --csv prints the result of a read-only SELECT."""
    assert main(["query", "SELECT fluid_id, value_si FROM curated_constants WHERE property = 'Tc'"
                 " ORDER BY fluid_id", "--published-file", str(published_demo["file"]), "--csv"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == "fluid_id,value_si"
    assert "water,647.096" in lines and len(lines) == 5


def test_query_published_switch_before_the_sql_reads_the_sql(published_demo, capsys):
    """--published is a switch: 'query --published "SQL"' runs the SQL on the published file
    beside the store (one row per fluid: the fluids of the curated constants)."""
    store = published_demo["out"] / "store.duckdb"   # published.duckdb lies beside it
    sql = ("SELECT fluid_id, fl_vapour_pressure(fluid_id, 120.0) AS p_Pa FROM "
           "(SELECT DISTINCT fluid_id FROM curated_constants) ORDER BY fluid_id")
    assert main(["query", "--published", sql, "--store", str(store), "--csv"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0] == "fluid_id,p_Pa" and len(lines) == 5
    argon = next(line for line in lines if line.startswith("argon,"))
    # argon at 120 K: about 1.21 MPa (Tegeler, Span & Wagner 1999 ancillary, from memory)
    assert 1.1e6 < float(argon.split(",")[1]) < 1.3e6


@pytest.mark.parametrize("sql", ["DROP TABLE release", "INSERT INTO release_publication "
                                 "SELECT * FROM release_publication",
                                 "COPY release TO 'x.csv'", "ATTACH 'other.duckdb'",
                                 "SELECT 1; DELETE FROM release"])
def test_query_refuses_statements_that_write(published_demo, sql, capsys):
    """Writes, file exports and attaching other databases are refused with exit code 2."""
    assert main(["query", sql, "--store", str(published_demo["store"])]) == 2
    assert "only read statements are allowed" in capsys.readouterr().err


def test_query_cannot_read_files_outside_the_database(published_demo, tmp_path, capsys):
    """Table functions that read other files are disabled in query connections."""
    secret = tmp_path / "secret.csv"
    secret.write_text("a\n1\n")
    assert main(["query", f"SELECT * FROM read_csv('{secret}')", "--published-file",
                 str(published_demo["file"])]) == 2
    assert "query failed" in capsys.readouterr().err
