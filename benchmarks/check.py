"""Benchmark of the check stage: every check over 1,000 and 4,000 synthetic fluids.

The fluids are those of ``benchmarks/synthetic_fluids.py`` (corresponding-states copies of
argon, nitrogen and carbon dioxide, ~300 observations in seven files each, curves with a fit's
covariance; 1 % carry a unit mix-up). The parent process builds the stacked tables of each
size once and hands them to child processes, one per measurement, so every figure is that of
a fresh process: its own peak memory, no warm caches. In each child:

- ``load``: the stacked tables split into fluids (``fluids_from_tables``: what the store
  loader does after its five queries);
- ``checks``: ``run_checks`` over all fluids, every check (the figure with a target);
- ``store``: ``store_run`` into a fresh store (the run row and all results in one insert);
- the process's peak resident memory.

Printed per size: min / median / max over the repeats (wall, and CPU of the checks), the ratio
of the median to the target of issue 14 (all checks over 1,000 fluids <= 3 s), and the
linearity (time per fluid at the larger size over that at the smaller: 1 is linear), each for
the wall time (the target's measure) and for the CPU time of the checks (which other work on
a shared machine moves less). The sizes alternate within each repeat, so a change in load
weighs on all of them. The machine's load average is printed before and after: on a shared
machine compare ratios within one run. No timed tests: this script only prints.

Run: ``python benchmarks/check.py`` (``--fluids 1000 4000``, ``--repeat 3``).
"""

from __future__ import annotations

import argparse
import json
import os
import pickle
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

TARGET_S = 3.0           # issue 14: all checks over 1,000 fluids
TARGET_FLUIDS = 1000
LINEAR_LIMIT = 1.10      # time per fluid at the larger size / at the smaller


def tables(n: int, seed: int = 7) -> dict:
    """The stacked input tables of ``n`` synthetic fluids (as the store loader reads them)."""
    from synthetic_fluids import synthetic_fluid

    rng = np.random.default_rng(seed)
    parts = [synthetic_fluid(i, rng, plant=(i % 100 == 0)) for i in range(n)]
    return {"fluids": pd.DataFrame([p["fluid"] for p in parts],
                                   columns=["fluid_id", "molar_mass_kg_mol"]),
            "observations": pd.concat([p["obs"] for p in parts], ignore_index=True),
            "fixed_points": pd.DataFrame([r for p in parts for r in p["fixed"]]),
            "constants": pd.DataFrame([r for p in parts for r in p["constants"]]),
            "curves": {p["fluid"][0]: p["curves"] for p in parts}}


def child(path: Path) -> dict:
    """One measurement in this process: load, checks, store; peak memory."""
    from pipeline.checks import run_checks, store_run
    from pipeline.checks.loader import fluids_from_tables
    from pipeline.store import open_store

    with open(path, "rb") as fh:
        t = pickle.load(fh)
    t0 = time.perf_counter()
    fluids = fluids_from_tables(t["fluids"], t["observations"], t["fixed_points"], t["constants"],
                                t["curves"])
    load = time.perf_counter() - t0
    t0, c0 = time.perf_counter(), time.process_time()
    run = run_checks(fluids)
    checks, cpu = time.perf_counter() - t0, time.process_time() - c0
    with tempfile.TemporaryDirectory() as tmp, open_store(Path(tmp) / "store.duckdb") as store:
        t0 = time.perf_counter()
        store_run(store.con, run)
        stored = time.perf_counter() - t0
    peak_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return {"fluids": len(fluids), "results": len(run.table), "counts": run.counts(),
            "load_s": load, "checks_s": checks, "checks_cpu_s": cpu, "store_s": stored,
            "peak_rss_mib": peak_kib / 1024}


def measure(path: Path) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", str(path)], check=True,
                         capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _spread(values: list[float]) -> str:
    return f"{min(values):.2f} / {statistics.median(values):.2f} / {max(values):.2f}"


def _spread_mib(values: list[float]) -> str:
    return f"{min(values):.0f} / {statistics.median(values):.0f} / {max(values):.0f}"


def _load() -> str:
    return " ".join(f"{x:.1f}" for x in os.getloadavg())


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--fluids", type=int, nargs="+", default=[1000, 4000])
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--child", type=Path, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.child:
        print(json.dumps(child(args.child)))
        return 0
    print(f"machine: {os.cpu_count()} CPUs, load average {_load()} (1, 5, 15 min) before")
    medians, cpu_medians = {}, {}
    with tempfile.TemporaryDirectory() as tmp:
        paths, built = {}, {}
        for n in args.fluids:
            t0 = time.perf_counter()
            paths[n] = Path(tmp) / f"fluids-{n}.pickle"
            with open(paths[n], "wb") as fh:
                pickle.dump(tables(n), fh, protocol=pickle.HIGHEST_PROTOCOL)
            built[n] = time.perf_counter() - t0
        # the sizes alternate, so that a change in the machine's load weighs on all of them
        measured: dict[int, list[dict]] = {n: [] for n in args.fluids}
        for _ in range(args.repeat):
            for n in args.fluids:
                measured[n].append(measure(paths[n]))
        for n, runs in measured.items():
            wall = [r["checks_s"] for r in runs]
            medians[n] = statistics.median(wall)
            cpu_medians[n] = statistics.median(r["checks_cpu_s"] for r in runs)
            r0 = runs[0]
            counts = ", ".join(f"{v} {k}" for k, v in r0["counts"].items() if v)
            print(f"{n:6d} fluids ({r0['results']} results: {counts}; built in {built[n]:.1f} s), "
                  f"{args.repeat} runs, min / median / max:\n"
                  f"         checks {_spread(wall)} s wall, "
                  f"{_spread([r['checks_cpu_s'] for r in runs])} s CPU; "
                  f"load {_spread([r['load_s'] for r in runs])} s; "
                  f"store {_spread([r['store_s'] for r in runs])} s; "
                  f"peak RSS {_spread_mib([r['peak_rss_mib'] for r in runs])} MiB", flush=True)
    print(f"load average {_load()} after")
    for label, med in (("wall", medians), ("CPU", cpu_medians)):
        if TARGET_FLUIDS in med:
            m = med[TARGET_FLUIDS]
            print(f"target (issue 14): all checks over {TARGET_FLUIDS} fluids <= {TARGET_S:g} s: "
                  f"median {m:.2f} s {label}, ratio {m / TARGET_S:.2f} -> "
                  f"{'MET' if m <= TARGET_S else 'NOT MET'}")
        if len(med) >= 2:
            (n0, t0_), (n1, t1) = sorted(med.items())[0], sorted(med.items())[-1]
            per = (t1 / n1) / (t0_ / n0)
            print(f"linearity ({label}): {n1}/{n0} fluids: time x{t1 / t0_:.2f} for x{n1 / n0:.1f} "
                  f"fluids, time per fluid x{per:.2f} (target <= x{LINEAR_LIMIT:.2f}) -> "
                  f"{'MET' if per <= LINEAR_LIMIT else 'NOT MET'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
