"""Snapshot check inputs and results, so a change to the check code can prove it changes nothing.

The check results of three data sets are frozen here, with the inputs they were computed from:

- ``demo``: the demo store (``raw/``, after ingest and fit by the nightly job);
- ``realdata``: the real-data corpus store (``benchmarks/realdata.py --keep DIR``);
- ``synthetic``: the benchmark's synthetic fluids (``benchmarks/synthetic_fluids.py``, built in
  memory, so only their results are stored).

For a store, the inputs are the five tables :func:`pipeline.checks.data.load_fluid_data` reads
(fluids, observations, fixed points, stated constants, current fits), written as Parquet, so
the test does not depend on the ingest and fit stages (whose own changes would move the
numbers). The results of :func:`pipeline.checks.run_checks` on them (default thresholds, no
post-processing) are written as gzipped JSON lines, every field but the timing.

    python tests/checks/regression/snapshot_results.py [--demo STORE] [--realdata STORE] [--synthetic]

Run it only from code whose results are the reference (the commit before a change that must
not change them), and say so in the commit message.
"""

from __future__ import annotations

import argparse
import gzip
import importlib.util
import json
import sys
from pathlib import Path

import duckdb
import pandas as pd

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[2]
sys.path.insert(0, str(ROOT))

from pipeline.checks import run_checks  # noqa: E402
from pipeline.checks import loader as check_data  # noqa: E402

TABLES = {"fluids": (check_data._Q_FLUIDS, ""), "observations": (check_data._Q_OBS, "o"),
          "fixed_points": (check_data._Q_FIXED, "p"), "constants": (check_data._Q_CONST, "c"),
          "fits": (check_data._Q_FITS, "")}
#: synthetic fluids snapshotted (fluid 0 carries the planted kPa-as-Pa file)
SYNTHETIC_FLUIDS = 40
RESULT_FIELDS = ("check_id", "fluid_id", "subject", "status", "severity", "message", "measured",
                 "limit", "statistic", "evidence", "thresholds", "input_hash", "decision_id")


def synthetic_module():
    """``benchmarks/synthetic_fluids.py`` as a module (the benchmark's fluid generator)."""
    spec = importlib.util.spec_from_file_location("synthetic_fluids",
                                                  ROOT / "benchmarks" / "synthetic_fluids.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def synthetic_fluids():
    return synthetic_module().build(SYNTHETIC_FLUIDS)


def read_inputs(folder: Path) -> dict:
    """The FluidData of a snapshotted store, built as :func:`load_fluid_data` builds them."""
    frames = {name: pd.read_parquet(folder / f"{name}.parquet") for name in TABLES}
    return check_data.fluids_from_tables(frames["fluids"], frames["observations"],
                                         frames["fixed_points"], frames["constants"],
                                         check_data._fits(frames["fits"]))


def records(run) -> list[dict]:
    """The results of a run as JSON-safe dicts, in the engine's order, without timings."""
    return [{k: v for k, v in r.asdict().items() if k in RESULT_FIELDS} for r in run.results]


def read_expected(name: str) -> list[dict]:
    with gzip.open(HERE / f"expected-{name}.jsonl.gz", "rt", encoding="utf-8") as fh:
        return [json.loads(line) for line in fh]


def _write_expected(name: str, fluids) -> None:
    rows = records(run_checks(fluids))
    with gzip.GzipFile(HERE / f"expected-{name}.jsonl.gz", "wb", mtime=0) as fh:
        for row in rows:
            fh.write((json.dumps(row, sort_keys=True) + "\n").encode("utf-8"))
    print(f"{name}: {len(rows)} results")


def _snapshot_store(name: str, store: Path) -> None:
    folder = HERE / name
    folder.mkdir(exist_ok=True)
    con = duckdb.connect(str(store), read_only=True)
    try:
        for table, (sql, alias) in TABLES.items():
            check_data._query(con, sql, alias, None).to_parquet(folder / f"{table}.parquet",
                                                                  index=False)
    finally:
        con.close()
    _write_expected(name, read_inputs(folder))


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--demo", type=Path, help="the demo store after a nightly run")
    p.add_argument("--realdata", type=Path,
                   help="the real-data store (benchmarks/realdata.py --keep DIR: DIR/store.duckdb)")
    p.add_argument("--synthetic", action="store_true", help="the benchmark's synthetic fluids")
    args = p.parse_args(argv)
    if args.demo:
        _snapshot_store("demo", args.demo)
    if args.realdata:
        _snapshot_store("realdata", args.realdata)
    if args.synthetic:
        _write_expected("synthetic", synthetic_fluids())
    return 0


if __name__ == "__main__":
    sys.exit(main())
