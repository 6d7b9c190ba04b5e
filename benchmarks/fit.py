"""Benchmark the in-memory fitting path: synthetic fluids x 3 boundaries x N points.

Run ``python benchmarks/fit.py [--fluids 1000] [--points 200] [--seed 1]`` from the project
root. It prints the time per fit and in total per boundary, the time of the linear Wagner solve
against generic nonlinear ``least_squares`` solves of the same fit, and the time to evaluate all
fitted curves at once with ``evaluate_batch``.

Reusable parts (the store I/O benchmark can build on them): :func:`make_fluids`,
:func:`make_series`, :func:`time_fits`, :func:`time_solvers`, :func:`time_batch_evaluation`.

The synthetic fluids follow corresponding states loosely: a Wagner 2.5-5 vapour-pressure curve
perturbed around nitrogen's coefficients (Span et al. 2000), a sublimation curve whose slope at
the triple point exceeds the vaporisation slope by 10-40 % (Delta h_fus / Delta h_vap), and a
Simon-Glatzel melting curve. They are test data, not property estimates.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from pipeline.correlations import Curve, evaluate_batch, fit_curve, fit_form  # noqa: E402

N2_WAGNER = np.array([-6.12445284, 1.26327220, -0.765910082, -1.77570564])
BOUNDARIES = ("liquid-vapour", "solid-vapour", "solid-liquid")
CANDIDATES = {
    "liquid-vapour": ["wagner-2.5-5", "wagner-3-6"],
    "solid-vapour": ["sublimation-power"],
    "solid-liquid": ["melting-polynomial", "simon-glatzel"],
}


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


def time_fits(series: list[Series]) -> dict[str, dict]:
    """Fit every series with fit_curve; per boundary: count, total and per-fit time, skips."""
    stats = {b: {"n": 0, "seconds": 0.0, "skipped": 0, "outcomes": []} for b in BOUNDARIES}
    for s in series:
        t0 = time.perf_counter()
        out = fit_curve(CANDIDATES[s.boundary], s.T, s.y, s.u_y, s.u_T, s.ref)
        st = stats[s.boundary]
        st["seconds"] += time.perf_counter() - t0
        st["n"] += 1
        st["skipped"] += not out.fitted
        st["outcomes"].append(out)
    return stats


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


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fluids", type=int, default=1000)
    parser.add_argument("--points", type=int, default=200)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)

    rng = np.random.default_rng(args.seed + 1)
    t0 = time.perf_counter()
    fluids = make_fluids(args.fluids, args.seed)
    series = [make_series(f, b, args.points, rng) for f in fluids for b in BOUNDARIES]
    print(f"{args.fluids} fluids x {len(BOUNDARIES)} boundaries x {args.points} points "
          f"generated in {time.perf_counter() - t0:.2f} s")

    stats = time_fits(series)
    total = sum(s["seconds"] for s in stats.values())
    n_fits = sum(s["n"] for s in stats.values())
    print("\nfit_curve (model selection, outlier rounds, u_T through the slope):")
    for b, s in stats.items():
        chosen = {}
        for o in s["outcomes"]:
            if o.fitted:
                chosen[f"{o.form}/{len(o.curve.params)}"] = chosen.get(
                    f"{o.form}/{len(o.curve.params)}", 0) + 1
        print(f"  {b:14s} {s['n']:5d} fits  {s['seconds']:7.2f} s  "
              f"{1e3 * s['seconds'] / s['n']:6.2f} ms/fit  skipped {s['skipped']}  "
              f"chosen {dict(sorted(chosen.items()))}")
    print(f"  {'total':14s} {n_fits:5d} fits  {total:7.2f} s  {1e3 * total / n_fits:6.2f} ms/fit")

    lv = [s for s in series if s.boundary == "liquid-vapour"]
    solver = time_solvers(lv)
    print(f"\nsame Wagner 2.5-5 fit (5 parameters, {len(lv)} series of {args.points} points):")
    for label, sec in solver.items():
        print(f"  {label:22s} {1e3 * sec / len(lv):7.3f} ms/fit   "
              f"ratio to linear {sec / solver['linear']:6.1f}x")

    curves = [o.curve for s in stats.values() for o in s["outcomes"] if o.fitted]
    t_value, t_u = time_batch_evaluation(curves)
    print(f"\nevaluate_batch on {len(curves)} curves x 200 T: value {1e3 * t_value:.1f} ms, "
          f"u {1e3 * t_u:.1f} ms")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
