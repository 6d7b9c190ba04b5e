"""Publish at the scale of a compilation, and the SQL curve macro against numpy (ratios).

Prints each measurement against its target of issue 14 (a benchmark, not a timing test; no
result depends on speed):

1. **publish of N fluids** (default 1,000; target <= 4 s): the whole stage - ``publish()``
   reads the inputs, recommends, builds the provenance, writes and validates the exports,
   builds the published file and writes the store rows - on the synthetic store the issue
   measured: per fluid a critical and a triple point, a stated normal boiling point, a raw
   file of 20 vapour-pressure observations with a Wagner fit (argon's ancillary equation of
   Tegeler et al. 1999 rescaled to the fluid), a sublimation fit and three passing findings.
   Also at N/10 fluids: t(N) / t(N/10) = 10 is linear scaling.
2. **incremental publish after one changed batch** / full publish: one fluid's critical point
   is restated (as a changed batch.toml would), then the release is made incrementally over
   the previous one, and from scratch (``full=True``); the two releases must be identical.
3. **SQL curve macro** over 1,000,000 (fluid, T) rows of the published file against numpy
   (``Curve.value`` per curve, and ``evaluate_batch``); target <= 3x batched, for the table
   macro ``fl_vapour_pressure_table`` (the bulk form); the per-row scalar macro
   ``fl_vapour_pressure`` and a hand-written join are printed beside it. The inputs are made
   before any timing on both sides (a temporary table of points; the same temperatures as
   numpy arrays). Each side is run once to warm up, then repeated.
4. with ``--pipeline``: 1 and 2 on a store that the pipeline made (``ingest``, ``fit``,
   ``check`` of the synthetic fluids of ``benchmarks/nightly.py``: five curves and about 38
   findings per fluid), the changed batch a new campaign of one fluid's saturation data. The
   store takes minutes to build; ``--keep DIR`` keeps it for the next run.

Every publish runs in a fresh process (``--child``) on a fresh copy of its store; repeated
``--repeat`` times (default 3) and shown as min / median / max, with the peak RSS of the child
process alone (its own ``ru_maxrss``, not the parent's).

    python benchmarks/publish.py [--fluids 1000] [--repeat 3] [--pipeline] [--keep DIR]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from pipeline.correlations import Curve, evaluate_batch, reference_curve  # noqa: E402

N_OBS = 20
ROWS = 1_000_000
TARGET_PUBLISH_S = 4.0
TARGET_MACRO = 3.0


# --- the synthetic store of issue 14 -------------------------------------------------------

def _curves(n: int) -> tuple[list[Curve], list[Curve], np.ndarray, np.ndarray, np.ndarray]:
    """Rescaled argon vapour-pressure and sublimation curves for n fluids."""
    rng = np.random.default_rng(7)
    scale = rng.uniform(0.5, 3.0, n)
    vap0 = reference_curve("argon", "liquid-vapour", "pressure")
    sub0 = reference_curve("argon", "solid-vapour", "pressure")
    Tc, Tt = 150.687 * scale, 83.8058 * scale
    pc = 4.863e6 * scale ** 1.5
    vap, sub = [], []
    for i in range(n):
        a = list(vap0.params[1:])
        vap.append(Curve("wagner-type", (float(np.log(pc[i])), *a),
                         {"T_ref_K": float(Tc[i]), "exponents": vap0.ref["exponents"]},
                         tuple(tuple(1e-8 * (j == k) for k in range(5)) for j in range(5)),
                         float(Tt[i]), float(0.99 * Tc[i])))
        p_t = float(vap[-1].value(Tt[i]))
        sub.append(Curve("sublimation-power", (float(np.log(p_t)), *sub0.params[1:]),
                         {"T_ref_K": float(Tt[i]), "exponents": sub0.ref["exponents"]}, None,
                         float(0.85 * Tt[i]), float(Tt[i])))
    return vap, sub, Tc, Tt, pc


def build_store(path: Path, n: int) -> None:
    from pipeline.store import open_store

    vap, sub, Tc, Tt, pc = _curves(n)
    with open_store(path) as s:
        con = s.con
        con.execute("INSERT INTO run VALUES ('ingest-bench', 'ingest', now(), now(), 'bench', "
                    "'{}', 'ok', '{}'), ('check-bench', 'check', now(), now(), 'bench', '{}', "
                    "'ok', '{}')")
        con.execute("INSERT INTO source VALUES ('bench-evaluated', 'evaluated', "
                    "'Synthetic benchmark source', NULL, 'none', 'bench', NULL), "
                    "('bench-lab', 'measurement', 'Synthetic benchmark lab', NULL, 'none', "
                    "'bench', NULL)")
        con.execute("INSERT INTO fluid SELECT 'fluid-' || i, 'fluid ' || i, NULL, NULL, 0.04, "
                    "NULL FROM range(?) r(i)", [n])
        # file ids: 2i+1 the batch.toml of fluid i, 2i+2 its vapour-pressure CSV file
        con.execute("""INSERT INTO raw_file SELECT 2*i+1, sha256('m' || i), sha256('map' || i),
            'b' || i || '/batch.toml', 'b' || i, 'manifest', 'bench-evaluated', NULL, NULL, NULL,
            NULL, 100, 3, 3, 0, 'ingest-bench', now(), NULL, NULL FROM range(?) r(i)""", [n])
        con.execute("""INSERT INTO raw_file SELECT 2*i+2, sha256('t' || i), sha256('mapt' || i),
            'b' || i || '/vp.csv', 'b' || i, 'table', 'bench-lab', 0, 'fluid-' || i,
            'liquid-vapour', '', 1000, ?, ?, 0, 'ingest-bench', now(), NULL, NULL
            FROM range(?) r(i)""", [N_OBS, N_OBS, n])
        con.execute("""INSERT INTO raw_column SELECT 2*i+2, q, q, u, NULL, u, NULL FROM range(?) r(i),
            (VALUES ('temperature', 'K'), ('pressure', 'Pa')) v(q, u)""", [n])
        pts = pa.table({"i": np.arange(n), "Tc": Tc, "pc": pc, "Tt": Tt,
                        "pt": [float(c.value(t)) for c, t in zip(vap, Tt)]})
        con.register("pts", pts)
        con.execute("""INSERT INTO fixed_point SELECT 2*i+1, 'fluid-' || i, 'critical',
            'liquid,vapour', Tc, 0.01, pc, 1000.0, 500.0, 1.0, 'bench-evaluated', 2*i+1,
            sha256('m' || i), 'b' || i || '/batch.toml', 1, '{}', 'ingest-bench' FROM pts""")
        con.execute("""INSERT INTO fixed_point SELECT 2*i+2, 'fluid-' || i, 'triple',
            'vapour,liquid,solid', Tt, 0.002, pt, 5.0, NULL, NULL, 'bench-evaluated', 2*i+1,
            sha256('m' || i), 'b' || i || '/batch.toml', 2, '{}', 'ingest-bench' FROM pts""")
        nbp = [float(c.inverse(101325.0)) for c in vap]
        con.register("nbp", pa.table({"i": np.arange(n), "T": nbp}))
        con.execute("""INSERT INTO stated_constant SELECT i+1, 'fluid-' || i, 'normal_boiling_T',
            T, 0.002, 'K', 'bench-evaluated', 2*i+1, sha256('m' || i), 'b' || i || '/batch.toml',
            3, '{}', 'ingest-bench' FROM nbp WHERE isfinite(T)""")
        T_obs = np.array([np.linspace(c.T_min_K, c.T_max_K, N_OBS) for c in vap])
        p_obs = np.array([c.value(t) for c, t in zip(vap, T_obs)])
        obs = pa.table({"obs_id": np.arange(n * N_OBS) + 1,
                        "file_id": np.repeat(2 * np.arange(n) + 2, N_OBS),
                        "row_number": np.tile(np.arange(N_OBS) + 1, n),
                        "T": T_obs.ravel(), "p": p_obs.ravel()})
        con.register("obs", obs)
        con.execute("""INSERT INTO observation SELECT obs_id, file_id, row_number, 'pressure', T,
            0.01, p, 1e-3 * p, NULL, NULL, NULL, NULL, T, p FROM obs""")
        fits = []
        for i in range(n):
            for boundary, curve in (("liquid-vapour", vap[i]), ("solid-vapour", sub[i])):
                fits.append({"fit_id": f"fluid-{i}/{boundary}/-/pressure/bench",
                             "fluid_id": f"fluid-{i}", "boundary": boundary,
                             "form": curve.form, "curve_json": json.dumps(curve.to_dict()),
                             "T_min_K": curve.T_min_K, "T_max_K": curve.T_max_K,
                             "input_hash": f"{i:064x}"})
        con.register("fits", pa.Table.from_pylist(fits))
        con.execute("""INSERT INTO fit SELECT fit_id, fluid_id, boundary, '', 'pressure',
            'fitted', NULL, form, curve_json, NULL, NULL, T_min_K, T_max_K, ?, ?, 0, 0, 1.0, 1.0,
            0.0, input_hash, 'fit-bench', now(), true FROM fits""", [N_OBS, N_OBS])
        con.execute("""INSERT INTO fit_residual SELECT 'fluid-' || ((file_id - 2) // 2) ||
            '/liquid-vapour/-/pressure/bench', obs_id, 0.0, 0.0, false, NULL FROM obs""")
        con.execute("""INSERT INTO check_result SELECT 'check-bench', c, 'fluid-' || i, s, 'pass',
            'fail', 0.1, 3.0, '|z|', 'synthetic finding', '{"fit_id": "fluid-' || i ||
            '/liquid-vapour/-/pressure/bench", "fp_ids": [' || (2*i+1) || ']}', '{}', NULL, NULL,
            0.0 FROM range(?) r(i), (VALUES ('critical.curve-end', 'p(Tc)'),
            ('triple-point.on-curves', 'triple:vapour,liquid,solid|liquid-vapour'),
            ('data.outliers', 'curve:liquid-vapour')) v(c, s)""", [n])


def restate_one_fluid(store: Path, n: int) -> str:
    """One fluid's batch.toml states its critical temperature 1 mK higher (a changed batch)."""
    from pipeline.store import open_store

    fluid = f"fluid-{n // 2}"
    with open_store(store) as s:
        s.con.execute("UPDATE fixed_point SET T_K = T_K + 0.001 WHERE fluid_id = ? AND "
                      "kind = 'critical'", [fluid])
    return fluid


# --- the pipeline's store ----------------------------------------------------------------------

def build_pipeline_store(folder: Path, n: int) -> Path:
    """raw/ of n synthetic fluids (benchmarks/nightly.py), ingested, fitted, checked."""
    store = folder / "store.duckdb"
    if store.exists():
        return store
    sys.path.insert(0, str(HERE))
    import nightly

    nightly.make_raw(folder / "raw", n)
    for args in (["ingest", str(folder / "raw")], ["fit"], ["check"]):
        _cli(args, store)
    return store


def _cli(args: list[str], store: Path) -> None:
    subprocess.run([sys.executable, "-m", "pipeline.cli", *args, "--store", str(store), "-q"],
                   check=False, cwd=HERE.parent, stdout=subprocess.DEVNULL)


def change_pipeline_batch(folder: Path, store: Path, n: int) -> None:
    """A new campaign of one fluid's data in a copy of raw/, ingested, fitted, checked."""
    sys.path.insert(0, str(HERE))
    import nightly

    raw = store.parent / "raw"
    shutil.rmtree(raw, ignore_errors=True)
    shutil.copytree(folder / "raw", raw)
    nightly.write_fluid(raw, n // 2, variant=1)
    for args in (["ingest", str(raw)], ["fit"], ["check"]):
        _cli(args, store)


# --- measurements in child processes -----------------------------------------------------------

def child_publish(store: str, out: str, full: bool) -> None:
    from pipeline.publish.release import publish
    from pipeline.store import open_store

    with open_store(Path(store)) as s:
        t0 = time.perf_counter()
        r = publish(s.con, Path(store), out=Path(out), allow_failures=True, full=full)
        elapsed = time.perf_counter() - t0
    print(json.dumps({"seconds": elapsed, "release": r.release_id,
                      "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                      "copied": r.fluids_copied, "computed": r.fluids_computed,
                      "curves": r.n_curves}))


def run_child(*args: str) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", *args], check=True,
                         capture_output=True, text=True, cwd=HERE.parent)
    return json.loads(out.stdout.strip().splitlines()[-1])


def timed_publishes(template: Path, work: Path, repeat: int, *, full: bool,
                    out_template: Path | None = None) -> list[dict]:
    """Publish fresh copies of ``template`` (and of its previous export root)."""
    runs = []
    for k in range(repeat):
        run = work / f"run-{k}"
        shutil.rmtree(run, ignore_errors=True)
        run.mkdir(parents=True)
        store = run / "store.duckdb"
        shutil.copyfile(template, store)
        out = run / "out"
        if out_template is not None:
            shutil.copytree(out_template, out)
        runs.append(run_child("publish", str(store), str(out), "full" if full else "inc"))
        if k < repeat - 1:
            shutil.rmtree(run, ignore_errors=True)
    return runs


def spread(values: list[float]) -> str:
    return (f"min {min(values):.2f}  median {statistics.median(values):.2f}  "
            f"max {max(values):.2f}")


def report_publish(label: str, runs: list[dict]) -> float:
    t = [r["seconds"] for r in runs]
    mem = max(r["peak_mib"] for r in runs)
    print(f"  {label:<46} {spread(t)} s   peak RSS {mem:.0f} MiB   "
          f"(fluids computed {runs[0]['computed']}, copied {runs[0]['copied']})")
    return statistics.median(t)


def same_release(a: Path, b: Path) -> bool:
    files = sorted(p.name for p in a.iterdir())
    return files == sorted(p.name for p in b.iterdir()) and all(
        (a / f).read_bytes() == (b / f).read_bytes() for f in files)


def incremental_scenario(label: str, template: Path, work: Path, repeat: int,
                         change) -> float:
    """Publish ``template`` once (the previous release), apply ``change``, then time the next
    publish incrementally and from scratch; returns incremental / full (medians)."""
    base = work / "prepared"
    shutil.rmtree(base, ignore_errors=True)
    base.mkdir(parents=True)
    store = base / "store.duckdb"
    shutil.copyfile(template, store)
    run_child("publish", str(store), str(base / "out"), "full")
    change(store)
    inc, full = [], []
    for _ in range(repeat):      # alternated, so that the machine's load weighs on both alike
        inc += timed_publishes(store, work / "inc", 1, full=False, out_template=base / "out")
        full += timed_publishes(store, work / "full", 1, full=True, out_template=base / "out")
    t_inc = report_publish(f"{label}: incremental after one changed batch", inc)
    t_full = report_publish(f"{label}: the same, from scratch (--full)", full)
    rel = inc[-1]["release"]
    same = same_release(work / "inc" / "run-0" / "out" / rel,
                        work / "full" / "run-0" / "out" / rel)
    print(f"  ratio incremental / full: {t_inc / t_full:.3f}   releases byte-identical: {same}")
    return t_inc / t_full


# --- the SQL macro against numpy --------------------------------------------------------------

def child_macro(published: str, repeat: int) -> None:
    import duckdb

    con = duckdb.connect(published, read_only=True)
    rows = con.execute("SELECT fluid_id, form, params, exponents, T_ref_K, T_min_K, T_max_K "
                       "FROM curated_curves WHERE boundary = 'liquid-vapour' AND "
                       "quantity = 'pressure' ORDER BY fluid_id").fetchall()
    per = ROWS // len(rows)
    # the inputs, made before any timing on both sides: a table of (fluid, T) points, as a
    # user's data would be, and the same temperatures as numpy arrays (strictly inside each
    # curve's range: k + 0.5 of per steps)
    con.execute("CREATE TEMP TABLE bench_points AS SELECT c.fluid_id, c.T_min_K + (c.T_max_K - "
                f"c.T_min_K) * (k + 0.5) / {int(per)} AS temperature_K FROM curated_curves c, "
                f"range({int(per)}) r(k) WHERE c.boundary = 'liquid-vapour' AND "
                "c.quantity = 'pressure'")
    curves = [Curve(f, tuple(p), {"T_ref_K": tr, "exponents": tuple(e)}, None, lo, hi)
              for _, f, p, e, tr, lo, hi in rows]
    k = np.arange(per) + 0.5
    lo = np.array([c.T_min_K for c in curves])[:, None]
    hi = np.array([c.T_max_K for c in curves])[:, None]
    grid = lo + (hi - lo) * k / per
    per_curve_T = list(grid)

    sql = ("SELECT count(v), sum(v) FROM (SELECT fl_vapour_pressure(p.fluid_id, "
           "p.temperature_K) AS v FROM bench_points p)")
    # the same values set-based: the points joined to their curves, fl_form_value per row
    joined = ("SELECT count(v), sum(v) FROM (SELECT CASE WHEN p.temperature_K >= c.T_min_K AND "
              "p.temperature_K <= c.T_max_K THEN fl_form_value(c.form, c.params, c.exponents, "
              "c.T_ref_K, p.temperature_K) END AS v FROM bench_points p JOIN curated_curves c "
              "ON c.fluid_id = p.fluid_id AND c.boundary = 'liquid-vapour' AND "
              "c.solid_phase = '' AND c.quantity = 'pressure')")
    # the table macro (the bulk form)
    table = ("SELECT count(vapour_pressure_Pa), sum(vapour_pressure_Pa) FROM "
             "fl_vapour_pressure_table('bench_points')")

    def run_sql():
        return con.execute(sql).fetchone()

    def run_table():
        return con.execute(table).fetchone()

    def run_joined():
        return con.execute(joined).fetchone()

    def run_per_curve():
        return sum(float(np.sum(c.value(T))) for c, T in zip(curves, per_curve_T))

    def run_batched():
        return float(np.sum(evaluate_batch(curves, grid)))

    out = {}
    for name, fn in (("sql", run_sql), ("table", run_table), ("joined", run_joined),
                     ("per_curve", run_per_curve), ("batched", run_batched)):
        result = fn()                                 # warm-up (and the value to compare)
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            fn()
            times.append(time.perf_counter() - t0)
        out[name] = {"times": times, "value": result}
    print(json.dumps({"rows": int(out["sql"]["value"][0]), "curves": len(curves), **out}))


def report_macro(result: dict) -> float:
    n_sql, s_sql = result["sql"]["value"]
    print(f"  {result['rows']:,} (fluid, T) rows of {result['curves']:,} vapour-pressure curves "
          "(after one warm-up run each):")
    for name, label in (("sql", "DuckDB fl_vapour_pressure per row"),
                        ("table", "DuckDB fl_vapour_pressure_table"),
                        ("joined", "DuckDB join + fl_form_value"),
                        ("per_curve", "numpy, Curve.value per curve"),
                        ("batched", "numpy, evaluate_batch")):
        print(f"    {label:<36} {spread(result[name]['times'])} s")
    agree = {k: abs(result[k]["value"][1] / s_sql - 1) for k in ("table", "joined")}
    agree_c = abs(s_sql / result["per_curve"]["value"] - 1)
    agree_b = abs(s_sql / result["batched"]["value"] - 1)
    print(f"    sums agree to {agree_c:.1e} (per curve), {agree_b:.1e} (batched), "
          f"{agree['table']:.1e} (table macro), {agree['joined']:.1e} (join) relative")
    med = {k: statistics.median(result[k]["times"])
           for k in ("sql", "table", "joined", "per_curve", "batched")}
    ratio = med["table"] / med["batched"]
    print(f"  ratio SQL curve macro over 1 M rows / numpy batched (medians): table macro "
          f"{ratio:.2f} (target <= {TARGET_MACRO:g}), per-row scalar macro "
          f"{med['sql'] / med['batched']:.2f}, join + fl_form_value "
          f"{med['joined'] / med['batched']:.2f}; per curve: table macro "
          f"{med['table'] / med['per_curve']:.2f}")
    return ratio


# --- main ----------------------------------------------------------------------------------

def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fluids", type=int, default=1000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--pipeline", action="store_true",
                    help="also measure on a store the pipeline made (minutes to build)")
    ap.add_argument("--keep", type=Path, default=None,
                    help="work in this folder and keep the built stores for the next run")
    ap.add_argument("--child", nargs="+", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        kind, *rest = args.child
        if kind == "publish":
            child_publish(rest[0], rest[1], rest[2] == "full")
        else:
            child_macro(rest[0], int(rest[1]))
        return
    work = args.keep or Path(tempfile.mkdtemp(prefix="fl-publish-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    n, small = args.fluids, max(args.fluids // 10, 1)
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at start; "
          f"{args.repeat} repeats, each publish in its own process")
    try:
        stores = {}
        for size in (small, n):
            stores[size] = work / f"synthetic-{size}.duckdb"
            if not stores[size].exists():
                build_store(stores[size], size)
        print(f"synthetic store of issue 14 ({N_OBS} observations, 2 curves, 3 findings per "
              "fluid):")
        small_runs, full_runs = [], []
        for _ in range(args.repeat):     # alternated, so that the load weighs on both alike
            small_runs += timed_publishes(stores[small], work / "s", 1, full=True)
            full_runs += timed_publishes(stores[n], work / "n", 1, full=True)
        t_small = report_publish(f"full publish, {small:,} fluids", small_runs)
        t_full = report_publish(f"full publish, {n:,} fluids", full_runs)
        print(f"  ratio t({n:,}) / t({small:,}): {t_full / t_small:.2f} (10 = linear scaling)")
        print(f"  ratio to the target: {t_full:.2f} s / {TARGET_PUBLISH_S:g} s = "
              f"{t_full / TARGET_PUBLISH_S:.2f} (<= 1 meets it)")
        incremental_scenario(f"{n:,} fluids", stores[n], work / "i", args.repeat,
                             lambda store: restate_one_fluid(store, n))
        published = work / "n" / "run-0" / "out" / "published.duckdb"
        report_macro(run_child("macro", str(published), str(max(args.repeat, 3))))
        if args.pipeline:
            folder = work / f"pipeline-{n}"
            folder.mkdir(exist_ok=True)
            t0 = time.perf_counter()
            store = build_pipeline_store(folder, n)
            print(f"store made by the pipeline ({n:,} fluids of benchmarks/nightly.py; built in "
                  f"{time.perf_counter() - t0:.0f} s):")
            report_publish(f"full publish, {n:,} fluids",
                           timed_publishes(store, work / "p", args.repeat, full=True))
            incremental_scenario(f"{n:,} fluids", store, work / "pi", args.repeat,
                                 lambda s: change_pipeline_batch(folder, s, n))
        print(f"load average {os.getloadavg()[0]:.2f} at the end")
    finally:
        if args.keep is None:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
