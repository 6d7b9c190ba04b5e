"""Argon: the Tegeler-Span-Wagner ancillary equations evaluated and an invented rig campaign
reported on IPTS-68."""

from __future__ import annotations

import numpy as np

from pipeline.ingest.scales import its90_minus_ipts68
from demo_scenarios.common import (
    ANCILLARY_BASIS, ancillary_batch, Batch, BRACKENRIDGE, CITE_TEGELER, clipped_normal,
    csv_text, curve_values, fix, grid, KPA, lab_source, rng_for, T_col, Table, TORR,
)


def argon_ancillaries() -> Batch:
    return ancillary_batch(
        "tegeler-1999-argon-ancillaries", "argon", CITE_TEGELER, "Tegeler et al. (1999)",
        vle_T=grid(85.0, 148.0, 1.5, extra=[83.8058, 149.5]),
        melt_T=grid(85.0, 140.0, 2.5, extra=[83.8058]),
        sub_T=grid(70.0, 83.0, 1.0, extra=[83.8058]), sub_unit="kPa", sub_factor=KPA,
        vle_unit="kPa", vle_factor=KPA,
        u={"pressure": 1e-4, "rho_liquid": 2e-4, "rho_vapour": 5e-4, "melting": 1e-3,
           "sublimation": 1e-3},
        critical=((150.687, "K", 0.015), (4.863, "MPa", 0.003), (535.6, "kg/m^3", 1.1)),
        triple=((83.8058, "K", 0.0002), (68.891, "kPa", 0.005)),
        basis=ANCILLARY_BASIS + [
            "reference-values.md section 4: vapour-pressure ancillary at Tt 2.8e-5 above pt,",
            "at the normal boiling point 6.5e-5 below 101.325 kPa."],
        constants=[(["Normal boiling point, Tegeler et al. (1999); u is a demo assignment."],
                    {"fluid": "argon", "name": "normal_boiling_T", "value": 87.302, "unit": "K",
                     "u": 0.002})],
    )


def argon_rig_b_ipts68() -> Batch:
    """Argon vapour pressure from an archived campaign: T on IPTS-68, p in torr. Clean."""
    name = "brackenridge-rig-b-argon-1988"
    fluid = "argon"
    rng = rng_for(name)
    T90_set = np.arange(84.0, 120.1, 1.5)
    n = T90_set.size
    T90 = T90_set + rng.uniform(-0.02, 0.02, n)
    T68 = np.asarray([t - float(its90_minus_ipts68(t)) for t in T90])
    T68_rec = T68 + 0.002 * clipped_normal(rng, n)
    p = curve_values(fluid, "liquid-vapour", "pressure", T90)
    p_rec = p * (1.0 + 2e-4 * clipped_normal(rng, n))
    rows = [[fix(T68_rec[i], 3), fix(p_rec[i] / TORR, 2)] for i in range(n)]
    b = Batch(
        name=name,
        source=lab_source(name, f"{BRACKENRIDGE}, rig B, argon vapour-pressure campaign 1988, "
                                "archived logbook BCPE-LB-88-14 (temperatures on IPTS-68)",
                          "Temperatures were generated on ITS-90 and converted back to IPTS-68 "
                          "with T68 = T90 - (T90 - T68)(T90), the published difference function "
                          "(pipeline.ingest.scales.its90_minus_ipts68)."),
        comments=["Invented lab campaign (archived): argon vapour pressure, rig B, 1988.",
                  "Temperatures are on IPTS-68 (declared scale); pressures in torr.",
                  "Uncertainty basis (k = 1): T 0.002 K, p 2e-4 of reading (mercury manometer).",
                  "Clean: argon carries no planted flaw; after conversion to ITS-90 the data agree",
                  "with the Tegeler et al. (1999) vapour-pressure equation within uncertainty."],
    )
    b.tables.append(Table(
        entry={"file": "argon-vapour-pressure-1988.csv", "fluid": fluid, "boundary": "liquid-vapour",
               "temperature": T_col("T68_K", "K", "IPTS-68"),
               "pressure": {"column": "p_torr", "unit": "torr"}},
        text=csv_text(["T68_K", "p_torr"], rows),
        uncertainty={"temperature": {"value": 0.002, "unit": "K"},
                     "pressure": {"relative": 2e-4, "unit": "torr"}}))
    return b
