"""Metastable extensions: a curve continued past the triple point lies where its phases are
metastable, so the stable curve there has the lower pressure."""

from __future__ import annotations

import numpy as np

from pipeline.checks.data import FluidData
from pipeline.checks.findings import judge, skipped
from pipeline.checks.physics import curve_label
from pipeline.checks.registry import register_check

#: side of the triple point -> (sign of T - Tt, curve expected higher, curve expected lower,
#: the phase that is metastable there)
SIDES = {
    "below": (-1, "vap", "sub", "supercooled liquid"),
    "above": (+1, "sub", "vap", "superheated solid"),
}


def _side(fluid: FluidData, tp, curves: dict, side: str, th):
    sign, high, low, phase = SIDES[side]
    n, w = int(th["n_points"]), th["window_fraction"]
    T = tp.T_K * (1 + sign * w * np.linspace(1.0 / n, 1.0, n))
    with np.errstate(invalid="ignore", divide="ignore"):
        p_high = np.asarray(curves[high].value(T, extrapolate=True), dtype=float)
        p_low = np.asarray(curves[low].value(T, extrapolate=True), dtype=float)
    ok = np.isfinite(p_high) & np.isfinite(p_low) & (p_low > 0)
    subject = f"{tp.label}|{side}"
    names = {"vap": "p_vap", "sub": "p_sub"}
    if not ok.any():
        return skipped(fluid.fluid_id, subject,
                       f"the curves cannot be extended {side} Tt (a form undefined there)")
    margin = (p_high[ok] - p_low[ok]) / p_low[ok]
    worst = int(np.argmin(margin))
    return judge(fluid.fluid_id, subject, measured=float(margin[worst]), limit=-th["rel_tol"],
                 upper=False, statistic=f"min ({names[high]} - {names[low]})/{names[low]}",
                 evidence={"Tt_K": tp.T_K, "T_range_K": [float(T[ok].min()), float(T[ok].max())],
                           "n_points": int(ok.sum()), "worst_T_K": float(T[ok][worst]),
                           f"worst_{names[high]}_Pa": float(p_high[ok][worst]),
                           f"worst_{names[low]}_Pa": float(p_low[ok][worst])},
                 context=f"{side} Tt = {tp.T_K:.6g} K ({phase}), {int(ok.sum())} points "
                         f"{T[ok].min():.5g}-{T[ok].max():.5g} K: {names[high]} must exceed "
                         f"{names[low]}; at {T[ok][worst]:.5g} K {p_high[ok][worst]:.5g} vs "
                         f"{p_low[ok][worst]:.5g} Pa")


@register_check("metastable.extensions", tags=("metastable", "triple-point", "curves"),
                purpose="Curves extended past the triple point lie in the metastable region.")
def extensions(fluid: FluidData, th):
    """Below the triple temperature the stable phase next to the vapour is the solid; the
    liquid there is supercooled (metastable), and a metastable phase has the higher chemical
    potential, hence the higher vapour pressure: for T < Tt, p_vap(T) > p_sub(T). Above Tt the
    roles swap (a superheated solid): p_sub(T) > p_vap(T). Both fitted curves are extended
    (extrapolate=True) over Tt (1 -/+ window_fraction) and their order is tested at n_points
    temperatures; the smallest relative margin is reported. A side where a curve's form is
    undefined (a non-integer power of 1 − T/Tt above Tt) is skipped.

    Usual causes of a failure: vaporization and sublimation fits that do not meet at the triple
    point; a curvature forced by a few distant points; sublimation data of another solid phase.
    """
    out = []
    for tp in fluid.triple_points:
        if not (tp.has_vapour and "liquid" in tp.phases):
            continue
        solid = next(p for p in tp.phases if p not in ("vapour", "liquid"))
        _, vap = fluid.curve_between("vapour", "liquid")
        skey, sub = fluid.curve_between("vapour", solid)
        if vap is None or sub is None:
            missing = "liquid-vapour" if vap is None else curve_label(skey)
            out.append(skipped(fluid.fluid_id, f"{tp.label}|below", f"no fitted {missing} curve"))
            continue
        curves = {"vap": vap, "sub": sub}
        out.extend(_side(fluid, tp, curves, side, th) for side in SIDES)
    return out
