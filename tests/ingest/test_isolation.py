"""One bad batch never stops the others, not even a fault of the code (issue 13, case 2)."""

from __future__ import annotations

import pytest

import pipeline.ingest.grouped as grouped
import pipeline.ingest.stage as stage
from pipeline.cli import main
from pipeline.errors import EXIT_INTERNAL
from pipeline.store import open_store
from pipeline.verify import verify
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch


def test_an_unexpected_exception_in_one_batch_refuses_only_that_batch(raw_root, store_path,
                                                                     capsys, monkeypatch):
    """Case 2: a fault of the code while loading one batch rolls that batch back and names it; the batches before and after it load; the command exits 3 (a fault remains) without a traceback."""
    for name in ("a", "b", "c"):
        write_batch(raw_root, name, SIMPLE_BATCH.format(source=f"rig-{name}"),
                    {"vp.csv": SIMPLE_CSV.replace("78.9", f"7{ord(name)}.9")})
    def bug_in_b(con, spec):
        if spec.file == "vp.csv" and con.execute(
                "SELECT count(*) FROM source WHERE source_id = 'rig-b'").fetchone()[0]:
            raise ZeroDivisionError("a bug in batch b")

    original_add, original_load = grouped._Group.add, stage.load_staged

    def faulty_add(self, p, tables):           # the batches loaded together: planning batch b
        if p.plan.batch.endswith("b"):
            raise ZeroDivisionError("a bug in batch b")
        return original_add(self, p, tables)

    def faulty_load(ing, file_id, rel, sha, spec, staged, rejects):  # a batch loaded alone
        bug_in_b(ing.con, spec)
        return original_load(ing, file_id, rel, sha, spec, staged, rejects)

    monkeypatch.setattr(grouped._Group, "add", faulty_add)
    monkeypatch.setattr(stage, "load_staged", faulty_load)
    code = main(["ingest", str(raw_root), "--store", str(store_path)])
    out, err = capsys.readouterr()
    assert code == EXIT_INTERNAL
    assert "2 batch(es) loaded (6 rows read" in out     # off a terminal: the one-line result
    assert ("b: internal error while ingesting this batch (ZeroDivisionError: a bug in batch b); "
            "the batch was left out, the others went on") in err
    assert "Traceback" not in out + err
    with open_store(store_path, read_only=True) as s:
        assert s.con.execute("SELECT DISTINCT batch FROM raw_file ORDER BY 1").fetchall() == \
            [("a",), ("c",)]
        assert s.con.execute("SELECT count(*) FROM source WHERE source_id = 'rig-b'"
                             ).fetchone()[0] == 0
    assert verify(store_path).ok


@pytest.mark.parametrize("argv", [["fit", "--outlier-z", "nan"],
                                  ["fit", "--outlier-z=-inf"],
                                  ["decide", "exclude-observations", "--source", "s", "--fluid",
                                   "argon", "--boundary", "liquid-vapour", "--T-min", "nan",
                                   "--why", "w", "--who", "x"]])
def test_non_finite_numbers_on_the_command_line_are_usage_errors(store_path, capsys, argv):
    """Case 4: NaN or infinity given to a numeric option is refused by the parser (exit 2) before anything runs."""
    with pytest.raises(SystemExit) as stop:
        main([*argv, "--store", str(store_path)])
    assert stop.value.code == 2
    assert "expected a finite number" in capsys.readouterr().err
