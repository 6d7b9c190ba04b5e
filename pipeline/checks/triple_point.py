"""Triple-point checks: the stated point lies on its three curves; the slopes meet as they must."""

from __future__ import annotations

import math

import numpy as np

from pipeline.checks.data import CheckBatch, FluidData
from pipeline.checks.findings import Findings
from pipeline.checks.physics import curve_label, delta_v, density, enthalpy, lookup_requests
from pipeline.checks.points import StatedPoint, u0
from pipeline.checks.registry import register_check
from pipeline.checks.stats import combined_u, deviation_statistic

#: curves steep in p(T): compared along T (melting slopes are MPa/K)
STEEP = {"solid-liquid", "solid-solid"}


def _context(label: str, Tt: float, p: float, pt: float, what: str, dT: float) -> str:
    return (f"{label} at Tt = {Tt:.6g} K gives {p:.6g} Pa vs {what} = {pt:.6g} Pa "
            f"(the curve passes it at Tt {-dT * 1e3:+.3g} mK)")


def _on_curve(out: Findings, fluid: FluidData, tp: StatedPoint, key, point, th) -> None:
    """The curve ``key`` at Tt against the stated pt."""
    subject, label = f"{tp.label}|{curve_label(key)}", curve_label(key)
    Tt, pt, slope = tp.T_K, tp.p_Pa, point.slope
    u = combined_u(tp.u_p_Pa, slope * u0(tp.u_T_K), point.u)
    dT = (point.value - pt) / slope if slope else math.nan
    evidence = {**tp.evidence(), **fluid.curves[key].evidence(), "p_curve_Pa": point.value,
                "slope_Pa_K": slope, "u_fit_Pa": point.u, "u_combined_Pa": u,
                "curve": point.evidence(), "T_curve_minus_Tt_K": -dT}
    context = _context(label, Tt, point.value, pt, "pt", dT)
    if key[0] in STEEP and not u > 0:
        out.judge(fluid.fluid_id, subject, measured=abs(dT), limit=th["T_tol_K"],
                  statistic="|T_curve(pt) - Tt| [K]", context=context, evidence=evidence)
        return
    dev = deviation_statistic(point.value - pt, pt, u, z_max=th["z_max"], rel_tol=th["rel_tol"])
    out.judge(fluid.fluid_id, subject, measured=dev.measured, limit=dev.limit,
              statistic=dev.statistic, context=context, evidence=evidence)


def _curves_meet(out: Findings, fluid: FluidData, tp: StatedPoint, found: dict, th) -> None:
    """A temperature-only triple point: each curve at Tt against the others' weighted mean.

    Without a stated pt the curves can still be tested against each other: they must meet at
    Tt. Each curve's u includes dp/dT u(Tt), so a steep melting curve weighs almost nothing in
    the others' mean and is itself judged along T.
    """
    u = {k: math.hypot(pt.u, pt.slope * u0(tp.u_T_K)) for k, pt in found.items()}
    for key, point in found.items():
        others = [k for k in found if k != key and u[k] > 0]
        subject = f"{tp.label}|{curve_label(key)}"
        if not others:
            out.skip(fluid.fluid_id, subject, f"{tp.label} states no pressure and no other curve "
                                              "reaches Tt to compare with")
            continue
        w = np.array([1.0 / u[k] ** 2 for k in others])
        mean = float(np.sum(w * [found[k].value for k in others]) / w.sum())
        u_mean = 1.0 / math.sqrt(w.sum())
        uc = math.hypot(u[key], u_mean)
        dT = (point.value - mean) / point.slope if point.slope else math.nan
        names = ", ".join(curve_label(k) for k in others)
        dev = deviation_statistic(point.value - mean, mean, uc, z_max=th["z_max"],
                                  rel_tol=th["rel_tol"])
        out.judge(fluid.fluid_id, subject, measured=dev.measured, limit=dev.limit,
                  statistic=dev.statistic,
                  evidence={**tp.evidence(), "p_curve_Pa": point.value,
                            "curve": point.evidence(), "p_others_Pa": mean,
                            "u_others_Pa": u_mean, "others": names, "u_combined_Pa": uc},
                  context=_context(curve_label(key), tp.T_K, point.value, mean,
                                   f"the other curves ({names}; no stated pt)", dT))


def _pair_keys(fluid: FluidData, tp: StatedPoint) -> list:
    """The curve key of each phase pair meeting at ``tp``."""
    return [fluid.curve_between(a, b)[0] for a, b in tp.pairs()]


@register_check("triple-point.on-curves", tags=("triple-point", "curves"), vectorised=True,
                purpose="Each stated triple point lies on the fitted curves of its phase pairs.")
def on_curves(batch: CheckBatch, th) -> Findings:
    """Three phases coexist at a triple point, so each of the three two-phase curves meeting
    there passes through it: p_vap(Tt) = p_sub(Tt) = p_melt(Tt) = pt (for a solid-solid-liquid
    point, both melting curves and the solid-solid curve).

    The test is z = (p(Tt) - pt) / u with u^2 = u_pt^2 + (dp/dT u_Tt)^2 + u_fit(Tt)^2, all from
    the one uncertainty budget: stated values without an uncertainty take the documented
    default of their source kind, and u_fit never falls below the correlated part of the best
    file the curve was fitted to (points of one file or one equation are not independent), so
    hundreds of points sampled from one equation do not shrink it. Melting curves are steep
    (MPa/K), so the same z is read along the steep direction: the message gives
    T_curve(pt) - Tt. A triple point stated by temperature alone (common in compilations) is
    tested by comparing the curves with each other at Tt. A curve is evaluated at Tt only
    within the extrapolation policy; otherwise the result is a skip naming it.

    Usual causes of a failure: a fit whose reference point (ln pt) drifted because of a bad
    data set near Tt; a triple point stated on another temperature scale; a curve fitted to
    the wrong solid phase; a stated pt taken from a different equation of state.
    """
    batch.prefetch((fluid, key, tp.T_K) for fluid in batch for tp in fluid.triple_points
                   for key in _pair_keys(fluid, tp))
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        for tp in fluid.triple_points:
            found = {}
            for key in _pair_keys(fluid, tp):
                point, reason = fluid.at(key, tp.T_K)
                if point is None:
                    out.skip(fluid.fluid_id, f"{tp.label}|{curve_label(key)}", reason)
                else:
                    found[key] = point
            if math.isfinite(tp.p_Pa):
                for key, point in found.items():
                    _on_curve(out, fluid, tp, key, point, t)
            else:
                _curves_meet(out, fluid, tp, found, t)
    return out


def _slope_keys(fluid: FluidData, tp: StatedPoint):
    """The vapour-pressure and sublimation curve keys at a vapour-liquid-solid point."""
    solid = next(p for p in tp.phases if p not in ("vapour", "liquid"))
    return fluid.curve_between("vapour", "liquid")[0], fluid.curve_between("vapour", solid)[0]


def _slopes_at(fluid: FluidData, tp: StatedPoint):
    vkey, skey = _slope_keys(fluid, tp)
    points = []
    for key in (vkey, skey):
        point, reason = fluid.at(key, tp.T_K)
        if point is None:
            return None, reason
        points.append(point)
    return (skey[1], *points), None


def _expected_ratio(fluid: FluidData, tp: StatedPoint, solid_phase: str, th):
    """(1 + Δh_fus/Δh_vap) * (Δv_vap/Δv_sub), its standard uncertainty and evidence, or None."""
    Tt, tol = tp.T_K, th["T_tol_K"]
    h_fus = enthalpy(fluid, "solid-liquid", solid_phase, Tt, tol, Tt)
    h_vap = enthalpy(fluid, "liquid-vapour", "", Tt, tol, Tt)
    if h_vap is None:
        h_sub = enthalpy(fluid, "solid-vapour", solid_phase, Tt, tol, Tt)
        if h_sub is None or h_fus is None:
            return None
        # ratio = h_sub / (h_sub - h_fus)
        d = h_sub.value - h_fus.value
        ratio_h = h_sub.value / d
        u_h = math.hypot(u0(h_sub.u) * h_fus.value / d ** 2, u0(h_fus.u) * h_sub.value / d ** 2)
    elif h_fus is None:
        return None
    else:
        ratio_h = 1.0 + h_fus.value / h_vap.value
        u_h = math.hypot(u0(h_fus.u) / h_vap.value, h_fus.value * u0(h_vap.u) / h_vap.value ** 2)
    rho = {ph: density(fluid, ph, b, s, Tt, tol) for ph, b, s in
           (("liquid", "liquid-vapour", ""), ("vapour", "liquid-vapour", ""),
            ("solid", "solid-vapour", solid_phase))}
    correction = 1.0
    if all(rho.values()):
        dv_vap, _ = delta_v(fluid.molar_mass, rho["liquid"], rho["vapour"])
        dv_sub, _ = delta_v(fluid.molar_mass, rho["solid"], rho["vapour"])
        correction = dv_vap / dv_sub
    evidence = {"h_fusion_J_mol": h_fus.evidence() if h_fus else None,
                "h_vaporization_J_mol": h_vap.evidence() if h_vap else None,
                "volume_correction": correction}
    return ratio_h * correction, u_h * correction, evidence


def _vapour_liquid_points(fluid: FluidData) -> list[StatedPoint]:
    return [tp for tp in fluid.triple_points if tp.has_vapour and "liquid" in tp.phases]


@register_check("triple-point.slopes", tags=("triple-point", "clapeyron"), vectorised=True,
                purpose="At a triple point the sublimation curve is steeper than the vapour-pressure curve.")
def slopes(batch: CheckBatch, th) -> Findings:
    """At the vapour-liquid-solid triple point Δh_sub = Δh_fus + Δh_vap > Δh_vap while the
    volume changes are almost equal (the vapour dominates both), so by Clapeyron
    dp_sub/dT > dp_vap/dT at Tt, and

        (dp_sub/dT) / (dp_vap/dT) = (Δh_sub / Δh_vap) (Δv_vap / Δv_sub)
                                  ≈ 1 + Δh_fus / Δh_vap.

    The order is always tested (a ratio below 1 by more than z_max standard uncertainties
    fails); the ratio when Δh_fus and Δh_vap (or Δh_sub) at Tt are stored (stated constants or
    observations within T_tol_K of Tt); the volume factor is applied when the three densities
    are stored. The slopes' uncertainties come from the fits' covariance (delta method) and
    the correlated floor of their files; enthalpies without a stated uncertainty take the
    budget's defaults. Both slopes are read within the extrapolation policy.

    Usual causes of a failure: sublimation and vaporization fits made from inconsistent data
    sets near Tt; a sublimation curve extrapolated far from its data; a fusion enthalpy in
    J/kg stored as J/mol.
    """
    batch.prefetch(request for fluid in batch for tp in _vapour_liquid_points(fluid)
                   for request in ([(fluid, key, tp.T_K) for key in _slope_keys(fluid, tp)]
                                   + lookup_requests(fluid, tp.T_K)))
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        for tp in _vapour_liquid_points(fluid):
            _slopes_of(out, fluid, tp, t)
    return out


def _slopes_of(out: Findings, fluid: FluidData, tp: StatedPoint, th) -> None:
    """The order of the two slopes at ``tp`` and, with the enthalpies, their ratio."""
    subject = f"{tp.label}|order"
    found, reason = _slopes_at(fluid, tp)
    if found is None:
        out.skip(fluid.fluid_id, subject, reason)
        return
    solid_phase, vap, sub = found
    ratio = sub.slope / vap.slope
    u_ratio = abs(ratio) * math.hypot(vap.u_slope / vap.slope, sub.u_slope / sub.slope)
    ev = {"T_K": tp.T_K, "slope_vap_Pa_K": vap.slope, "slope_sub_Pa_K": sub.slope,
          "u_slope_vap_Pa_K": vap.u_slope, "u_slope_sub_Pa_K": sub.u_slope,
          "ratio": ratio, "u_ratio": u_ratio}
    z_order = (ratio - 1.0) / u_ratio if u_ratio > 0 else math.copysign(math.inf, ratio - 1.0)
    out.judge(fluid.fluid_id, subject, measured=ratio, limit=1.0, upper=False,
              ok=ratio > 1.0 or z_order >= -th["z_max"],
              statistic="dp_sub/dT / dp_vap/dT", evidence=ev,
              context=f"slopes at Tt = {tp.T_K:.6g} K: sublimation {sub.slope:.5g} ± "
                      f"{sub.u_slope:.2g} Pa/K, vaporization {vap.slope:.5g} ± "
                      f"{vap.u_slope:.2g} Pa/K")
    expected = _expected_ratio(fluid, tp, solid_phase, th)
    if expected is None:
        return
    value, u_h, ev_h = expected
    u = math.hypot(u_h, u_ratio)
    dev = deviation_statistic(ratio - value, value, u, z_max=th["z_max"], rel_tol=th["rel_tol"])
    out.judge(fluid.fluid_id, f"{tp.label}|ratio", measured=dev.measured, limit=dev.limit,
              statistic=dev.statistic,
              evidence={**ev, **ev_h, "expected": value, "u_expected": u_h, "u_combined": u},
              context=f"slope ratio {ratio:.5g} ± {u_ratio:.2g} vs 1 + Δh_fus/Δh_vap "
                      f"(volume-corrected) = {value:.5g} ± {u_h:.2g}")
