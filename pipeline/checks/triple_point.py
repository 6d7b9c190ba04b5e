"""Triple-point checks: the stated point lies on its three curves; the slopes meet as they must."""

from __future__ import annotations

import math

from pipeline.checks.data import FluidData
from pipeline.checks.findings import Finding, judge, skipped
from pipeline.checks.physics import curve_label, delta_v, density, enthalpy
from pipeline.checks.points import StatedPoint, u0
from pipeline.checks.registry import register_check
from pipeline.checks.stats import combined_u, deviation_statistic

#: curves steep in p(T): compared along T (melting slopes are MPa/K)
STEEP = {"solid-liquid", "solid-solid"}


def _on_curve(fluid: FluidData, tp: StatedPoint, a: str, b: str, th) -> Finding:
    key, fitted = fluid.curve_between(a, b)
    subject = f"{tp.label}|{curve_label(key)}"
    if fitted is None:
        return skipped(fluid.fluid_id, subject, f"no fitted {a}-{b} curve ({key[0]})")
    if not math.isfinite(tp.p_Pa):
        return skipped(fluid.fluid_id, subject, f"{tp.label} states no pressure")
    Tt, pt = tp.T_K, tp.p_Pa
    if not fitted.covers(Tt, th["max_extrapolation_K"]):
        return skipped(fluid.fluid_id, subject,
                       f"{curve_label(key)} fit range {fitted.T_min_K:.6g}-{fitted.T_max_K:.6g} K "
                       f"does not reach Tt = {Tt:.6g} K")
    p, slope, u_fit = fitted.near(Tt)
    u = combined_u(tp.u_p_Pa, slope * u0(tp.u_T_K), u_fit)
    dT = (p - pt) / slope if slope else math.nan
    evidence = {**tp.evidence(), **fitted.evidence(), "p_curve_Pa": p, "slope_Pa_K": slope,
                "u_fit_Pa": u_fit, "u_combined_Pa": u, "T_curve_minus_Tt_K": -dT}
    context = (f"{curve_label(key)} at Tt = {Tt:.6g} K gives {p:.6g} Pa vs pt = {pt:.6g} Pa "
               f"(the curve passes pt at Tt {-dT * 1e3:+.3g} mK)")
    if u > 0:
        dev = deviation_statistic(p - pt, pt, u, z_max=th["z_max"], rel_tol=th["rel_tol"])
        return judge(fluid.fluid_id, subject, measured=dev.measured, limit=dev.limit,
                     statistic=dev.statistic, context=context, evidence=evidence)
    if key[0] in STEEP:
        return judge(fluid.fluid_id, subject, measured=abs(dT), limit=th["T_tol_K"],
                     statistic="|T_curve(pt) - Tt| [K]", context=context, evidence=evidence)
    return judge(fluid.fluid_id, subject, measured=abs(p - pt) / pt, limit=th["rel_tol"],
                 statistic="|relative deviation|", context=context, evidence=evidence)


@register_check("triple-point.on-curves", tags=("triple-point", "curves"),
                purpose="Each stated triple point lies on the fitted curves of its phase pairs.")
def on_curves(fluid: FluidData, th):
    """Three phases coexist at a triple point, so each of the three two-phase curves meeting
    there passes through it: p_vap(Tt) = p_sub(Tt) = p_melt(Tt) = pt (for a solid-solid-liquid
    point, both melting curves and the solid-solid curve).

    For vapour and sublimation curves the test is z = (p(Tt) - pt) / u with
    u^2 = u_pt^2 + (dp/dT u_Tt)^2 + u_fit(Tt)^2. Melting curves are steep (MPa/K), so the same
    z is read along the steep direction and the message gives T_curve(pt) - Tt; without
    uncertainties that temperature difference is compared with T_tol_K.

    Usual causes of a failure: a fit whose reference point (ln pt) drifted because of a bad
    data set near Tt; a triple point stated on another temperature scale; a curve fitted to
    the wrong solid phase; a stated pt taken from a different equation of state.
    """
    return [_on_curve(fluid, tp, a, b, th) for tp in fluid.triple_points for a, b in tp.pairs()]


def _slopes_at(fluid: FluidData, tp: StatedPoint, th):
    solid = next(p for p in tp.phases if p not in ("vapour", "liquid"))
    (_, vap), (skey, sub) = fluid.curve_between("vapour", "liquid"), fluid.curve_between("vapour", solid)
    for name, fitted in (("liquid-vapour", vap), (curve_label(skey), sub)):
        if fitted is None:
            return None, f"no fitted {name} curve"
        if not fitted.covers(tp.T_K, th["max_extrapolation_K"]):
            return None, f"{name} fit does not reach Tt = {tp.T_K:.6g} K"
    s_vap, s_sub = vap.near(tp.T_K)[1], sub.near(tp.T_K)[1]
    return (solid, skey[1], s_vap, s_sub), None


def _expected_ratio(fluid: FluidData, tp: StatedPoint, solid_phase: str, th):
    """(1 + Δh_fus/Δh_vap) * (Δv_vap/Δv_sub) and its uncertainty, or None."""
    Tt, tol = tp.T_K, th["T_tol_K"]
    h_fus = enthalpy(fluid, "solid-liquid", solid_phase, Tt, tol, Tt)
    h_vap = enthalpy(fluid, "liquid-vapour", "", Tt, tol, Tt)
    if h_vap is None:
        h_sub = enthalpy(fluid, "solid-vapour", solid_phase, Tt, tol, Tt)
        if h_sub is None or h_fus is None:
            return None
        ratio_h, u_rel = h_sub.value / (h_sub.value - h_fus.value), math.nan
    elif h_fus is None:
        return None
    else:
        ratio_h = 1.0 + h_fus.value / h_vap.value
        u_rel = math.hypot(u0(h_fus.u) / h_vap.value, h_fus.value * u0(h_vap.u) / h_vap.value ** 2) / ratio_h
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
    return ratio_h * correction, u_rel * ratio_h * correction, evidence


@register_check("triple-point.slopes", tags=("triple-point", "clapeyron"),
                purpose="At a triple point the sublimation curve is steeper than the vapour-pressure curve.")
def slopes(fluid: FluidData, th):
    """At the vapour-liquid-solid triple point Δh_sub = Δh_fus + Δh_vap > Δh_vap while the
    volume changes are almost equal (the vapour dominates both), so by Clapeyron
    dp_sub/dT > dp_vap/dT at Tt, and

        (dp_sub/dT) / (dp_vap/dT) = (Δh_sub / Δh_vap) (Δv_vap / Δv_sub)
                                  ≈ 1 + Δh_fus / Δh_vap.

    The order is always tested; the ratio when Δh_fus and Δh_vap (or Δh_sub) at Tt are stored
    (stated constants or observations within T_tol_K of Tt); the volume factor is applied when
    the three densities are stored.

    Usual causes of a failure: sublimation and vaporization fits made from inconsistent data
    sets near Tt; a sublimation curve extrapolated far from its data; a fusion enthalpy in
    J/kg stored as J/mol.
    """
    out = []
    for tp in fluid.triple_points:
        if not (tp.has_vapour and "liquid" in tp.phases):
            continue
        subject = f"{tp.label}|order"
        found, reason = _slopes_at(fluid, tp, th)
        if found is None:
            out.append(skipped(fluid.fluid_id, subject, reason))
            continue
        solid, solid_phase, s_vap, s_sub = found
        ratio = s_sub / s_vap
        ev = {"T_K": tp.T_K, "slope_vap_Pa_K": s_vap, "slope_sub_Pa_K": s_sub, "ratio": ratio}
        out.append(judge(fluid.fluid_id, subject, measured=ratio, limit=1.0, upper=False,
                         ok=ratio > 1.0, statistic="dp_sub/dT / dp_vap/dT", evidence=ev,
                         context=f"slopes at Tt = {tp.T_K:.6g} K: sublimation {s_sub:.5g} Pa/K, "
                                 f"vaporization {s_vap:.5g} Pa/K"))
        expected = _expected_ratio(fluid, tp, solid_phase, th)
        if expected is None:
            continue
        value, u, ev_h = expected
        # the slopes of two fitted curves differentiated at their end point are not known
        # better than slope_rel_u (relative, standard); combined with u of the enthalpies
        u_slopes = th.get("slope_rel_u", 1e-3) * value
        u = math.hypot(u, u_slopes) if math.isfinite(u) else u_slopes
        dev = deviation_statistic(ratio - value, value, u, z_max=th["z_max"],
                                  rel_tol=th["rel_tol"])
        out.append(judge(fluid.fluid_id, f"{tp.label}|ratio", measured=dev.measured,
                         limit=dev.limit, statistic=dev.statistic, evidence={**ev, **ev_h,
                                                                            "expected": value},
                         context=f"slope ratio {ratio:.5g} vs 1 + Δh_fus/Δh_vap "
                                 f"(volume-corrected) = {value:.5g}"))
    return out
