"""Synthetic fluids for the check benchmark and the check regression test.

Each synthetic fluid is a corresponding-states copy of a published fluid (argon, nitrogen, carbon
dioxide: the reference curves of ``pipeline.correlations.reference``) with its temperatures
scaled by s_T and pressures by s_p (every reference form is a function of T/T_ref times the
reference value, so the scaled curves stay mutually consistent). Per fluid: triple and critical
points from two sources, a stated acentric factor and Δh_vap at Tt, ~300 observations in seven
files (three vapour-pressure campaigns, a sublimation and a melting series, near-critical
saturated densities, solid and liquid densities at Tt) with noise and fit residuals
(|z| <= 2.5); 1 % of the fluids carry a kPa-recorded-as-Pa file so the diagnosis path runs too.

The curves stand for the fit stage's output, so they carry what a fit records: a parameter
covariance (that of a weighted least-squares fit to the curve's own observations,
(J^T W J)^-1 with W = 1/u^2, J the parameter Jacobian at their temperatures), the fit id the
pressure observations' residuals name, the number of points used and the reduced chi-square
of those residuals.

``tests/checks/test_check_regression.py`` holds the check results of the first 40 fluids to a
snapshot: a change here that changes the fluids needs a new snapshot made with the check code
of the main branch (``tests/checks/regression/snapshot_results.py``).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd

from pipeline.checks import FittedCurve, FluidData
from pipeline.checks.loader import fluids_from_tables
from pipeline.correlations import REFERENCE_CONSTANTS, reference_curve

BASES = ("argon", "nitrogen", "carbon-dioxide")
SCALE_OF = {"pressure": "p", "rho_liquid": "rho", "rho_vapour": "rho"}
CURVE_KEYS = [("liquid-vapour", "", "pressure"), ("liquid-vapour", "", "rho_liquid"),
              ("liquid-vapour", "", "rho_vapour"), ("solid-vapour", "", "pressure"),
              ("solid-liquid", "", "pressure")]


def scaled(curve, sT: float, factor: float):
    """The curve with T scaled by sT and its values by ``factor`` (corresponding states)."""
    log = curve.correlation_form.link == "log"
    first = curve.params[0] + math.log(factor) if log else curve.params[0] * factor
    return dataclasses.replace(curve, params=(first,) + tuple(curve.params[1:]),
                               ref={**curve.ref, "T_ref_K": curve.ref["T_ref_K"] * sT},
                               T_min_K=curve.T_min_K * sT, T_max_K=curve.T_max_K * sT)


def _series(curve, T, rng, *, boundary, quantity="pressure", source, kind, noise=1e-4, scale=1.0):
    value = np.asarray(curve.value(T), dtype=float) * (1 + rng.normal(0, noise, len(T))) * scale
    return {"boundary": np.full(len(T), boundary), "quantity": np.full(len(T), quantity),
            "T_K": T, "value_si": value, "u_value_si": np.abs(value) * noise,
            "source_id": np.full(len(T), source), "source_kind": np.full(len(T), kind),
            "file_path": np.full(len(T), f"synthetic/{source}-{boundary}-{quantity}.csv")}


def _observations(i, curves, pts, rng, plant: bool) -> pd.DataFrame:
    """Seven files: three vapour-pressure campaigns, sublimation, melting, densities."""
    Tt, Tc = pts["Tt"], pts["Tc"]
    lv, sv, sl = (curves[k] for k in (CURVE_KEYS[0], CURVE_KEYS[3], CURVE_KEYS[4]))
    LV = "liquid-vapour"
    parts = [
        _series(lv, np.linspace(Tt + 1, Tc - 1, 50), rng, boundary=LV, source=f"std-{i}", kind="standard"),
        _series(lv, np.linspace(Tt + 2, Tc - 2, 45), rng, boundary=LV, source=f"lit-{i}", kind="literature"),
        _series(lv, np.linspace(Tt + 3, 0.9 * Tc, 40), rng, boundary=LV, source=f"lab-{i}", kind="measurement",
                scale=1e-3 if plant else 1.0),
        _series(sv, np.linspace(sv.T_min_K, Tt - 0.5, 30), rng, boundary="solid-vapour", source=f"sub-{i}",
                kind="literature"),
        _series(sl, np.linspace(Tt + 0.5, sl.T_max_K, 30), rng, boundary="solid-liquid", source=f"melt-{i}",
                kind="literature"),
    ]
    T_near_critical = np.linspace(0.95 * Tc, 0.998 * Tc, 20)
    for q in ("rho_liquid", "rho_vapour"):
        parts.append(_series(curves[(LV, "", q)], T_near_critical, rng, boundary=LV, quantity=q,
                             source=f"dens-{i}", kind="literature"))
    for q, v in (("rho_solid", 1.15 * pts["rho_l"]), ("rho_liquid", pts["rho_l"])):
        parts.append({"boundary": ["solid-liquid"], "quantity": [q], "T_K": [Tt], "value_si": [v],
                      "u_value_si": [0.5], "source_id": [f"dens-{i}"], "source_kind": ["literature"],
                      "file_path": [f"synthetic/dens-{i}-solid.csv"]})
    obs = pd.concat([pd.DataFrame(p) for p in parts], ignore_index=True)
    obs["obs_id"] = np.arange(1, len(obs) + 1) + 1000 * i
    pressure = obs["quantity"].to_numpy() == "pressure"
    obs["fit_id"] = np.where(pressure, obs["boundary"].to_numpy() + f"-{i}", None)
    obs["z"] = np.where(pressure, np.clip(rng.normal(0, 0.7, len(obs)), -2.5, 2.5), np.nan)
    return obs


def _fixed_points(i, pts, sT) -> list[dict]:
    """Triple and critical points from a standard and a slightly different literature source."""
    u_T = 0.01 * sT
    rows = []
    for source, kind, dT, fp in ((f"std-{i}", "standard", 0.0, 1.0), (f"lit-{i}", "literature", 0.003, 1.00005)):
        rows.append(dict(kind="triple", phases="vapour,liquid,solid", T_K=pts["Tt"] + dT, u_T_K=u_T,
                         p_Pa=pts["pt"] * fp, u_p_Pa=pts["pt"] * 1e-4, source_id=source, source_kind=kind))
        rows.append(dict(kind="critical", phases="liquid,vapour", T_K=pts["Tc"] - dT, u_T_K=u_T,
                         p_Pa=pts["pc"] / fp, u_p_Pa=pts["pc"] * 1e-4, rho_kg_m3=pts["rhoc"],
                         u_rho_kg_m3=pts["rhoc"] * 1e-3, source_id=source, source_kind=kind))
    return rows


def _constants(i, curves, pts, M, rng) -> list[dict]:
    """A stated acentric factor, and Δh_vap at Tt consistent with Clapeyron."""
    lv = curves[CURVE_KEYS[0]]
    omega = -math.log10(float(lv.value(0.7 * pts["Tc"], extrapolate=True)) / pts["pc"]) - 1
    dv = M * (1 / float(curves[CURVE_KEYS[2]].value(pts["Tt"])) - 1 / pts["rho_l"])
    return [dict(name="acentric_factor", value_si=omega + rng.normal(0, 1e-3), u_si=2e-3, si_unit="1",
                 source_id=f"lit-{i}", source_kind="literature"),
            dict(name="h_vaporization_triple", value_si=pts["Tt"] * dv * float(lv.slope(pts["Tt"])),
                 u_si=np.nan, si_unit="J/mol", source_id=f"std-{i}", source_kind="standard")]


def _as_fitted(fid: str, key, curve, obs: pd.DataFrame) -> FittedCurve:
    """``curve`` as the fit stage would record it from the observations of its group."""
    boundary, _, quantity = key
    sel = (obs["boundary"].to_numpy() == boundary) & (obs["quantity"].to_numpy() == quantity)
    T, u = obs["T_K"].to_numpy()[sel], obs["u_value_si"].to_numpy()[sel]
    J = np.asarray(curve.jacobian(T), dtype=float) / u[:, None]
    cov = np.linalg.pinv(J.T @ J)
    curve = dataclasses.replace(curve, covariance=((cov + cov.T) / 2).tolist())
    if quantity != "pressure":
        return FittedCurve(curve, fit_id=f"{fid}:{boundary}//{quantity}", form=curve.form,
                           n_used=int(sel.sum()))
    z = obs["z"].to_numpy()[sel]
    dof = max(int(sel.sum()) - len(curve.params), 1)
    return FittedCurve(curve, fit_id=obs["fit_id"].to_numpy()[sel][0], form=curve.form,
                       n_used=int(sel.sum()), reduced_chi2=float(np.sum(z ** 2) / dof))


def synthetic_fluid(i: int, rng: np.random.Generator, *, plant: bool) -> dict:
    """Tables of one synthetic fluid: observations, fixed points, constants, curves."""
    base = BASES[i % len(BASES)]
    ref = REFERENCE_CONSTANTS[base]
    sT, sp, srho = rng.uniform(0.6, 1.8), rng.uniform(0.5, 2.0), rng.uniform(0.8, 1.2)
    factor = {"p": sp, "rho": srho}
    curves = {k: scaled(reference_curve(base, k[0], k[2], k[1]), sT, factor[SCALE_OF[k[2]]])
              for k in CURVE_KEYS}
    tp = ref["triple_points"][0]
    pts = {"Tt": tp["T_K"] * sT, "pt": tp["p_Pa"] * sp, "Tc": ref["Tc_K"] * sT, "pc": ref["pc_Pa"] * sp,
           "rhoc": ref["rhoc_kg_m3"] * srho}
    pts["rho_l"] = float(curves[CURVE_KEYS[1]].value(pts["Tt"]))
    fid = f"synthetic-{i:05d}"
    obs = _observations(i, curves, pts, rng, plant).assign(fluid_id=fid)
    fitted = {k: _as_fitted(fid, k, c, obs) for k, c in curves.items()}
    fixed = [dict(r, fluid_id=fid) for r in _fixed_points(i, pts, sT)]
    constants = [dict(r, fluid_id=fid) for r in _constants(i, curves, pts, ref["molar_mass_kg_mol"], rng)]
    return {"fluid": (fid, ref["molar_mass_kg_mol"]), "obs": obs, "fixed": fixed, "constants": constants,
            "curves": fitted}


def build(n: int, seed: int = 7) -> dict[str, FluidData]:
    """n synthetic fluids, stacked and split once (as the store loader does)."""
    rng = np.random.default_rng(seed)
    parts = [synthetic_fluid(i, rng, plant=(i % 100 == 0)) for i in range(n)]
    fluids = pd.DataFrame([p["fluid"] for p in parts], columns=["fluid_id", "molar_mass_kg_mol"])
    return fluids_from_tables(fluids, pd.concat([p["obs"] for p in parts], ignore_index=True),
                              pd.DataFrame([r for p in parts for r in p["fixed"]]),
                              pd.DataFrame([r for p in parts for r in p["constants"]]),
                              {p["fluid"][0]: p["curves"] for p in parts})
