"""What an ingest leaves in the store, canonically, and the raw folders it is compared on.

The expected snapshots in ``tests/ingest/expected_store/`` were written by the ingest of main
at commit 4012623 (before issue 14's ingest changes) with
``python -m tests.ingest.store_snapshot``; ``test_ingest_equivalence.py`` holds today's
ingest to them. A snapshot is every row of the data tables (ids, row numbers, SI values and
uncertainties bit for bit, original cell texts, quarantine reasons and messages) with the
run ids and clock times left out, since those differ on every run.
"""

from __future__ import annotations

import gzip
import json
import shutil
import tomllib
from pathlib import Path

from pipeline.ingest.stage import run_ingest
from pipeline.ingest.tableload import original_text
from pipeline.store import open_store

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
EXPECTED = HERE / "expected_store"
TABLES = ("fluid", "source", "raw_file", "raw_column", "observation", "quarantine",
          "fixed_point", "stated_constant")
#: columns that hold a run id or a clock time: different on every run by design
VOLATILE = ("updated_run_id", "ingest_run_id", "superseded_run_id", "ingested_at", "run_id")


#: how the store keeps a column the snapshots hold (since migration 009 an observation keeps
#: the number read from a cell, and the cell's text only where it is not the number's
#: canonical rendering): the snapshot holds the cell's text as written, as before
RECOVERED = {("observation", "T_original"): original_text("T_original", "T_parsed"),
             ("observation", "value_original"): original_text("value_original", "value_parsed")}
#: columns the snapshots do not hold, since the text recovered above is compared instead
DERIVED = {("observation", "T_parsed"), ("observation", "value_parsed")}


def snapshot(con) -> dict[str, list[list]]:
    """Every row of the data tables in primary-key order, as JSON-able lists."""
    out = {}
    for table in TABLES:
        cols = [r[0] for r in con.execute(f"DESCRIBE {table}").fetchall()
                if r[0] not in VOLATILE and (table, r[0]) not in DERIVED]
        select = ", ".join(f"{RECOVERED.get((table, c), c)} AS {c}" for c in cols)
        rows = con.execute(f"SELECT {select} FROM {table} ORDER BY ALL").fetchall()
        out[table] = [cols] + [[v if not isinstance(v, (list, tuple)) else list(v) for v in r]
                               for r in rows]
    return out


def bad_inputs_raw(dest: Path) -> Path:
    """The cases of the bad-input corpus that need no setup, as the batches of one raw folder
    (beside the test suite's fluids.toml): one ingest loads the good rows of every case,
    quarantines the bad ones and refuses the bad batches."""
    from tests.conftest import FLUIDS_TOML

    corpus = ROOT / "tests" / "bad_inputs"
    raw = dest / "raw"
    raw.mkdir(parents=True)
    (raw / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    for case in sorted(p for p in corpus.iterdir() if (p / "expected.toml").is_file()):
        if tomllib.loads((case / "expected.toml").read_text("utf-8")).get("setup"):
            continue
        shutil.copytree(case, raw / case.name,
                        ignore=shutil.ignore_patterns("expected.toml", "__pycache__"))
    return raw


def raw_folders(tmp: Path) -> dict[str, Path]:
    """The raw folders compared: the demo, the real-data corpus and the bad-input corpus."""
    return {"demo": ROOT / "raw", "realdata": ROOT / "tests" / "realdata" / "corpus",
            "bad_inputs": bad_inputs_raw(tmp)}


def ingest_snapshot(raw: Path, store: Path) -> dict:
    """Ingest ``raw`` into a new store at ``store``; its snapshot and the per-batch outcome."""
    with open_store(store) as s:
        result = run_ingest(s.con, [raw])
        snap = snapshot(s.con)
    snap["batches"] = [[b.batch, b.status, b.error, list(b.rows)] for b in result.batches]
    return snap


def main() -> None:
    import tempfile

    EXPECTED.mkdir(exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        for name, raw in raw_folders(Path(tmp)).items():
            snap = ingest_snapshot(raw, Path(tmp) / f"{name}.duckdb")
            with gzip.open(EXPECTED / f"{name}.json.gz", "wt", encoding="utf-8") as f:
                json.dump(snap, f, sort_keys=True, default=str)
            print(name, {t: len(snap[t]) - 1 for t in TABLES})


if __name__ == "__main__":
    main()
