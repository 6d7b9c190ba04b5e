"""Critical-point checks: the vapour-pressure curve ends at (Tc, pc); no boiling above Tc;
the saturated densities converge on (Tc, ρc)."""

from __future__ import annotations

import math

import numpy as np

from pipeline.checks.inputs import CheckBatch, FluidData
from pipeline.checks.findings import WARN, Findings
from pipeline.checks.points import u0
from pipeline.checks.registry import register_check
from pipeline.checks.stats import combined_u, deviation_statistic, linear_fit, linear_fits

LV = "liquid-vapour"


@register_check("critical.curve-end", tags=("critical", "curves"), vectorised=True,
                purpose="The vapour-pressure fit reaches the critical point and p_vap(Tc) = pc.")
def curve_end(batch: CheckBatch, th) -> Findings:
    """The liquid-vapour curve ends at the critical point. Two statements are tested:

    - reach: the fitted vapour pressure does not extend above Tc (beyond T_tol_K and z_max
      u(Tc)): data above Tc contradict the stated critical point and fail. Data that stop
      short of Tc by more than the extrapolation policy allows are a coverage gap, not a
      contradiction: a warning that names the gap, and p_vap(Tc) is not tested;
    - p(Tc): where the fit reaches Tc within the policy, p_vap(Tc) = pc. With the
      fitted-reference convention (ln pc a fitted parameter, Tc fixed) this is a real test:
      z = (p_vap(Tc) − pc) / u, u^2 = u_pc^2 + (dp/dT u_Tc)^2 + u_fit(Tc)^2, where u_pc and u_Tc
      take the budget's defaults when the source states none and u_fit includes the
      correlated floor of the files.

    Usual causes of a failure: a stated critical pressure from another source than the data;
    data above Tc included in the fit; a critical temperature in another unit or scale.
    """
    batch.prefetch((fluid, (LV, "", "pressure"), fluid.critical_point.T_K) for fluid in batch
                   if fluid.critical_point is not None and fluid.curve(LV) is not None)
    out = Findings()
    for fluid in batch:
        _curve_end(out, fluid, th(fluid.fluid_id))
    return out


def _curve_end(out: Findings, fluid: FluidData, th) -> None:
    cp, fitted = fluid.critical_point, fluid.curve(LV)
    if cp is None or fitted is None:
        missing = "stated critical point" if cp is None else "fitted vapour-pressure curve"
        out.skip(fluid.fluid_id, "reach", f"no {missing}")
        return
    Tc, pc = cp.T_K, cp.p_Pa
    gap = (Tc - fitted.T_max_K) / Tc
    margin = th["T_tol_K"] + th["z_max"] * u0(cp.u_T_K)
    above = fitted.T_max_K > Tc + margin
    point, reason = fluid.at((LV, "", "pressure"), Tc)
    ev = {**cp.evidence(), **fitted.evidence(), "gap_fraction": gap,
          "allowed_gap_K": fluid.budget.extrapolation.allowed(Tc)}
    context = f"fit ends at {fitted.T_max_K:.6g} K, Tc = {Tc:.6g} K"
    if above:
        out.judge(fluid.fluid_id, "reach", measured=fitted.T_max_K - Tc, limit=margin,
                  statistic="T_max - Tc [K]", evidence=ev,
                  context=context + " (the fit extends above Tc: no vapour pressure exists there)")
    elif point is None:
        out.add(fluid.fluid_id, "reach", WARN,
                f"coverage gap: the vapour-pressure data end at {fitted.T_max_K:.6g} K = "
                f"{fitted.T_max_K / Tc:.3g} Tc, short of Tc = {Tc:.6g} K ({reason}); "
                f"p_vap(Tc) = pc is not tested", gap, None, "(Tc - T_max)/Tc", ev)
    else:
        out.judge(fluid.fluid_id, "reach", measured=gap, limit=ev["allowed_gap_K"] / Tc,
                  ok=True, statistic="(Tc - T_max)/Tc", evidence=ev,
                  context=context + " (within the extrapolation policy)")
    if not math.isfinite(pc):
        out.skip(fluid.fluid_id, "p(Tc)", "the critical point states no pressure")
        return
    if point is None:
        out.skip(fluid.fluid_id, "p(Tc)", reason or "the fit does not reach Tc")
        return
    p, u_fit = point.value, point.u
    u = combined_u(cp.u_p_Pa, point.slope * u0(cp.u_T_K), u_fit)
    dev = deviation_statistic(p - pc, pc, u, z_max=th["z_max"], rel_tol=th["rel_tol"])
    out.judge(fluid.fluid_id, "p(Tc)", measured=dev.measured, limit=dev.limit,
              statistic=dev.statistic,
              evidence={**ev, "p_curve_Pa": p, "u_fit_Pa": u_fit, "u_combined_Pa": u,
                        "curve": point.evidence()},
              context=f"p_vap(Tc = {Tc:.6g} K) = {p:.6g} Pa vs pc = {pc:.6g} Pa "
                      f"({(p / pc - 1) * 100:+.3g} %)")


@register_check("critical.no-vle-above-tc", tags=("critical", "data"), vectorised=True,
                purpose="No liquid-vapour observation lies above the critical temperature.")
def no_vle_above_tc(batch: CheckBatch, th):
    """Above the critical temperature liquid and vapour are one phase: there is no boiling and
    no vapour pressure. Every liquid-vapour observation (pressure or saturated density) must
    have T <= Tc within its uncertainty: a point is above Tc when, for every stated critical
    temperature Tc_i (each source's own, with its uncertainty or the budget's default),
    T − Tc_i > max(T_tol_K, z_max sqrt(u_T^2 + u_Tc_i^2)): points sampled up to the critical
    point of their own equation contradict nothing while sources differ on Tc (that is
    sources.agreement's finding). The offending observation ids, files and rows are named.

    Usual causes of a failure: supercritical isotherm or dew/bubble data of a mixture filed as
    vapour pressure; a temperature column in another unit or scale; a stated Tc that is too low.
    """
    out = Findings()
    for fluid in batch:
        cp, fid = fluid.critical_point, fluid.fluid_id
        t = th(fid)
        groups = [idx for key, idx in fluid._groups.items() if key[0] == LV]
        if cp is None or not groups:
            out.skip(fid, "", "no stated critical point" if cp is None
                     else "no liquid-vapour observations")
            continue
        idx = np.sort(np.concatenate(groups))
        cols = fluid._columns
        stated = [(r["T_K"], u0(r["u_T_K"]), r["source_id"]) for r in fluid.fixed_point_records
                  if r["kind"] == "critical" and math.isfinite(r["T_K"])]
        T = cols["T_K"][idx].astype(float)
        u = np.nan_to_num(cols["u_T_K"][idx].astype(float))
        # above Tc means above every stated critical temperature, each by more than its margin
        margins = [Tc_i + np.maximum(t["T_tol_K"], t["z_max"] * np.sqrt(u ** 2 + u_i ** 2))
                   for Tc_i, u_i, _ in stated]
        bound = np.max(margins, axis=0)
        bad = idx[T > bound]
        highest = max(stated, key=lambda s: s[0])
        refs = [{"obs_id": int(cols["obs_id"][i]), "file": str(cols["file_path"][i]),
                 "row": int(cols["row_number"][i]), "quantity": str(cols["quantity"][i]),
                 "T_K": float(cols["T_K"][i])} for i in bad[:20]]
        named = "; ".join(f"obs {r['obs_id']} ({r['file']} row {r['row']}, T = {r['T_K']:.6g} K)"
                          for r in refs[:5])
        worst = float((T - cp.T_K).max())
        where = (f"Tc = {cp.T_K:.6g} K" if len(stated) == 1 else
                 f"every stated Tc (consensus {cp.T_K:.6g} K, highest {highest[0]:.6g} K from "
                 f"{highest[2]})")
        out.judge(fid, "", measured=float(len(bad)), limit=0.0,
                  statistic="observations above Tc",
                  evidence={"Tc_K": cp.T_K, "u_Tc_K": cp.u_T_K, "max_T_minus_Tc_K": worst,
                            "stated_Tc_K": [{"T_K": s[0], "u_K": s[1], "source": s[2]}
                                            for s in stated],
                            "n_observations": int(len(idx)), "above": refs},
                  context=(f"{len(bad)} of {len(idx)} liquid-vapour observations above "
                           f"{where}" + (f": {named}" if named else
                                         f" (highest T - Tc = {worst:.4g} K)")))
    return out


def _means_at(keys: np.ndarray, values: np.ndarray, at: np.ndarray) -> np.ndarray:
    """The mean of ``values`` over the rows whose key equals each of ``at`` (sorted, present):
    a single row's value as it is, several rows' mean as numpy's ``mean`` gives it."""
    order = np.argsort(keys, kind="stable")
    lo = np.searchsorted(keys, at, side="left", sorter=order)
    hi = np.searchsorted(keys, at, side="right", sorter=order)
    out = values[order[lo]].astype(float)
    for i in np.flatnonzero(hi - lo > 1):
        out[i] = values[keys == at[i]].mean()
    return out


def _paired_densities(fluid: FluidData, Tc: float, th):
    """(T, ρ', ρ'', basis) near Tc from observations at equal T, else from the fitted curves."""
    liq, vap = fluid.series(LV, "rho_liquid"), fluid.series(LV, "rho_vapour")
    lo = th["Tr_min"] * Tc
    if len(liq) and len(vap):
        key_l = np.round(liq.T, 3)
        key_v = np.round(vap.T, 3)
        common = np.intersect1d(key_l[key_l >= lo], key_v[key_v >= lo])
        if len(common) >= th["min_points"]:
            rl, rv = _means_at(key_l, liq.value, common), _means_at(key_v, vap.value, common)
            return common.astype(float), rl, rv, "observations"
    fl, fv = fluid.curve(LV, "", "rho_liquid"), fluid.curve(LV, "", "rho_vapour")
    if fl is None or fv is None:
        return None
    a, b = max(lo, fl.T_min_K, fv.T_min_K), min(Tc, fl.T_max_K, fv.T_max_K)
    if b <= a:
        return None
    T = np.linspace(a, b, int(th["n_grid"]) + 1)[:-1] if b >= Tc else np.linspace(a, b, int(th["n_grid"]))
    return T, np.asarray(fl.value(T), float), np.asarray(fv.value(T), float), "fitted curves"


def _lines(T, rl, rv, beta) -> tuple[tuple, tuple]:
    """The two straight lines in T: (ρ'−ρ'')^(1/β) and the diameter (ρ'+ρ'')/2 (x, y each)."""
    return (T, (rl - rv) ** (1.0 / beta)), (T, (rl + rv) / 2.0)


def _estimate(T, rl, rv, beta):
    """Tc from (ρ'−ρ'')^(1/β) linear in T; ρc from the rectilinear diameter at that Tc."""
    return _estimate_from(*(linear_fit(x, y) for x, y in _lines(T, rl, rv, beta)))


def _estimate_from(scaling, diameter):
    """(Tc, u(Tc), ρc, u(ρc), diameter slope) from the two fitted lines (params, covariance)."""
    (a, b), cov = scaling
    Tc = -a / b
    g = np.array([-1.0 / b, a / b ** 2])
    u_Tc = math.sqrt(max(g @ cov @ g, 0.0))
    (c0, c1), cov_d = diameter
    rhoc = c0 + c1 * Tc
    gd = np.array([1.0, Tc])
    u_rhoc = math.sqrt(max(gd @ cov_d @ gd + (c1 * u_Tc) ** 2, 0.0))
    return Tc, u_Tc, rhoc, u_rhoc, float(c1)


@register_check("critical.density-convergence", tags=("critical", "densities"), vectorised=True,
                purpose="Saturated liquid and vapour densities converge on the stated (Tc, ρc).")
def density_convergence(batch: CheckBatch, th) -> Findings:
    """Near the critical point the coexisting densities follow the scaling law
    ρ' − ρ'' = B (1 − T/Tc)^β with β ≈ 0.326 (E. A. Guggenheim, J. Chem. Phys. 13, 253 (1945),
    with the modern exponent), and their mean follows the law of the rectilinear diameter
    (ρ' + ρ'')/2 = ρc + A (1 − T/Tc) (L. Cailletet and E. Mathias, C. R. Acad. Sci. 102, 1202
    (1886)). So (ρ' − ρ'')^(1/β) is linear in T and vanishes at Tc: a straight-line fit over
    T/Tc >= Tr_min gives an estimate of Tc, and the diameter line at that temperature an
    estimate of ρc. Both are compared with the stated critical point within Tc_rel_tol and
    rhoc_rel_tol (the laws are asymptotic, so a tolerance, not a z-score, decides; the
    regression uncertainties are in the evidence). Densities are observations of ρ' and ρ''
    at equal temperatures, else the fitted saturated-density curves.

    Usual causes of a failure: a stated Tc or ρc from another source than the densities;
    liquid and vapour density columns swapped or in different units; near-critical data
    measured on another temperature scale.
    """
    out = Findings()
    plans = [(fluid, t, _convergence_plan(fluid, t)) for fluid, t in
             ((f, th(f.fluid_id)) for f in batch)]
    lines = [line for _, t, plan in plans if plan is not None
             for line in _lines(plan[0], plan[1], plan[2], t["beta"])]
    fits = iter(linear_fits([x for x, _ in lines], [y for _, y in lines]))   # all fluids' lines at once
    for fluid, t, plan in plans:
        _convergence(out, fluid, t, plan, None if plan is None else (next(fits), next(fits)))
    return out


def _convergence_plan(fluid: FluidData, th):
    """(T, ρ', ρ'', basis) to fit, or None (the fluid gets a skip)."""
    cp = fluid.critical_point
    if cp is None:
        return None
    pairs = _paired_densities(fluid, cp.T_K, th)
    if pairs is None or len(pairs[0]) < th["min_points"]:
        return None
    return pairs


def _convergence(out: Findings, fluid: FluidData, th, pairs, fits) -> None:
    cp = fluid.critical_point
    if cp is None:
        out.skip(fluid.fluid_id, "Tc", "no stated critical point")
        return
    if pairs is None:
        out.skip(fluid.fluid_id, "Tc", f"fewer than {th['min_points']} pairs of saturated "
                                       f"densities with T/Tc >= {th['Tr_min']}")
        return
    T, rl, rv, basis = pairs
    Tc, u_Tc, rhoc, u_rhoc, slope_d = _estimate_from(*fits)
    ev = {"basis": basis, "n_points": int(len(T)), "T_range_K": [float(T.min()), float(T.max())],
          "Tc_estimate_K": Tc, "u_Tc_estimate_K": u_Tc, "rhoc_estimate_kg_m3": rhoc,
          "u_rhoc_estimate_kg_m3": u_rhoc, "diameter_slope_kg_m3_K": slope_d,
          "beta": th["beta"], **cp.evidence()}
    out.judge(fluid.fluid_id, "Tc", measured=abs(Tc / cp.T_K - 1), limit=th["Tc_rel_tol"],
              statistic="|Tc_est/Tc - 1|", evidence=ev,
              context=f"scaling law on {len(T)} {basis} gives Tc = {Tc:.6g} ± {u_Tc:.2g} K "
                      f"vs stated {cp.T_K:.6g} K")
    if math.isfinite(cp.rho_kg_m3):
        out.judge(fluid.fluid_id, "rhoc", measured=abs(rhoc / cp.rho_kg_m3 - 1),
                  limit=th["rhoc_rel_tol"], statistic="|rhoc_est/rhoc - 1|", evidence=ev,
                  context=f"rectilinear diameter gives ρc = {rhoc:.5g} ± {u_rhoc:.2g} kg/m3 "
                          f"vs stated {cp.rho_kg_m3:.5g} kg/m3")
