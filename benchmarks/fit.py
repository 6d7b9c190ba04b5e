"""Benchmark the in-memory fitting path: synthetic fluids x 3 boundaries x N points.

    python benchmarks/fit.py [--fluids 1000] [--points 200] [--seed 1] [--repeat 3]
                             [--no-reference]

Fits the noisy series of :func:`make_fluids` / :func:`make_series` exactly as the fit stage
does: the candidate forms of its plan (``FIT_PLAN`` in ``pipeline/fitting/groups.py``: three
Wagner forms for the vapour pressure, the sublimation form, the eight melting forms) and its
settings (|z| > 4 flagged, at least 5 points, BIC, points above the reference temperature
excluded, every point of the one source trusted). Each way of fitting runs ``--repeat`` times
in a child process of its own, which reports its fitting time (the data generation is not
timed), CPU time and peak RSS:

- ``batched``: :func:`pipeline.correlations.batched.fit_curves`, all series of a boundary in
  one call (what the stage runs);
- ``reference``: :func:`pipeline.correlations.fit_curve`, one series after the other (what
  the stage ran before issue 14; skipped with ``--no-reference``).

Prints min/median/max, ms per fit and the forms chosen per boundary, the largest relative
difference between the two ways' parameters (they are the same fits), the ratio of their
medians, and the ratio of the batched time for 3,000 fits to the 8 s target of issue 14 for
the whole fit stage (which also reads and writes the store: ``benchmarks/fit_store.py``).
Then, in this process: the same 5-parameter Wagner fit by the linear solve and by
``least_squares``, and ``evaluate_batch`` over all fitted curves.

The synthetic fluids follow corresponding states loosely: a Wagner 2.5-5 vapour-pressure curve
perturbed around nitrogen's coefficients (Span et al. 2000), a sublimation curve whose slope at
the triple point exceeds the vaporisation slope by 10-40 % (Delta h_fus / Delta h_vap), and a
Simon-Glatzel melting curve. They are test data, not property estimates.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from pipeline.correlations import Curve, evaluate_batch, fit_curve, fit_form  # noqa: E402
from pipeline.fitting.groups import FIT_PLAN  # noqa: E402

N2_WAGNER = np.array([-6.12445284, 1.26327220, -0.765910082, -1.77570564])
BOUNDARIES = ("liquid-vapour", "solid-vapour", "solid-liquid")
CANDIDATES = {b: list(FIT_PLAN[(b, "pressure")][1]) for b in BOUNDARIES}
"""The candidate forms of the fit stage's plan, per boundary."""
STAGE_KWARGS = dict(outlier_z=4.0, min_points=5, criterion="bic", above_reference="exclude")
TARGET_S = 8.0             # issue 14: the fit stage for 1,000 fluids x 3 boundaries x 200 points


@dataclass(frozen=True)
class SyntheticFluid:
    """True curves of one synthetic fluid."""

    Tc: float
    Tt: float
    curves: dict  # boundary -> Curve


@dataclass(frozen=True)
class Series:
    """One boundary's data set, ready for fit_curve."""

    boundary: str
    T: np.ndarray
    y: np.ndarray
    u_y: np.ndarray
    u_T: float
    ref: dict


def _vapour_curve(rng, Tc) -> Curve:
    while True:
        a = N2_WAGNER * (1 + np.array([0.1, 0.3, 0.3, 0.3]) * rng.standard_normal(4))
        curve = Curve("wagner-2.5-5", (math.log(rng.uniform(1e6, 1e7)), *a), {"T_ref_K": Tc},
                      T_min_K=0.4 * Tc, T_max_K=Tc)
        if np.all(curve.slope(np.linspace(0.4 * Tc, 0.999 * Tc, 50)) > 0):
            return curve


def make_fluids(n: int, seed: int = 1) -> list[SyntheticFluid]:
    """`n` synthetic fluids with vapour-pressure, sublimation and melting curves."""
    rng = np.random.default_rng(seed)
    fluids = []
    for _ in range(n):
        Tc = rng.uniform(100.0, 650.0)
        vap = _vapour_curve(rng, Tc)
        Tt = Tc * rng.uniform(0.45, 0.65)
        pt = vap.value(Tt)
        s_sub = vap.slope(Tt) / pt * (1 + rng.uniform(0.1, 0.4))  # d ln p_sub / dT at Tt
        sub = Curve("sublimation-power", (math.log(pt), -Tt * s_sub, rng.normal(0, 0.5)),
                    {"T_ref_K": Tt, "exponents": (1.0, 1.9)}, T_min_K=0.6 * Tt, T_max_K=Tt)
        melt = Curve("simon-glatzel", (pt, rng.uniform(100e6, 1000e6), rng.uniform(1.3, 2.5)),
                     {"T_ref_K": Tt}, T_min_K=Tt, T_max_K=1.6 * Tt)
        fluids.append(SyntheticFluid(Tc, Tt, {"liquid-vapour": vap, "solid-vapour": sub,
                                              "solid-liquid": melt}))
    return fluids


def make_series(fluid: SyntheticFluid, boundary: str, n_points: int, rng) -> Series:
    """Noisy data on one boundary: relative noise on the value, 0.01 K on T."""
    curve = fluid.curves[boundary]
    span = {"liquid-vapour": (fluid.Tt, 0.995 * fluid.Tc),
            "solid-vapour": (0.65 * fluid.Tt, 0.995 * fluid.Tt),
            "solid-liquid": (1.002 * fluid.Tt, 1.6 * fluid.Tt)}[boundary]
    T_true = np.sort(rng.uniform(*span, n_points))
    rel = 1e-3 if boundary == "liquid-vapour" else 2e-3
    y_true = curve.value(T_true)
    u_y = rel * y_true
    u_T = 0.01
    y = y_true + u_y * rng.standard_normal(n_points)
    T = T_true + u_T * rng.standard_normal(n_points)
    ref = {"T_ref_K": curve.ref["T_ref_K"]}
    return Series(boundary, T, y, u_y, u_T, ref)


def all_series(n_fluids: int, n_points: int, seed: int) -> list[Series]:
    rng = np.random.default_rng(seed + 1)
    fluids = make_fluids(n_fluids, seed)
    return [make_series(f, b, n_points, rng) for f in fluids for b in BOUNDARIES]


def fit_reference(series: list[Series]) -> list:
    """fit_curve on one series after the other, as the stage did before issue 14."""
    return [fit_curve(CANDIDATES[s.boundary], s.T, s.y, s.u_y, s.u_T, s.ref,
                      trusted=np.ones(s.T.size, bool), **STAGE_KWARGS) for s in series]


def fit_batched(series: list[Series]) -> list:
    """fit_curves on all series of a boundary at once, as the stage does."""
    from pipeline.correlations.batched import Series as BatchSeries, fit_curves

    out = [None] * len(series)
    for b in BOUNDARIES:
        idx = [i for i, s in enumerate(series) if s.boundary == b]
        batch = [BatchSeries(series[i].T, series[i].y, series[i].u_y, series[i].u_T,
                             series[i].ref, np.ones(series[i].T.size, bool)) for i in idx]
        for i, o in zip(idx, fit_curves(CANDIDATES[b], batch, **STAGE_KWARGS)):
            out[i] = o
    return out


def child(mode: str, args, params_out: str) -> None:
    """Fit all series one way in this process; print one JSON line; save the parameters."""
    series = all_series(args.fluids, args.points, args.seed)
    fit = {"batched": fit_batched, "reference": fit_reference}[mode]
    t0, c0 = time.perf_counter(), time.process_time()
    outcomes = fit(series)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    chosen = {b: Counter(f"{o.form}/{len(o.curve.params)}" for s, o in zip(series, outcomes)
                         if s.boundary == b and o.fitted) for b in BOUNDARIES}
    skipped = {b: sum(not o.fitted for s, o in zip(series, outcomes) if s.boundary == b)
               for b in BOUNDARIES}
    np.save(params_out, np.concatenate([np.r_[o.curve.params, o.outlier_mask, o.z]
                                        if o.fitted else [np.nan] for o in outcomes]))
    print(json.dumps({"wall_s": wall, "cpu_s": cpu, "n": len(series), "chosen": chosen,
                      "skipped": skipped,
                      "rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))


def run_child(mode: str, args, params_out: Path) -> dict:
    cmd = [sys.executable, __file__, "--child", mode, "--params-out", str(params_out),
           "--fluids", str(args.fluids), "--points", str(args.points), "--seed", str(args.seed)]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    if proc.returncode:
        raise SystemExit(f"child failed ({proc.returncode}):\n{proc.stdout}\n{proc.stderr}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def time_solvers(series: list[Series], repeat: int = 1) -> dict[str, float]:
    """Seconds for the same 5-parameter Wagner fit: linear solve vs least_squares.

    The nonlinear solves start from a generic point (ln p_max, -6, 0, 0, 0) and use the analytic
    Jacobian; "least_squares" uses the plain quadratic loss (the same estimator as the linear
    solve), "least_squares soft_l1" the robust loss used for nonlinear forms.
    """
    out = {"linear": 0.0, "least_squares": 0.0, "least_squares soft_l1": 0.0}
    for s in series:
        x0 = np.array([math.log(s.y.max()), -6.0, 0.0, 0.0, 0.0])
        for label, kwargs in (("linear", {}),
                              ("least_squares", dict(method="nonlinear", loss="linear", x0=x0)),
                              ("least_squares soft_l1", dict(method="nonlinear", x0=x0))):
            t0 = time.perf_counter()
            for _ in range(repeat):
                fit_form("wagner-2.5-5", s.T, s.y, s.u_y, s.ref, **kwargs)
            out[label] += (time.perf_counter() - t0) / repeat
    return out


def time_batch_evaluation(curves: list[Curve], n_T: int = 200) -> tuple[float, float]:
    """Seconds to evaluate value and u of all curves on an (n_curves, n_T) grid at once."""
    T = np.array([np.linspace(c.T_min_K, c.T_max_K, n_T) for c in curves])
    t0 = time.perf_counter()
    evaluate_batch(curves, T, "value")
    t1 = time.perf_counter()
    evaluate_batch(curves, T, "u")
    return t1 - t0, time.perf_counter() - t1


def spread(values, fmt="{:.2f}") -> str:
    return "/".join(fmt.format(v) for v in (min(values), statistics.median(values), max(values)))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fluids", type=int, default=1000)
    parser.add_argument("--points", type=int, default=200)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--no-reference", action="store_true",
                        help="skip the (slow) one-series-at-a-time reference")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    parser.add_argument("--params-out", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.child, args, args.params_out)
        return 0

    modes = ["batched"] + ([] if args.no_reference else ["reference"])
    runs: dict[str, list[dict]] = {m: [] for m in modes}
    load = [os.getloadavg()[0]]
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(args.repeat):
            for m in modes:
                runs[m].append(run_child(m, args, Path(tmp) / f"{m}.npy"))
                load.append(os.getloadavg()[0])
        params = {m: np.load(Path(tmp) / f"{m}.npy") for m in modes}
    n = runs["batched"][0]["n"]
    print(f"{args.fluids} fluids x {len(BOUNDARIES)} boundaries x {args.points} points = {n} "
          f"series; candidate forms as the fit stage: "
          + "; ".join(f"{b} {len(f)}" for b, f in CANDIDATES.items()))
    print(f"load average during the runs (1 min): {spread(load, '{:.1f}')} on {os.cpu_count()} "
          f"CPUs (min/median/max)")
    print(f"{args.repeat} runs each in a child process (min/median/max):")
    for m, rs in runs.items():
        walls = [r["wall_s"] for r in rs]
        print(f"  {m:9s} {spread(walls)} s  ({1e3 * statistics.median(walls) / n:.2f} ms/fit)  "
              f"CPU {spread([r['cpu_s'] for r in rs])} s  peak RSS "
              f"{spread([r['rss_mib'] for r in rs], '{:.0f}')} MiB")
    for b in BOUNDARIES:
        print(f"  {b:14s} skipped {runs['batched'][0]['skipped'][b]}  chosen "
              f"{dict(sorted(runs['batched'][0]['chosen'][b].items()))}")
    med = statistics.median(r["wall_s"] for r in runs["batched"])
    cpu = statistics.median(r["cpu_s"] for r in runs["batched"])
    print(f"batched fits for 3,000 series (median, scaled): wall {med * 3000 / n:.2f} s, CPU "
          f"{cpu * 3000 / n:.2f} s; ratio to the {TARGET_S:.0f} s target of issue 14 for the whole "
          f"stage: wall {med * 3000 / n / TARGET_S:.2f}, CPU {cpu * 3000 / n / TARGET_S:.2f}")
    if "reference" in runs:
        ref = statistics.median(r["wall_s"] for r in runs["reference"])
        a, b = params["batched"], params["reference"]
        same_shape = a.shape == b.shape and np.array_equal(np.isnan(a), np.isnan(b))
        rel = np.nanmax(np.abs(a - b) / np.maximum(np.abs(b), 1e-300)) if same_shape else np.inf
        print(f"reference / batched (medians of this run): {ref / med:.1f}x; largest relative "
              f"difference of parameters, outlier flags and z: {rel:.1e}")

    series = all_series(args.fluids, args.points, args.seed)
    lv = [s for s in series if s.boundary == "liquid-vapour"]
    solver = time_solvers(lv)
    print(f"\nsame Wagner 2.5-5 fit (5 parameters, {len(lv)} series of {args.points} points):")
    for label, sec in solver.items():
        print(f"  {label:22s} {1e3 * sec / len(lv):7.3f} ms/fit   "
              f"ratio to linear {sec / solver['linear']:6.1f}x")
    curves = [o.curve for o in fit_batched(series) if o.fitted]
    t_value, t_u = time_batch_evaluation(curves)
    print(f"\nevaluate_batch on {len(curves)} curves x 200 T: value {1e3 * t_value:.1f} ms, "
          f"u {1e3 * t_u:.1f} ms")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
