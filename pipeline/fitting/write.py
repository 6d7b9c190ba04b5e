"""Writing the fit stage's results: fit rows and residual rows, in one transaction.

The residuals of all groups are collected as numpy slices and inserted as one Arrow table
(fit ids dictionary-encoded, NaN written as SQL NULL); the fit rows (one per group) as another.
"""

from __future__ import annotations

import json
import math

import duckdb
import numpy as np
import pyarrow as pa

from pipeline.ingest.stage import utcnow

_KEY = ("fluid_id", "boundary", "solid_phase", "quantity")


def fit_id_of(key: tuple, digest: str) -> str:
    """The id of a group's fit: the group and the first 12 hex digits of its input hash."""
    fluid, boundary, phase, quantity = key
    return f"{fluid}/{boundary}/{phase or '-'}/{quantity}/{digest[:12]}"


def _num(x) -> float | None:
    return None if x is None or not math.isfinite(float(x)) else float(x)


def _doubles(values: np.ndarray) -> pa.Array:
    """Doubles with NaN and inf as NULL (what the store holds for 'no value')."""
    return pa.array(values, type=pa.float64(), mask=~np.isfinite(values))


class Writer:
    """Collects fit rows and residual slices of one fit run, then writes them in one
    transaction. ``rows`` are the stage's observation columns (``stage.Rows``)."""

    def __init__(self, run_id: str, rows):
        self.run_id, self.now, self.rows = run_id, utcnow(), rows
        self.fits: list[dict] = []
        self.residuals: list[tuple] = []    # (fit index, lo, hi, residual, z, outlier, excl.)
        self.retired: list[tuple] = []

    def add(self, key, digest, lo: int, hi: int, outcome, reason: str | None,
            used: np.ndarray, excluded: dict) -> str:
        """Record the fit (or skip) of the group in rows ``lo:hi``; returns its fit id."""
        fit_id = fit_id_of(key, digest)
        self.retired.append(key)
        row = dict(zip(_KEY, key))
        row.update(fit_id=fit_id, input_hash=digest, n_points=hi - lo,
                   n_excluded=0 if outcome is None else len(excluded),
                   fit_run_id=self.run_id, fitted_at=self.now)
        if outcome is None or not outcome.fitted:
            row.update(status="skipped", skipped_reason=reason or outcome.skipped_reason,
                       n_used=0, n_flagged=0)
            self.fits.append(row)
            return fit_id
        curve = outcome.curve
        row.update(status="fitted", form=outcome.form, curve_json=json.dumps(curve.to_dict()),
                   params_json=json.dumps(list(curve.params)),
                   covariance_json=json.dumps(curve.covariance) if curve.covariance else None,
                   T_min_K=curve.T_min_K, T_max_K=curve.T_max_K, n_used=outcome.n_used,
                   n_flagged=outcome.n_flagged, weighted_rms=_num(outcome.weighted_rms),
                   reduced_chi2=_num(outcome.reduced_chi2), bic=_num(outcome.bic))
        self.fits.append(row)
        n = hi - lo
        z = np.full(n, np.nan)
        outlier = np.zeros(n, dtype=bool)
        z[used] = outcome.z
        outlier[used] = outcome.outlier_mask
        residual = self.rows.value_si[lo:hi] - curve.value(self.rows.T_K[lo:hi],
                                                           extrapolate=True)
        by = None
        if excluded:
            by = [excluded.get(int(o)) for o in self.rows.obs_id[lo:hi]]
        self.residuals.append((len(self.fits) - 1, lo, hi, residual, z, outlier, by))
        return fit_id

    def _residual_table(self, skip: set[str]) -> pa.Table | None:
        parts = [r for r in self.residuals if self.fits[r[0]]["fit_id"] not in skip]
        if not parts:
            return None
        ids = [self.fits[p[0]]["fit_id"] for p in parts]
        sizes = [p[2] - p[1] for p in parts]
        index = np.repeat(np.arange(len(parts), dtype=np.int32), sizes)
        rows = np.concatenate([np.arange(p[1], p[2]) for p in parts])
        by = [v for p in parts for v in (p[6] if p[6] is not None else [None] * (p[2] - p[1]))] \
            if any(p[6] is not None for p in parts) else None
        return pa.table({
            "fit_id": pa.DictionaryArray.from_arrays(pa.array(index), pa.array(ids)),
            "obs_id": pa.array(self.rows.obs_id[rows], type=pa.int64()),
            "residual_si": _doubles(np.concatenate([p[3] for p in parts])),
            "z": _doubles(np.concatenate([p[4] for p in parts])),
            "is_outlier": pa.array(np.concatenate([p[5] for p in parts])),
            "excluded_by": pa.nulls(len(rows), pa.string()) if by is None
            else pa.array(by, type=pa.string())})

    def write(self, con: duckdb.DuckDBPyConnection) -> None:
        """Retire the groups' current fits, insert the new fit and residual rows (a fit id
        seen before is made current again instead), in one transaction."""
        columns = [r[0] for r in con.execute("DESCRIBE fit").fetchall()]
        con.execute("BEGIN TRANSACTION")
        try:
            if self.retired:
                keys = pa.table(dict(zip(_KEY, map(list, zip(*self.retired)))))
                con.register("fl_retired", keys)
                con.execute("UPDATE fit SET is_current = false FROM fl_retired r WHERE "
                            "fit.fluid_id = r.fluid_id AND fit.boundary = r.boundary AND "
                            "fit.solid_phase = r.solid_phase AND fit.quantity = r.quantity")
                con.unregister("fl_retired")
            if self.fits:
                ids = [r["fit_id"] for r in self.fits]
                old = {r[0] for r in con.execute(
                    "SELECT fit_id FROM fit WHERE list_contains(?, fit_id)", [ids]).fetchall()}
                if old:  # identical inputs seen before: the earlier fit is current again
                    con.execute("UPDATE fit SET is_current = true WHERE list_contains(?, fit_id)",
                                [sorted(old)])
                new = [r for r in self.fits if r["fit_id"] not in old]
                if new:
                    table = pa.Table.from_pylist(
                        [{c: (True if c == "is_current" else r.get(c)) for c in columns}
                         for r in new])
                    con.register("fl_fits", table)
                    con.execute(f"INSERT INTO fit SELECT {', '.join(columns)} FROM fl_fits")
                    con.unregister("fl_fits")
                residuals = self._residual_table(old)
                if residuals is not None:
                    con.register("fl_res", residuals)
                    con.execute("INSERT INTO fit_residual SELECT fit_id, obs_id, residual_si, z, "
                                "is_outlier, excluded_by FROM fl_res")
                    con.unregister("fl_res")
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
