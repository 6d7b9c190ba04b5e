"""Benchmark of the check stage: every check over 1,000 and 4,000 synthetic fluids in memory.

Each synthetic fluid is a corresponding-states copy of a published fluid (argon, nitrogen, carbon
dioxide: the reference curves of ``pipeline.correlations.reference``) with its temperatures
scaled by s_T and pressures by s_p (every reference form is a function of T/T_ref times the
reference value, so the scaled curves stay mutually consistent). Per fluid: triple and critical
points from two sources, a stated acentric factor and Δh_vap at Tt, ~300 observations in seven files (three
vapour-pressure campaigns, a sublimation and a melting series, near-critical saturated
densities, solid and liquid densities at Tt) with noise and fit residuals (|z| <= 2.5); 1 % of the fluids
carry a kPa-recorded-as-Pa file so the diagnosis path is timed too.

Run: ``python benchmarks/check.py`` (``--fluids 1000 4000`` to choose sizes). Targets: < 10 s
for 1,000 fluids, and 4x the fluids in <= 4.5x the time.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from pipeline.checks import run_checks  # noqa: E402
from synthetic_fluids import build  # noqa: E402

def timed(n: int) -> tuple[float, object]:
    t0 = time.perf_counter()
    fluids = build(n)
    t_build = time.perf_counter() - t0
    t0, c0 = time.perf_counter(), time.process_time()
    run = run_checks(fluids)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    print(f"{n:6d} fluids: built in {t_build:6.2f} s; checks in {seconds:6.2f} s wall, {cpu:6.2f} s CPU "
          f"({len(run.results)} results: {run.asstr().split(': ', 1)[1]})", flush=True)
    return seconds, run


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--fluids", type=int, nargs="+", default=[1000, 4000])
    args = p.parse_args(argv)
    times = [timed(n)[0] for n in args.fluids]
    if len(times) >= 2:
        n0, n1 = args.fluids[0], args.fluids[-1]
        ratio = times[-1] / times[0]
        print(f"ratio {n1}/{n0} fluids: time x{ratio:.2f} for x{n1 / n0:.1f} fluids "
              f"(target <= x{4.5 * n1 / n0 / 4:.2f}); {n0} fluids in {times[0]:.2f} s (target < 10 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
