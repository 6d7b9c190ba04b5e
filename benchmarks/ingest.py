"""Ingest throughput against DuckDB's bare typed read_csv, and the cost per small file (ratios).

Prints each measurement against its target of issue 14 (a benchmark, not a timing test; no
result depends on speed):

1. **one big batch** of N observation rows (default 2,000,000; a few planted bad rows that go
   to quarantine): ``run_ingest`` into a new file-backed store, against DuckDB's bare typed
   ``read_csv`` of the same file into a table of a new file-backed database.
   Targets: time <= 2.5x the bare load's, peak RSS <= 2x the bare load's.
2. **many small batches**: B batches (default 1,000) of 4 table files each (20 rows per file,
   the batch.toml not counted as a file), ingested by one ``run_ingest`` into a new store.
   Target: <= 5 ms per table file. The bare typed ``read_csv`` of the same 4,000 files (one
   statement per file into one table) is printed beside it for scale. With ``--not-plain``
   each file has a fourth, unmapped column of quoted notes holding the delimiter
   (``"run 3, rig B"``), so no file is plain (:mod:`pipeline.ingest.plaincsv`) and each is
   staged by DuckDB's reader: the cost of the files the Python split leaves to DuckDB.

Every measurement runs in its own fresh process (``--child``), so the peak RSS printed is that
process's own high-water mark (``VmHWM`` of /proc/self/status, which starts afresh at exec;
``ru_maxrss`` would carry the parent's). The bare load and the ingest alternate within each
repeat (``--repeat``, default 3), so the machine's load weighs on both alike; times are shown
as min / median / max and the ratios are of the medians. Each side's CPU time (all its
threads, user + system, over the same window as its wall time) is printed beside: on a
machine loaded by other work it moves far less than the wall time. The machine's load
average is printed before and after.

With ``--before DIR`` the ingest of the checkout at DIR (for example a worktree of the code
before a change) is measured too, in the same repeats, and its ratios printed beside.

    python benchmarks/ingest.py [--rows 2000000] [--batches 1000] [--repeat 3] [--skip-big]
                                [--skip-small] [--not-plain] [--before DIR]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
# --before DIR: the child measures the ingest of another checkout (e.g. a worktree of main)
sys.path.insert(0, os.environ.get("FL_INGEST_CODE") or str(HERE.parent))
sys.path.append(str(HERE.parent))     # the store kit of this checkout's tests

from tests.storekit import batch_toml, source, vp_table  # noqa: E402

TARGET_BIG_TIME = 2.5
TARGET_BIG_RSS = 2.0
TARGET_SMALL_MS = 5.0
FILES_PER_BATCH = 4
ROWS_PER_FILE = 20

FLUIDS = """[[fluid]]
id = "argon"
name = "argon"
molar_mass = { value = 39.948, unit = "g/mol" }
"""
#: u(p) read from a column of expanded (k = 2) uncertainties, u(T) stated
COLUMN_U = {"temperature": {"value": 0.01, "unit": "K"},
            "pressure": {"column": "u_p", "unit": "kPa", "coverage": 2}}
BIG_BATCH = batch_toml(
    source("bench", "synthetic benchmark data"),
    [vp_table(file="big.csv", temperature={"column": "T", "unit": "degC", "scale": "IPTS-68"},
              uncertainty=COLUMN_U)], format_version=None)


def small_batch(i: int, notes: bool = False) -> str:
    """batch.toml of small campaign ``i``: FILES_PER_BATCH tables of argon vapour pressures
    (``notes``: the files' note column is left unmapped)."""
    extra = {"extra_columns": "ignore"} if notes else {}
    return batch_toml(source(f"rig-{i:04d}", f"synthetic benchmark campaign {i}"),
                      [vp_table(file=f"run-{j}.csv", uncertainty=COLUMN_U, **extra)
                       for j in range(FILES_PER_BATCH)], format_version=None)


COLUMNS = "{'T': 'DOUBLE', 'p': 'DOUBLE', 'u_p': 'DOUBLE'}"


def vapour_pressure_kpa(T_K):
    """A rough argon vapour-pressure shape [kPa] (benchmark data, not a property)."""
    import numpy as np

    return 68.9 * np.exp(9.0 * (1 - 83.8 / T_K))


def make_big(root: Path, rows: int) -> Path:
    import numpy as np

    rng = np.random.default_rng(1)
    T = rng.uniform(-189.0, -123.0, rows)                  # degC, argon liquid range
    p = vapour_pressure_kpa(T + 273.15) * (1 + 1e-4 * rng.standard_normal(rows))
    u = p * 1e-3
    lines = np.char.add(np.char.add(np.char.mod("%.6f,", T), np.char.mod("%.7g,", p)),
                        np.char.mod("%.3g", u))
    lines[::100_000] = "-150.0,abc,0.1"                    # planted bad rows -> quarantine
    raw = root / "big" / "raw"
    batch = raw / "bench"
    batch.mkdir(parents=True)
    (raw / "fluids.toml").write_text(FLUIDS)
    (batch / "batch.toml").write_text(BIG_BATCH)
    with open(batch / "big.csv", "w") as f:
        f.write("T,p,u_p\n")
        f.write("\n".join(lines.tolist()))
        f.write("\n")
    return raw


def make_small(root: Path, batches: int, notes: bool = False) -> Path:
    import numpy as np

    header, note = ("T,p,u_p,note\n", ',"run {}, rig B"') if notes else ("T,p,u_p\n", "")

    rng = np.random.default_rng(2)
    raw = root / "small" / "raw"
    raw.mkdir(parents=True)
    (raw / "fluids.toml").write_text(FLUIDS)
    for i in range(batches):
        batch = raw / f"campaign-{i:04d}"
        batch.mkdir()
        for j in range(FILES_PER_BATCH):
            T = np.sort(rng.uniform(84.0, 150.0, ROWS_PER_FILE))
            p = vapour_pressure_kpa(T) * (1 + 1e-4 * rng.standard_normal(ROWS_PER_FILE))
            text = header + "".join(f"{a:.4f},{b:.6g},{b * 2e-3:.3g}{note.format(n)}\n"
                                    for n, (a, b) in enumerate(zip(T, p)))
            (batch / f"run-{j}.csv").write_text(text)
        (batch / "batch.toml").write_text(small_batch(i, notes))
    return raw


# --- the measured sides, each in its own process -------------------------------------------

def peak_mib() -> float:
    """This process's own peak resident set since exec [MiB] (VmHWM)."""
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    raise RuntimeError("no VmHWM in /proc/self/status")


def cpu_seconds() -> float:
    """CPU time of this process so far, every thread (DuckDB's too), user + system [s]."""
    import resource

    use = resource.getrusage(resource.RUSAGE_SELF)
    return use.ru_utime + use.ru_stime


def child_bare(raw: Path, db: Path) -> dict:
    """DuckDB's typed read_csv of every table file of ``raw`` into one table, one statement
    per file (the big batch has one file)."""
    import duckdb

    files = sorted(str(p) for p in raw.rglob("*.csv"))
    notes = open(files[0]).readline().strip().endswith(",note")     # --not-plain files
    columns = COLUMNS[:-1] + ", 'note': 'VARCHAR'}" if notes else COLUMNS
    t0, c0 = time.perf_counter(), cpu_seconds()
    con = duckdb.connect(str(db))
    con.execute("CREATE TABLE t (T DOUBLE, p DOUBLE, u_p DOUBLE" + (", note VARCHAR)" if notes
                                                                     else ")"))
    for f in files:
        con.execute(f"INSERT INTO t SELECT * FROM read_csv(?, header=true, auto_detect=false, "
                    f"columns={columns}, ignore_errors=true)", [f])
    con.close()
    return {"seconds": time.perf_counter() - t0, "cpu": cpu_seconds() - c0, "files": len(files)}


def child_ingest(raw: Path, db: Path) -> dict:
    from pipeline.ingest.stage import run_ingest
    from pipeline.store import open_store

    t0, c0 = time.perf_counter(), cpu_seconds()
    with open_store(db) as s:
        result = run_ingest(s.con, [raw])
    seconds, cpu = time.perf_counter() - t0, cpu_seconds() - c0
    if result.errors:
        raise SystemExit(f"ingest refused batches: {[b.error for b in result.errors][:3]}")
    rows = [sum(b.rows[k] for b in result.batches) for k in range(3)]
    files = sum(1 for b in result.batches for f in b.files if not f.path.endswith("batch.toml"))
    return {"seconds": seconds, "cpu": cpu, "rows": rows, "files": files}


def run_child(side: str, raw: Path, db: Path, code: str | None = None) -> dict:
    if db.exists():
        db.unlink()
    env = dict(os.environ, FL_INGEST_CODE=code) if code else None
    out = subprocess.run([sys.executable, __file__, "--child", side, str(raw), str(db)],
                         check=True, capture_output=True, text=True, env=env)
    db.unlink(missing_ok=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


# --- the comparison ------------------------------------------------------------------------

def spread(values: list[float], fmt: str) -> str:
    return " / ".join(format(v, fmt) for v in (min(values), statistics.median(values),
                                                max(values)))


def load() -> str:
    return "load average " + " ".join(f"{x:.2f}" for x in os.getloadavg())


def compare(name: str, raw: Path, tmp: Path, repeat: int, before: str | None
            ) -> tuple[list[dict], list[dict], list[dict]]:
    bare, full, old = [], [], []
    for r in range(repeat):
        bare.append(run_child("bare", raw, tmp / f"{name}-bare.duckdb"))
        full.append(run_child("ingest", raw, tmp / f"{name}-store.duckdb"))
        line = (f"  {name} repeat {r + 1}: bare {bare[-1]['seconds']:.3f} s, "
                f"ingest {full[-1]['seconds']:.3f} s")
        if before:
            old.append(run_child("ingest", raw, tmp / f"{name}-old.duckdb", before))
            line += f", ingest before {old[-1]['seconds']:.3f} s"
        print(f"{line} ({load()})", flush=True)
    return bare, full, old


def report_before(full: list[dict], old: list[dict], bare: list[dict], per: float = 1.0,
                  unit: str = "s") -> None:
    if not old:
        return
    to = statistics.median([o["seconds"] * per for o in old])
    tb = statistics.median([b["seconds"] * per for b in bare])
    tf = statistics.median([f["seconds"] * per for f in full])
    print(f"  ingest before (--before):              "
          f"{spread([o['seconds'] * per for o in old], '.2f')} {unit}, peak RSS "
          f"{spread([o['peak_mib'] for o in old], '.0f')} MiB; ratio to bare {to / tb:.2f}, "
          f"speed-up now / before {to / tf:.2f}x")
    co, cf = (statistics.median([r.get("cpu", 0.0) for r in side]) for side in (old, full))
    if co and cf:
        print(f"  CPU time before / now: {co:.2f} / {cf:.2f} s ({co / cf:.2f}x)")


def report_big(bare: list[dict], full: list[dict], rows: int) -> None:
    tb, tf = [b["seconds"] for b in bare], [f["seconds"] for f in full]
    mb, mf = [b["peak_mib"] for b in bare], [f["peak_mib"] for f in full]
    read, loaded, quarantined = full[0]["rows"]
    time_ratio = statistics.median(tf) / statistics.median(tb)
    rss_ratio = statistics.median(mf) / statistics.median(mb)
    print(f"big batch: {rows:,} rows (read {read:,}, loaded {loaded:,}, "
          f"quarantined {quarantined:,}), {len(tb)} repeats, min / median / max")
    print(f"  bare typed read_csv into a file table: {spread(tb, '.2f')} s, "
          f"peak RSS {spread(mb, '.0f')} MiB")
    print(f"  full ingest into a file-backed store:  {spread(tf, '.2f')} s, "
          f"peak RSS {spread(mf, '.0f')} MiB")
    cb, cf = [b.get("cpu", 0.0) for b in bare], [f.get("cpu", 0.0) for f in full]
    print(f"  CPU time (all threads), bare / ingest: {spread(cb, '.2f')} s / {spread(cf, '.2f')} "
          f"s; ratio {statistics.median(cf) / statistics.median(cb):.2f} (less swayed by the "
          "machine's load than the wall time)")
    print(f"  time ratio ingest / bare: {time_ratio:.2f}  (target <= {TARGET_BIG_TIME}: "
          f"{'met' if time_ratio <= TARGET_BIG_TIME else 'NOT met'})")
    print(f"  peak RSS ratio ingest / bare: {rss_ratio:.2f}  (target <= {TARGET_BIG_RSS}: "
          f"{'met' if rss_ratio <= TARGET_BIG_RSS else 'NOT met'})")
    print(f"  throughput: {rows / statistics.median(tf):,.0f} rows/s")


def report_small(bare: list[dict], full: list[dict], batches: int, notes: bool) -> None:
    files = full[0]["files"]
    tb = [b["seconds"] * 1e3 / files for b in bare]
    tf = [f["seconds"] * 1e3 / files for f in full]
    per_file = statistics.median(tf)
    print(f"small batches{' (quoted notes: every file read by DuckDB)' if notes else ''}: "
          f"{batches:,} batches x {FILES_PER_BATCH} table files of "
          f"{ROWS_PER_FILE} rows ({files:,} files, {full[0]['rows'][1]:,} rows loaded), "
          f"{len(tf)} repeats, min / median / max")
    print(f"  bare typed read_csv, one statement per file: {spread(tb, '.2f')} ms per file, "
          f"peak RSS {spread([b['peak_mib'] for b in bare], '.0f')} MiB")
    print(f"  full ingest:                                 {spread(tf, '.2f')} ms per file, "
          f"peak RSS {spread([f['peak_mib'] for f in full], '.0f')} MiB")
    print(f"  ingest per file: {per_file:.2f} ms  (target <= {TARGET_SMALL_MS} ms: "
          f"{'met' if per_file <= TARGET_SMALL_MS else 'NOT met'}); "
          f"ratio to the target {per_file / TARGET_SMALL_MS:.2f}, "
          f"to the bare load {per_file / statistics.median(tb):.1f}x")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=2_000_000)
    ap.add_argument("--batches", type=int, default=1_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--skip-big", action="store_true")
    ap.add_argument("--skip-small", action="store_true")
    ap.add_argument("--not-plain", action="store_true",
                    help="small files with a quoted note column holding commas (none is plain)")
    ap.add_argument("--before", metavar="DIR", help="also measure the ingest of this checkout")
    ap.add_argument("--child", nargs=3, metavar=("SIDE", "RAW", "DB"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        side, raw, db = args.child
        res = (child_bare if side == "bare" else child_ingest)(Path(raw), Path(db))
        res["peak_mib"] = peak_mib()
        print(json.dumps(res))
        return
    print(f"before: {load()} on {os.cpu_count()} cores", flush=True)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        if not args.skip_big:
            raw = make_big(tmp, args.rows)
            bare, full, old = compare("big", raw, tmp, args.repeat, args.before)
            report_big(bare, full, args.rows)
            report_before(full, old, bare)
        if not args.skip_small:
            raw = make_small(tmp, args.batches, args.not_plain)
            bare, full, old = compare("small", raw, tmp, args.repeat, args.before)
            report_small(bare, full, args.batches, args.not_plain)
            report_before(full, old, bare, 1e3 / full[0]["files"], "ms per file")
    print(f"after: {load()}")


if __name__ == "__main__":
    main()
