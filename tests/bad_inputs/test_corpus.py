"""The bad-input corpus: every case folder is ingested through the CLI and must end as expected.

Each ``tests/bad_inputs/<case>/`` holds a batch (``batch.toml`` and its files) and
``expected.toml``:

* a batch-level refusal: ``exit_code = 2``, ``message`` (a fragment of stderr naming the
  key/row/column), ``names_file`` (the file the message must name as ``<case>/<file>``) and
  optionally ``message_also`` (a second fragment); the store must hold nothing of the batch;
* a row-level outcome: ``exit_code = 0``, the batch totals ``rows_read``/``rows_loaded``/
  ``rows_quarantined``, every ``[[quarantine]]`` row exactly (``file``, ``row``, ``column`` --
  empty for a whole-row fault --, ``reason``) and optionally ``[[observation]]`` values in SI.

``[setup]`` asks for things git keeps badly: ``symlink = "<name>"`` creates that file in the
batch as a symlink to a file outside the batch folder holding ``outside``.
After every case the accounting invariant holds for every file and ``verify`` finds nothing.
"""

from __future__ import annotations

import math
import shutil
import tomllib
from pathlib import Path

import pytest

from pipeline.cli import main
from pipeline.store import open_store
from pipeline.verify import verify
from tests.conftest import FLUIDS_TOML

CORPUS = Path(__file__).resolve().parent
CASES = sorted(p.name for p in CORPUS.iterdir() if (p / "expected.toml").is_file())
ROW_TABLES = ("observation", "quarantine", "fixed_point", "stated_constant")


def load_expected(case: str) -> dict:
    return tomllib.loads((CORPUS / case / "expected.toml").read_text("utf-8"))


def stage_case(case: str, tmp_path: Path) -> Path:
    """Copy a case into ``<tmp>/raw/<case>/`` beside a fluids.toml; return the raw root."""
    raw = tmp_path / "raw"
    batch = raw / case
    shutil.copytree(CORPUS / case, batch, symlinks=True,
                    ignore=shutil.ignore_patterns("expected.toml", "__pycache__"))
    (raw / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    setup = load_expected(case).get("setup", {})
    if "symlink" in setup:
        outside = tmp_path / "outside" / setup["symlink"]
        outside.parent.mkdir()
        outside.write_text(setup["outside"], encoding="utf-8")
        (batch / setup["symlink"]).symlink_to(outside)
    return raw


@pytest.fixture(scope="session")
def empty_store(tmp_path_factory) -> Path:
    """A freshly migrated store, copied for each case (migrating takes longer than a case)."""
    path = tmp_path_factory.mktemp("template") / "empty.duckdb"
    open_store(path).close()
    return path


def ingest_case(case: str, tmp_path: Path, capsys, empty_store: Path) -> tuple[int, str, str, Path]:
    raw = stage_case(case, tmp_path)
    store = tmp_path / "store.duckdb"
    shutil.copyfile(empty_store, store)
    code = main(["ingest", str(raw), "--store", str(store)])
    out, err = capsys.readouterr()
    return code, out, err, store


def test_corpus_covers_both_outcomes():
    """The corpus holds at least 40 cases, with batch-level and row-level outcomes both present."""
    codes = [load_expected(c)["exit_code"] for c in CASES]
    assert len(CASES) >= 40
    assert codes.count(2) >= 15 and codes.count(0) >= 15
    assert set(codes) == {0, 2}


@pytest.mark.parametrize("case", CASES)
def test_case_ends_as_expected(case, tmp_path, capsys, empty_store):
    """A corpus case exits as expected, names file/row/column, and loses or duplicates no row."""
    expected = load_expected(case)
    code, out, err, store = ingest_case(case, tmp_path, capsys, empty_store)
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
    result = verify(store)
    assert result.ok, result.asstr()


def assert_refused(case, expected, err, files, con) -> None:
    errors = [line for line in err.splitlines() if line.startswith("fluidledger ingest: error:")]
    assert len(errors) == 1, err
    assert expected["message"] in errors[0], errors[0]
    assert f"{case}/{expected['names_file']}" in errors[0], errors[0]
    if "message_also" in expected:
        assert expected["message_also"] in errors[0], errors[0]
    assert files == []
    assert con.execute("SELECT count(*) FROM source WHERE batch = ?", [case]).fetchone()[0] == 0
    for table in ROW_TABLES:
        assert con.execute(f"SELECT count(*) FROM {table}").fetchone()[0] == 0, table


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
