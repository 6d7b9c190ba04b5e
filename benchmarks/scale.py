"""The nightly job at the scale of a whole compilation: 1,000 and 10,000 fluids (issue 14).

For each size N (``--sizes``, default 1000 10000) a raw root of N synthetic fluids is written
with the generator of ``benchmarks/nightly.py`` (argon scaled by corresponding states, one
batch per fluid) at ``--points`` times its rows (default 10: 1,000 observations per fluid -
vapour pressure and both saturated densities on 240 temperatures, 160 melting and 120
sublimation points - so 10^7 observations at 10,000 fluids). Then, each in its own process
(``fluidledger nightly`` in a fresh interpreter, so nothing is shared):

1. **full**: the first nightly run on an empty store (every batch ingested, every group
   fitted, every check run, a release published and verified, every figure drawn);
2. **incremental**: the next run after one fluid's batch changed (a new campaign of its
   data): one batch ingested, one fluid refitted and rechecked, an incremental release, one
   figure drawn.

Each run's per-stage wall time, CPU time and peak RSS come from the run itself (the ``usage``
the nightly records per stage in ``run.summary_json``, ``pipeline/stagemeter.py``); the
process's own wall time, CPU time and peak RSS are measured here (``os.wait4``: the child's,
its workers included, never this process's). Printed: per stage and size, the three figures;
the ratio between sizes (10x the fluids: 10 is linear); incremental / full (target <= 5 %).
The load average (``os.getloadavg``, what ``uptime`` shows) is printed with every run: the
machine is shared.

    python benchmarks/scale.py [--sizes 1000 10000] [--points 10] [--keep DIR] [--json PATH]
                               [--with EARLIER.json] [--predict 10000]

``--keep DIR`` writes the raw roots, stores and reports to DIR/n<N>/ and keeps them (a folder
already there is replaced); ``--again DIR`` runs one more incremental nightly in each kept
DIR/n<N>/ after one more batch changed (the next fluid, the next variant: the steady state of
nightly runs, measured with the code as it is now), printed against the full run of
DIR's ``--json`` file (``--with``); ``--json PATH`` writes every figure after each size; ``--with``
adds an earlier run's figures to the tables (sizes measured on different days: compare their
load averages); with two sizes or more, a straight line through the two largest predicts
``--predict`` fluids, printed as a prediction. The synthetic fluids are test data, not
property estimates.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

import nightly as generator  # noqa: E402  (benchmarks/nightly.py: the synthetic fluids)

TARGET_INCREMENTAL = 0.05
STAGES = ("ingest", "fit", "check", "publish", "verify", "report")
CHILD = ("import sys; from pipeline.cli import main; "
         "sys.exit(main(['nightly', '--quiet', *sys.argv[1:]]))")


def load() -> str:
    """The 1, 5 and 15 minute load averages, as ``uptime`` prints them."""
    return "load " + ", ".join(f"{x:.2f}" for x in os.getloadavg())


def run_nightly(work: Path) -> dict:
    """One ``fluidledger nightly`` in its own process: exit code, the process's wall time and
    peak RSS, the load before and after, and the run's own record of its stages."""
    args = ["--store", str(work / "store.duckdb"), "--raw", str(work / "raw"),
            "--reports", str(work / "reports")]
    load_before = load()
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", CHILD, *args], cwd=HERE.parent,
                            stdout=subprocess.DEVNULL)   # its one-line verdict; errors stay
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    summary = latest_summary(work / "store.duckdb")
    return {"exit": proc.returncode, "wall_s": wall,
            "cpu_s": usage.ru_utime + usage.ru_stime, "peak_rss_mib": usage.ru_maxrss / 1024,
            "load_before": load_before, "load_after": load(), "run_id": summary["run_id"],
            "verdict": summary["verdict"], "publish": summary["publish"]["status"],
            "stages": {k: {"duration_s": v["duration_s"], "status": v["status"],
                           **(v.get("usage") or {})}
                       for k, v in summary["stages"].items()}}


def latest_summary(store: Path) -> dict:
    import duckdb

    with duckdb.connect(str(store), read_only=True) as con:
        row = con.execute("SELECT summary_json FROM run WHERE kind = 'nightly' "
                          "ORDER BY started_at DESC, rowid DESC LIMIT 1").fetchone()
    return json.loads(row[0])


def observations(store: Path) -> int:
    import duckdb

    with duckdb.connect(str(store), read_only=True) as con:
        return con.execute("SELECT count(*) FROM observation").fetchone()[0]


def measure_size(n: int, points: int, work: Path) -> dict:
    """Build the raw root of ``n`` fluids, run the full and the incremental nightly."""
    if work.exists():
        shutil.rmtree(work)
    work.mkdir(parents=True)
    t0 = time.perf_counter()
    generator.make_raw(work / "raw", n, points=points)
    t_gen = time.perf_counter() - t0
    print(f"[{n} fluids] raw root written in {t_gen:.1f} s ({load()})", flush=True)
    full = run_nightly(work)
    n_obs = observations(work / "store.duckdb")
    print(f"[{n} fluids] full nightly: {full['wall_s']:.1f} s, peak RSS "
          f"{full['peak_rss_mib']:.0f} MiB, exit {full['exit']}, publish {full['publish']}, "
          f"{n_obs:,} observations ({full['load_before']} -> {full['load_after']})", flush=True)
    generator.write_fluid(work / "raw", n // 2, variant=1, points=points)   # one batch changes
    inc = run_nightly(work)
    print(f"[{n} fluids] incremental nightly: {inc['wall_s']:.1f} s, peak RSS "
          f"{inc['peak_rss_mib']:.0f} MiB, exit {inc['exit']}, publish {inc['publish']} "
          f"({inc['load_before']} -> {inc['load_after']})", flush=True)
    return {"fluids": n, "points": points, "observations": n_obs, "generate_s": t_gen,
            "full": full, "incremental": inc}


def measure_again(earlier: dict, work: Path) -> dict:
    """One more incremental nightly in a kept folder: the next fluid's batch changes."""
    n, points = earlier["fluids"], earlier["points"]
    k = len(earlier.get("again", [])) + 1
    generator.write_fluid(work / "raw", n // 2 + k, variant=k + 1, points=points)
    inc = run_nightly(work)
    print(f"[{n} fluids] incremental nightly #{k + 1} (fluid {n // 2 + k} changed): "
          f"{inc['wall_s']:.1f} s, peak RSS {inc['peak_rss_mib']:.0f} MiB, exit {inc['exit']}, "
          f"publish {inc['publish']} ({inc['load_before']} -> {inc['load_after']})", flush=True)
    return {**earlier, "incremental": inc, "again": earlier.get("again", []) + [inc]}


def _cell(run: dict, stage: str) -> str:
    if stage == "process":
        return f"{run['wall_s']:8.2f} {run.get('cpu_s', float('nan')):8.2f} " \
               f"{run['peak_rss_mib']:7.0f}"
    s = run["stages"].get(stage)
    if s is None:
        return f"{'-':>8} {'-':>8} {'-':>7}"
    cpu = s.get("cpu_s", float("nan")) + s.get("children_cpu_s", 0.0)
    rss = s.get("peak_rss_mib")
    return f"{s['duration_s']:8.2f} {cpu:8.2f} " + (f"{rss:7.0f}" if rss is not None
                                                    else f"{'?':>7}")


def print_tables(results: list[dict]) -> None:
    """Per stage: time [s] and peak RSS [MiB] of every run; the size ratio; incremental/full."""
    runs = [(f"{r['fluids']} {kind}", r[kind]) for r in results
            for kind in ("full", "incremental")]
    print("\nper stage: wall time [s], CPU time [s] (workers included) and peak RSS [MiB] "
          "(the run's own figures)")
    print(f"{'':<9}" + "".join(f" | {name:>25}" for name, _ in runs))
    print(f"{'stage':<9}" + "".join(f" | {'wall s':>8} {'CPU s':>8} {'MiB':>7}" for _ in runs))
    for stage in STAGES + ("process",):
        print(f"{stage:<9}" + "".join(f" | {_cell(run, stage)}" for _, run in runs))
    print("(process: the whole child process and its workers, start-up included, from "
          "os.wait4; a stage's peak is its own where the run's method is 'stage'; on a loaded "
          "machine CPU time is the steadier figure)")
    if len(results) >= 2:
        small, big = results[0], results[-1]
        k = big["fluids"] / small["fluids"]
        print(f"\nratio {big['fluids']} / {small['fluids']} fluids (x{k:g} fluids; {k:g} is "
              "linear in time; RSS ratio: how memory grows)")
        for kind in ("full", "incremental"):
            parts = []
            for stage in STAGES:
                a, b = small[kind]["stages"].get(stage), big[kind]["stages"].get(stage)
                if a and b and a["duration_s"] > 0:
                    parts.append(f"{stage} t x{b['duration_s'] / a['duration_s']:.1f} "
                                 f"rss x{b['peak_rss_mib'] / a['peak_rss_mib']:.2f}")
            tot = big[kind]["wall_s"] / small[kind]["wall_s"]
            rss = big[kind]["peak_rss_mib"] / small[kind]["peak_rss_mib"]
            print(f"  {kind:<11} total t x{tot:.1f} rss x{rss:.2f}; " + "; ".join(parts))
    print()
    for r in results:
        full, inc = r["full"], r["incremental"]
        ratio = inc["wall_s"] / full["wall_s"]
        verdict = "meets" if ratio <= TARGET_INCREMENTAL else "misses"
        print(f"{r['fluids']} fluids: incremental / full = {inc['wall_s']:.1f} / "
              f"{full['wall_s']:.1f} s = {ratio:.1%} (target <= {TARGET_INCREMENTAL:.0%}: "
              f"{verdict}); per stage: " + ", ".join(
                  f"{s} {inc['stages'][s]['duration_s'] / full['stages'][s]['duration_s']:.1%}"
                  for s in STAGES if s in inc["stages"] and s in full["stages"]
                  and full["stages"][s]["duration_s"] > 0))
        if full.get("cpu_s") and inc.get("cpu_s"):
            print(f"  by CPU time: {inc['cpu_s']:.1f} / {full['cpu_s']:.1f} s = "
                  f"{inc['cpu_s'] / full['cpu_s']:.1%}")


def predict(results: list[dict], n: int) -> None:
    """A straight line through the two largest sizes, per stage, for time and peak RSS at
    ``n`` fluids: a prediction, printed as one, never a measurement."""
    if len(results) < 2 or n <= results[-1]["fluids"]:
        return
    a, b = results[-2], results[-1]
    na, nb = a["fluids"], b["fluids"]

    def line(ya: float, yb: float) -> float:     # a stage that does not grow: never below 0
        return max(0.0, ya + (yb - ya) * (n - na) / (nb - na))

    print(f"\nPREDICTED (not measured) for {n} fluids, a straight line through {na} and {nb}:")
    for kind in ("full", "incremental"):
        parts = []
        for stage in STAGES:
            sa, sb = a[kind]["stages"].get(stage), b[kind]["stages"].get(stage)
            if sa and sb and sa.get("peak_rss_mib") and sb.get("peak_rss_mib"):
                parts.append(f"{stage} {line(sa['duration_s'], sb['duration_s']):.0f} s "
                             f"{line(sa['peak_rss_mib'], sb['peak_rss_mib']):.0f} MiB")
        total = line(a[kind]["wall_s"], b[kind]["wall_s"])
        rss = line(a[kind]["peak_rss_mib"], b[kind]["peak_rss_mib"])
        print(f"  {kind:<11} {total:.0f} s, peak {rss:.0f} MiB; " + "; ".join(parts))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="*", default=[1000, 10000],
                    help="numbers of fluids (default: 1000 10000; none: only the --with figures)")
    ap.add_argument("--points", type=int, default=10,
                    help="rows per table as a multiple of benchmarks/nightly.py's "
                         "(default 10: 1,000 observations per fluid)")
    ap.add_argument("--keep", type=Path, default=None,
                    help="work in this folder (DIR/n<N>/) and keep it")
    ap.add_argument("--json", type=Path, default=None, help="also write the figures here")
    ap.add_argument("--again", type=Path, default=None, metavar="DIR",
                    help="one more incremental nightly in each DIR/n<N>/ kept by --keep, "
                         "against the full run of the --with file")
    ap.add_argument("--with", dest="earlier", type=Path, action="append", default=[],
                    metavar="PATH", help="add the sizes of an earlier run's --json file to "
                                         "the tables (repeatable; sizes run now win)")
    ap.add_argument("--predict", type=int, default=10000,
                    help="also print a straight-line prediction for this many fluids when it "
                         "is above the sizes run (default 10000)")
    args = ap.parse_args(argv)
    root = args.again or args.keep or Path(tempfile.mkdtemp(prefix="fl-scale-"))
    print(f"scale benchmark: sizes {'kept' if args.again else args.sizes}, "
          f"{'kept' if args.again else args.points}x rows, in {root}; "
          f"{os.cpu_count()} cores, {load()}", flush=True)
    earlier = {r["fluids"]: r for path in args.earlier for r in json.loads(path.read_text())}
    results = []
    if args.again is not None:       # the kept folders of an earlier --keep run, in place
        if not earlier:
            ap.error("--again needs the earlier run's figures (--with ITS.json)")
        results = [measure_again(r, args.again / f"n{n}") for n, r in sorted(earlier.items())]
        if args.json:
            args.json.write_text(json.dumps(results, indent=1))
        print_tables(results)
        return 0
    try:
        for n in sorted(args.sizes):
            results.append(measure_size(n, args.points, root / f"n{n}"))
            if args.json:
                args.json.write_text(json.dumps(results, indent=1))
        fresh = {r["fluids"] for r in results}
        results = sorted(results + [r for n, r in earlier.items() if n not in fresh],
                         key=lambda r: r["fluids"])
        print_tables(results)
        predict(results, args.predict)
    finally:
        if args.keep is None:
            shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
