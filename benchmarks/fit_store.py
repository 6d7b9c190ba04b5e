"""The whole fit stage against a file-backed store: read observations, fit, write fits.

    python benchmarks/fit_store.py [--fluids 1000] [--points 200] [--seed 1]

Builds a raw root of synthetic fluids (the curves and noisy series of ``benchmarks/fit.py``:
one batch per fluid with vapour-pressure, sublimation and melting tables and its critical and
triple points), ingests it into a new store (timed separately), then times ``run_fit`` - the
stage as ``fluidledger fit`` runs it: one query for the observations and fixed points, every
group fitted, the fit and residual rows written, one commit. Prints the ingest time, the fit
stage time and its parts, the time per fit, and the ratio to the 10 s target for 3,000 fits.
The synthetic fluids are test data, not property estimates.
"""

from __future__ import annotations

import argparse
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from fit import BOUNDARIES, make_fluids, make_series  # noqa: E402

TARGET_S = 10.0            # for 3,000 fits (1,000 fluids x 3 boundaries)
FILES = {"liquid-vapour": "vp.csv", "solid-vapour": "sub.csv", "solid-liquid": "melt.csv"}
REL_U = {"liquid-vapour": 1e-3, "solid-vapour": 2e-3, "solid-liquid": 2e-3}

TABLE = """
[[table]]
file = "{file}"
fluid = "{fluid}"
boundary = "{boundary}"
temperature = {{ column = "T", unit = "K" }}
pressure = {{ column = "p", unit = "Pa" }}
[table.uncertainty]
temperature = {{ value = 0.01, unit = "K" }}
pressure = {{ relative = {rel} }}
"""

POINTS = """
[[fixed_point]]
fluid = "{fluid}"
kind = "critical"
T = {{ value = {Tc!r}, unit = "K", u = 0.01 }}
p = {{ value = {pc!r}, unit = "Pa", u = {u_pc!r} }}

[[fixed_point]]
fluid = "{fluid}"
kind = "triple"
phases = ["vapour", "liquid", "solid"]
T = {{ value = {Tt!r}, unit = "K", u = 0.01 }}
p = {{ value = {pt!r}, unit = "Pa", u = {u_pt!r} }}
"""


def write_raw(root: Path, n_fluids: int, n_points: int, seed: int) -> int:
    """A raw root with one batch per synthetic fluid; returns the number of observation rows."""
    rng = np.random.default_rng(seed + 1)
    fluids = make_fluids(n_fluids, seed)
    root.mkdir(parents=True)
    entries, rows = [], 0
    for i, fluid in enumerate(fluids):
        fid = f"synthetic-{i:05d}"
        entries.append(f'[[fluid]]\nid = "{fid}"\nname = "synthetic fluid {i}"\n'
                       'molar_mass = { value = 40.0, unit = "g/mol" }\n')
        batch = root / fid
        batch.mkdir()
        parts = ['format_version = 1\n\n[source]\n'
                 f'id = "bench-{fid}"\nkind = "literature"\n'
                 f'citation = "Synthetic benchmark series for {fid}"\n']
        for boundary in BOUNDARIES:
            s = make_series(fluid, boundary, n_points, rng)
            text = "T,p\n" + "\n".join(f"{t:.6f},{p:.9g}" for t, p in zip(s.T, s.y)) + "\n"
            (batch / FILES[boundary]).write_text(text, encoding="utf-8")
            parts.append(TABLE.format(file=FILES[boundary], fluid=fid, boundary=boundary,
                                      rel=REL_U[boundary]))
            rows += len(s.T)
        vap = fluid.curves["liquid-vapour"]
        pc, pt = math.exp(vap.params[0]), float(vap.value(fluid.Tt))
        parts.append(POINTS.format(fluid=fid, Tc=fluid.Tc, pc=pc, u_pc=1e-4 * pc, Tt=fluid.Tt,
                                   pt=pt, u_pt=1e-4 * pt))
        (batch / "batch.toml").write_text("".join(parts), encoding="utf-8")
    (root / "fluids.toml").write_text("\n".join(entries), encoding="utf-8")
    return rows


def main(argv=None) -> int:
    from pipeline.fitting.stage import run_fit
    from pipeline.ingest.stage import run_ingest
    from pipeline.store import open_store

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fluids", type=int, default=1000)
    parser.add_argument("--points", type=int, default=200)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        root, store = Path(tmp) / "raw", Path(tmp) / "store.duckdb"
        t0 = time.perf_counter()
        rows = write_raw(root, args.fluids, args.points, args.seed)
        t1 = time.perf_counter()
        with open_store(store) as s:
            ingest = run_ingest(s.con, [root])
        assert not ingest.errors, ingest.asstr()
        t2 = time.perf_counter()
        with open_store(store) as s:
            t3 = time.perf_counter()
            result = run_fit(s.con)
            t4 = time.perf_counter()
        t5 = time.perf_counter()
        with open_store(store, read_only=True) as s:
            n_fits, n_res = s.con.execute(
                "SELECT (SELECT count(*) FROM fit WHERE is_current AND status = 'fitted'), "
                "(SELECT count(*) FROM fit_residual)").fetchone()
    groups = len(result.groups)
    fit_s, stage_s = t4 - t3, t5 - t3
    print(f"{args.fluids} synthetic fluids x {len(BOUNDARIES)} boundaries x {args.points} points "
          f"= {rows:,} rows (raw files written in {t1 - t0:.1f} s)")
    print(f"ingest into a new file-backed store:   {t2 - t1:7.2f} s")
    print(f"fit stage (read, fit, write):          {fit_s:7.2f} s for {groups} groups, "
          f"{n_fits} fitted, {n_res:,} residual rows; {1e3 * fit_s / max(groups, 1):.2f} ms/fit")
    print(f"  with the closing checkpoint:         {stage_s:7.2f} s")
    scaled = stage_s * 3000 / max(groups, 1)
    print(f"for 3,000 fits (scaled): {scaled:.1f} s; ratio to the {TARGET_S:.0f} s target: "
          f"{scaled / TARGET_S:.2f}  (target <= 1.0)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
