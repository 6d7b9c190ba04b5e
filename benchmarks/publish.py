"""Publish at scale and the SQL vapour-pressure macro vs numpy (ratios, not timing tests).

1. Builds a store of N synthetic fluids (default 1,000) directly by SQL inserts: per fluid a
   critical and a triple point, a stated normal boiling point, a raw file of 20 vapour-pressure
   observations with a Wagner 2.5-5 fit (the argon ancillary of Tegeler et al. 1999 rescaled to
   the fluid's Tc, pc), a sublimation fit, and a passing check run. Publishes it, and a store
   of N/10 fluids, and prints the time and the ratio t(N) / t(N/10) (10 = linear scaling).
2. Evaluates ``fl_vapour_pressure(fluid, T)`` over 1,000,000 (fluid, T) rows in DuckDB on the
   published file, and the same values with numpy (``Curve.value`` per curve, and the batched
   ``evaluate_batch``); prints the ratios DuckDB / numpy and checks the values agree.

    python benchmarks/publish.py [--fluids N]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pyarrow as pa

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from pipeline.correlations import Curve, evaluate_batch, reference_curve  # noqa: E402
from pipeline.publish.release import publish  # noqa: E402
from pipeline.store import open_store  # noqa: E402

N_OBS = 20
ROWS = 1_000_000


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
            0.01, p, 1e-3 * p, CAST(T AS VARCHAR), CAST(p AS VARCHAR), NULL, NULL FROM obs""")
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


def time_publish(root: Path, n: int) -> tuple[float, Path]:
    store = root / f"store-{n}.duckdb"
    build_store(store, n)
    with open_store(store) as s:
        t0 = time.perf_counter()
        result = publish(s.con, store, out=root / f"out-{n}")
        elapsed = time.perf_counter() - t0
    assert result.n_curves == 2 * n, result.n_curves
    return elapsed, Path(result.published_file)


def macro_vs_numpy(published: Path) -> None:
    import duckdb

    con = duckdb.connect(str(published), read_only=True)
    rows = con.execute("SELECT fluid_id, form, params, exponents, T_ref_K, T_min_K, T_max_K "
                       "FROM curated_curves WHERE boundary = 'liquid-vapour' AND "
                       "quantity = 'pressure' ORDER BY fluid_id").fetchall()
    per = ROWS // len(rows)
    sql = ("SELECT count(v), sum(v) FROM (SELECT fl_vapour_pressure(c.fluid_id, c.T_min_K + "
           "(c.T_max_K - c.T_min_K) * k / ?) AS v FROM curated_curves c, range(?) r(k) "
           "WHERE c.boundary = 'liquid-vapour' AND c.quantity = 'pressure')")
    t0 = time.perf_counter()
    n_sql, s_sql = con.execute(sql, [per - 1, per]).fetchone()
    t_sql = time.perf_counter() - t0
    con.close()
    curves = [Curve(f, tuple(p), {"T_ref_K": tr, "exponents": tuple(e)}, None, lo, hi)
              for _, f, p, e, tr, lo, hi in rows]
    k = np.arange(per)
    t0 = time.perf_counter()
    grids = [c.T_min_K + (c.T_max_K - c.T_min_K) * k / (per - 1) for c in curves]
    s_np = sum(float(np.nansum(c.value(T))) for c, T in zip(curves, grids))
    t_np = time.perf_counter() - t0
    t0 = time.perf_counter()
    lo = np.array([c.T_min_K for c in curves])[:, None]
    hi = np.array([c.T_max_K for c in curves])[:, None]
    s_batch = float(np.nansum(evaluate_batch(curves, lo + (hi - lo) * k / (per - 1))))
    t_batch = time.perf_counter() - t0
    print(f"vapour pressure over {n_sql:,} (fluid, T) rows: DuckDB macro {t_sql:.3f} s, "
          f"numpy Curve.value per curve {t_np:.3f} s, numpy evaluate_batch {t_batch:.3f} s")
    print(f"  sums agree: {abs(s_sql / s_np - 1):.1e} (per curve), "
          f"{abs(s_sql / s_batch - 1):.1e} (batched) relative")
    print(f"ratio DuckDB / numpy: {t_sql / t_np:.2f} (per-curve), {t_sql / t_batch:.2f} (batched)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fluids", type=int, default=1000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        t_small, _ = time_publish(root, max(args.fluids // 10, 1))
        t_full, published = time_publish(root, args.fluids)
        print(f"publish {args.fluids:,} fluids ({2 * args.fluids:,} curves, "
              f"{args.fluids * N_OBS:,} observations): {t_full:.2f} s; "
              f"{args.fluids // 10:,} fluids: {t_small:.2f} s")
        print(f"ratio t({args.fluids:,}) / t({args.fluids // 10:,}): {t_full / t_small:.2f} "
              "(10 = linear scaling)")
        macro_vs_numpy(published)


if __name__ == "__main__":
    main()
