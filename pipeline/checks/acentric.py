"""Acentric factor: a stated ω agrees with the one the vapour-pressure curve implies."""

from __future__ import annotations

import math

from pipeline.checks.data import CheckBatch, FluidData
from pipeline.checks.findings import Findings
from pipeline.checks.points import u0
from pipeline.checks.registry import register_check
from pipeline.checks.stats import deviation_statistic

LN10 = math.log(10.0)
T_REDUCED = 0.7


def omega_from_curve(fluid: FluidData, th=None):
    """(ω, u(ω), evidence) from the fitted vapour pressure at 0.7 Tc, or (None, reason)."""
    cp = fluid.critical_point
    if cp is None or not math.isfinite(cp.p_Pa):
        return None, "no stated critical temperature and pressure"
    T = T_REDUCED * cp.T_K
    point, reason = fluid.at(("liquid-vapour", "", "pressure"), T)
    if point is None:
        return None, reason
    p, slope = point.value, point.slope
    omega = -math.log10(p / cp.p_Pa) - 1.0
    d_omega_dTc = -T_REDUCED * slope / (p * LN10)
    u = math.sqrt((point.u / (p * LN10)) ** 2 + (u0(cp.u_p_Pa) / (cp.p_Pa * LN10)) ** 2
                  + (d_omega_dTc * u0(cp.u_T_K)) ** 2)
    return (omega, u, {"T_K": T, "p_vap_Pa": p, "pc_Pa": cp.p_Pa, "Tc_K": cp.T_K,
                       "u_fit_Pa": point.u, "curve": point.evidence(),
                       **fluid.curve("liquid-vapour").evidence()}), None


@register_check("acentric.factor", tags=("acentric", "critical", "curves"), vectorised=True,
                purpose="A stated acentric factor agrees with −log10(p_vap(0.7 Tc)/pc) − 1.")
def acentric_factor(batch: CheckBatch, th) -> Findings:
    """Pitzer's acentric factor is defined from the vapour pressure at the reduced temperature
    T/Tc = 0.7: ω = −log10(p_vap(0.7 Tc)/pc) − 1 (K. S. Pitzer et al., J. Am. Chem. Soc. 77,
    3433 (1955), from memory). The value implied by the fitted vapour-pressure curve and the
    stated critical point, with its uncertainty from the fit covariance, u(pc) and u(Tc)
    (dω/dTc = −0.7 (dp/dT)/(p ln 10)), is compared with each stated ω:
    z = (ω_stated − ω_curve)/sqrt(u_stated^2 + u_curve^2). Values without a stated uncertainty
    (ω, pc, Tc) take the budget's defaults for their source kind; the fit's uncertainty
    includes the correlated floor of its files; the curve is read at 0.7 Tc only within the
    extrapolation policy.

    Usual causes of a failure: ω computed with another Tc or pc; a value for another substance
    or isomer; ω taken from a cubic equation of state's fitted parameter.
    """
    batch.prefetch((fluid, ("liquid-vapour", "", "pressure"), T_REDUCED * fluid.critical_point.T_K)
                   for fluid in batch if fluid.critical_point is not None
                   and math.isfinite(fluid.critical_point.p_Pa)
                   and any(r["name"] == "acentric_factor" for r in fluid.constant_records))
    out = Findings()
    for fluid in batch:
        _acentric(out, fluid, th(fluid.fluid_id))
    return out


def _acentric(out: Findings, fluid: FluidData, th) -> None:
    stated = [r for r in fluid.constant_records if r["name"] == "acentric_factor"]
    if not stated:
        return
    found, reason = omega_from_curve(fluid)
    for r in stated:
        subject = f"source:{r['source_id']}"
        if found is None:
            out.skip(fluid.fluid_id, subject, reason)
            continue
        omega, u, ev = found
        diff = r["value_si"] - omega
        u_comb = math.hypot(u0(r["u_si"]), u)
        dev = deviation_statistic(diff, 1.0, u_comb, z_max=th["z_max"], rel_tol=th["abs_tol"])
        stat = dev.statistic if u_comb > 0 else "|Δω|"
        out.judge(fluid.fluid_id, subject, measured=dev.measured, limit=dev.limit,
                  statistic=stat, evidence={**ev, "omega_curve": omega, "u_omega_curve": u,
                                            "omega_stated": r["value_si"],
                                            "u_omega_stated": r["u_si"]},
                  context=f"stated ω = {r['value_si']:.4f} ({r['source_id']}) vs "
                          f"{omega:.4f} ± {u:.2g} from the vapour-pressure curve")
