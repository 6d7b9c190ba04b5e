"""The bad-input corpus: every case folder is ingested through the CLI and must end as expected.

Each ``tests/bad_inputs/<case>/`` holds a batch (``batch.toml`` and its files) and
``expected.toml``:

* a batch-level refusal: ``exit_code = 2``, ``message`` (a fragment of stderr naming the
  key/row/column), ``names_file`` (the file the message must name as ``<case>/<file>``; empty:
  the message names the batch folder) and optionally ``message_also`` (a second fragment);
* a row-level outcome: ``exit_code = 0``, the batch totals ``rows_read``/``rows_loaded``/
  ``rows_quarantined``, every ``[[quarantine]]`` row exactly (``file``, ``row``, ``column`` --
  empty for a whole-row fault --, ``reason``) and optionally ``[[observation]]`` values in SI.

``[setup]`` asks for things git keeps badly:

* ``symlink = "<name>"`` creates that file in the batch as a symlink to a file outside the
  raw folder holding ``outside``;
* ``directory = "<name>"`` / ``fifo = "<name>"`` create a directory / a named pipe there;
* ``link_inside = "<name>"`` with ``target = "<file>"`` links a file to another of the batch;
* ``link_folder = "outside"`` puts the batch outside the raw folder and links it in;
* ``[[setup.write]]`` writes ``file`` as ``head + repeat * times + tail`` (large files).

Every case is ingested from a raw folder that also holds a *resident* batch (already in the
store) and a *sibling* batch (new): the sibling must load whatever the case does (one bad
batch never stops the others), and the store must be unchanged by a refused case -- every
data table equal, row for row, to what it held before, apart from the sibling's rows -- and
hold nothing of it. After every case the accounting invariant holds for every file and
``verify`` finds nothing.
"""

from __future__ import annotations

import math
import os
import shutil
import tomllib
from pathlib import Path

import pytest

from pipeline.cli import main
from pipeline.store import open_store
from pipeline.verify import verify
from tests.storekit import FLUIDS_TOML, batch_toml, source, vp_table

CORPUS = Path(__file__).resolve().parent
CASES = sorted(p.name for p in CORPUS.iterdir() if (p / "expected.toml").is_file())
ROW_TABLES = ("observation", "quarantine", "fixed_point", "stated_constant")
DATA_TABLES = ("fluid", "source", "raw_file", "raw_column", *ROW_TABLES)
RESIDENT, SIBLING = "aa-corpus-resident", "zz-corpus-sibling"
NEIGHBOURS = {RESIDENT: "T,p\n100.0,323.0\n110.0,667.0\n",     # contents no case uses
              SIBLING: "T,p\n120.0,1213.0\n130.0,2025.0\n"}


def neighbour_batch(name: str) -> str:
    """A small argon batch loaded beside every case (no uncertainty stated)."""
    return batch_toml(source(name, "Invented rig beside the bad-input corpus"),
                      [vp_table(p_unit="kPa", u_p_rel=None)])


def load_expected(case: str) -> dict:
    return tomllib.loads((CORPUS / case / "expected.toml").read_text("utf-8"))


def write_neighbour(raw: Path, name: str) -> None:
    folder = raw / name
    folder.mkdir(parents=True)
    (folder / "batch.toml").write_text(neighbour_batch(name), encoding="utf-8")
    (folder / "vp.csv").write_text(NEIGHBOURS[name], encoding="utf-8")


def stage_case(case: str, tmp_path: Path) -> Path:
    """Copy a case into ``<tmp>/raw/<case>/`` beside a fluids.toml, the resident and the
    sibling batch; apply its ``[setup]``; return the raw root."""
    raw = tmp_path / "raw"
    batch = raw / case
    setup = load_expected(case).get("setup", {})
    ignore = shutil.ignore_patterns("expected.toml", "__pycache__")
    if setup.get("link_folder") == "outside":
        real = tmp_path / "elsewhere" / case
        shutil.copytree(CORPUS / case, real, symlinks=True, ignore=ignore)
        raw.mkdir()
        batch.symlink_to(real, target_is_directory=True)
    else:
        shutil.copytree(CORPUS / case, batch, symlinks=True, ignore=ignore)
    (raw / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    for name in NEIGHBOURS:
        write_neighbour(raw, name)
    if "symlink" in setup:
        outside = tmp_path / "outside" / setup["symlink"]
        outside.parent.mkdir()
        outside.write_text(setup["outside"], encoding="utf-8")
        (batch / setup["symlink"]).symlink_to(outside)
    if "directory" in setup:
        (batch / setup["directory"]).mkdir()
    if "fifo" in setup:
        if not hasattr(os, "mkfifo"):
            pytest.skip("named pipes need POSIX")
        os.mkfifo(batch / setup["fifo"])
    if "link_inside" in setup:
        (batch / setup["link_inside"]).symlink_to(setup["target"])
    for item in setup.get("write", []):
        (batch / item["file"]).write_text(item["head"] + item["repeat"] * item["times"]
                                          + item["tail"], encoding="utf-8")
    return raw


@pytest.fixture(scope="session")
def resident_store(tmp_path_factory) -> Path:
    """A store holding the resident batch, copied for each case (it is in every raw folder)."""
    root = tmp_path_factory.mktemp("template")
    raw = root / "raw"
    raw.mkdir()
    (raw / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    write_neighbour(raw, RESIDENT)
    path = root / "resident.duckdb"
    assert main(["ingest", str(raw), "--store", str(path), "-q"]) == 0
    return path


def snapshot(con, without: tuple[str, ...] = ()) -> dict[str, list[str]]:
    """Every row of the data tables (the run log aside), leaving out the batches ``without``."""
    out = {}
    files = "SELECT file_id FROM raw_file WHERE list_contains($batches, batch)"
    for table in DATA_TABLES:
        cols = [r[0] for r in con.execute(f"DESCRIBE {table}").fetchall()
                if r[0] != "updated_run_id"]          # fluids are upserted by every run
        where = ("true" if table == "fluid" else "NOT list_contains($batches, batch)"
                 if table in ("source", "raw_file") else f"file_id NOT IN ({files})")
        rows = con.execute(f"SELECT {', '.join(cols)} FROM {table} WHERE {where}",
                           {"batches": list(without)} if "$batches" in where else {}).fetchall()
        out[table] = sorted(map(repr, rows))
    return out


def ingest_case(case: str, tmp_path: Path, capsys, template: Path
                ) -> tuple[int, str, str, Path, dict]:
    raw = stage_case(case, tmp_path)
    store = tmp_path / "store.duckdb"
    shutil.copyfile(template, store)
    with open_store(store, read_only=True) as s:
        before = snapshot(s.con)
    code = main(["ingest", str(raw), "--store", str(store)])
    out, err = capsys.readouterr()
    return code, out, err, store, before


def test_corpus_covers_both_outcomes():
    """The corpus holds at least 150 cases, with batch-level and row-level outcomes both present, each with its expected exit code and message."""
    expected = [load_expected(c) for c in CASES]
    codes = [e["exit_code"] for e in expected]
    assert len(CASES) >= 150
    assert codes.count(2) >= 60 and codes.count(0) >= 40
    assert set(codes) == {0, 2}
    assert all(e.get("description") for e in expected)
    assert all(e["message"] for e in expected if e["exit_code"] == 2)


@pytest.mark.parametrize("case", CASES)
def test_case_ends_as_expected(case, tmp_path, capsys, resident_store):
    """A corpus case exits as expected, names file/row/column, loses or duplicates no row, leaves the store as it was when refused, and never stops the sibling batch."""
    expected = load_expected(case)
    code, out, err, store, before = ingest_case(case, tmp_path, capsys, resident_store)
    assert "Traceback" not in out + err and "internal error" not in err, err
    assert code == expected["exit_code"], f"stdout:\n{out}\nstderr:\n{err}"
    with open_store(store, read_only=True) as s:
        con = s.con
        files = con.execute("SELECT path, role, rows_read, rows_loaded, rows_quarantined "
                            "FROM raw_file WHERE batch = ?", [case]).fetchall()
        for path, _, read, loaded, quarantined in files:
            assert read == loaded + quarantined, path
        if code == 2:
            assert_refused(case, expected, err, files, con)
        else:
            assert_rows(case, expected, err, files, con)
        assert snapshot(con, (SIBLING, case)) == before, "the store changed beyond the case"
        if code == 2:
            assert snapshot(con, (SIBLING,)) == before, "a refused case changed the store"
        assert con.execute("SELECT sum(rows_loaded) FROM raw_file WHERE batch = ? AND "
                           "role = 'table'", [SIBLING]).fetchone()[0] == 2, "sibling not loaded"
    result = verify(store)
    assert result.ok, result.asstr()


def assert_refused(case, expected, err, files, con) -> None:
    errors = [line for line in err.splitlines() if line.startswith("fluidledger ingest: error:")]
    assert len(errors) == 1, err
    assert expected["message"] in errors[0], errors[0]
    names = expected["names_file"]
    assert (f"{case}/{names}" if names else f" {case}: ") in errors[0], errors[0]
    if "message_also" in expected:
        assert expected["message_also"] in errors[0], errors[0]
    assert files == []
    assert con.execute("SELECT count(*) FROM source WHERE batch = ?", [case]).fetchone()[0] == 0


def assert_rows(case, expected, err, files, con) -> None:
    assert "error" not in err, err
    totals = tuple(sum(f[i] for f in files) for i in (2, 3, 4))
    assert totals == (expected["rows_read"], expected["rows_loaded"],
                      expected["rows_quarantined"])
    got = con.execute(
        "SELECT f.path, q.row_number, coalesce(q.column_name, ''), q.reason_code, q.message "
        "FROM quarantine q JOIN raw_file f USING (file_id) WHERE f.batch = ? ORDER BY ALL",
        [case]).fetchall()
    want = sorted((f"{case}/{e['file']}", e["row"], e["column"], e["reason"])
                  for e in expected.get("quarantine", []))
    assert sorted(g[:4] for g in got) == want
    for path, row, column, _, message in got:
        assert message.startswith(f"{path}, "), message
        assert (f"entry {row}" if path.endswith("batch.toml") else f"row {row}") in message
        if column:
            assert (f"key '{column}'" if path.endswith("batch.toml")
                    else f"column '{column}'") in message, message
    for e in expected.get("observation", []):
        rows = con.execute(
            "SELECT o.T_K, o.value_si FROM observation o JOIN raw_file f USING (file_id) "
            "WHERE f.path = ? AND o.row_number = ? AND o.quantity = ?",
            [f"{case}/{e['file']}", e["row"], e["quantity"]]).fetchall()
        assert len(rows) == 1, e
        T, value = rows[0]
        assert math.isclose(T, e["T_K"], rel_tol=1e-9), (T, e)
        assert math.isclose(value, e["value_si"], rel_tol=1e-9), (value, e)
