"""Ingest throughput vs DuckDB's own typed read_csv of the same file (a ratio, not a timing test).

Generates a batch of N observation rows (default 2,000,000; a few planted bad rows), then in
separate child processes (so peak memory is measured per phase):
  1. bare: DuckDB ``read_csv`` with pinned types into a table of a file-backed database;
  2. full: ``fluidledger`` ingest (parse, units, scale, validation, quarantine, load) into a
     file-backed store.
Prints both times, the ratio full/bare (target <= 2.0) and each phase's peak RSS.

    python benchmarks/ingest.py [--rows N]
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

FLUIDS = """[[fluid]]
id = "argon"
name = "argon"
molar_mass = { value = 39.948, unit = "g/mol" }
"""
BATCH = """[source]
id = "bench"
kind = "measurement"
citation = "synthetic benchmark data"

[[table]]
file = "big.csv"
fluid = "argon"
boundary = "liquid-vapour"
temperature = { column = "T", unit = "degC", scale = "IPTS-68" }
pressure = { column = "p", unit = "kPa" }
[table.uncertainty]
temperature = { value = 0.01, unit = "K" }
pressure = { column = "u_p", unit = "kPa", coverage = 2 }
"""


def make_batch(root: Path, rows: int) -> Path:
    rng = np.random.default_rng(1)
    T = rng.uniform(-189.0, -123.0, rows)                  # degC, argon liquid range
    p = 68.9 * np.exp(9.0 * (1 - 83.8 / (T + 273.15)))     # a rough vapour-pressure shape [kPa]
    p *= 1 + 1e-4 * rng.standard_normal(rows)               # measurement scatter
    u = p * 1e-3
    lines = np.char.add(np.char.add(np.char.mod("%.6f,", T), np.char.mod("%.7g,", p)),
                        np.char.mod("%.3g", u))
    lines[::100_000] = "-150.0,abc,0.1"                    # planted bad rows -> quarantine
    batch = root / "raw" / "bench"
    batch.mkdir(parents=True)
    (root / "raw" / "fluids.toml").write_text(FLUIDS)
    (batch / "batch.toml").write_text(BATCH)
    with open(batch / "big.csv", "w") as f:
        f.write("T,p,u_p\n")
        f.write("\n".join(lines.tolist()))
        f.write("\n")
    return batch / "big.csv"


def bare(csv: str, db: str, out) -> None:
    import duckdb

    t0 = time.perf_counter()
    con = duckdb.connect(db)
    con.execute("CREATE TABLE t AS SELECT * FROM read_csv(?, header=true, auto_detect=false, "
                "columns={'T':'DOUBLE','p':'DOUBLE','u_p':'DOUBLE'}, ignore_errors=true)", [csv])
    con.close()
    out.put((time.perf_counter() - t0, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss))


def full(raw: str, db: str, out) -> None:
    from pipeline.ingest.stage import run_ingest
    from pipeline.store import open_store

    t0 = time.perf_counter()
    with open_store(db) as s:
        result = run_ingest(s.con, [Path(raw)])
    assert not result.errors, result.errors
    out.put((time.perf_counter() - t0, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss,
             result.batches[0].rows))


def phase(target, *args):
    q = mp.get_context("spawn").Queue()
    p = mp.get_context("spawn").Process(target=target, args=(*args, q))
    p.start()
    res = q.get()
    p.join()
    return res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=2_000_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        csv = make_batch(root, args.rows)
        t_bare, rss_bare = phase(bare, str(csv), str(root / "bare.duckdb"))
        t_full, rss_full, rows = phase(full, str(root / "raw"), str(root / "store.duckdb"))
    print(f"rows: {args.rows:,} (read {rows[0]:,}, loaded {rows[1]:,}, quarantined {rows[2]:,})")
    print(f"bare typed read_csv into file-backed table: {t_bare:.2f} s, peak RSS {rss_bare / 1024:.0f} MiB")
    print(f"full ingest into file-backed store:         {t_full:.2f} s, peak RSS {rss_full / 1024:.0f} MiB")
    print(f"ratio full / bare: {t_full / t_bare:.2f}  (target <= 2.0)")
    print(f"throughput: {args.rows / t_full:,.0f} rows/s")


if __name__ == "__main__":
    main()
