"""A small store built with plain SQL inserts from in-memory FluidData (no ingest stage).

Columns are read from the migrated store (information_schema), and NOT NULL columns the test
data does not give get a neutral value of their type, so the builder follows schema growth.
"""

from __future__ import annotations

import hashlib
import json
import math
from datetime import datetime

from pipeline.store import open_store

_NEUTRAL = {"VARCHAR": "", "BIGINT": 0, "INTEGER": 0, "DOUBLE": 0.0, "BOOLEAN": False}
RUN_ID = "ingest-test-000000"
OBS_ID_STRIDE = 100_000  # obs ids of the i-th fluid are offset by i * OBS_ID_STRIDE


def _clean(v):
    if isinstance(v, float) and math.isnan(v):
        return None
    return v.item() if hasattr(v, "item") else v


def insert(con, table: str, rows: list[dict]) -> None:
    """Insert ``rows`` into ``table``, filling NOT NULL columns they lack with neutral values."""
    if not rows:
        return
    cols = con.execute("SELECT column_name, data_type, is_nullable FROM information_schema.columns "
                       "WHERE table_name = ? ORDER BY ordinal_position", [table]).fetchall()
    names = [c for c, _, _ in cols]
    values = []
    for row in rows:
        unknown = set(row) - set(names)
        if unknown:
            raise KeyError(f"{table} has no column(s) {sorted(unknown)}")
        values.append([_clean(row[c]) if c in row else
                       (None if nullable == "YES" else
                        datetime(2026, 1, 1) if dtype.startswith("TIMESTAMP") else _NEUTRAL.get(dtype, ""))
                       for c, dtype, nullable in cols])
    marks = ", ".join("?" * len(names))
    con.executemany(f"INSERT INTO {table} ({', '.join(names)}) VALUES ({marks})", values)


def _sha(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


def _files(con, fluid, next_id: int, offset: int) -> int:
    obs = fluid.observations
    for path, rows in obs.groupby("file_path", sort=False):
        file_id, next_id = next_id, next_id + 1
        first = rows.iloc[0]
        insert(con, "raw_file", [dict(file_id=file_id, sha256=_sha(path), mapping_sha256=_sha(path + "m"),
                                      path=path, batch="test", role="table", source_id=first.source_id,
                                      fluid_id=fluid.fluid_id, boundary=first.boundary,
                                      solid_phase=first.solid_phase, size_bytes=1, rows_read=len(rows),
                                      rows_loaded=len(rows), rows_quarantined=0, ingest_run_id=RUN_ID)])
        insert(con, "raw_column", [dict(file_id=file_id, quantity="temperature", column_name="T",
                                        unit=first.T_unit, scale=first.T_scale, si_unit="K")]
               + [dict(file_id=file_id, quantity=q, column_name=q, unit=g.value_unit.iloc[0],
                       si_unit=g.value_unit.iloc[0]) for q, g in rows.groupby("quantity")])
        insert(con, "observation", [dict(obs_id=r.obs_id + offset, file_id=file_id, row_number=r.row_number,
                                         quantity=r.quantity, T_K=r.T_K, u_T_K=r.u_T_K, value_si=r.value_si,
                                         u_value_si=r.u_value_si, T_original=str(r.T_K),
                                         value_original=str(r.value_si)) for r in rows.itertuples()])
    return next_id


def _manifest(con, fluid, file_id: int) -> None:
    insert(con, "raw_file", [dict(file_id=file_id, sha256=_sha(fluid.fluid_id), path=f"{fluid.fluid_id}/batch.toml",
                                  mapping_sha256=_sha(fluid.fluid_id), batch=fluid.fluid_id, role="manifest",
                                  source_id="iapws", size_bytes=1, rows_read=0, rows_loaded=0,
                                  rows_quarantined=0, ingest_run_id=RUN_ID)])
    common = dict(file_id=file_id, file_sha256=_sha(fluid.fluid_id), file_path=f"{fluid.fluid_id}/batch.toml",
                  original_json="{}", ingest_run_id=RUN_ID, fluid_id=fluid.fluid_id)
    fp = fluid.fixed_points
    insert(con, "fixed_point", [dict(common, fp_id=file_id * 100 + i, kind=r.kind, phases=r.phases, T_K=r.T_K,
                                     u_T_K=r.u_T_K, p_Pa=r.p_Pa, u_p_Pa=r.u_p_Pa, rho_kg_m3=r.rho_kg_m3,
                                     u_rho_kg_m3=r.u_rho_kg_m3, source_id=r.source_id, entry_number=i + 1)
                                for i, r in enumerate(fp.itertuples())])
    if len(fluid.constants):
        insert(con, "stated_constant", [dict(common, const_id=file_id * 100 + i, name=r.name, value_si=r.value_si,
                                             u_si=r.u_si, si_unit=r.si_unit, source_id=r.source_id,
                                             entry_number=i + 1)
                                        for i, r in enumerate(fluid.constants.itertuples())])


def _fits(con, fluid, offset: int) -> None:
    obs = fluid.observations
    for (boundary, solid, quantity), fitted in fluid.curves.items():
        fit_id = f"{fluid.fluid_id}/{boundary}/{solid}/{quantity}"
        mine = obs[(obs.boundary == boundary) & (obs.solid_phase == solid) & (obs.quantity == quantity)]
        insert(con, "fit", [dict(fit_id=fit_id, fluid_id=fluid.fluid_id, boundary=boundary, solid_phase=solid,
                                 quantity=quantity, status="fitted", form=fitted.curve.form,
                                 curve_json=json.dumps(fitted.curve.to_dict()), T_min_K=fitted.T_min_K,
                                 T_max_K=fitted.T_max_K, n_points=len(mine), n_used=len(mine), n_flagged=0,
                                 n_excluded=0, input_hash=_sha(fit_id), fit_run_id="fit-test",
                                 fitted_at=datetime(2026, 1, 1), is_current=True)])
        with_z = mine[mine["z"].notna()]
        insert(con, "fit_residual", [dict(fit_id=fit_id, obs_id=r.obs_id + offset, residual_si=0.0, z=r.z,
                                          is_outlier=bool(r.is_outlier)) for r in with_z.itertuples()])


def build_store(path, fluids, *, sources=None) -> str:
    """Write ``fluids`` into a new store at ``path`` (obs ids offset per fluid, see OBS_ID_STRIDE)."""
    with open_store(path) as store:
        con = store.con
        kinds = {}
        for f in fluids:
            for frame in (f.observations, f.fixed_points, f.constants):
                if len(frame):
                    kinds.update(dict(zip(frame["source_id"], frame["source_kind"])))
        kinds.update(sources or {})
        insert(con, "source", [dict(source_id=s, kind=k, citation=f"test source {s}", batch="test")
                               for s, k in kinds.items()])
        insert(con, "fluid", [dict(fluid_id=f.fluid_id, name=f.fluid_id, molar_mass_kg_mol=f.molar_mass)
                              for f in fluids])
        next_id = 1
        for i, f in enumerate(fluids):
            offset = OBS_ID_STRIDE * i
            next_id = _files(con, f, next_id, offset)
            _manifest(con, f, next_id)
            next_id += 1
            _fits(con, f, offset)
    return str(path)
