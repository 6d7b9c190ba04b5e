"""Phase rule and ordering: at most three phases meet at a point; curves cross only at stated
triple points; the triple point lies below the critical point."""

from __future__ import annotations

import itertools

import numpy as np

from pipeline.checks.curves import grid_values, linspace_rows
from pipeline.checks.data import CheckBatch, FluidData
from pipeline.checks.findings import Findings
from pipeline.checks.physics import curve_label
from pipeline.checks.points import curve_phases, u0
from pipeline.checks.registry import register_check

_MIN_OVERLAP_K = 1e-6


def _ordering(out: Findings, fluid: FluidData) -> None:
    cp = fluid.critical_point
    if cp is None:
        return
    for tp in fluid.triple_points:
        if not tp.has_vapour:
            continue
        for name, t_val, c_val, unit in (("Tt<Tc", tp.T_K, cp.T_K, "K"),
                                         ("pt<pc", tp.p_Pa, cp.p_Pa, "Pa")):
            if not (np.isfinite(t_val) and np.isfinite(c_val)):
                continue
            gap = c_val - t_val
            out.judge(fluid.fluid_id, f"{tp.label}|{name}", measured=gap, limit=0.0,
                      upper=False, ok=gap > 0, statistic=f"critical - triple [{unit}]",
                      evidence={"triple": tp.evidence(), "critical": cp.evidence()},
                      context=f"{tp.label} at {t_val:.6g} {unit}, critical point at "
                              f"{c_val:.6g} {unit}")


def _coincident(out: Findings, fluid: FluidData, th) -> None:
    points, bad = fluid.triple_points, []
    for a, b in itertools.combinations(points, 2):
        close_T = abs(a.T_K - b.T_K) <= th["T_tol_K"]
        close_p = np.isfinite(a.p_Pa) and np.isfinite(b.p_Pa) and \
            abs(a.p_Pa - b.p_Pa) <= th["p_rel_tol"] * max(a.p_Pa, b.p_Pa)
        if close_T and close_p and len(set(a.phases) | set(b.phases)) > 3:
            bad.append(f"{a.label} and {b.label}")
    bad += [f"{tp.label} names {len(tp.phases)} phases" for tp in points if len(tp.phases) != 3]
    if not points:
        return
    out.judge(fluid.fluid_id, "phase-count", measured=float(len(bad)), limit=0.0,
              statistic="points where more than three phases meet",
              evidence={"violations": bad, "triple_points": [tp.label for tp in points]},
              context=f"{len(points)} stated triple point(s)" + (": " + "; ".join(bad) if bad else ""))


def _pairs(fluid: FluidData) -> list:
    """Pairs of fitted pressure curves whose ranges overlap: ((key, curve), (key, curve))."""
    curves = fluid.pressure_curves()
    return [((ka, a), (kb, b)) for (ka, a), (kb, b) in itertools.combinations(sorted(curves.items()), 2)
            if min(a.T_max_K, b.T_max_K) - max(a.T_min_K, b.T_min_K) >= _MIN_OVERLAP_K]


def _crossings(T: np.ndarray, d: np.ndarray) -> list[float]:
    """Temperatures where p_a - p_b (``d`` on the grid ``T``) is zero or changes sign."""
    ok = np.isfinite(d)
    T, d = T[ok], d[ok]
    roots = list(T[d == 0])
    change = np.flatnonzero(np.sign(d[:-1]) * np.sign(d[1:]) < 0)
    roots += list(T[change] - d[change] * (T[change + 1] - T[change]) / (d[change + 1] - d[change]))
    return sorted(float(r) for r in roots)


def _matching_point(fluid: FluidData, phases: set, T: float, th):
    for tp in fluid.triple_points:
        if phases <= set(tp.phases) and abs(T - tp.T_K) <= max(th["T_tol_K"], th["z_max"] * u0(tp.u_T_K)):
            return tp
    return None


def _differences(batch: CheckBatch, pairs: dict, th) -> dict:
    """p_a - p_b on the grid of every pair of every fluid, one kernel call per form."""
    flat = [(fid, i, a, b, int(th(fid)["n_grid"])) for fid, ps in pairs.items()
            for i, ((_, a), (_, b)) in enumerate(ps)]
    out = {}
    for n in sorted({f[4] for f in flat}):
        rows = [f for f in flat if f[4] == n]
        T = linspace_rows(np.array([max(a.T_min_K, b.T_min_K) for _, _, a, b, _ in rows]),
                          np.array([min(a.T_max_K, b.T_max_K) for _, _, a, b, _ in rows]), n)
        d = grid_values([r[2].curve for r in rows], T) - grid_values([r[3].curve for r in rows], T)
        for (fid, i, *_), T_row, d_row in zip(rows, T, d):
            out[(fid, i)] = (T_row, d_row)
    return out


def _intersections(out: Findings, fluid: FluidData, pairs: list, grids: dict, th) -> None:
    solids = {p for tp in fluid.triple_points for p in tp.phases} - {"vapour", "liquid"}
    for i, ((ka, a), (kb, b)) in enumerate(pairs):
        pa, pb = curve_phases(ka[0], ka[1], solids), curve_phases(kb[0], kb[1], solids)
        phases = set(pa or ()) | set(pb or ())
        found = []
        for T in _crossings(*grids[(fluid.fluid_id, i)]):
            tp = _matching_point(fluid, phases, T, th)
            found.append({"T_K": T, "p_Pa": float(a.value(T)), "triple_point": tp.label if tp else None})
        stray = [x for x in found if x["triple_point"] is None]
        names = f"{curve_label(ka)} and {curve_label(kb)}"
        text = "; ".join(f"{x['T_K']:.6g} K, {x['p_Pa']:.6g} Pa" for x in stray[:5])
        out.judge(fluid.fluid_id, f"curves:{curve_label(ka)}|{curve_label(kb)}",
                  measured=float(len(stray)), limit=0.0,
                  statistic="intersections away from stated triple points",
                  evidence={"intersections": found, "phases": sorted(phases)},
                  context=f"{names} cross {len(found)} time(s) in their common range"
                          + (f", not at a stated triple point: {text}" if stray else ""))


@register_check("phase-rule.ordering", tags=("phase-rule", "critical", "triple-point", "curves"),
                vectorised=True,
                purpose="At most three phases meet at a point; curves cross only at stated "
                        "triple points; Tt < Tc and pt < pc.")
def ordering(batch: CheckBatch, th) -> Findings:
    """Gibbs' phase rule for a pure substance, F = 3 − P, allows at most three coexisting
    phases, and only at isolated points (F = 0): two distinct triple points may not coincide
    (that would be a quadruple point), and two coexistence curves may cross only at a triple
    point whose phases include both curves' phases. Every pair of fitted pressure curves is
    scanned on n_grid points of its common range; each sign change of p_a − p_b is an
    intersection, which must lie within max(T_tol_K, z_max u_Tt) of such a stated triple point
    (J. W. Gibbs, Trans. Conn. Acad. 3, 108 (1876), from memory). The vapour-liquid-solid
    triple point ends the vapour-pressure curve at its low end and the critical point at its
    high end, so Tt < Tc and pt < pc.

    Usual causes of a failure: a fit extrapolated beyond its data until it crosses another
    curve; curves of different solid phases mixed up; a triple or critical point in the wrong
    unit.
    """
    pairs = {fluid.fluid_id: _pairs(fluid) for fluid in batch}
    grids = _differences(batch, pairs, th)
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        _ordering(out, fluid)
        _coincident(out, fluid, t)
        _intersections(out, fluid, pairs[fluid.fluid_id], grids, t)
    return out
