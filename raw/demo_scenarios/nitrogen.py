"""Nitrogen: the Span et al. ancillary equations evaluated, three invented rig campaigns (gauge
pressures, kPa filed as Pa, a two-sheet workbook) and a literature critical point."""

from __future__ import annotations

import datetime
import io

import numpy as np

from demo_scenarios.common import (
    AMBIENT_KPA, ANCILLARY_BASIS, ancillary_batch, BAR, Batch, BRACKENRIDGE, CITE_SPAN_N2,
    clipped_normal, csv_text, curve_values, fix, fixed_point, grid, KPA, lab_source, PSI,
    rng_for, T_col, Table,
)


def nitrogen_ancillaries() -> Batch:
    return ancillary_batch(
        "span-2000-nitrogen-ancillaries", "nitrogen", CITE_SPAN_N2, "Span et al. (2000)",
        vle_T=grid(64.0, 124.0, 1.5, extra=[63.151, 125.0]),
        melt_T=grid(64.0, 120.0, 2.0, extra=[63.151]),
        sub_T=grid(50.0, 63.0, 1.0, extra=[63.151]), sub_unit="Pa", sub_factor=1.0,
        vle_unit="kPa", vle_factor=KPA,
        u={"pressure": 1e-4, "rho_liquid": 2e-4, "rho_vapour": 5e-4, "melting": 1e-3,
           "sublimation": 1e-3},
        critical=((126.192, "K", 0.01), (3.3958, "MPa", 0.002), (313.3, "kg/m^3", 1.0)),
        triple=((63.151, "K", 0.003), (12.523, "kPa", 0.005)),
        basis=ANCILLARY_BASIS + [
            "reference-values.md section 3: vapour-pressure ancillary at Tt 1.0e-4 below pt,",
            "at the normal boiling point 3.7e-5 below 101.325 kPa."],
        constants=[(["Normal boiling point, Span et al. (2000); u is a demo assignment."],
                    {"fluid": "nitrogen", "name": "normal_boiling_T", "value": 77.355, "unit": "K",
                     "u": 0.002})],
    )


def nitrogen_rig_a_gauge() -> Batch:
    """Nitrogen vapour pressure as gauge pressure in psi with a stated ambient.

    PLANTED FLAWS (quarantine): a row with T = 0 K and a row with a NaN pressure.
    """
    name = "brackenridge-rig-a-nitrogen-2023-09"
    fluid = "nitrogen"
    rng = rng_for(name)
    T_set = np.arange(74.0, 122.1, 2.0)
    n = T_set.size
    T_true = T_set + rng.uniform(-0.02, 0.02, n)
    T_rec = T_true + 0.005 * clipped_normal(rng, n)
    p_abs = curve_values(fluid, "liquid-vapour", "pressure", T_true)
    gauge = (p_abs - AMBIENT_KPA * KPA) / PSI + 0.05 * clipped_normal(rng, n)
    rows: list = []
    run = 1
    for i in range(n):
        rows.append([f"N2-2309-{run:02d}", fix(T_rec[i], 3), fix(gauge[i], 3)])
        run += 1
        if T_set[i] == 90.0:       # logger drop-out: temperature written as zero
            p91 = curve_values(fluid, "liquid-vapour", "pressure", [91.0])[0]
            rows.append([f"N2-2309-{run:02d}", "0.000", fix((p91 - AMBIENT_KPA * KPA) / PSI, 3)])
            run += 1
        if T_set[i] == 106.0:      # transducer fault: pressure written as NaN
            rows.append([f"N2-2309-{run:02d}", fix(107.0 + float(rng.uniform(-0.02, 0.02)), 3), "NaN"])
            run += 1
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig A, nitrogen vapour-pressure campaign "
                                "2023-09 (gauge transducer), internal report BCPE-TL-2023-052"),
        comments=["Invented lab campaign: nitrogen vapour pressure, rig A, gauge pressures in psi",
                  "relative to the stated ambient 101.325 kPa (absolute = gauge + ambient; readings",
                  "below 77.35 K are negative gauge pressures and valid). Column 'run' is ignored.",
                  "Uncertainty basis (k = 1): T 0.005 K, p 0.05 psi (transducer, 0.01 % of 500 psi FS).",
                  "PLANTED FLAWS (ingest quarantine): a row with T = 0 K (logger drop-out) and a row",
                  "with pressure 'NaN' (transducer fault)."],
    )
    b.tables.append(Table(
        entry={"file": "nitrogen-gauge-rig-a.csv", "fluid": fluid, "boundary": "liquid-vapour",
               "temperature": T_col("T_K"),
               "pressure": {"column": "p_gauge_psi", "unit": "psi", "reference": "gauge",
                            "ambient": {"value": AMBIENT_KPA, "unit": "kPa"}},
               "extra_columns": "ignore"},
        text=csv_text(["run", "T_K", "p_gauge_psi"], rows),
        uncertainty={"temperature": {"value": 0.005, "unit": "K"},
                     "pressure": {"value": 0.05, "unit": "psi"}}))
    return b


def nitrogen_rig_b_kpa_as_pa() -> Batch:
    """Nitrogen vapour pressure. PLANTED FLAW: values in kPa, declared as Pa."""
    name = "brackenridge-rig-b-nitrogen-2022-11"
    fluid = "nitrogen"
    rng = rng_for(name)
    T_set = np.arange(65.0, 125.1, 3.0)
    n = T_set.size
    T_true = T_set + rng.uniform(-0.02, 0.02, n)
    T_rec = T_true + 0.005 * clipped_normal(rng, n)
    p = curve_values(fluid, "liquid-vapour", "pressure", T_true) * (1.0 + 3e-4 * clipped_normal(rng, n))
    rows = [[fix(T_rec[i], 3), fix(p[i] / KPA, 4)] for i in range(n)]
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig B, nitrogen vapour-pressure campaign "
                                "2022-11, internal report BCPE-TL-2022-088"),
        comments=["Invented lab campaign: nitrogen vapour pressure, rig B.",
                  "Uncertainty basis (k = 1): T 0.005 K, p 3e-4 of reading.",
                  "PLANTED FLAW: the pressures were exported in kPa but the manifest declares Pa, so",
                  "every value is 1000 times too small (data.unit-mixup: kPa recorded as Pa)."],
    )
    b.tables.append(Table(
        entry={"file": "nitrogen-vapour-pressure-rig-b.csv", "fluid": fluid,
               "boundary": "liquid-vapour", "temperature": T_col("T_K"),
               "pressure": {"column": "p", "unit": "Pa"}},
        text=csv_text(["T_K", "p"], rows),
        uncertainty={"temperature": {"value": 0.005, "unit": "K"},
                     "pressure": {"relative": 3e-4, "unit": "Pa"}}))
    return b


def nitrogen_rig_c_workbook() -> Batch:
    """Nitrogen vapour pressure and saturated densities delivered as ONE workbook, two sheets.

    Sheet ``VLE``: a title row, a blank row, the header on row 3 (run, T_K, p_bar, p_kPa); the
    mapped ``p_kPa`` column is a formula ``=C*100`` whose cached value is read. Sheet
    ``Densities``: the table in the range B2:D15 (a note column and a summary row outside it).
    PLANTED FLAWS (ingest quarantine): a reading not recorded (``n/r`` in p_bar), so its
    ``p_kPa`` formula caches the error #VALUE!; a run date typed into the T_K column.
    """
    import xlsxwriter

    name = "brackenridge-rig-c-nitrogen-2026-01"
    fluid = "nitrogen"
    file = "nitrogen-rig-c-campaign.xlsx"
    rng = rng_for(name)
    T_set = np.arange(70.0, 124.1, 3.0)
    n = T_set.size
    T_true = T_set + rng.uniform(-0.02, 0.02, n)
    T_rec = np.round(T_true + 0.005 * clipped_normal(rng, n), 3)
    p = curve_values(fluid, "liquid-vapour", "pressure", T_true)
    p_bar = np.round(p * (1.0 + 3e-4 * clipped_normal(rng, n)) / BAR, 6)
    T_rho = np.arange(72.0, 120.1, 4.0)
    m = T_rho.size
    T_rho_true = T_rho + rng.uniform(-0.02, 0.02, m)
    T_rho_rec = np.round(T_rho_true + 0.005 * clipped_normal(rng, m), 3)
    rho_l = np.round(curve_values(fluid, "liquid-vapour", "rho_liquid", T_rho_true)
                     * (1.0 + 5e-4 * clipped_normal(rng, m)), 3)
    rho_v = np.round(curve_values(fluid, "liquid-vapour", "rho_vapour", T_rho_true)
                     * (1.0 + 2e-3 * clipped_normal(rng, m)), 4)
    not_recorded = int(np.flatnonzero(T_set == 97.0)[0])     # row of the #VALUE! cell
    date_typed = int(np.flatnonzero(T_set == 112.0)[0])      # row of the date in T_K

    book_bytes = io.BytesIO()
    book = xlsxwriter.Workbook(book_bytes, {"in_memory": True})
    book.set_properties({"title": "Rig C nitrogen campaign 2026-01 (invented demo data)",
                         "created": datetime.datetime(2026, 1, 30, 12, 0, 0)})
    date_format = book.add_format({"num_format": "yyyy-mm-dd"})
    vle = book.add_worksheet("VLE")
    vle.write_string(0, 0, "Brackenridge thermophysics lab, rig C: nitrogen vapour pressure, "
                           "campaign 2026-01 (invented demo data)")
    vle.write_row(2, 0, ["run", "T_K", "p_bar", "p_kPa"])
    for i in range(n):
        r = 3 + i                                           # 0-based sheet row
        vle.write_string(r, 0, f"N2-C-{i + 1:02d}")
        if i == date_typed:
            vle.write_datetime(r, 1, datetime.datetime(2026, 1, 21), date_format)
        else:
            vle.write_number(r, 1, float(T_rec[i]))
        if i == not_recorded:
            vle.write_string(r, 2, "n/r")
            vle.write_formula(r, 3, f"=C{r + 1}*100", None, "#VALUE!")
        else:
            vle.write_number(r, 2, float(p_bar[i]))
            vle.write_formula(r, 3, f"=C{r + 1}*100", None, float(p_bar[i]) * 100)
    dens = book.add_worksheet("Densities")
    dens.write_string(0, 0, "Saturated densities, vibrating-tube densimeter, rig C")
    dens.write_row(1, 1, ["T_K", "rho_liq_kg_m3", "rho_vap_kg_m3"])
    for i in range(m):
        dens.write_row(2 + i, 1, [float(T_rho_rec[i]), float(rho_l[i]), float(rho_v[i])])
    dens.write_string(2, 5, "densimeter calibrated 2026-01-05 (note outside the table range)")
    last = 2 + m                                             # 1-based row of the last data row
    dens.write_string(last + 1, 1, "mean")
    dens.write_formula(last + 1, 2, f"=AVERAGE(C3:C{last})", None, float(np.mean(rho_l)))
    book.close()

    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig C, nitrogen vapour pressure and saturated "
                                "densities, campaign 2026-01 (workbook as delivered by the rig "
                                "operator), internal report BCPE-TL-2026-004"),
        comments=["Invented lab campaign delivered as a workbook with two sheets: VLE (vapour",
                  "pressure; p_kPa is a formula =p_bar*100, read as its cached value) and Densities",
                  "(saturated liquid and vapour densities in the range B2:D15).",
                  "Uncertainty basis (k = 1): T 0.005 K, p 3e-4 of reading, rho' 5e-4 and",
                  "rho'' 2e-3 of reading.",
                  f"PLANTED FLAWS (ingest quarantine): VLE!D{4 + not_recorded} holds #VALUE! (reading",
                  f"not recorded: 'n/r' in p_bar); VLE!B{4 + date_typed} holds a date typed into T_K."],
        workbooks={file: book_bytes.getvalue()},
    )
    b.tables.append(Table(
        entry={"file": file, "sheet": "VLE", "header_row": 3, "fluid": fluid,
               "boundary": "liquid-vapour", "temperature": T_col("T_K"),
               "pressure": {"column": "p_kPa", "unit": "kPa"}, "extra_columns": "ignore"},
        text=None, comments=["Sheet VLE: header on row 3; run and p_bar are not mapped."],
        uncertainty={"temperature": {"value": 0.005, "unit": "K"},
                     "pressure": {"relative": 3e-4, "unit": "kPa"}}))
    b.tables.append(Table(
        entry={"file": file, "sheet": "Densities", "range": f"B2:D{last}", "fluid": fluid,
               "boundary": "liquid-vapour", "temperature": T_col("T_K")},
        text=None, comments=["Sheet Densities: the table is the range; the note in column F and",
                             "the mean below it are outside."],
        uncertainty={"temperature": {"value": 0.005, "unit": "K"},
                     "rho_liquid": {"relative": 5e-4, "unit": "kg/m^3"},
                     "rho_vapour": {"relative": 2e-3, "unit": "kg/m^3"}},
        columns={"rho_liquid": {"column": "rho_liq_kg_m3", "unit": "kg/m^3"},
                 "rho_vapour": {"column": "rho_vap_kg_m3", "unit": "kg/m^3"}}))
    return b


def nitrogen_critical_literature() -> Batch:
    """A fictional literature critical point. PLANTED FLAW: Tc = 126.55 K vs 126.192 K."""
    name = "lit-nitrogen-critical-point"
    b = Batch(
        name=name,
        source={"id": name, "kind": "literature",
                "citation": "Q. Thorncastle and E. Villaroy, Meniscus disappearance in nitrogen near "
                            "its critical point, Journal of Invented Cryophysics 12, 44-58 (1987) "
                            "[fictional source invented for the FluidLedger demo]",
                "license": "citation only (invented demo data)",
                "notes": "Invented demo data: the authors and the journal are fictional. The "
                         "stated critical temperature is 0.36 K above the reference value."},
        comments=["Invented literature source (fictional journal): a nitrogen critical point.",
                  "PLANTED FLAW: Tc = 126.55 K +- 0.02 K disagrees with 126.192 K of Span et al. (2000)",
                  "(sources.agreement names this source); its pressure agrees with the reference."],
    )
    b.fixed_points.append((
        ["Critical point as stated by the (fictional) paper; u as stated there."],
        fixed_point("nitrogen", "critical", (126.55, "K", 0.02), (3.400, "MPa", 0.005))))
    return b
