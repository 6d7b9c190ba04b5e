"""Published data for the check tests: water and carbon dioxide as FluidData, and perturbations.

Sources of every value (see /work/shared/reference-values.md):
- water curves: IAPWS R14-08(2011) melting (Ih, III, V, VI, VII) and sublimation pressure;
  IAPWS SR1-86(1992) saturation pressure and saturated densities (via ``reference_curve``);
- water constants: Tc = 647.096 K, pc = 22.064 MPa, ρc = 322 kg/m3, M = 18.015268 g/mol
  (IAPWS-95); Tt = 273.16 K, pt = 611.657 Pa and the ice triple points (IAPWS R14-08, Table 1);
  ρ(ice Ih, Tt) = 916.709 kg/m3 (IAPWS R10-06(2009), Table 6); ρ'(Tt) = 999.793 kg/m3,
  Δh_fus = 333.4449 kJ/kg, Δh_vap = 2500.915 kJ/kg, Δh_sub = 2834.359 kJ/kg at Tt
  (IAPWS-95 with R10-06);
- carbon dioxide: ancillary equations and fixed points of Span & Wagner, J. Phys. Chem. Ref.
  Data 25, 1509 (1996): Tc = 304.1282 K, pc = 7.3773 MPa, ρc = 467.6 kg/m3, Tt = 216.592 K,
  pt = 0.51795 MPa, M = 44.0098 g/mol, ρ'(Tt) = 1178.46 kg/m3 (their EOS);
  ρ(solid CO2, Tt) ≈ 1512 kg/m3 is from memory (literature 1.51-1.53 g/cm3).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from pipeline.checks import FluidData, sample_series
from pipeline.correlations import reference_curve

# -- water (IAPWS) ------------------------------------------------------------------------------
M_WATER = 0.018015268                 # kg/mol, IAPWS-95
TT_WATER, PT_WATER = 273.16, 611.657  # K, Pa, IAPWS R14-08
TC_WATER, PC_WATER, RHOC_WATER = 647.096, 22.064e6, 322.0   # IAPWS-95
RHO_ICE_IH_TT = 916.709               # kg/m3, IAPWS R10-06(2009) Table 6
RHO_LIQ_TT = 999.793                  # kg/m3, IAPWS-95 saturated liquid at Tt
H_FUS_TT = 333.4449e3 * M_WATER       # J/mol, IAPWS-95 h' minus R10-06 h_ice at Tt
H_VAP_TT = 2500.915e3 * M_WATER       # J/mol, IAPWS-95 at Tt
H_SUB_TT = 2834.359e3 * M_WATER       # J/mol, IAPWS-95 h'' minus R10-06 h_ice at Tt
WATER_ICE_TRIPLES = [                 # IAPWS R14-08 Table 1: (phases, T [K], p [Pa])
    ("Ih,III,liquid", 251.165, 208.566e6), ("III,V,liquid", 256.164, 350.100e6),
    ("V,VI,liquid", 273.31, 632.400e6), ("VI,VII,liquid", 355.0, 2216.0e6),
]
WATER_MELTING = ("Ih", "III", "V", "VI", "VII")

# -- carbon dioxide (Span & Wagner 1996) ---------------------------------------------------------
M_CO2 = 0.0440098
TT_CO2, PT_CO2 = 216.592, 0.51795e6
TC_CO2, PC_CO2, RHOC_CO2 = 304.1282, 7.3773e6, 467.6
RHO_LIQ_TT_CO2 = 1178.46              # kg/m3, Span & Wagner EOS at Tt
RHO_SOLID_TT_CO2 = 1512.0             # kg/m3, from memory (literature 1.51-1.53 g/cm3)


def point(kind, phases, T, p=np.nan, rho=np.nan, *, u_T=np.nan, u_p=np.nan, u_rho=np.nan,
          source="iapws", source_kind="standard"):
    """A fixed-point row."""
    return {"kind": kind, "phases": phases, "T_K": T, "p_Pa": p, "rho_kg_m3": rho,
            "u_T_K": u_T, "u_p_Pa": u_p, "u_rho_kg_m3": u_rho, "source_id": source,
            "source_kind": source_kind}


def constant(name, value, u=np.nan, *, unit="J/mol", source="iapws", source_kind="standard"):
    return {"name": name, "value_si": value, "u_si": u, "si_unit": unit, "source_id": source,
            "source_kind": source_kind}


def single(boundary, quantity, T, value, *, solid_phase="", file="memory/single.csv",
           source="memory", u=np.nan):
    """One observation row."""
    return pd.DataFrame([{"boundary": boundary, "solid_phase": solid_phase, "quantity": quantity,
                          "T_K": T, "value_si": value, "u_value_si": u, "source_id": source,
                          "file_path": file}])


def stack(*frames) -> pd.DataFrame:
    """Concatenate observation frames and renumber obs_id uniquely."""
    frame = pd.concat([f for f in frames if f is not None and len(f)], ignore_index=True)
    frame["obs_id"] = np.arange(1, len(frame) + 1)
    return frame


def water_curves(melting=WATER_MELTING) -> dict:
    """Published water curves keyed as FluidData.curves."""
    curves = {("liquid-vapour", "", q): reference_curve("water", "liquid-vapour", q)
              for q in ("pressure", "rho_liquid", "rho_vapour")}
    curves[("solid-vapour", "Ih", "pressure")] = reference_curve("water", "solid-vapour", "pressure", "Ih")
    for ice in melting:
        curves[("solid-liquid", ice, "pressure")] = reference_curve("water", "solid-liquid", "pressure", ice)
    return curves


def water_observations(*, rho_ice=RHO_ICE_IH_TT) -> pd.DataFrame:
    """Vapour-pressure files, a melting and a sublimation file, saturated and ice densities."""
    lv = reference_curve("water", "liquid-vapour", "pressure")
    return stack(
        sample_series(lv, np.arange(280.0, 641.0, 20.0), boundary="liquid-vapour",
                      source_id="sr1-86-table", source_kind="standard", u_rel=1e-4),
        sample_series(lv, np.arange(290.0, 631.0, 20.0), boundary="liquid-vapour",
                      source_id="lab-a", source_kind="measurement", u_rel=2e-4),
        sample_series(lv, np.arange(285.0, 646.0, 30.0), boundary="liquid-vapour",
                      source_id="lit-b", u_rel=2e-4),
        sample_series(reference_curve("water", "solid-liquid", "pressure", "Ih"),
                      np.linspace(252.0, 273.0, 8), boundary="solid-liquid", solid_phase="Ih",
                      source_id="r14-melting", source_kind="standard"),
        sample_series(reference_curve("water", "solid-vapour", "pressure", "Ih"),
                      np.linspace(200.0, 273.0, 8), boundary="solid-vapour", solid_phase="Ih",
                      source_id="r14-sublimation", source_kind="standard"),
        single("solid-liquid", "rho_solid", TT_WATER, rho_ice, solid_phase="Ih",
               file="memory/r10-06.csv", source="iapws-r10-06", u=0.01),
        single("solid-liquid", "rho_liquid", TT_WATER, RHO_LIQ_TT, solid_phase="Ih",
               file="memory/iapws-95.csv", source="iapws-95", u=0.01),
    )


def water_fixed_points() -> list[dict]:
    pts = [point("triple", "vapour,liquid,Ih", TT_WATER, PT_WATER),
           point("critical", "liquid,vapour", TC_WATER, PC_WATER, RHOC_WATER)]
    return pts + [point("triple", ph, T, p) for ph, T, p in WATER_ICE_TRIPLES]


def water(*, observations=None, fixed_points=None, constants=None, curves=None,
          rho_ice=RHO_ICE_IH_TT) -> FluidData:
    """Water from the IAPWS releases (override any part to perturb it)."""
    return FluidData.build(
        "water", M_WATER,
        observations=water_observations(rho_ice=rho_ice) if observations is None else observations,
        fixed_points=water_fixed_points() if fixed_points is None else fixed_points,
        constants=[constant("h_fusion_triple", H_FUS_TT), constant("h_vaporization_triple", H_VAP_TT),
                   constant("h_sublimation_triple", H_SUB_TT)] if constants is None else constants,
        curves=water_curves() if curves is None else curves, cas_rn="7732-18-5")


def co2_curves() -> dict:
    c = {("liquid-vapour", "", q): reference_curve("carbon-dioxide", "liquid-vapour", q)
         for q in ("pressure", "rho_liquid", "rho_vapour")}
    c[("solid-vapour", "", "pressure")] = reference_curve("carbon-dioxide", "solid-vapour", "pressure")
    c[("solid-liquid", "", "pressure")] = reference_curve("carbon-dioxide", "solid-liquid", "pressure")
    return c


def co2_melting_file(source="sw-melting", T=None, reverse=False) -> pd.DataFrame:
    """A melting series from the Span-Wagner melting equation; ``reverse`` makes p fall with T."""
    T = np.linspace(217.0, 249.0, 9) if T is None else np.asarray(T)
    frame = sample_series(reference_curve("carbon-dioxide", "solid-liquid", "pressure"), T,
                          boundary="solid-liquid", source_id=source)
    if reverse:
        frame["value_si"] = frame["value_si"].to_numpy()[::-1]
    return frame


def co2(*, observations=None, fixed_points=None, curves=None, extra=()) -> FluidData:
    """Carbon dioxide from the Span & Wagner (1996) ancillary equations."""
    lv = reference_curve("carbon-dioxide", "liquid-vapour", "pressure")
    obs = stack(
        sample_series(lv, np.linspace(220.0, 300.0, 9), boundary="liquid-vapour",
                      source_id="sw-table", source_kind="standard"),
        co2_melting_file("lit-melting-a"), co2_melting_file("lit-melting-b", np.linspace(218.5, 246.5, 6)),
        single("solid-liquid", "rho_solid", TT_CO2, RHO_SOLID_TT_CO2, file="memory/solid.csv", u=5.0),
        single("solid-liquid", "rho_liquid", TT_CO2, RHO_LIQ_TT_CO2, file="memory/sw-eos.csv", u=0.1),
        *extra,
    ) if observations is None else observations
    return FluidData.build(
        "carbon-dioxide", M_CO2, observations=obs,
        fixed_points=[point("triple", "vapour,liquid,solid", TT_CO2, PT_CO2, source="sw1996"),
                      point("critical", "liquid,vapour", TC_CO2, PC_CO2, RHOC_CO2, source="sw1996")]
        if fixed_points is None else fixed_points,
        curves=co2_curves() if curves is None else curves, cas_rn="124-38-9")


def with_range(curve, T_min=None, T_max=None):
    """The same curve with another validity range."""
    return dataclasses.replace(curve, T_min_K=curve.T_min_K if T_min is None else T_min,
                               T_max_K=curve.T_max_K if T_max is None else T_max)


def by_subject(findings) -> dict:
    """Findings (or results) keyed by subject."""
    return {f.subject: f for f in findings}


def th(check_id: str, **overrides) -> dict:
    """Default thresholds of a check with some keys replaced."""
    from pipeline.checks import Thresholds

    return {**Thresholds.load().for_check(check_id), **overrides}
