"""Metastable extensions: a curve continued past the triple point lies where its phases are
metastable, so the stable curve there has the lower pressure."""

from __future__ import annotations

import math

import numpy as np

from pipeline.checks.curves import PointColumns, evaluate_point_columns
from pipeline.checks.data import CheckBatch, FluidData
from pipeline.checks.findings import Findings
from pipeline.checks.physics import curve_label
from pipeline.checks.registry import register_check

#: side of the triple point -> (sign of T - Tt, curve expected higher, curve expected lower,
#: the phase that is metastable there)
SIDES = {
    "below": (-1, "vap", "sub", "supercooled liquid"),
    "above": (+1, "sub", "vap", "superheated solid"),
}
NAMES = {"vap": "p_vap", "sub": "p_sub"}


def _temperatures(tp, sign: int, th) -> list[float]:
    """The n_points temperatures of one side: Tt (1 ± window_fraction k/n), k = 1..n."""
    n, w = int(th["n_points"]), th["window_fraction"]
    return [float(T) for T in tp.T_K * (1 + sign * w * np.linspace(1.0 / n, 1.0, n))]


def _side(out: Findings, fluid: FluidData, tp, side: str, points: PointColumns, rows, th) -> None:
    """One side of the triple point: ``rows`` are (T, row of the high curve, row of the low
    curve) in ``points``."""
    sign, high, low, phase = SIDES[side]
    subject = f"{tp.label}|{side}"
    found, reasons = [], []
    ok, value, unc, why = points.ok, points.value, points.u, points.reasons
    for T, ia, ib in rows:
        if not (ok[ia] and ok[ib]):
            reasons.append(why[ia] or why[ib])
            continue
        a, b = float(value[ia]), float(value[ib])
        u = math.hypot(float(unc[ia]), float(unc[ib]))
        found.append((float(T), a, b, u, (a - b) / u if u > 0 else math.nan, (a - b) / b))
    if not found:
        out.skip(fluid.fluid_id, subject, f"the curves cannot be extended {side} Tt = "
                                          f"{tp.T_K:.6g} K: {reasons[0]}")
        return
    T, p_high, p_low, u, z, margin = (np.array(c) for c in zip(*found))
    use_z = bool(np.all(np.isfinite(z)))
    stat = z if use_z else margin
    worst = int(np.argmin(stat))
    statistic = (f"min ({NAMES[high]} - {NAMES[low]})/u" if use_z
                 else f"min ({NAMES[high]} - {NAMES[low]})/{NAMES[low]}")
    limit = -th["z_max"] if use_z else -th["rel_tol"]
    out.judge(fluid.fluid_id, subject, measured=float(stat[worst]), limit=limit,
              upper=False, statistic=statistic,
              evidence={"Tt_K": tp.T_K, "T_range_K": [float(T.min()), float(T.max())],
                        "n_points": len(found), "not_evaluated": len(reasons),
                        "worst_T_K": float(T[worst]),
                        f"worst_{NAMES[high]}_Pa": float(p_high[worst]),
                        f"worst_{NAMES[low]}_Pa": float(p_low[worst]),
                        "worst_u_difference_Pa": float(u[worst]),
                        "worst_relative_margin": float(margin[worst])},
              context=f"{side} Tt = {tp.T_K:.6g} K ({phase}), {len(found)} points "
                      f"{T.min():.5g}-{T.max():.5g} K: {NAMES[high]} must exceed "
                      f"{NAMES[low]}; at {T[worst]:.5g} K {p_high[worst]:.5g} vs "
                      f"{p_low[worst]:.5g} Pa (u of the difference {u[worst]:.2g} Pa)")


def _extended(fluid: FluidData):
    """(triple point, curve keys, missing label) of each vapour-liquid-solid point."""
    out = []
    for tp in fluid.triple_points:
        if not (tp.has_vapour and "liquid" in tp.phases):
            continue
        solid = next(p for p in tp.phases if p not in ("vapour", "liquid"))
        vkey, vap = fluid.curve_between("vapour", "liquid")
        skey, sub = fluid.curve_between("vapour", solid)
        missing = curve_label(vkey) if vap is None else curve_label(skey) if sub is None else None
        out.append((tp, {"vap": vkey, "sub": skey}, missing))
    return out


@register_check("metastable.extensions", tags=("metastable", "triple-point", "curves"),
                vectorised=True,
                purpose="Curves extended past the triple point lie in the metastable region.")
def extensions(batch: CheckBatch, th) -> Findings:
    """Below the triple temperature the stable phase next to the vapour is the solid; the
    liquid there is supercooled (metastable), and a metastable phase has the higher chemical
    potential, hence the higher vapour pressure: for T < Tt, p_vap(T) > p_sub(T). Above Tt the
    roles swap (a superheated solid): p_sub(T) > p_vap(T). Both fitted curves are extended
    over Tt (1 -/+ window_fraction), at n_points temperatures, but only as far as the one
    extrapolation policy allows (a curve is never evaluated far from its data); the order is
    tested as z = (p_high − p_low)/u with u from both curves' budgets, so two curves that meet
    at Tt within their uncertainty do not fail just beside it. A side where a curve's form is
    undefined or the policy forbids every point is skipped with the reason.

    Usual causes of a failure: vaporization and sublimation fits that do not meet at the triple
    point; a curvature forced by a few distant points; sublimation data of another solid phase.
    """
    plan = {fluid.fluid_id: _extended(fluid) for fluid in batch}
    requests, rows = [], {}
    for fluid in batch:
        t = th(fluid.fluid_id)
        for tp, keys, missing in plan[fluid.fluid_id]:
            if missing is not None:
                continue
            for side, (sign, high, low, _) in SIDES.items():
                at = rows[(fluid.fluid_id, tp.label, side)] = []
                for T in _temperatures(tp, sign, t):
                    at.append((T, len(requests), len(requests) + 1))
                    requests += [(fluid, keys[high], T), (fluid, keys[low], T)]
    points = evaluate_point_columns(requests, slope_u=False)   # values and their u only
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        for tp, keys, missing in plan[fluid.fluid_id]:
            if missing is not None:
                out.skip(fluid.fluid_id, f"{tp.label}|below", f"no fitted {missing} curve")
                continue
            for side in SIDES:
                _side(out, fluid, tp, side, points, rows[(fluid.fluid_id, tp.label, side)], t)
    return out
