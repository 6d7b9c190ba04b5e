"""Metastable extensions: a curve continued past the triple point lies where its phases are
metastable, so the stable curve there has the lower pressure."""

from __future__ import annotations

import math

import numpy as np

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


def _side(out: Findings, fluid: FluidData, tp, keys: dict, side: str, th) -> None:
    sign, high, low, phase = SIDES[side]
    subject = f"{tp.label}|{side}"
    rows, reasons = [], []
    for T in _temperatures(tp, sign, th):
        a, why_a = fluid.at(keys[high], float(T))
        b, why_b = fluid.at(keys[low], float(T))
        if a is None or b is None:
            reasons.append(why_a or why_b)
            continue
        u = math.hypot(a.u, b.u)
        rows.append((float(T), a.value, b.value, u, (a.value - b.value) / u if u > 0 else math.nan,
                     (a.value - b.value) / b.value))
    if not rows:
        out.skip(fluid.fluid_id, subject, f"the curves cannot be extended {side} Tt = "
                                          f"{tp.T_K:.6g} K: {reasons[0]}")
        return
    T, p_high, p_low, u, z, margin = (np.array(c) for c in zip(*rows))
    use_z = bool(np.all(np.isfinite(z)))
    stat = z if use_z else margin
    worst = int(np.argmin(stat))
    statistic = (f"min ({NAMES[high]} - {NAMES[low]})/u" if use_z
                 else f"min ({NAMES[high]} - {NAMES[low]})/{NAMES[low]}")
    limit = -th["z_max"] if use_z else -th["rel_tol"]
    out.judge(fluid.fluid_id, subject, measured=float(stat[worst]), limit=limit,
              upper=False, statistic=statistic,
              evidence={"Tt_K": tp.T_K, "T_range_K": [float(T.min()), float(T.max())],
                        "n_points": len(rows), "not_evaluated": len(reasons),
                        "worst_T_K": float(T[worst]),
                        f"worst_{NAMES[high]}_Pa": float(p_high[worst]),
                        f"worst_{NAMES[low]}_Pa": float(p_low[worst]),
                        "worst_u_difference_Pa": float(u[worst]),
                        "worst_relative_margin": float(margin[worst])},
              context=f"{side} Tt = {tp.T_K:.6g} K ({phase}), {len(rows)} points "
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
    batch.prefetch((fluid, key, T) for fluid in batch
                   for tp, keys, missing in plan[fluid.fluid_id] if missing is None
                   for sign, *_ in SIDES.values() for T in _temperatures(tp, sign, th(fluid.fluid_id))
                   for key in keys.values())
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        for tp, keys, missing in plan[fluid.fluid_id]:
            if missing is not None:
                out.skip(fluid.fluid_id, f"{tp.label}|below", f"no fitted {missing} curve")
                continue
            for side in SIDES:
                _side(out, fluid, tp, keys, side, t)
    return out
