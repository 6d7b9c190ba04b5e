"""The fit stage: read groups from the store, fit each, write fits and residuals.

Recipe: (1) read every current observation of the fitted quantities and every stated fixed
point with two set-based queries; (2) per (fluid, boundary, solid phase, quantity) group,
pick the reference point and candidate forms (:mod:`pipeline.fitting.groups`), hash the
inputs, and skip the group when the hash equals that of its current fit; (3) fit with
:func:`pipeline.correlations.fitting.fit_curve` (in spawned worker processes, one per CPU,
when many groups are to be fitted: :func:`fit_workers`); (4) write all new fits and residuals in one
transaction (bulk inserts through Arrow), marking the superseded fits not current.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import asdict, dataclass, field

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from pipeline import __version__
from pipeline.correlations.fitting import fit_call
from pipeline.errors import FitError
from pipeline.fitting.groups import FIT_PLAN, FITTED_QUANTITIES, SOURCE_RANK, reference_point
from pipeline.ingest.stage import new_run_id, utcnow
from pipeline.store.runs import end_run


@dataclass(frozen=True)
class FitSettings:
    """Thresholds of the fit stage (configurable from the command line)."""

    outlier_z: float = 4.0
    min_points: int = 5
    criterion: str = "bic"
    default_relative_u: float = 0.01   # for observations that state no uncertainty


@dataclass
class GroupResult:
    fluid_id: str
    boundary: str
    solid_phase: str
    quantity: str
    status: str            # fitted | skipped | unchanged
    fit_id: str | None = None
    form: str | None = None
    n_points: int = 0
    n_used: int = 0
    n_flagged: int = 0
    reduced_chi2: float | None = None
    reason: str | None = None


@dataclass
class FitRunResult:
    run_id: str
    groups: list[GroupResult] = field(default_factory=list)

    def count(self, status: str) -> int:
        return sum(g.status == status for g in self.groups)

    @property
    def changed(self) -> bool:
        return any(g.status != "unchanged" for g in self.groups)

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "groups": [asdict(g) for g in self.groups]}

    def asstr(self) -> str:
        lines = []
        for g in self.groups:
            key = f"{g.fluid_id} {g.boundary}{'/' + g.solid_phase if g.solid_phase else ''} {g.quantity}"
            if g.status == "fitted":
                lines.append(f"  fitted  {key}: {g.form}, {g.n_used}/{g.n_points} points used, "
                             f"{g.n_flagged} flagged, reduced chi2 {g.reduced_chi2:.3g}")
            elif g.status == "skipped":
                lines.append(f" skipped  {key}: {g.reason}")
        lines.append(f"{self.count('fitted')} fitted, {self.count('skipped')} skipped, "
                     f"{self.count('unchanged')} unchanged")
        return "\n".join(lines)


_OBS_SQL = """
SELECT o.obs_id, o.fluid_id, o.boundary, o.solid_phase, o.quantity, o.T_K, o.u_T_K,
       o.value_si, o.u_value_si, s.kind AS source_kind
FROM observation_current o JOIN source s USING (source_id)
WHERE quantity IN ({q}) {where}
ORDER BY o.fluid_id, o.boundary, o.solid_phase, o.quantity, o.T_K, o.obs_id
"""
_FP_SQL = """
SELECT p.fp_id, p.fluid_id, p.kind, p.phases, p.T_K, p.u_T_K, p.p_Pa, p.rho_kg_m3, p.source_id,
       s.kind AS source_kind
FROM fixed_point_current p JOIN source s USING (source_id) {where}
"""


def _hash_inputs(g: pd.DataFrame, ref, forms, settings: FitSettings, excluded: dict) -> str:
    h = hashlib.sha256()
    for col in ("obs_id", "T_K", "u_T_K", "value_si", "u_value_si"):
        h.update(np.ascontiguousarray(g[col].to_numpy(dtype=float)).tobytes())
    h.update(json.dumps({"ref": asdict(ref) if ref else None, "forms": forms,
                         "settings": asdict(settings),
                         "excluded": sorted((int(k), v) for k, v in excluded.items())},
                        sort_keys=True).encode())
    return h.hexdigest()


def _fit_id(key: tuple, digest: str) -> str:
    fluid, boundary, phase, quantity = key
    return f"{fluid}/{boundary}/{phase or '-'}/{quantity}/{digest[:12]}"


def _num(x) -> float | None:
    return None if x is None or not math.isfinite(float(x)) else float(x)


class _Writer:
    """Collects fit and residual rows, then writes them in one transaction."""

    def __init__(self, run_id: str):
        self.run_id, self.now = run_id, utcnow()
        self.fits: list[dict] = []
        self.residuals: list[pd.DataFrame] = []
        self.reused: list[str] = []
        self.retired: list[tuple] = []

    def add(self, key, digest, g: pd.DataFrame, outcome, reason: str | None, excluded_ids,
            excluded_by: dict) -> str:
        fit_id = _fit_id(key, digest)
        self.retired.append(key)
        row = dict(zip(("fluid_id", "boundary", "solid_phase", "quantity"), key))
        row.update(fit_id=fit_id, input_hash=digest, n_points=len(g),
                   n_excluded=len(excluded_ids), fit_run_id=self.run_id, fitted_at=self.now)
        if outcome is None or not outcome.fitted:
            row.update(status="skipped", skipped_reason=reason or outcome.skipped_reason,
                       n_used=0, n_flagged=0)
            self.fits.append(row)
            return fit_id
        curve = outcome.curve
        T = g["T_K"].to_numpy(float)
        used = ~g["obs_id"].isin(excluded_ids).to_numpy()
        row.update(status="fitted", form=outcome.form, curve_json=json.dumps(curve.to_dict()),
                   params_json=json.dumps(list(curve.params)),
                   covariance_json=json.dumps(curve.covariance) if curve.covariance else None,
                   T_min_K=curve.T_min_K, T_max_K=curve.T_max_K, n_used=outcome.n_used,
                   n_flagged=outcome.n_flagged, weighted_rms=_num(outcome.weighted_rms),
                   reduced_chi2=_num(outcome.reduced_chi2), bic=_num(outcome.bic))
        self.fits.append(row)
        z = np.full(len(g), np.nan)
        outlier = np.zeros(len(g), dtype=bool)
        z[used] = outcome.z
        outlier[used] = outcome.outlier_mask
        residual = g["value_si"].to_numpy(float) - curve.value(T, extrapolate=True)
        self.residuals.append(pd.DataFrame({
            "fit_id": fit_id, "obs_id": g["obs_id"].to_numpy(np.int64),
            "residual_si": np.where(np.isfinite(residual), residual, np.nan),
            "z": np.where(np.isfinite(z), z, np.nan), "is_outlier": outlier,
            "excluded_by": [excluded_by.get(int(o)) for o in g["obs_id"]]}))
        return fit_id

    def write(self, con: duckdb.DuckDBPyConnection) -> None:
        columns = [r[0] for r in con.execute("DESCRIBE fit").fetchall()]
        con.execute("BEGIN TRANSACTION")
        try:
            if self.retired:
                keys = pa.table(dict(zip(("fluid_id", "boundary", "solid_phase", "quantity"),
                                         map(list, zip(*self.retired)))))
                con.register("fl_retired", keys)
                con.execute("UPDATE fit SET is_current = false FROM fl_retired r WHERE "
                            "fit.fluid_id = r.fluid_id AND fit.boundary = r.boundary AND "
                            "fit.solid_phase = r.solid_phase AND fit.quantity = r.quantity")
                con.unregister("fl_retired")
            if self.fits:
                frame = pd.DataFrame([{c: r.get(c) for c in columns} for r in self.fits])
                frame["is_current"] = True
                ids = frame["fit_id"].tolist()
                old = {r[0] for r in con.execute(
                    "SELECT fit_id FROM fit WHERE list_contains(?, fit_id)", [ids]).fetchall()}
                if old:  # identical inputs seen before: the earlier fit is current again
                    con.execute("UPDATE fit SET is_current = true WHERE list_contains(?, fit_id)",
                                [sorted(old)])
                new = frame[~frame["fit_id"].isin(old)]
                con.register("fl_fits", new)
                con.execute(f"INSERT INTO fit SELECT {', '.join(columns)} FROM fl_fits")
                con.unregister("fl_fits")
                if self.residuals:
                    res = pd.concat(self.residuals, ignore_index=True)
                    res = res[~res["fit_id"].isin(old)]
                    con.register("fl_res", res)
                    con.execute("INSERT INTO fit_residual SELECT fit_id, obs_id, residual_si, z, "
                                "is_outlier, excluded_by FROM fl_res")
                    con.unregister("fl_res")
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise


def run_fit(con: duckdb.DuckDBPyConnection, *, fluids: list[str] | None = None,
            settings: FitSettings = FitSettings(), full: bool = False,
            exclusions: dict[int, str] | None = None, run_id: str | None = None,
            workers: int | None = None) -> FitRunResult:
    """Fit every group with data (restricted to ``fluids``); refit only changed groups unless
    ``full``. ``exclusions`` maps obs_id -> curation decision id (points left out of fits).
    ``workers``: processes that fit the groups (default: :func:`fit_workers`)."""
    run_id = run_id or new_run_id("fit")
    exclusions = exclusions or {}
    if fluids:
        known = [r[0] for r in con.execute("SELECT fluid_id FROM fluid ORDER BY 1").fetchall()]
        unknown = [f for f in dict.fromkeys(fluids) if f not in known]
        if unknown:
            raise FitError(f"unknown fluid(s) {', '.join(unknown)}; the store holds: "
                           f"{', '.join(known) or '(none)'}", key="--fluid")
    con.execute("INSERT INTO run VALUES (?, 'fit', ?, NULL, ?, ?, 'running', NULL)",
                [run_id, utcnow(), __version__, json.dumps(
                    {"fluids": fluids, "full": full, **asdict(settings)}, sort_keys=True)])
    try:
        where, params = ("AND list_contains(?, o.fluid_id)", [fluids]) if fluids else ("", [])
        q = ", ".join(f"'{x}'" for x in FITTED_QUANTITIES)
        obs = con.execute(_OBS_SQL.format(q=q, where=where), params).df()
        fixed = con.execute(_FP_SQL.format(where="WHERE list_contains(?, p.fluid_id)" if fluids else ""),
                            params).df()
        current = dict(((r[0], r[1], r[2], r[3]), r[4]) for r in con.execute(
            "SELECT fluid_id, boundary, solid_phase, quantity, input_hash FROM fit WHERE is_current"
        ).fetchall())
        result, writer = FitRunResult(run_id), _Writer(run_id)
        points: dict[str, list[dict]] = {}
        for record in fixed.to_dict("records"):      # split per fluid once, as plain records
            points.setdefault(record["fluid_id"], []).append(record)
        jobs = []
        for key, g in obs.groupby(["fluid_id", "boundary", "solid_phase", "quantity"], sort=True):
            if (key[1], key[3]) not in FIT_PLAN and key[3] != "pressure":
                continue  # single-point properties (densities, enthalpies on solid boundaries)
            jobs.append(_prepare(key, g, points.get(key[0], []), settings, exclusions, current,
                                 full))
        todo = [j for j in jobs if j.call is not None]
        outcomes = dict(zip(map(id, todo), _fit_all([j.call for j in todo],
                                                    fit_workers(len(todo), workers))))
        result.groups = [_finish(j, outcomes.get(id(j)), writer) for j in jobs]
        writer.write(con)
    except BaseException as err:
        end_run(con, run_id, err)
        raise
    status = "ok" if result.changed else "no-changes"
    con.execute("UPDATE run SET finished_at = ?, status = ?, summary_json = ? WHERE run_id = ?",
                [utcnow(), status, json.dumps(result.asdict(), sort_keys=True, default=str), run_id])
    return result


@dataclass
class _Job:
    """One group on its way through the stage: prepared, fitted (maybe elsewhere), written."""

    res: GroupResult
    key: tuple
    digest: str
    g: pd.DataFrame
    excluded: dict
    call: tuple | None = None       # (args, kwargs) of fit_curve; None: nothing to fit


def _prepare(key, g, fixed, settings, exclusions, current, full) -> _Job:
    fluid, boundary, phase, quantity = key
    res = GroupResult(fluid, boundary, phase, quantity, "skipped", n_points=len(g))
    plan = FIT_PLAN.get((boundary, quantity))
    ref = reference_point(fixed, boundary, phase) if plan else None
    forms = list(plan[1]) if plan else []
    excluded = {int(o): exclusions[int(o)] for o in g["obs_id"] if int(o) in exclusions}
    job = _Job(res, key, _hash_inputs(g, ref, forms, settings, excluded), g, excluded)
    if not full and current.get(key) == job.digest:
        res.status, res.fit_id = "unchanged", _fit_id(key, job.digest)
        return job
    if plan is None:
        res.reason = f"no correlation form is defined for {quantity} on the {boundary} boundary"
    elif ref is None:
        point = "critical point" if plan[0] == "critical" else \
            f"triple point of {phase or 'solid'} with {'liquid' if boundary == 'solid-liquid' else 'vapour'}"
        res.reason = f"no stated {point} to anchor the correlation"
    if res.reason:
        return job
    use = g[~g["obs_id"].isin(list(excluded))]
    y = use["value_si"].to_numpy(float)
    u_y = use["u_value_si"].to_numpy(float)
    u_y = np.where(np.isfinite(u_y) & (u_y > 0), u_y, settings.default_relative_u * np.abs(y))
    u_T = np.nan_to_num(use["u_T_K"].to_numpy(float), nan=0.0)
    rank = use["source_kind"].map(SOURCE_RANK).fillna(9).to_numpy()
    job.call = ((forms, use["T_K"].to_numpy(float), y, u_y, u_T, {"T_ref_K": ref.T_K}),
                dict(outlier_z=settings.outlier_z, min_points=settings.min_points,
                     criterion=settings.criterion, above_reference="exclude",
                     trusted=rank == rank.min()))
    return job


def _finish(job: _Job, outcome, writer: _Writer) -> GroupResult:
    res = job.res
    if res.status == "unchanged":
        return res
    if outcome is None:
        res.fit_id = writer.add(job.key, job.digest, job.g, None, res.reason, [], {})
        return res
    res.fit_id = writer.add(job.key, job.digest, job.g, outcome, None, list(job.excluded),
                            job.excluded)
    if outcome.fitted:
        res.status, res.form = "fitted", outcome.form
        res.n_used, res.n_flagged = outcome.n_used, outcome.n_flagged
        res.reduced_chi2 = _num(outcome.reduced_chi2)
    else:
        res.reason = outcome.skipped_reason
    return res


PARALLEL_MIN_FITS = 200
"""With ``workers`` left automatic, groups are fitted in worker processes from this many on
(below it, starting the processes costs more than it saves)."""
WORKERS_ENV = "FLUIDLEDGER_FIT_WORKERS"


def fit_workers(n_jobs: int, workers: int | None = None) -> int:
    """How many processes fit ``n_jobs`` groups: ``workers`` when given, else the variable
    ``FLUIDLEDGER_FIT_WORKERS``, else one per CPU (at most 8) from PARALLEL_MIN_FITS groups."""
    if workers is None and os.environ.get(WORKERS_ENV, "").strip():
        try:
            workers = int(os.environ[WORKERS_ENV])
        except ValueError:
            raise FitError(f"{WORKERS_ENV} must be a whole number of processes, got "
                           f"{os.environ[WORKERS_ENV]!r}") from None
    if workers is None:
        workers = min(os.cpu_count() or 1, 8) if n_jobs >= PARALLEL_MIN_FITS else 1
    return max(1, min(int(workers), max(n_jobs, 1)))


def _fit_all(calls: list[tuple], workers: int) -> list:
    """Outcomes of ``calls`` in order; in ``workers`` spawned processes when more than one.

    fit_curve is deterministic, so the outcomes do not depend on where they were computed
    (tests/fitting compares one process with two). Spawned, not forked: the parent holds
    DuckDB's threads, which a fork must not copy.
    """
    if workers <= 1 or len(calls) < 2:
        return [fit_call(c) for c in calls]
    from concurrent.futures import ProcessPoolExecutor
    from multiprocessing import get_context

    chunk = max(1, len(calls) // (workers * 8))
    with ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn")) as pool:
        return list(pool.map(fit_call, calls, chunksize=chunk))
