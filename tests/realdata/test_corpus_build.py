"""The real-data regression corpus: reproducible, sourced, valid, and faithful to its equations."""

from __future__ import annotations

import csv
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

HERE = Path(__file__).resolve().parent
CORPUS = HERE / "corpus"
sys.path.insert(0, str(HERE))

import build_corpus  # noqa: E402
import corpus_equations as eq  # noqa: E402
from corpus_faults import FAULTS  # noqa: E402
from corpus_sources import (  # noqa: E402
    FLUIDS, NOISE_FRACTION, PA, VP_SOURCES, ZERO_C, SourceTables, num, vp_equation,
)

from pipeline.ingest.stage import run_ingest  # noqa: E402
from pipeline.store import open_store  # noqa: E402

#: sources that share their origin count once when counting independent sources: the CRC
#: Handbook's critical constants come from the IUPAC series; Poling's Wagner and Antoine
#: tables are one book; the three IAPWS water releases are one body's evaluation.
LINEAGE = {
    "crc-handbook-critical-organics": "iupac-critical",
    "iupac-critical-constants-series": "iupac-critical",
    "poling-2001-wagner-vapour-pressure": "poling-2001",
    "poling-2001-antoine-vapour-pressure": "poling-2001",
    "iapws-sr1-86-h2o-saturation": "iapws",
    "iapws-r14-08-h2o-melting-sublimation": "iapws",
    "iapws-r10-06-ice-ih-density": "iapws",
    "crc-handbook-enthalpy-of-fusion": "crc-handbook",
    "crc-handbook-normal-boiling-points": "crc-handbook",
}


def batches(root: Path = CORPUS) -> dict[str, dict]:
    return {p.parent.name: tomllib.loads(p.read_text()) for p in sorted(root.glob("*/batch.toml"))}


def read_table(batch: str, entry: dict) -> tuple[np.ndarray, np.ndarray]:
    """(T [K], p [Pa]) of a table, converted with the units its entry declares."""
    with open(CORPUS / batch / entry["file"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    T = np.array([float(r[entry["temperature"]["column"]]) for r in rows])
    T = T + ZERO_C if entry["temperature"]["unit"] == "degC" else T
    p = np.array([float(r[entry["pressure"]["column"]]) for r in rows]) * PA[entry["pressure"]["unit"]]
    return T, p


@pytest.fixture(scope="module")
def tables():
    return SourceTables()


def test_rebuilding_gives_byte_identical_files(tmp_path):
    """Rebuilding the corpus into a fresh folder reproduces every committed file byte for byte."""
    build_corpus.build(tmp_path / "corpus")
    built = {p.relative_to(tmp_path / "corpus"): p.read_bytes()
             for p in (tmp_path / "corpus").rglob("*") if p.is_file()}
    committed = {p.relative_to(CORPUS): p.read_bytes() for p in CORPUS.rglob("*") if p.is_file()}
    assert sorted(built) == sorted(committed)
    assert [k for k in built if built[k] != committed[k]] == []


def test_corpus_has_at_least_forty_real_fluids_with_their_identity(tables):
    """At least 40 real fluids, each with the CAS number, formula and molar mass of the chemicals tables."""
    fluids = tomllib.loads((CORPUS / "fluids.toml").read_text())["fluid"]
    fault_ids = {f.fluid for f in FAULTS}
    real = [f for f in fluids if f["id"] not in fault_ids]
    assert len(real) >= 40
    by_id = {f["id"]: f for f in fluids}
    assert by_id["h2o"]["cas_rn"] == "7732-18-5" and by_id["d2o"]["cas_rn"] == "7789-20-0"
    assert "water" not in by_id                       # not the demo's slug: match by identity
    for f in fluids:
        formula, mm = tables.identity(f["cas_rn"])
        assert (f["formula"], f["molar_mass"]["value"]) == (formula, mm), f["id"]
    assert by_id["h2o"]["solid_phases"] == ["Ih", "III", "V", "VI", "VII"]


def test_every_clean_fluid_has_two_independent_sources_of_phase_data():
    """Each real fluid has tables or fixed points from at least two sources of independent origin."""
    origins: dict[str, set[str]] = {}
    for name, doc in batches().items():
        for entry in doc.get("table", []) + doc.get("fixed_point", []):
            origins.setdefault(entry["fluid"], set()).add(LINEAGE.get(doc["source"]["id"],
                                                                      doc["source"]["id"]))
    short = {f.id: sorted(origins.get(f.id, ())) for f in FLUIDS if len(origins.get(f.id, ())) < 2}
    assert short == {}


def test_every_batch_cites_one_source_and_faults_are_single_items():
    """Each batch is one cited source; a fault's own batch carries exactly one table or one fixed point."""
    docs = batches()
    assert len({d["source"]["id"] for d in docs.values()}) == len(docs)
    assert all(len(d["source"]["citation"]) > 20 for d in docs.values())
    manifest = tomllib.loads((CORPUS / "faults.toml").read_text())["fault"]
    assert [m["fluid"] for m in manifest] == [f.fluid for f in FAULTS]
    for m in manifest:
        doc = docs[m["batch"]]
        items = doc.get("table", []) + doc.get("fixed_point", []) + doc.get("constant", [])
        assert len(items) == 1 and items[0]["fluid"] == m["fluid"], m["fluid"]
        assert m["families"]


def test_every_batch_ingests_and_only_temperature_only_fixed_points_are_quarantined(tmp_path):
    """The whole corpus ingests with no rejected batch; what is quarantined is a triple point stated without p."""
    with open_store(tmp_path / "store.duckdb") as s:
        result = run_ingest(s.con, [CORPUS])
        assert [b.error for b in result.errors] == []
        q = s.con.execute("SELECT file_path, row_number, reason_code FROM quarantine_current").fetchall()
    docs = batches()
    t_only = {(f"{name}/batch.toml", i) for name, doc in docs.items()
              for i, fp in enumerate(doc.get("fixed_point", []), start=1) if "p" not in fp}
    assert {code for _, _, code in q} <= {"missing-pressure"}
    assert {(path, row) for path, row, _ in q} <= t_only
    assert len(t_only) >= 10                          # Staveley states many T-only triple points


@pytest.mark.parametrize("key", sorted(VP_SOURCES))
def test_sampled_vapour_pressures_reproduce_their_equations(tables, key):
    """Every sampled pressure lies within the stated noise (5 sigma) plus rounding of its compiled equation."""
    s = VP_SOURCES[key]
    doc = batches()[s["id"]]
    u_std = s["u_rel"] / s["coverage"]
    fluids = {f.id: f for f in FLUIDS}
    checked = 0
    for entry in doc["table"]:
        fluid = fluids.get(entry["fluid"])
        if fluid is None:                             # a fault copy: checked below
            continue
        fn, lo, hi, _tc, _pc = vp_equation(tables, key, fluid,
                                           raw=entry["boundary"] == "solid-vapour")
        T, p = read_table(s["id"], entry)
        assert lo - 1e-9 <= T.min() and T.max() <= hi + 1e-9, entry["file"]   # inside Tmin-Tmax only
        dev = np.abs(p / fn(T) - 1)
        assert dev.max() < 5 * NOISE_FRACTION * u_std + 1e-4, entry["file"]   # 5 significant digits
        checked += 1
    assert checked >= 10


@pytest.mark.parametrize("ice, T, p_MPa", [
    ("Ih", 260.0, 138.268), ("III", 254.0, 268.685), ("V", 265.0, 479.640),
    ("VI", 320.0, 1356.76), ("VII", 550.0, 6308.71),
])
def test_water_melting_equations_give_iapws_r14_08_check_values(ice, T, p_MPa):
    """The melting equations sampled for water give the check values of IAPWS R14-08(2011), Table 3."""
    assert eq.h2o_melting(T, ice)[0] / 1e6 == pytest.approx(p_MPa, rel=5e-6)


def test_water_sublimation_and_saturation_give_iapws_check_values():
    """Sublimation at 230 K is 8.94735 Pa (IAPWS R14-08, Table 3); saturation at 373.1243 K is
    0.101325 MPa, 958.365 and 0.597586 kg/m3 (IAPWS SR1-86(1992) check values)."""
    assert eq.h2o_sublimation(230.0)[0] == pytest.approx(8.94735, rel=2e-6)
    p, rho_l, rho_v = eq.h2o_saturation([373.1243])
    assert p[0] == pytest.approx(101325.0, rel=1e-6)
    assert rho_l[0] == pytest.approx(958.365, rel=1e-6)
    assert rho_v[0] == pytest.approx(0.597586, rel=2e-6)


@pytest.mark.parametrize("name, fn, T, expected, rel", [
    # Span & Wagner (1996) saturation table, 250 K: 1.785045 MPa (the ancillary is within 1e-5)
    ("co2", eq.ancillary_vapour_pressure, 250.0, 1.785045e6, 2e-5),
    # ancillaries at the triple point reproduce the published pt = 0.51795 MPa (Span & Wagner 1996)
    ("co2", eq.ancillary_vapour_pressure, 216.592, 0.51795e6, 5e-5),
    # normal boiling points (p = 101.325 kPa by definition): N2 77.355 K (Span et al. 2000),
    # Ar 87.302 K (Tegeler et al. 1999)
    ("n2", eq.ancillary_vapour_pressure, 77.355, 101325.0, 1e-4),
    ("ar", eq.ancillary_vapour_pressure, 87.302, 101325.0, 1e-4),
    # N2 pt = 12.523 kPa and Ar pt = 68.891 kPa at their triple points (same papers)
    ("n2", eq.ancillary_vapour_pressure, 63.151, 12.523e3, 2e-4),
    ("ar", eq.ancillary_vapour_pressure, 83.8058, 68.891e3, 1e-4),
])
def test_ancillary_equations_reproduce_published_points(name, fn, T, expected, rel):
    """The CO2, N2 and Ar ancillary equations reproduce the published points they must pass."""
    assert fn(name, T) == pytest.approx(expected, rel=rel)


def test_compiled_equations_reproduce_their_published_examples():
    """Methane at 100 K: Wagner 3-6 (McGarry coefficients) 34520.45 Pa and Wagner 2.5-5 (Poling
    coefficients) 34415.00 Pa, the worked examples of the chemicals package documentation."""
    assert eq.wagner_3_6(100.0, 190.53, 4596420.0, -6.00435, 1.1885, -0.834082, -1.22833) == \
        pytest.approx(34520.44601450499, rel=1e-12)
    assert eq.wagner_25_5(100.0, 190.551, 4599200.0, -6.02242, 1.26652, -0.5707, -1.366) == \
        pytest.approx(34415.004762637, rel=1e-12)


#: compiled equations that miss 1 atm at the CRC normal boiling point by more than their stated
#: expanded u: true disagreements between published sources (tests/realdata/README.md)
KNOWN_TB_DISAGREEMENTS = {("neon", "mcgarry-wagner"), ("fluorine", "mcgarry-wagner"),
                          ("hydrogen-sulfide", "poling-antoine")}


def test_compiled_equations_give_one_atmosphere_at_the_crc_normal_boiling_point(tables):
    """p(Tb) = 101.325 kPa within the stated expanded u for every compiled equation covering the
    CRC Handbook's normal boiling temperature, apart from the three documented disagreements."""
    misses = set()
    checked = 0
    for fluid in FLUIDS:
        r = tables.row("crc-boiling", fluid.cas)
        if r is None or not num(r["Tb"]):
            continue
        Tb = num(r["Tb"])
        for key, s in VP_SOURCES.items():
            found = vp_equation(tables, key, fluid)
            if found and found[1] <= Tb <= found[2]:
                checked += 1
                if abs(found[0](Tb) / 101325.0 - 1) > s["u_rel"]:
                    misses.add((fluid.id, key))
    assert checked >= 80
    assert misses == KNOWN_TB_DISAGREEMENTS


@pytest.mark.parametrize("fault, true_T_shift, true_p_unit, p_offset", [
    ("fault-kpa-as-pa-methane", 0.0, "kPa", 0.0),
    ("fault-mpa-as-bar-ethane", 0.0, "MPa", 0.0),
    ("fault-degc-as-k-toluene", ZERO_C, "kPa", 0.0),
    ("fault-gauge-as-absolute-propane", 0.0, "kPa", 101325.0),
])
def test_planted_unit_faults_are_exactly_the_stated_mix_up(tables, fault, true_T_shift, true_p_unit,
                                                           p_offset):
    """Read with the true unit (kPa, MPa, degC, gauge + 1 atm) a fault file reproduces its real
    fluid's compiled equation within the campaign's scatter; read as declared it does not."""
    spec = next(f for f in FAULTS if f.fluid == fault)
    entry = batches()[fault]["table"][0]
    with open(CORPUS / fault / entry["file"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    T = np.array([float(r["T"]) for r in rows]) + true_T_shift
    p = np.array([float(r["p"]) for r in rows]) * PA[true_p_unit] + p_offset
    fn = vp_equation(tables, "poling-wagner", tables.fluid(spec.base))[0]
    assert np.abs(p / fn(T) - 1).max() < 0.01
    T_decl = np.array([float(r["T"]) for r in rows])
    p_decl = np.array([float(r["p"]) for r in rows]) * PA[entry["pressure"]["unit"]]
    assert np.abs(p_decl / fn(np.maximum(T_decl, 1.0)) - 1).max() > 0.05
