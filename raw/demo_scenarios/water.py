"""Water: the IAPWS saturation, melting and sublimation releases evaluated, its triple-point
properties, and two invented rig campaigns (a semicolon dialect; Celsius filed as kelvin)."""

from __future__ import annotations

import numpy as np

from demo_scenarios.common import (
    Batch, boundary_table, BRACKENRIDGE, CITE_IAPWS95, CITE_R10_06, CITE_R14_08, CITE_SR1_86,
    clipped_normal, csv_text, curve_values, fix, fixed_point, grid, KPA, lab_source,
    LICENSE_PUBLISHED, MPA, rng_for, saturation_table, T_col, Table, ZERO_C,
)


def water_saturation() -> Batch:
    fluid = "water"
    b = Batch(
        name="iapws-sr1-86-water-saturation",
        source={"id": "iapws-sr1-86-water-saturation", "kind": "standard",
                "citation": CITE_SR1_86, "license": LICENSE_PUBLISHED,
                "notes": "Saturation pressure and saturated liquid and vapour densities of water "
                         "from the SR1-86(1992) auxiliary equations, evaluated by "
                         "raw/generate_demo.py; critical point as in IAPWS-95 / SR1-86."},
        comments=["Published equations, evaluated: IAPWS SR1-86(1992) auxiliary equations for water.",
                  "Standard uncertainties are demo assignments (not quoted from the release),",
                  "set above the deviations of the auxiliary equations from IAPWS-95 reported in",
                  "reference-values.md section 1.5: p within 3e-5; rho' within 6e-5 to 500 K,",
                  "2e-4 at 600 K, 9e-4 at 640 K; rho'' within 1.2e-4 below 600 K, 7e-4 at 640 K."],
    )
    b.tables.append(saturation_table(
        fluid, "water-saturation-273-600K.csv", grid(275.0, 600.0, 5.0, extra=[273.16]), "MPa", MPA,
        {"pressure": 5e-5, "rho_liquid": 2e-4, "rho_vapour": 2e-4},
        ["273.16 K to 600 K: u(p) = 5e-5, u(rho') = 2e-4, u(rho'') = 2e-4 (relative, k = 1)."]))
    b.tables.append(saturation_table(
        fluid, "water-saturation-600-645K.csv", grid(602.5, 645.0, 2.5), "MPa", MPA,
        {"pressure": 5e-5, "rho_liquid": 1.5e-3, "rho_vapour": 1.5e-3},
        ["602.5 K to 645 K, approaching the critical point, where the auxiliary densities",
         "deviate most from IAPWS-95: u(p) = 5e-5, u(rho') = u(rho'') = 1.5e-3 (relative, k = 1)."]))
    b.fixed_points.append((
        ["Critical point of IAPWS-95 (also used by SR1-86); u are demo assignments."],
        fixed_point(fluid, "critical", (647.096, "K", 0.01), (22.064, "MPa", 0.005),
                    (322.0, "kg/m^3", 3.0))))
    return b


def water_melting_sublimation() -> Batch:
    fluid = "water"
    b = Batch(
        name="iapws-r14-08-water-melting-sublimation",
        source={"id": "iapws-r14-08-water-melting-sublimation", "kind": "standard",
                "citation": CITE_R14_08, "license": LICENSE_PUBLISHED,
                "notes": "Melting pressure of ices Ih, III and V and sublimation pressure of ice Ih "
                         "from the R14-08(2011) equations, evaluated by raw/generate_demo.py; "
                         "triple points as used by the release (its Table 1)."},
        comments=["Published equations, evaluated: IAPWS R14-08(2011) melting and sublimation curves.",
                  "Each melting series runs between the triple points that bound it, so the store",
                  "holds the liquid-Ih, liquid-III and liquid-V curves meeting at the solid-solid-liquid",
                  "triple points Ih-III-liquid (251.165 K) and III-V-liquid (256.164 K).",
                  "Standard uncertainties (relative, k = 1) are demo assignments, not quoted from the",
                  "release: 1e-3 for the melting pressures, 5e-4 for the sublimation pressure;",
                  "the melting tables also state u(T) = 2 mK (the curves are steep, ~10 MPa/K)."],
    )
    b.tables.append(boundary_table(
        fluid, "solid-liquid", "water-melting-ice-Ih.csv",
        grid(251.5, 273.0, 0.5, extra=[251.165, 273.16]), "MPa", MPA, 1e-3,
        ["Melting curve of ice Ih, 251.165 K to 273.16 K (pressure falls with T: ice Ih is less",
         "dense than liquid water)."], solid_phase="Ih"))
    b.tables.append(boundary_table(
        fluid, "solid-liquid", "water-melting-ice-III.csv",
        grid(251.5, 256.0, 0.5, extra=[251.165, 251.2, 256.164]), "MPa", MPA, 1e-3,
        ["Melting curve of ice III, 251.165 K to 256.164 K."], solid_phase="III"))
    b.tables.append(boundary_table(
        fluid, "solid-liquid", "water-melting-ice-V.csv",
        grid(257.0, 273.0, 1.0, extra=[256.164, 256.5, 273.3]), "MPa", MPA, 1e-3,
        ["Melting curve of ice V, 256.164 K to 273.3 K."], solid_phase="V"))
    b.tables.append(boundary_table(
        fluid, "solid-vapour", "water-sublimation-ice-Ih.csv",
        grid(200.0, 272.0, 2.0, extra=[273.16]), "Pa", 1.0, 5e-4,
        ["Sublimation curve of ice Ih, 200 K to 273.16 K."], solid_phase="Ih"))
    b.fixed_points += [
        (["Triple point vapour-liquid-ice Ih: 273.16 K and 611.657 Pa as used by R14-08 and",
          "R10-06; u are demo assignments."],
         fixed_point(fluid, "triple", (273.16, "K", 0.0001), (611.657, "Pa", 0.01),
                     phases=["vapour", "liquid", "Ih"])),
        (["Triple point ice Ih-ice III-liquid, R14-08 Table 1; u are demo assignments."],
         fixed_point(fluid, "triple", (251.165, "K", 0.005), (208.566, "MPa", 0.01),
                     phases=["Ih", "III", "liquid"])),
        (["Triple point ice III-ice V-liquid, R14-08 Table 1; u are demo assignments."],
         fixed_point(fluid, "triple", (256.164, "K", 0.005), (350.1, "MPa", 0.01),
                     phases=["III", "V", "liquid"])),
    ]
    return b


def water_triple_point_properties() -> Batch:
    fluid = "water"
    Tt = 273.16
    b = Batch(
        name="iapws-water-triple-point-properties",
        source={"id": "iapws-water-triple-point-properties", "kind": "standard",
                "citation": CITE_IAPWS95 + "; " + CITE_R10_06,
                "license": LICENSE_PUBLISHED,
                "notes": "Phase-change properties of water at the triple point (273.16 K, "
                         "611.657 Pa): liquid and vapour from IAPWS-95 (saturated states), ice Ih "
                         "from R10-06 (density 916.709492 kg/m3, enthalpy -333.444254 kJ/kg, its "
                         "Table 6); enthalpy differences IAPWS-95 minus R10-06. Values as tabulated "
                         "in reference-values.md (the project's table of published reference "
                         "values), section 1.1."},
        comments=["Published values: phase-change properties of water at the triple point, for the",
                  "Clapeyron checks (slope sign, magnitude, triple-point slopes).",
                  "Standard uncertainties (relative, k = 1) are demo assignments, not quoted from the",
                  "releases: densities 1e-5 (ice, liquid) and 1e-4 (vapour); enthalpies 1e-4."],
    )
    rho_ice, rho_liq, rho_vap = 916.709492, 999.792520, 0.00485457572
    h_fus, h_vap, h_sub = 333.4449, 2500.915, 2834.359
    specs = [
        ("solid-liquid", "water-triple-point-solid-liquid.csv",
         [("rho_solid", "rho_Ih_kg_m3", rho_ice, "kg/m^3", 1e-5),
          ("rho_liquid", "rho_liquid_kg_m3", rho_liq, "kg/m^3", 1e-5),
          ("h_fusion", "h_fusion_kJ_kg", h_fus, "kJ/kg", 1e-4)],
         "Melting at the triple point: ice Ih density (R10-06), liquid density (IAPWS-95),"
         " enthalpy of fusion."),
        ("liquid-vapour", "water-triple-point-liquid-vapour.csv",
         [("rho_liquid", "rho_liquid_kg_m3", rho_liq, "kg/m^3", 1e-5),
          ("rho_vapour", "rho_vapour_kg_m3", rho_vap, "kg/m^3", 1e-4),
          ("h_vaporization", "h_vaporization_kJ_kg", h_vap, "kJ/kg", 1e-4)],
         "Vaporization at the triple point (IAPWS-95 saturated liquid and vapour)."),
        ("solid-vapour", "water-triple-point-solid-vapour.csv",
         [("rho_solid", "rho_Ih_kg_m3", rho_ice, "kg/m^3", 1e-5),
          ("rho_vapour", "rho_vapour_kg_m3", rho_vap, "kg/m^3", 1e-4),
          ("h_sublimation", "h_sublimation_kJ_kg", h_sub, "kJ/kg", 1e-4)],
         "Sublimation at the triple point (R10-06 ice Ih, IAPWS-95 vapour)."),
    ]
    for boundary, file, cols, note in specs:
        entry = {"file": file, "fluid": fluid, "boundary": boundary}
        if boundary != "liquid-vapour":
            entry["solid_phase"] = "Ih"
        entry["temperature"] = T_col("T_K")
        b.tables.append(Table(
            entry=entry,
            text=csv_text(["T_K"] + [c[1] for c in cols], [[fix(Tt, 2)] + [repr(c[2]) for c in cols]]),
            comments=[note],
            uncertainty={c[0]: {"relative": c[4], "unit": c[3]} for c in cols},
            columns={c[0]: {"column": c[1], "unit": c[3]} for c in cols}))
    b.constants += [
        (["Enthalpy of fusion at the triple point, IAPWS-95 h' minus R10-06 h(ice Ih)."],
         {"fluid": fluid, "name": "h_fusion_triple", "value": h_fus, "unit": "kJ/kg", "u": 0.03}),
        (["Enthalpy of vaporization at the triple point, IAPWS-95."],
         {"fluid": fluid, "name": "h_vaporization_triple", "value": h_vap, "unit": "kJ/kg", "u": 0.25}),
        (["Enthalpy of sublimation at the triple point, IAPWS-95 h'' minus R10-06 h(ice Ih)."],
         {"fluid": fluid, "name": "h_sublimation_triple", "value": h_sub, "unit": "kJ/kg", "u": 0.28}),
        (["Normal boiling point (101325 Pa), IAPWS-95, ITS-90."],
         {"fluid": fluid, "name": "normal_boiling_T", "value": 373.1243, "unit": "K", "u": 0.001}),
    ]
    return b


def water_rig_a_semicolon() -> Batch:
    """Water vapour pressure in degC and kPa; semicolons and decimal commas.

    PLANTED FLAWS (quarantine): an empty pressure cell and a negative pressure.
    """
    name = "brackenridge-rig-a-water-2025-06"
    fluid = "water"
    rng = rng_for(name)
    t_set = np.arange(5.0, 95.1, 5.0)
    n = t_set.size
    T_true = t_set + ZERO_C + rng.uniform(-0.03, 0.03, n)
    T_rec = T_true + 0.01 * clipped_normal(rng, n)
    p = curve_values(fluid, "liquid-vapour", "pressure", T_true) * (1.0 + 3e-4 * clipped_normal(rng, n))

    def comma(x: float, d: int) -> str:
        return fix(x, d).replace(".", ",")

    rows: list = []
    for i in range(n):
        rows.append([comma(T_rec[i] - ZERO_C, 3), comma(p[i] / KPA, 4)])
        if t_set[i] == 40.0:        # reading not transferred: empty pressure cell
            rows.append([comma(42.5 + float(rng.uniform(-0.03, 0.03)), 3), ""])
        if t_set[i] == 60.0:        # sign slip in the export: a negative absolute pressure
            T = 62.5 + float(rng.uniform(-0.03, 0.03))
            p_neg = -curve_values(fluid, "liquid-vapour", "pressure", [T + ZERO_C])[0]
            rows.append([comma(T, 3), comma(p_neg / KPA, 4)])
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig A, water vapour-pressure campaign 2025-06 "
                                "(spreadsheet export, semicolon-separated, decimal commas), "
                                "internal report BCPE-TL-2025-019"),
        comments=["Invented lab campaign: water vapour pressure, rig A, 5-95 degC, exported with",
                  "semicolon delimiters and decimal commas (declared below).",
                  "Uncertainty basis (k = 1): T 0.01 K, p 3e-4 of reading.",
                  "PLANTED FLAWS (ingest quarantine): the row at 42.5 degC has an empty pressure cell;",
                  "the row at 62.5 degC has a negative absolute pressure."],
    )
    b.tables.append(Table(
        entry={"file": "water-vapour-pressure-rig-a.csv", "fluid": fluid, "boundary": "liquid-vapour",
               "temperature": T_col("t_degC", "degC"), "pressure": {"column": "p_kPa", "unit": "kPa"},
               "delimiter": ";", "decimal": ","},
        text=csv_text(["t_degC", "p_kPa"], rows, delimiter=";"),
        uncertainty={"temperature": {"value": 0.01, "unit": "K"},
                     "pressure": {"relative": 3e-4, "unit": "kPa"}}))
    return b


def water_rig_b_celsius_as_kelvin() -> Batch:
    """Water vapour pressure. PLANTED FLAW: Celsius temperatures in a column declared K."""
    name = "brackenridge-rig-b-water-2021-03"
    fluid = "water"
    rng = rng_for(name)
    t_set = np.arange(20.0, 95.1, 5.0)
    n = t_set.size
    T_true = t_set + ZERO_C + rng.uniform(-0.03, 0.03, n)
    T_rec = T_true + 0.02 * clipped_normal(rng, n)
    p = curve_values(fluid, "liquid-vapour", "pressure", T_true) * (1.0 + 5e-4 * clipped_normal(rng, n))
    rows = [[fix(T_rec[i] - ZERO_C, 2), fix(p[i] / KPA, 3)] for i in range(n)]
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig B, water vapour-pressure campaign 2021-03, "
                                "internal report BCPE-TL-2021-011"),
        comments=["Invented lab campaign: water vapour pressure, rig B, 20-95 degC.",
                  "Uncertainty basis (k = 1): T 0.02 K, p 5e-4 of reading.",
                  "PLANTED FLAW: the temperatures are Celsius values (20-95) but the column is",
                  "declared in K (data.unit-mixup: degC recorded as K)."],
    )
    b.tables.append(Table(
        entry={"file": "water-vapour-pressure-rig-b.csv", "fluid": fluid, "boundary": "liquid-vapour",
               "temperature": T_col("T_K", "K"), "pressure": {"column": "p_kPa", "unit": "kPa"}},
        text=csv_text(["T_K", "p_kPa"], rows),
        uncertainty={"temperature": {"value": 0.02, "unit": "K"},
                     "pressure": {"relative": 5e-4, "unit": "kPa"}}))
    return b
