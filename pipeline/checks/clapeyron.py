"""Clapeyron checks: slope signs from density changes, slope magnitudes from Δh/(TΔv).

Clapeyron's equation along any two-phase boundary of a pure substance,

    dp/dT = Δh / (T Δv),

with Δh the molar enthalpy and Δv the molar volume of transition (B. P. E. Clapeyron, J. Éc.
Polytech. 14, 153 (1834); R. Clausius, Ann. Phys. 157, 353 (1850)).
"""

from __future__ import annotations

import math

import numpy as np

from pipeline.checks.curves import grids
from pipeline.checks.inputs import CheckBatch, FittedCurve, FluidData, ObsSeries
from pipeline.checks.findings import Findings
from pipeline.checks.physics import (
    PHASES_OF,
    curve_label,
    delta_v,
    density,
    enthalpy,
    lookup_requests,
    vapour_density_estimate,
)
from pipeline.checks.points import SINGLE_SOLID
from pipeline.checks.registry import register_check
from pipeline.checks.stats import deviation_statistic, linear_fit, linear_fits

_SIGN_WORD = {1: "positive", -1: "negative"}
_T_CLAMP = 1e6  # |t| of an exactly linear series


def _reference_T(fluid: FluidData, solid_phase: str, rho_solid: ObsSeries) -> float | None:
    tp = fluid.vapour_triple_point(solid_phase or SINGLE_SOLID)
    if tp is not None:
        return tp.T_K
    return float(np.median(rho_solid.T)) if len(rho_solid) else None


def expected_melting_sign(fluid: FluidData, solid_phase: str, th):
    """sign(ρ_solid − ρ_liquid) with its evidence, or (None, reason)."""
    solid_obs = fluid.series("solid-liquid", "rho_solid", solid_phase)
    T = _reference_T(fluid, solid_phase, solid_obs)
    if T is None:
        return None, "no solid density stored and no triple point to read it at"
    tol = th["density_T_tol_K"]
    rho_s = density(fluid, "solid", "solid-liquid", solid_phase, T, tol)
    rho_l = density(fluid, "liquid", "solid-liquid", solid_phase, T, tol)
    if rho_s is None or rho_l is None:
        missing = " and ".join(n for n, r in (("solid", rho_s), ("liquid", rho_l)) if r is None)
        return None, f"no {missing} density within {tol:g} K of {T:.6g} K"
    diff = rho_s.value - rho_l.value
    u = math.hypot(*(0.0 if not math.isfinite(r.u) else r.u for r in (rho_s, rho_l)))
    evidence = {"T_K": T, "rho_solid": rho_s.evidence(), "rho_liquid": rho_l.evidence(),
                "rho_solid_minus_liquid_kg_m3": diff}
    if diff == 0 or abs(diff) <= th["density_z"] * u:
        return None, (f"ρ_solid − ρ_liquid = {diff:.4g} ± {u:.2g} kg/m3 does not fix the sign")
    return (1 if diff > 0 else -1, evidence), None


def sign_from_triple_point(fluid: FluidData, solid_phase: str, series: ObsSeries):
    """The melting slope's sign from where the melting data lie, or (None, reason).

    Melting pressures never fall below the triple point where the melting curve starts (the
    lowest-pressure triple point of that solid with the liquid: with the vapour where there is
    one). So a melting series lying at temperatures above that point's Tt rises, one below it
    falls (ice Ih), whatever the densities.
    """
    label = solid_phase or SINGLE_SOLID
    starts = [tp for tp in fluid.triple_points
              if "liquid" in tp.phases and label in tp.phases and np.isfinite(tp.T_K)]
    if not starts or not len(series):
        return None, "no triple point of that solid with the liquid to start the melting curve"
    start = min(starts, key=lambda tp: (not tp.has_vapour,
                                        tp.p_Pa if np.isfinite(tp.p_Pa) else np.inf))
    T_mid = float(np.median(series.T))
    tol = max(0.01, 3.0 * (start.u_T_K if np.isfinite(start.u_T_K) else 0.0))
    if abs(T_mid - start.T_K) <= tol:
        return None, f"the melting data lie at the triple-point temperature {start.T_K:.6g} K"
    sign = 1 if T_mid > start.T_K else -1
    return (sign, {"basis": "position of the melting data", "start": start.label,
                   "Tt_K": start.T_K, "median_T_K": T_mid}), None


def _fitted_sign(out: Findings, fluid: FluidData, key, fitted: FittedCurve, grid, sign: int,
                 basis: str, evidence: dict) -> None:
    T, slope = grid
    worst = float(np.fmin.reduce(sign * slope))      # np.nanmin without its warning check
    context = (f"{curve_label(key)} fit: dp/dT from {np.fmin.reduce(slope):.4g} to "
               f"{np.fmax.reduce(slope):.4g} Pa/K over {T[0]:.6g}-{T[-1]:.6g} K; {basis} so the "
               f"slope must be {_SIGN_WORD[sign]}")
    out.judge(fluid.fluid_id, f"curve:{curve_label(key)}", measured=worst, limit=0.0,
              upper=False, ok=worst > 0, statistic="min(sign*dp/dT) [Pa/K]", context=context,
              evidence={**evidence, **fitted.evidence(), "expected_sign": sign})


def _file_sign(out: Findings, fluid: FluidData, path: str, s: ObsSeries, sign: int, basis: str,
               th, lines: dict | None = None) -> None:
    subject = f"file:{path}|{s.boundary}" + (f":{s.solid_phase}" if s.solid_phase else "")
    if not _has_slope(s, th):
        out.skip(fluid.fluid_id, subject, f"{len(s)} points in {path}: too few for a slope")
        return
    found = (lines or {}).get((fluid.fluid_id, s.solid_phase, path))
    (a, b), cov = found if found is not None else linear_fit(s.T, s.value)
    se = math.sqrt(max(cov[1, 1], 0.0))
    t = float(np.clip(sign * b / se, -_T_CLAMP, _T_CLAMP)) if se > 0 else math.copysign(_T_CLAMP, sign * b)
    context = (f"{path}: {len(s)} melting points, slope {b:.4g} Pa/K (t = {t:.3g}); {basis} so "
               f"the slope must be {_SIGN_WORD[sign]}")
    wrong = t < -th["t_min"]
    out.judge(fluid.fluid_id, subject, measured=t, limit=-th["t_min"], upper=False,
              statistic="t = sign*slope/u(slope)", context=context,
              evidence={"slope_Pa_K": b, "u_slope_Pa_K": se, "expected_sign": sign,
                        "n_points": len(s), "observations": s.refs() if wrong else []})


def _has_slope(s: ObsSeries, th) -> bool:
    return len(s) >= th["min_points"] and np.ptp(s.T) != 0


def _file_lines(batch: CheckBatch, th) -> dict:
    """The least-squares lines of every melting file with a slope, all at once
    (:func:`~pipeline.checks.stats.linear_fits`): (fluid, solid phase, path) -> (params, cov)."""
    keys, xs, ys = [], [], []
    for fluid in batch:
        t = th(fluid.fluid_id)
        for solid_phase in _solids(fluid):
            for path, s in fluid.series("solid-liquid", "pressure", solid_phase).by_file().items():
                if _has_slope(s, t):
                    keys.append((fluid.fluid_id, solid_phase, path))
                    xs.append(s.T)
                    ys.append(s.value)
    try:
        return dict(zip(keys, linear_fits(xs, ys)))
    except Exception:   # noqa: BLE001 - a file whose line fails fails alone, in _file_sign
        return {}


def _melting_findings(out: Findings, fluid: FluidData, solid_phase: str, slopes: dict,
                      th, lines: dict | None = None) -> None:
    key = ("solid-liquid", solid_phase, "pressure")
    fitted = fluid.curve(*key)
    files = fluid.series("solid-liquid", "pressure", solid_phase).by_file()
    expected, reason = expected_melting_sign(fluid, solid_phase, th)
    by_position, _ = sign_from_triple_point(fluid, solid_phase,
                                            fluid.series("solid-liquid", "pressure", solid_phase))
    if expected is not None:
        sign, evidence = expected
        d = evidence["rho_solid_minus_liquid_kg_m3"]
        basis = f"ρ_solid − ρ_liquid = {d:.4g} kg/m3 at {evidence['T_K']:.6g} K"
    elif by_position is not None:
        sign, evidence = by_position
        where = "above" if sign > 0 else "below"
        basis = (f"the melting data lie {where} the {evidence['start']} temperature "
                 f"{evidence['Tt_K']:.6g} K and melting pressures rise away from it")
    elif fitted is not None and len(files) > 1:
        slope = slopes[key][1]
        sign, evidence = int(np.sign(np.nanmedian(slope))), {"basis": "fitted curve"}
        basis = "the fitted melting curve of all files has that sign"
    else:
        out.skip(fluid.fluid_id, f"curve:{curve_label(key)}", reason)
        return
    if fitted is not None and evidence.get("basis") != "fitted curve":
        _fitted_sign(out, fluid, key, fitted, slopes[key], sign, basis, evidence)
    elif fitted is not None:
        out.skip(fluid.fluid_id, f"curve:{curve_label(key)}", reason)
    for path, s in files.items():
        _file_sign(out, fluid, path, s, sign, basis, th, lines)


def _sign_requests(fluid: FluidData, th) -> list:
    """The density look-ups of :func:`expected_melting_sign`, for prefetching."""
    out = []
    for solid_phase in _solids(fluid):
        T = _reference_T(fluid, solid_phase, fluid.series("solid-liquid", "rho_solid", solid_phase))
        if T is not None:
            out += lookup_requests(fluid, T)
    return out


def _solids(fluid: FluidData) -> list[str]:
    return sorted({k[1] for k in fluid.groups() if k[0] == "solid-liquid"}
                  | {k[1] for k in fluid.pressure_curves() if k[0] == "solid-liquid"})


@register_check("clapeyron.slope-sign", tags=("clapeyron", "melting", "curves", "sources"),
                vectorised=True,
                purpose="Melting slopes have the sign of ρ_solid − ρ_liquid; vapour and "
                        "sublimation slopes are positive.")
def slope_sign(batch: CheckBatch, th) -> Findings:
    """On melting Δh_fus > 0, so by Clapeyron sign(dp/dT) = sign(Δv) = sign(ρ_solid − ρ_liquid):
    a solid less dense than its liquid (ice Ih: 916.7 vs 999.8 kg/m3) melts at a lower
    temperature under pressure and its melting curve falls; a denser solid (CO2, argon) has a
    rising melting curve. Vaporization and sublimation always have Δh > 0 and Δv > 0, so their
    curves rise.

    Densities come from rho_solid / rho_liquid observations on the melting curve (within
    density_T_tol_K of the triple point), or the fitted saturated-liquid density at the
    triple point. Without densities the sign follows from where the melting data lie: melting
    pressures never fall below the triple point where the curve starts, so data above that
    point's temperature must rise and data below it fall. Failing both, a fluid with several
    files compares each with the fitted curve of all. The sign is tested on the fitted melting
    curve (every grid point) and on each source file's own melting series (least-squares
    slope, t = sign*b/u(b) >= -t_min), so a single bad file is named.

    Usual causes of a failure: a file with T and p columns swapped or sorted wrongly; a
    melting series of another solid phase; solid and liquid density columns interchanged.
    """
    curves = [(fluid, key, fitted) for fluid in batch for key, fitted in fluid.pressure_curves().items()]
    slopes = grids([c[2] for c in curves], [int(th(c[0].fluid_id)["n_grid"]) for c in curves], "slope")
    by_fluid: dict[str, dict] = {}
    for (fluid, key, _), grid in zip(curves, slopes):
        by_fluid.setdefault(fluid.fluid_id, {})[key] = grid
    batch.prefetch(r for fluid in batch for r in _sign_requests(fluid, th(fluid.fluid_id)))
    lines = _file_lines(batch, th)
    out = Findings()
    for fluid in batch:
        t, own = th(fluid.fluid_id), by_fluid.get(fluid.fluid_id, {})
        for solid_phase in _solids(fluid):
            _melting_findings(out, fluid, solid_phase, own, t, lines)
        for key, fitted in fluid.pressure_curves().items():
            if key[0] in ("liquid-vapour", "solid-vapour"):
                _fitted_sign(out, fluid, key, fitted, own[key], 1,
                             f"Δh > 0 and Δv > 0 on {key[0]}", {})
    return out


def _clapeyron_point(fluid: FluidData, key, fitted: FittedCurve, T: float, th, triple_T):
    boundary, solid_phase, _ = key
    h = enthalpy(fluid, boundary, solid_phase, T, th["T_tol_K"], triple_T)
    if h is None:
        return None
    first, second = PHASES_OF[boundary]
    rho = {ph: density(fluid, ph, boundary, solid_phase, T, th["T_tol_K"]) for ph in (first, second)}
    point, _ = fluid.at(key, T)
    if point is None:
        return None
    if boundary == "solid-vapour" and rho["vapour"] is None and th["ideal_gas_vapour"]:
        rho["vapour"] = vapour_density_estimate(fluid, point.value, T)
    if any(r is None for r in rho.values()):
        return None
    dv, u_dv = delta_v(fluid.molar_mass, rho[first], rho[second])
    clap = h.value / (T * dv)
    stated = all(math.isfinite(x.u) and x.u > 0 for x in (h, rho[first], rho[second]))
    u_clap = abs(clap) * math.hypot(h.u / h.value, u_dv / dv) if stated else 0.0
    u = math.hypot(u_clap, point.u_slope)
    dev = deviation_statistic(point.slope - clap, clap, u, z_max=th["z_max"], rel_tol=th["rel_tol"])
    return dev, {"T_K": T, "slope_fit_Pa_K": point.slope, "u_slope_fit_Pa_K": point.u_slope,
                 "slope_clapeyron_Pa_K": clap, "u_clapeyron_Pa_K": u_clap,
                 "ratio": point.slope / clap, "delta_h": h.evidence(),
                 **{f"rho_{ph}": r.evidence() for ph, r in rho.items()}}


def _enthalpy_temperatures(fluid: FluidData, key, fitted: FittedCurve, triple_T) -> list[float]:
    boundary, solid_phase, _ = key
    quantity = {"liquid-vapour": "h_vaporization", "solid-liquid": "h_fusion",
                "solid-vapour": "h_sublimation"}[boundary]
    T = [float(t) for t in fluid.series(boundary, quantity, solid_phase).T if fitted.covers(t)]
    if triple_T is not None and fitted.covers(triple_T, 1e-6):
        T.append(triple_T)
    return sorted(set(T))


def _magnitude_plan(fluid: FluidData):
    """(curve key, fitted curve, triple-point T, enthalpy temperatures) of each curve."""
    out = []
    for key, fitted in fluid.pressure_curves().items():
        if key[0] not in PHASES_OF:
            continue
        tp = fluid.vapour_triple_point(None if key[0] == "liquid-vapour" else key[1] or SINGLE_SOLID)
        triple_T = tp.T_K if tp else None
        out.append((key, fitted, triple_T, _enthalpy_temperatures(fluid, key, fitted, triple_T)))
    return out


@register_check("clapeyron.magnitude", tags=("clapeyron", "curves"), vectorised=True,
                purpose="Fitted slopes agree with Clapeyron's Δh/(TΔv) where Δh and densities exist.")
def magnitude(batch: CheckBatch, th) -> Findings:
    """Clapeyron: dp/dT = Δh / (T Δv) with molar Δh [J/mol] and Δv = M (1/ρ_b − 1/ρ_a)
    [m3/mol] from the stored densities of the two phases and the molar mass. At every
    temperature where an enthalpy of transition is stored (observations, or the stated
    h_*_triple constants at the triple point) and both densities are found (fits, or
    observations within T_tol_K), the fitted slope is compared: z = (slope − Clapeyron) / u,
    u from the enthalpy and density uncertainties when all three are stated;
    |slope/Clapeyron − 1| <= rel_tol otherwise. On sublimation curves the vapour density may be
    the ideal-gas value p M/(R T).
    The worst point of each curve is reported, all points in the evidence.

    Usual causes of a failure: enthalpies in J/kg stored as J/mol (a factor of the molar mass);
    densities of the wrong phase; a fit whose slope is poorly constrained (too few points or
    a narrow range); an enthalpy at another temperature than stated.
    """
    plans = {fluid.fluid_id: _magnitude_plan(fluid) for fluid in batch}
    batch.prefetch(r for fluid in batch for key, _, _, temperatures in plans[fluid.fluid_id]
                   for T in temperatures for r in [(fluid, key, T)] + lookup_requests(fluid, T))
    out = Findings()
    for fluid in batch:
        t = th(fluid.fluid_id)
        for key, fitted, triple_T, temperatures in plans[fluid.fluid_id]:
            points = [p for T in temperatures
                      if (p := _clapeyron_point(fluid, key, fitted, T, t, triple_T)) is not None]
            if not points:
                continue
            dev, worst = max(points, key=lambda p: p[0].measured / p[0].limit)
            out.judge(fluid.fluid_id, f"curve:{curve_label(key)}", measured=dev.measured,
                      limit=dev.limit, statistic=dev.statistic,
                      evidence={"worst": worst, "points": [p[1] for p in points]},
                      context=f"{curve_label(key)} at {worst['T_K']:.6g} K: fitted slope "
                              f"{worst['slope_fit_Pa_K']:.5g} Pa/K vs Clapeyron "
                              f"{worst['slope_clapeyron_Pa_K']:.5g} Pa/K (ratio "
                              f"{worst['ratio']:.5f}; {len(points)} point(s))")
    return out
