"""The published sources of the real-data corpus and the batches built from them.

Every source is one batch (one ``[source]``) with its citation. Compilation tables are read
from the ``chemicals`` package with pandas (every cell as text, so digits are kept as
printed); equations are sampled with :mod:`corpus_equations`. The reasoning behind every
stated uncertainty and every sampling choice is in tests/realdata/README.md.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
import pandas as pd

import corpus_equations as eq
from corpus_writer import Batch, Table, rng_for

#: Gaussian scatter added to evaluated values, as a fraction of the stated standard
#: uncertainty (a compilation's equation reproduces its data within u, not exactly).
NOISE_FRACTION = 0.2
#: declared pressure units and their size in Pa (mmHg as pint defines it)
PA = {"Pa": 1.0, "kPa": 1e3, "MPa": 1e6, "bar": 1e5, "mmHg": 133.322387415, "psi": 6894.757293168,
      "atm": 101325.0}
#: the torr of the chemicals copy of Staveley's table (101325/760 Pa)
TORR = 101325.0 / 760.0
ZERO_C = 273.15

ALL = frozenset({"table", "critical", "triple", "constant", "density"})


@dataclass(frozen=True)
class Fluid:
    id: str
    cas: str
    name: str
    solid_phases: tuple[str, ...] = ()


FLUIDS = (
    Fluid("methane", "74-82-8", "methane"), Fluid("ethane", "74-84-0", "ethane"),
    Fluid("ethene", "74-85-1", "ethene"), Fluid("propane", "74-98-6", "propane"),
    Fluid("propene", "115-07-1", "propene"), Fluid("nitrogen", "7727-37-9", "nitrogen"),
    Fluid("argon", "7440-37-1", "argon"), Fluid("neon", "7440-01-9", "neon"),
    Fluid("krypton", "7439-90-9", "krypton"), Fluid("xenon", "7440-63-3", "xenon"),
    Fluid("carbon-monoxide", "630-08-0", "carbon monoxide"),
    Fluid("oxygen", "7782-44-7", "oxygen"), Fluid("fluorine", "7782-41-4", "fluorine"),
    Fluid("tetrafluoromethane", "75-73-0", "tetrafluoromethane"),
    Fluid("nitrous-oxide", "10024-97-2", "nitrous oxide"),
    Fluid("hydrogen-chloride", "7647-01-0", "hydrogen chloride"),
    Fluid("ammonia", "7664-41-7", "ammonia"), Fluid("sulfur-dioxide", "7446-09-5", "sulfur dioxide"),
    Fluid("hydrogen-sulfide", "7783-06-4", "hydrogen sulfide"),
    Fluid("chlorine", "7782-50-5", "chlorine"), Fluid("co2", "124-38-9", "carbon dioxide"),
    Fluid("sulfur-hexafluoride", "2551-62-4", "sulfur hexafluoride"),
    Fluid("hexafluoroethane", "76-16-4", "hexafluoroethane"),
    Fluid("ethyne", "74-86-2", "ethyne"), Fluid("neopentane", "463-82-1", "2,2-dimethylpropane"),
    Fluid("butane", "106-97-8", "butane"), Fluid("isobutane", "75-28-5", "2-methylpropane"),
    Fluid("pentane", "109-66-0", "pentane"), Fluid("hexane", "110-54-3", "hexane"),
    Fluid("heptane", "142-82-5", "heptane"), Fluid("methanol", "67-56-1", "methanol"),
    Fluid("acetone", "67-64-1", "propanone"), Fluid("isopropanol", "67-63-0", "propan-2-ol"),
    Fluid("diethyl-ether", "60-29-7", "diethyl ether"), Fluid("o-xylene", "95-47-6", "1,2-dimethylbenzene"),
    Fluid("m-xylene", "108-38-3", "1,3-dimethylbenzene"), Fluid("chloroform", "67-66-3", "trichloromethane"),
    Fluid("carbon-tetrachloride", "56-23-5", "tetrachloromethane"),
    Fluid("cyclopropane", "75-19-4", "cyclopropane"), Fluid("cyclopentane", "287-92-3", "cyclopentane"),
    Fluid("chlorodifluoromethane", "75-45-6", "chlorodifluoromethane"),
    Fluid("trifluoromethane", "75-46-7", "trifluoromethane"),
    Fluid("chloromethane", "74-87-3", "chloromethane"), Fluid("dimethyl-ether", "115-10-6", "dimethyl ether"),
    Fluid("ethyl-acetate", "141-78-6", "ethyl acetate"), Fluid("1-butene", "106-98-9", "but-1-ene"),
    Fluid("1-3-butadiene", "106-99-0", "buta-1,3-diene"), Fluid("benzene", "71-43-2", "benzene"),
    Fluid("toluene", "108-88-3", "toluene"),
    Fluid("h2o", "7732-18-5", "water", ("Ih", "III", "V", "VI", "VII")),
    Fluid("d2o", "7789-20-0", "heavy water", ("Ih", "III", "V", "VI")),
)

#: chemicals tables used (path under the package folder), by source key
CHEMICALS_TABLES = {
    "poling-wagner": "Vapor Pressure/Wagner Collection Poling.tsv",
    "mcgarry-wagner": "Vapor Pressure/Wagner Original McGarry.tsv",
    "poling-antoine": "Vapor Pressure/Antoine Collection Poling.tsv",
    "staveley": "Triple Properties/Staveley 1981.tsv",
    "iupac-critical": "Critical Properties/IUPACOrganicCriticalProps.tsv",
    "crc-critical": "Critical Properties/CRCCriticalOrganics.tsv",
    "mathews-critical": "Critical Properties/Mathews1972InorganicCriticalProps.tsv",
    "psrk-acentric": "Critical Properties/Appendix to PSRK Revision 4.tsv",
    "crc-fusion": "Phase Change/CRC Handbook Heat of Fusion.tsv",
    "crc-boiling": "Phase Change/CRC Handbook Heat of Vaporization.tsv",
}
#: rows the chemicals copy of Staveley's table files under a wrong CAS number
#: (oxygen under atomic oxygen, hydrogen sulfide under sulfur): fixed by name
CAS_FIXES = {"staveley": {"17778-80-2": "7782-44-7", "7704-34-9": "7783-06-4"}}
#: triple-point temperatures [K] of the reference equations (lower sampling bound)
REFERENCE_TT = {"co2": 216.592, "nitrogen": 63.151, "argon": 83.8058, "h2o": 273.16,
                "d2o": 276.969}


class SourceTables:
    """The chemicals tables, indexed by CAS number, and the fluids' identities."""

    def __init__(self):
        import chemicals
        root = os.path.dirname(chemicals.__file__)
        self.frames = {}
        for key, rel in CHEMICALS_TABLES.items():
            df = pd.read_csv(os.path.join(root, rel), sep="\t", dtype=str, keep_default_na=False)
            df["CAS"] = df["CAS"].str.strip().replace(CAS_FIXES.get(key, {}))
            self.frames[key] = df.drop_duplicates("CAS").set_index("CAS")
        self._fluids = {f.id: f for f in FLUIDS}

    def row(self, key: str, cas: str) -> dict | None:
        df = self.frames[key]
        if cas not in df.index:
            return None
        return {k: (v.strip() if isinstance(v, str) else v) for k, v in df.loc[cas].items()}

    def fluid(self, fluid_id: str) -> Fluid:
        return self._fluids[fluid_id]

    @staticmethod
    def identity(cas: str) -> tuple[str, float]:
        """(formula, molar mass [g/mol]) from the chemicals identifier tables."""
        from chemicals.identifiers import search_chemical
        chem = search_chemical(cas)
        return chem.formula, float(chem.MW)

    def triple_T(self, fluid: Fluid) -> float | None:
        """The triple-point temperature [K] a curator knows for the fluid, if any."""
        if fluid.id in REFERENCE_TT:
            return REFERENCE_TT[fluid.id]
        row = self.row("staveley", fluid.cas)
        return float(row["Tt"]) if row else None


def num(text) -> float | None:
    """A table cell as a float, None when empty."""
    if text is None or str(text).strip() == "":
        return None
    return float(text)


def members(tables: SourceTables, source_key: str, requests) -> list[tuple[str, Fluid, frozenset]]:
    """(fluid id, fluid whose data it is, parts wanted) for a source: every real fluid with
    all parts, then the fault copies that take clean parts from this source."""
    out = [(f.id, f, ALL) for f in FLUIDS]
    for fault_fluid, base, wanted in requests:
        parts = frozenset(what for what, src in wanted if src == source_key)
        if parts:
            out.append((fault_fluid, tables.fluid(base), parts))
    return out


# --- sampling --------------------------------------------------------------------------

def temperatures(lo: float, hi: float, n: int, unit: str = "K") -> tuple[list[str], np.ndarray]:
    """n temperatures from lo to hi [K] written to 0.01 in ``unit`` (K or degC), all inside
    [lo, hi]; the values [K] they stand for."""
    off = ZERO_C if unit == "degC" else 0.0
    a, b = math.ceil(round((lo - off) * 100, 6)) / 100, math.floor(round((hi - off) * 100, 6)) / 100
    if b < a:
        return [], np.array([])
    vals = np.unique(np.round(np.linspace(a, b, n), 2))
    T = np.clip(vals + off, lo, hi)
    return [f"{v + 0.0:.2f}" for v in vals], T


def scatter(values: np.ndarray, u_rel: float, rng: np.random.Generator) -> np.ndarray:
    """Values with Gaussian relative scatter of NOISE_FRACTION × the standard uncertainty."""
    return values * (1.0 + NOISE_FRACTION * u_rel * rng.standard_normal(len(values)))


def cells(values: np.ndarray, unit_size: float, digits: int) -> list[str]:
    return [eq.positional(v / unit_size, digits) for v in values]


def pressure_table(fid: str, source_id: str, file: str, boundary: str, T_lo: float, T_hi: float,
                   n: int, fn, *, T_unit="K", p_unit="Pa", u_rel=0.005, coverage=None,
                   digits=5, solid_phase="", densities=None, comment="") -> Table | None:
    """A table of pressures (and saturated densities) sampled from ``fn(T)`` [Pa].

    ``u_rel`` is the stated relative uncertainty of every value (expanded when ``coverage``
    is given); the scatter uses the standard uncertainty u_rel/coverage.
    """
    T_cells, T = temperatures(T_lo, T_hi, n, T_unit)
    if len(T) < 3:
        return None
    u_std = u_rel / (coverage or 1)
    rng = rng_for(source_id, fid, file)
    header = ["T_degC" if T_unit == "degC" else "T_K", f"p_{p_unit}"]
    columns = [T_cells, cells(scatter(np.asarray(fn(T), float), u_std, rng), PA[p_unit], digits)]
    u_entry = {"relative": u_rel, **({"coverage": coverage} if coverage else {})}
    entry = {"file": file, "fluid": fid, "boundary": boundary}
    if solid_phase:
        entry["solid_phase"] = solid_phase
    entry["temperature"] = {"column": header[0], "unit": T_unit}
    entry["pressure"] = {"column": header[1], "unit": p_unit}
    unc = {"pressure": u_entry}
    cols = {}
    for quantity, (f_rho, unit, size, u_rho) in (densities or {}).items():
        name = f"{quantity}_{unit.replace('/', '_per_').replace('^', '')}"
        header.append(name)
        columns.append(cells(scatter(np.asarray(f_rho(T), float), u_rho / (coverage or 1), rng),
                             size, digits))
        cols[quantity] = {"column": name, "unit": unit}
        unc[quantity] = {"relative": u_rho, **({"coverage": coverage} if coverage else {})}
    entry["uncertainty"] = unc
    if cols:
        entry["columns"] = cols
    rows = [list(r) for r in zip(*columns)]
    return Table(file, entry, header, rows, comment)


def point(value: float, unit: str, u: float | None = None, coverage: float | None = None,
          scale: str | None = None) -> dict:
    out = {"value": value, "unit": unit}
    if u is not None and u > 0:
        out["u"] = u
        if coverage:
            out["coverage"] = coverage
    if scale:
        out["scale"] = scale
    return out


def fixed_point(fid: str, kind: str, T: dict, p: dict | None = None, rho: dict | None = None,
                phases=None) -> dict:
    entry = {"fluid": fid, "kind": kind}
    if phases:
        entry["phases"] = list(phases)
    entry["T"] = T
    if p is not None:
        entry["p"] = p
    if rho is not None:
        entry["rho"] = rho
    return entry


def sig(x: float, digits: int) -> float:
    return float(eq.positional(x, digits))


# --- the chemicals compilations ---------------------------------------------------------------

def vp_equation(tables: SourceTables, key: str, fluid: Fluid, *, raw: bool = False):
    """(fn(T) [Pa], T_lo, T_hi, Tc, pc) of a compiled vapour-pressure equation, or None.

    The range is the published Tmin-Tmax (McGarry: Tmin to Tc), raised to the triple point
    where one is known (no liquid-vapour values below Tt) unless ``raw``."""
    r = tables.row(key, fluid.cas)
    if r is None:
        return None
    Tt = 0.0 if raw else (tables.triple_T(fluid) or 0.0)
    if key == "poling-wagner":
        Tc, pc = num(r["Tc"]), num(r["Pc"])
        a = [num(r[k]) for k in "ABCD"]
        return (lambda T: eq.wagner_25_5(T, Tc, pc, *a)), max(num(r["Tmin"]), Tt), num(r["Tmax"]), Tc, pc
    if key == "mcgarry-wagner":
        Tc, pc = num(r["Tc"]), num(r["Pc"])
        a = [num(r[k]) for k in "ABCD"]
        return (lambda T: eq.wagner_3_6(T, Tc, pc, *a)), max(num(r["Tmin"]), Tt), Tc, Tc, pc
    A, B, C = (num(r[k]) for k in "ABC")
    return (lambda T: eq.antoine_pa_k(T, A, B, C)), max(num(r["Tmin"]), Tt), num(r["Tmax"]), None, None


VP_SOURCES = {
    "poling-wagner": dict(
        id="poling-2001-wagner-vapour-pressure", kind="literature", n=18, T_unit="K", p_unit="kPa",
        u_rel=0.01, coverage=2, crit_p_unit="bar",
        citation="B. E. Poling, J. M. Prausnitz, J. P. O'Connell, The Properties of Gases and Liquids, "
                 "5th ed. (McGraw-Hill, New York, 2001), Appendix A: Wagner equation (2.5-5 form) "
                 "coefficients with Tc, Pc, Tmin, Tmax",
        what="Wagner 2.5-5 equations (Poling et al. 2001) evaluated from Tmin (or the triple point) to Tmax"),
    "mcgarry-wagner": dict(
        id="mcgarry-1983-wagner-vapour-pressure", kind="literature", n=18, T_unit="degC", p_unit="bar",
        u_rel=0.01, coverage=2, crit_p_unit="Pa",
        citation="J. McGarry, Correlation and Prediction of the Vapor Pressures of Pure Liquids over "
                 "Large Pressure Ranges, Ind. Eng. Chem. Process Des. Dev. 22, 313-322 (1983)",
        doi="10.1021/i200021a023",
        what="Wagner 3-6 equations (McGarry 1983) evaluated from Tmin (or the triple point) to Tc"),
    "poling-antoine": dict(
        id="poling-2001-antoine-vapour-pressure", kind="literature", n=10, T_unit="degC", p_unit="mmHg",
        u_rel=0.02, coverage=2, crit_p_unit=None,
        citation="B. E. Poling, J. M. Prausnitz, J. P. O'Connell, The Properties of Gases and Liquids, "
                 "5th ed. (McGraw-Hill, New York, 2001), Appendix A: Antoine equation coefficients "
                 "with Tmin, Tmax",
        what="Antoine equations (Poling et al. 2001) evaluated from Tmin (or the triple point) to Tmax"),
}


def vp_batch(tables: SourceTables, key: str, requests) -> Batch:
    s = VP_SOURCES[key]
    k = s["coverage"]
    header = (f"{s['what']}.\nGenerated by tests/realdata/build_corpus.py -- do not edit by hand.\n"
              f"Stated u(p) = {s['u_rel'] * 100:g} % (expanded, k = {k}); values carry a Gaussian scatter "
              f"of {NOISE_FRACTION} x the standard u\nand are rounded to 5 significant digits "
              f"(tests/realdata/README.md).")
    src = {"id": s["id"], "kind": s["kind"], "citation": s["citation"]}
    if s.get("doi"):
        src["doi"] = s["doi"]
    src["license"] = "values computed from published equations; cite the source"
    batch = Batch(s["id"], src, header)
    for fid, fluid, parts in members(tables, key, requests):
        found = vp_equation(tables, key, fluid)
        if found is None:
            continue
        fn, lo, hi, Tc, pc = found
        Tt = tables.triple_T(fluid)
        boundary, file, note = "liquid-vapour", f"{fid}-vapour-pressure.csv", ""
        if Tt and hi <= Tt:
            # the whole published range lies below the triple point: the compilation's
            # "vapour pressure" is the solid's (sublimation), and a curator files it so
            fn, lo, hi, Tc, pc = vp_equation(tables, key, fluid, raw=True)
            boundary, file = "solid-vapour", f"{fid}-sublimation-pressure.csv"
            note = f"; the range lies below Tt = {Tt:.3f} K: filed as sublimation pressure"
        if "table" in parts:
            t = pressure_table(fid, s["id"], file, boundary, lo, hi,
                               s["n"], fn, T_unit=s["T_unit"], p_unit=s["p_unit"], u_rel=s["u_rel"],
                               coverage=k, comment=f"{fid}: {lo:.2f} K to {hi:.2f} K{note}")
            if t:
                batch.tables.append(t)
        if "critical" in parts and Tc and s["crit_p_unit"]:
            unit = s["crit_p_unit"]
            batch.fixed_points.append(("critical point of the equation (no uncertainty stated)",
                                       fixed_point(fid, "critical", point(Tc, "K"),
                                                   point(sig(pc / PA[unit], 7), unit))))
    return batch


def staveley_batch(tables: SourceTables, requests) -> Batch:
    sid = "staveley-1981-triple-points"
    header = ("Triple points compiled by Staveley, Lobo and Calado (1981), as the chemicals package\n"
              "copies them: Tt in K on ITS-90 (the copy's digits show a conversion from the paper's\n"
              "IPTS-68 values), written to 1 mK; pt in mmHg as printed, with the quoted +- as a standard\n"
              "uncertainty. Rows without pt are temperature-only fixed points, stated as published.\n"
              "Generated by tests/realdata/build_corpus.py -- do not edit by hand.")
    batch = Batch(sid, {"id": sid, "kind": "literature",
                        "citation": "L. A. K. Staveley, L. Q. Lobo, J. C. G. Calado, Triple-points of "
                                    "low melting substances and their use in cryogenic work, "
                                    "Cryogenics 21, 131-144 (1981)",
                        "doi": "10.1016/0011-2275(81)90264-2"}, header)
    for fid, fluid, parts in members(tables, "staveley", requests):
        r = tables.row("staveley", fluid.cas)
        if r is None or "triple" not in parts:
            continue
        p = None
        if num(r["Pt"]):
            u = num(r["Pt_uncertainty"])
            p = point(sig(num(r["Pt"]) / TORR, 6), "mmHg", sig(u / TORR, 3) if u else None)
        batch.fixed_points.append(("", fixed_point(fid, "triple", point(round(num(r["Tt"]), 3), "K"), p)))
    return batch


def critical_batch(tables: SourceTables, key: str, requests) -> Batch:
    spec = {
        "iupac-critical": ("iupac-critical-constants-series", "The IUPAC series Vapor-Liquid Critical "
                           "Properties of Elements and Compounds, parts 1-12, J. Chem. Eng. Data "
                           "(1995-2015): D. Ambrose, C. Tsonopoulos, A. S. Teja, T. E. Daubert, "
                           "A. P. Kudchadker and co-authors", "Tc in K, pc in MPa, rho_c in mol/L "
                           "from Vc; the table states no uncertainty, so none is stated"),
        "crc-critical": ("crc-handbook-critical-organics", "W. M. Haynes, T. J. Bruno, D. R. Lide (eds.), "
                         "CRC Handbook of Chemistry and Physics, 95th ed. (CRC Press, 2014), "
                         "Critical constants of organic compounds", "Tc in K, pc in kPa, rho_c in "
                         "kg/m^3 from Vc and the molar mass; the stated errors as standard uncertainties"),
        "mathews-critical": ("mathews-1972-inorganic-critical", "J. F. Mathews, The critical constants "
                             "of inorganic substances, Chem. Rev. 72, 71-100 (1972)", "Tc in K on "
                             "IPTS-68 (the scale of 1972), pc in atm, rho_c in mol/dm^3 from Vc; no "
                             "uncertainty stated"),
    }[key]
    sid, citation, how = spec
    header = f"Critical points: {how}.\nGenerated by tests/realdata/build_corpus.py -- do not edit by hand."
    src = {"id": sid, "kind": "literature", "citation": citation}
    if key == "mathews-critical":
        src["doi"] = "10.1021/cr60275a004"
    batch = Batch(sid, src, header)
    for fid, fluid, parts in members(tables, key, requests):
        r = tables.row(key, fluid.cas)
        if r is None or "critical" not in parts or not num(r["Tc"]) or not num(r["Pc"]):
            continue
        Tc, pc, Vc = num(r["Tc"]), num(r["Pc"]), num(r["Vc"])
        if key == "iupac-critical":
            fp = fixed_point(fid, "critical", point(Tc, "K"), point(sig(pc / 1e6, 6), "MPa"),
                             point(sig(1e-3 / Vc, 4), "mol/L") if Vc else None)
        elif key == "crc-critical":
            mm = tables.identity(fluid.cas)[1] / 1000.0
            uT, up, uV = num(r["Tc_error"]), num(r["Pc_error"]), num(r["Vc_error"])
            rho = None
            if Vc:
                rho = point(sig(mm / Vc, 4), "kg/m^3", sig(mm / Vc * uV / Vc, 2) if uV else None)
            fp = fixed_point(fid, "critical", point(Tc, "K", uT), point(sig(pc / 1e3, 6), "kPa",
                             sig(up / 1e3, 3) if up else None), rho)
        else:
            fp = fixed_point(fid, "critical", point(Tc, "K", scale="IPTS-68"),
                             point(sig(pc / 101325.0, 5), "atm"),
                             point(sig(1e-3 / Vc, 4), "mol/dm^3") if Vc else None)
        batch.fixed_points.append(("", fp))
    return batch


def constants_batch(tables: SourceTables, key: str, requests) -> Batch:
    sid, citation, what = {
        "psrk-acentric": ("psrk-revision-4-acentric-factors", "S. Horstmann, A. Jabloniec, J. Krafczyk, "
                          "K. Fischer, J. Gmehling, PSRK group contribution equation of state: "
                          "comprehensive revision and extension IV, Fluid Phase Equilib. 227, "
                          "157-164 (2005), appendix of pure-component parameters",
                          "acentric factors (no uncertainty stated)"),
        "crc-fusion": ("crc-handbook-enthalpy-of-fusion", "W. M. Haynes, T. J. Bruno, D. R. Lide (eds.), "
                       "CRC Handbook of Chemistry and Physics, 95th ed. (CRC Press, 2014), Enthalpy of "
                       "fusion", "enthalpies of fusion at the normal melting point, stated as the "
                       "enthalpy of fusion at the triple point (no uncertainty stated)"),
        "crc-boiling": ("crc-handbook-normal-boiling-points", "W. M. Haynes, T. J. Bruno, D. R. Lide "
                        "(eds.), CRC Handbook of Chemistry and Physics, 95th ed. (CRC Press, 2014), "
                        "Enthalpy of vaporization (normal boiling temperatures)",
                        "normal boiling temperatures in degC (no uncertainty stated)"),
    }[key]
    header = f"Stated constants: {what}.\nGenerated by tests/realdata/build_corpus.py -- do not edit by hand."
    batch = Batch(sid, {"id": sid, "kind": "literature", "citation": citation}, header)
    for fid, fluid, parts in members(tables, key, requests):
        r = tables.row(key, fluid.cas)
        if r is None or "constant" not in parts:
            continue
        if key == "psrk-acentric" and num(r["omega"]) is not None:
            entry = {"fluid": fid, "name": "acentric_factor", "value": num(r["omega"]), "unit": "1"}
        elif key == "crc-fusion" and num(r["Hfus"]):
            entry = {"fluid": fid, "name": "h_fusion_triple", "value": sig(num(r["Hfus"]) / 1e3, 6),
                     "unit": "kJ/mol"}
        elif key == "crc-boiling" and num(r["Tb"]):
            entry = {"fluid": fid, "name": "normal_boiling_T", "value": round(num(r["Tb"]) - ZERO_C, 2),
                     "unit": "degC"}
        else:
            continue
        batch.constants.append(("", entry))
    return batch


def chemicals_batches(tables: SourceTables, requests=()) -> list[Batch]:
    """One batch per compilation table of the chemicals package."""
    out = [vp_batch(tables, k, requests) for k in VP_SOURCES]
    out.append(staveley_batch(tables, requests))
    out += [critical_batch(tables, k, requests) for k in ("iupac-critical", "crc-critical",
                                                           "mathews-critical")]
    out += [constants_batch(tables, k, requests) for k in ("psrk-acentric", "crc-fusion", "crc-boiling")]
    return out
