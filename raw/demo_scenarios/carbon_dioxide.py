"""Carbon dioxide: the Span-Wagner ancillary equations evaluated, an estimated triple point,
two invented rig campaigns and a transcribed melting-curve literature source."""

from __future__ import annotations

import numpy as np

from demo_scenarios.common import (
    ANCILLARY_BASIS, ancillary_batch, BAR, Batch, BRACKENRIDGE, CITE_SPAN_WAGNER,
    clipped_normal, csv_text, curve_slope, curve_values, fix, grid, KPA, lab_source,
    LICENSE_PUBLISHED, MPA, rng_for, T_col, Table, ZERO_C,
)


def co2_ancillaries() -> Batch:
    return ancillary_batch(
        "span-wagner-1996-co2-ancillaries", "carbon-dioxide", CITE_SPAN_WAGNER,
        "Span & Wagner (1996)",
        vle_T=grid(218.0, 302.0, 2.0, extra=[216.592, 303.0]),
        melt_T=grid(218.0, 250.0, 2.0, extra=[216.592]),
        sub_T=grid(160.0, 216.0, 2.0, extra=[216.592]), sub_unit="kPa", sub_factor=KPA,
        vle_unit="MPa", vle_factor=MPA,
        u={"pressure": 1e-4, "rho_liquid": 5e-4, "rho_vapour": 5e-4, "melting": 1e-3,
           "sublimation": 1e-3},
        critical=((304.1282, "K", 0.015), (7.3773, "MPa", 0.003), (467.6, "kg/m^3", 0.6)),
        triple=((216.592, "K", 0.003), (0.51795, "MPa", 0.0001)),
        basis=ANCILLARY_BASIS + [
            "reference-values.md section 2.3: ancillaries vs EOS, 216.6-300 K: p within 1e-5,",
            "rho' within 7e-5, rho'' within 1.1e-4 (at 304 K rho' -1.6e-3)."],
    )


def co2_triple_point_estimate() -> Batch:
    """rho_solid and the phase-change enthalpies of CO2 at Tt from the Clapeyron closure.

    With v = 1/rho and s the slopes dp/dT at Tt of the melting (m), sublimation (sub) and
    vapour-pressure (sigma) ancillaries, Clapeyron for each curve and the closure
    dh_sub = dh_fus + dh_vap give v_solid (s_m - s_sub) = v' s_m - v'' s_sub + dh_vap / Tt.
    """
    fluid, Tt = "carbon-dioxide", 216.592
    rho_liq, rho_vap, h_vap = 1178.46, 13.761, 350.38e3      # EOS at Tt, reference-values.md 2.1
    s_m = curve_slope(fluid, "solid-liquid", Tt)
    s_sub = curve_slope(fluid, "solid-vapour", Tt)
    v_l, v_v = 1.0 / rho_liq, 1.0 / rho_vap
    v_s = (v_l * s_m - v_v * s_sub + h_vap / Tt) / (s_m - s_sub)
    rho_s = round(1.0 / v_s)
    h_fus = round(Tt * (v_l - 1.0 / rho_s) * s_m / 100.0) / 10.0      # kJ/kg, 0.1 kJ/kg
    h_sub = round(Tt * (v_v - 1.0 / rho_s) * s_sub / 100.0) / 10.0
    b = Batch(
        name="co2-triple-point-closure-estimate",
        source={"id": "co2-triple-point-closure-estimate", "kind": "estimate",
                "citation": "FluidLedger demo estimate (not a measurement): solid density and "
                            "enthalpies of fusion and sublimation of carbon dioxide at the triple "
                            "point derived from the Clapeyron equation applied to the slopes at Tt "
                            "of the melting, sublimation and vapour-pressure ancillary equations "
                            "of " + CITE_SPAN_WAGNER + ", closed by dh_sub = dh_fus + dh_vap; "
                            "saturated densities and dh_vap at Tt from the same equation of state",
                "license": LICENSE_PUBLISHED,
                "notes": f"Derived by raw/generate_demo.py (co2_triple_point_estimate): "
                         f"rho_solid = {rho_s} kg/m3, dh_fus = {h_fus} kJ/kg, dh_sub = {h_sub} "
                         "kJ/kg; rho' = 1178.46 kg/m3, rho'' = 13.761 kg/m3 and dh_vap = 350.38 "
                         "kJ/kg are the Span-Wagner EOS values at Tt of reference-values.md "
                         "section 2.1. A rough estimate: the uncertainties are set wide."},
        comments=["Estimate: CO2 triple-point phase-change properties from the Clapeyron closure of",
                  "the Span-Wagner (1996) ancillary slopes (reference-values.md section 2.3 gives",
                  "rho_solid ~ 1535 kg/m3 and dh_fus ~ 199 kJ/kg by the same route).",
                  "Standard uncertainties (relative, k = 1) are wide demo assignments: rho_solid 1e-2,",
                  "dh_fus 3e-2, dh_sub 1e-2; EOS values rho' 1e-4, rho'' 2e-4, dh_vap 1e-3."],
    )
    specs = [
        ("solid-liquid", "co2-triple-point-solid-liquid.csv",
         [("rho_solid", "rho_solid_kg_m3", rho_s, "kg/m^3", 1e-2, "d"),
          ("rho_liquid", "rho_liquid_kg_m3", rho_liq, "kg/m^3", 1e-4, "f"),
          ("h_fusion", "h_fusion_kJ_kg", h_fus, "kJ/kg", 3e-2, "f")]),
        ("liquid-vapour", "co2-triple-point-liquid-vapour.csv",
         [("rho_liquid", "rho_liquid_kg_m3", rho_liq, "kg/m^3", 1e-4, "f"),
          ("rho_vapour", "rho_vapour_kg_m3", rho_vap, "kg/m^3", 2e-4, "f"),
          ("h_vaporization", "h_vaporization_kJ_kg", h_vap / 1e3, "kJ/kg", 1e-3, "f")]),
        ("solid-vapour", "co2-triple-point-solid-vapour.csv",
         [("rho_solid", "rho_solid_kg_m3", rho_s, "kg/m^3", 1e-2, "d"),
          ("rho_vapour", "rho_vapour_kg_m3", rho_vap, "kg/m^3", 2e-4, "f"),
          ("h_sublimation", "h_sublimation_kJ_kg", h_sub, "kJ/kg", 1e-2, "f")]),
    ]
    for boundary, file, cols in specs:
        b.tables.append(Table(
            entry={"file": file, "fluid": fluid, "boundary": boundary, "temperature": T_col("T_K")},
            text=csv_text(["T_K"] + [c[1] for c in cols],
                          [[fix(Tt, 3)] + [str(int(c[2])) if c[5] == "d" else repr(float(c[2]))
                                           for c in cols]]),
            comments=[f"{boundary} at the triple point."],
            uncertainty={c[0]: {"relative": c[4], "unit": c[3]} for c in cols},
            columns={c[0]: {"column": c[1], "unit": c[3]} for c in cols}))
    return b


def co2_rig_a() -> Batch:
    """CO2 vapour pressure (degC, bar, expanded U with k = 2) and liquid density (g/cm^3).

    PLANTED FLAW: one gross outlier, the -10 degC pressure is 8 % high.
    """
    name = "brackenridge-rig-a-co2-2024-05"
    fluid = "carbon-dioxide"
    rng = rng_for(name)
    t_set = np.arange(-55.0, 30.0, 3.0)                        # degC set points
    n = t_set.size
    T_true = t_set + ZERO_C + rng.uniform(-0.04, 0.04, n)
    T_rec = T_true + 0.005 * clipped_normal(rng, n)
    p_true = curve_values(fluid, "liquid-vapour", "pressure", T_true)
    u_p = np.hypot(2e-4 * p_true, 200.0)                        # Pa, k = 1
    p_rec = p_true + u_p * clipped_normal(rng, n)
    outlier = int(np.flatnonzero(t_set == -10.0)[0])
    p_rec[outlier] *= 1.08
    rho = curve_values(fluid, "liquid-vapour", "rho_liquid", T_true)
    rho_rec = rho * (1.0 + 5e-4 * clipped_normal(rng, n))
    rows = [[fix(T_rec[i] - ZERO_C, 3), fix(p_rec[i] / BAR, 4), fix(2.0 * u_p[i] / BAR, 4),
             fix(rho_rec[i] / 1e3, 5)] for i in range(n)]
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig A, carbon dioxide vapour-liquid equilibrium "
                                "campaign 2024-05, internal report BCPE-TL-2024-031"),
        comments=["Invented lab campaign: CO2 vapour pressure and saturated liquid density, rig A.",
                  "Uncertainty basis (k = 1): T 0.005 K (calibrated PRT); p from the expanded",
                  "uncertainty column U_p_bar (k = 2: 2e-4 of reading combined with 0.002 bar);",
                  "liquid density 5e-4 relative (vibrating-tube densimeter).",
                  f"PLANTED FLAW: the row at -10 degC (file row {outlier + 1}) is 8 % high (data.outliers)."],
    )
    b.tables.append(Table(
        entry={"file": "co2-vle-rig-a.csv", "fluid": fluid, "boundary": "liquid-vapour",
               "temperature": T_col("t_degC", "degC"),
               "pressure": {"column": "p_bar", "unit": "bar", "reference": "absolute"}},
        text=csv_text(["t_degC", "p_bar", "U_p_bar", "rho_liq_g_cm3"], rows),
        uncertainty={"temperature": {"value": 0.005, "unit": "K"},
                     "pressure": {"column": "U_p_bar", "unit": "bar", "coverage": 2},
                     "rho_liquid": {"relative": 5e-4, "unit": "g/cm^3"}},
        columns={"rho_liquid": {"column": "rho_liq_g_cm3", "unit": "g/cm^3"}}))
    return b


def co2_rig_b() -> Batch:
    """CO2 vapour pressure in K and MPa.

    PLANTED FLAWS: a 'vapour pressure' at 308 K, above Tc; a non-numeric pressure cell.
    """
    name = "brackenridge-rig-b-co2-2025-02"
    fluid = "carbon-dioxide"
    rng = rng_for(name)
    T_set = np.arange(220.0, 300.1, 5.0)
    n = T_set.size
    T_true = T_set + rng.uniform(-0.03, 0.03, n)
    T_rec = T_true + 0.01 * clipped_normal(rng, n)
    p_true = curve_values(fluid, "liquid-vapour", "pressure", T_true)
    p_rec = p_true * (1.0 + 3e-4 * clipped_normal(rng, n))
    Tc, pc = 304.1282, 7.3773e6
    T_above = 308.0 + float(rng.uniform(-0.03, 0.03))
    p_above = (pc + curve_slope(fluid, "liquid-vapour", 304.0) * (T_above - Tc)) \
        * (1.0 + 3e-4 * float(clipped_normal(rng, 1)[0]))
    rows: list = []
    for i in range(n):
        rows.append([fix(T_rec[i], 3), fix(p_rec[i] / MPA, 5)])
        if T_set[i] == 255.0:
            rows.append("# 2025-02-19 thermostat bath refilled; run resumed at 260 K")
        if T_set[i] == 265.0:
            rows.append([fix(267.5 + float(rng.uniform(-0.03, 0.03)), 3), "n.m."])
    rows.append([fix(T_above, 3), fix(p_above / MPA, 5)])
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig B, carbon dioxide vapour-pressure campaign "
                                "2025-02, internal report BCPE-TL-2025-007"),
        comments=["Invented lab campaign: CO2 vapour pressure, rig B (comment lines start with #).",
                  "Uncertainty basis (k = 1): T 0.01 K (PRT), p 3e-4 of reading (quartz gauge).",
                  "PLANTED FLAWS: the last row, at 308 K, is a 'vapour pressure' above the critical",
                  "temperature 304.1282 K (critical.no-vle-above-tc); the row at 267.5 K has the",
                  "non-numeric pressure 'n.m.' (quarantined at ingest: not-a-number)."],
    )
    b.tables.append(Table(
        entry={"file": "co2-vapour-pressure-rig-b.csv", "fluid": fluid, "boundary": "liquid-vapour",
               "temperature": T_col("T_K"), "pressure": {"column": "p_MPa", "unit": "MPa"},
               "comment": "#"},
        text=csv_text(["T_K", "p_MPa"], rows),
        uncertainty={"temperature": {"value": 0.01, "unit": "K"},
                     "pressure": {"relative": 3e-4, "unit": "MPa"}}))
    return b


def co2_melting_literature() -> Batch:
    """A fictional literature melting series. PLANTED FLAW: pressure falls with T."""
    name = "lit-co2-melting-transcribed"
    fluid = "carbon-dioxide"
    T = np.arange(220.0, 250.1, 2.5)
    p = curve_values(fluid, "solid-liquid", "pressure", T)[::-1]     # column order reversed
    rows = [[fix(T[i], 2), fix(p[i] / MPA, 1)] for i in range(T.size)]
    b = Batch(
        name=name,
        source={"id": name, "kind": "literature",
                "citation": "H. Olvanger and P. Strede, Melting curve of solid carbon dioxide to "
                            "200 MPa, Annals of Imaginary High-Pressure Physics 7, 113-129 (1979), "
                            "Table 2, transcribed by hand [fictional source invented for the "
                            "FluidLedger demo]",
                "license": "transcription for internal use (invented demo data)",
                "notes": "Invented demo data: the authors and the journal are fictional. The "
                         "pressure column was transcribed in reverse order, so pressure falls as "
                         "temperature rises."},
        comments=["Invented literature source (fictional journal), hand-transcribed CO2 melting series.",
                  "Uncertainty basis (k = 1): 5e-3 of the value (table resolution 0.1 MPa).",
                  "PLANTED FLAW: the pressure column is in reverse order, so the melting pressure",
                  "falls with T although solid CO2 is denser than its liquid (clapeyron.slope-sign)."],
    )
    b.tables.append(Table(
        entry={"file": "co2-melting-transcribed.csv", "fluid": fluid, "boundary": "solid-liquid",
               "temperature": T_col("T_K"), "pressure": {"column": "p_MPa", "unit": "MPa"}},
        text=csv_text(["T_K", "p_MPa"], rows),
        uncertainty={"pressure": {"relative": 5e-3, "unit": "MPa"}}))
    return b
