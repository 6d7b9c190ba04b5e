"""Nightly job at scale: a full run over N synthetic fluids vs an incremental run after one
batch changes (a ratio, not a timing test).

Generates a raw folder of N fluids (default 1,000) in a temporary directory. Each synthetic
fluid is argon scaled by corresponding states: its vapour-pressure, saturated-density,
melting and sublimation data are the published argon curves of
:func:`pipeline.correlations.reference.reference_curve` evaluated at ``T / s_T`` and multiplied
by ``s_p`` (pressures) or ``s_rho`` (densities), with small normal noise drawn from the stated
uncertainties; the critical and triple points are scaled the same way. One batch per fluid,
100 observations (``points=1``; ``benchmarks/scale.py`` writes 10x as many).

Then, each in a fresh child process (so imports and caches do not carry over):
  1. full:        ``fluidledger nightly --full`` on an empty store;
  2. no change:   ``fluidledger nightly`` again (nothing changed);
  3. incremental: ``fluidledger nightly`` after one fluid's vapour-pressure file changed.
Prints the times, the per-stage times of each run, and the ratio incremental / full
(target < 0.05).

    python benchmarks/nightly.py [--fluids N] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from pipeline.correlations.reference import REFERENCE_CONSTANTS, reference_curve  # noqa: E402
from tests.storekit import batch_toml, source  # noqa: E402

BASE = "argon"
SEED = 20261202

def batch_manifest(fid: str, s_T: float, s_p: float, s_rho: float) -> str:
    """batch.toml of synthetic fluid ``fid``: argon's saturation, melting and sublimation tables
    and its critical and triple points, scaled (numbers written as the tables round them)."""
    c = REFERENCE_CONSTANTS[BASE]
    Tc, pc, Tt = c["Tc_K"], c["pc_Pa"], c["triple_points"][0]["T_K"]
    pt = c["triple_points"][0]["p_Pa"]

    def table(file, boundary, p_col, p_unit, u_p, u_T=None, **extra):
        u = {} if u_T is None else {"temperature": {"value": u_T, "unit": "K"}}
        u["pressure"] = {"relative": u_p, "unit": p_unit}
        return {"file": file, "fluid": fid, "boundary": boundary,
                "temperature": {"column": "T_K", "unit": "K"},
                "pressure": {"column": p_col, "unit": p_unit}, "uncertainty": u, **extra}

    saturation = table("saturation.csv", "liquid-vapour", "p_kPa", "kPa", 0.0002)
    saturation["uncertainty"].update(rho_liquid={"relative": 0.0005, "unit": "kg/m^3"},
                                     rho_vapour={"relative": 0.001, "unit": "kg/m^3"})
    saturation["columns"] = {"rho_liquid": {"column": "rho_l", "unit": "kg/m^3"},
                             "rho_vapour": {"column": "rho_v", "unit": "kg/m^3"}}
    points = [
        {"fluid": fid, "kind": "critical",
         "T": {"value": round(Tc * s_T, 6), "unit": "K", "u": 0.015},
         "p": {"value": round(pc * s_p / 1e6, 6), "unit": "MPa", "u": round(0.003 * s_p, 6)},
         "rho": {"value": round(c["rhoc_kg_m3"] * s_rho, 4), "unit": "kg/m^3", "u": 1.1}},
        {"fluid": fid, "kind": "triple", "phases": ["vapour", "liquid", "solid"],
         "T": {"value": round(Tt * s_T, 6), "unit": "K", "u": 0.0002},
         "p": {"value": round(pt * s_p / 1e3, 6), "unit": "kPa", "u": round(0.005 * s_p, 6)}}]
    return batch_toml(
        source(f"synthetic-{fid}", f"Synthetic benchmark fluid {fid}: argon scaled by s_T = "
               f"{s_T:.6f}, s_p = {s_p:.6f}", "evaluated"),
        [saturation, table("melting.csv", "solid-liquid", "p_MPa", "MPa", 0.001, u_T=0.002),
         table("sublimation.csv", "solid-vapour", "p_kPa", "kPa", 0.001)], points)


def fluid_id(i: int) -> str:
    return f"synthetic-{i:04d}"


def _scales(i: int) -> tuple[float, float, float]:
    rng = np.random.default_rng([SEED, i])
    return (float(rng.uniform(0.7, 1.6)), float(rng.uniform(0.5, 2.0)),
            float(rng.uniform(0.8, 1.25)))


def _csv(header: str, columns: list[np.ndarray], formats: list[str]) -> str:
    lines = [header]
    for row in zip(*columns):
        lines.append(",".join(f % v for f, v in zip(formats, row)))
    return "\n".join(lines) + "\n"


def write_fluid(raw: Path, i: int, variant: int = 0, points: int = 1) -> None:
    """Write the batch of synthetic fluid ``i``; ``variant`` changes the noise (a new campaign);
    ``points`` multiplies the rows of each table (1: 100 observations per fluid, 10: 1,000)."""
    fid = fluid_id(i)
    s_T, s_p, s_rho = _scales(i)
    rng = np.random.default_rng([SEED, i, variant])
    c = REFERENCE_CONSTANTS[BASE]
    Tc, Tt = c["Tc_K"], c["triple_points"][0]["T_K"]

    def curve(boundary, quantity, T):
        return reference_curve(BASE, boundary, quantity).value(T)

    def noisy(values, u_rel):
        return values * (1 + 0.5 * u_rel * np.clip(rng.standard_normal(len(values)), -2.5, 2.5))

    folder = raw / fid
    folder.mkdir(parents=True, exist_ok=True)
    T = np.linspace(Tt + 0.5, Tc - 1.5, 24 * points)
    sat = _csv("T_K,p_kPa,rho_l,rho_v",
               [T * s_T, noisy(curve("liquid-vapour", "pressure", T), 2e-4) * s_p / 1e3,
                noisy(curve("liquid-vapour", "rho_liquid", T), 5e-4) * s_rho,
                noisy(curve("liquid-vapour", "rho_vapour", T), 1e-3) * s_rho],
               ["%.5f", "%.7g", "%.6g", "%.6g"])
    Tm = np.linspace(Tt + 1.0, 140.0, 16 * points)
    melt = _csv("T_K,p_MPa", [Tm * s_T, noisy(curve("solid-liquid", "pressure", Tm), 1e-3)
                              * s_p / 1e6], ["%.5f", "%.7g"])
    Ts = np.linspace(70.0, Tt - 0.5, 12 * points)
    sub = _csv("T_K,p_kPa", [Ts * s_T, noisy(curve("solid-vapour", "pressure", Ts), 1e-3)
                             * s_p / 1e3], ["%.5f", "%.7g"])
    (folder / "saturation.csv").write_text(sat)
    (folder / "melting.csv").write_text(melt)
    (folder / "sublimation.csv").write_text(sub)
    (folder / "batch.toml").write_text(batch_manifest(fid, s_T, s_p, s_rho))


def make_raw(raw: Path, n: int, points: int = 1) -> None:
    """A raw root with ``fluids.toml`` and one batch per synthetic fluid (``points``: see
    :func:`write_fluid`)."""
    raw.mkdir(parents=True, exist_ok=True)
    entries = []
    for i in range(n):
        s_T, s_p, s_rho = _scales(i)
        entries.append(f'[[fluid]]\nid = "{fluid_id(i)}"\nname = "synthetic fluid {i}"\n'
                       f'molar_mass = {{ value = {39.948 * s_rho:.4f}, unit = "g/mol" }}\n')
        write_fluid(raw, i, points=points)
    (raw / "fluids.toml").write_text("\n".join(entries))


def nightly(args: list[str], out) -> None:
    from pipeline.cli import main

    t0 = time.perf_counter()
    code = main(["nightly", "--quiet", *args])
    out.put((time.perf_counter() - t0, code))


def phase(*args) -> tuple[float, int]:
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=nightly, args=(list(args), q))
    p.start()
    res = q.get()
    p.join()
    return res


def stage_times(store: Path) -> dict[str, float]:
    import duckdb

    con = duckdb.connect(str(store), read_only=True)
    row = con.execute("SELECT summary_json FROM run WHERE kind = 'nightly' "
                      "ORDER BY started_at DESC, run_id DESC LIMIT 1").fetchone()
    con.close()
    summary = json.loads(row[0])
    return {k: v["duration_s"] for k, v in summary["stages"].items()}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fluids", type=int, default=1000)
    ap.add_argument("--keep", type=Path, default=None,
                    help="work in this folder and keep it (default: a temporary folder)")
    args = ap.parse_args()
    tmp = args.keep or Path(tempfile.mkdtemp(prefix="fl-nightly-bench-"))
    try:
        raw, store, reports = tmp / "raw", tmp / "store.duckdb", tmp / "reports"
        t0 = time.perf_counter()
        make_raw(raw, args.fluids)
        print(f"generated {args.fluids} synthetic fluids in {time.perf_counter() - t0:.1f} s")
        common = ["--store", str(store), "--raw", str(raw), "--reports", str(reports)]
        t_full, code_full = phase(*common, "--full")
        full_stages = stage_times(store)
        t_same, code_same = phase(*common)
        same_stages = stage_times(store)
        write_fluid(raw, args.fluids // 2, variant=1)   # one batch changes
        t_inc, code_inc = phase(*common)
        inc_stages = stage_times(store)
        print(f"full nightly:        {t_full:8.2f} s  (exit {code_full})")
        print(f"no-change nightly:   {t_same:8.2f} s  (exit {code_same})")
        print(f"incremental nightly: {t_inc:8.2f} s  (exit {code_inc}, one batch changed)")
        print("stage times [s]:  " + "  ".join(f"{k:>8}" for k in full_stages))
        for name, st in (("full", full_stages), ("no change", same_stages),
                         ("incremental", inc_stages)):
            print(f"  {name:<14}" + "  ".join(f"{st.get(k, 0.0):8.2f}" for k in full_stages))
        print(f"ratio incremental / full: {t_inc / t_full:.3f}  (target < 0.05)")
        print(f"ratio no-change / full:   {t_same / t_full:.3f}")
    finally:
        if args.keep is None:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
