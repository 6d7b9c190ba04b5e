"""The fit stage: read groups from the store, fit them in batches, write fits and residuals.

Recipe: (1) read every current observation of the fitted quantities as numpy columns (one
query, no per-row strings) and the files' facts and stated fixed points (two small queries);
order the rows by (fluid, boundary, solid phase, quantity, T, obs_id) and cut them into
groups; (2) per group pick the reference point and candidate forms
(:mod:`pipeline.fitting.groups`), hash the inputs, and skip the group when the hash equals
that of its current fit; (3) fit all groups that share their candidate forms together with
:func:`pipeline.correlations.batched.fit_curves` (in spawned worker processes when asked:
:func:`fit_workers`); (4) write all new fits and residuals in one transaction
(:mod:`pipeline.fitting.write`), marking the superseded fits not current.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from dataclasses import asdict, dataclass, field, fields

import duckdb
import numpy as np

from pipeline import __version__
from pipeline.correlations.batched import Series, fit_batch, fit_batches
from pipeline.correlations.fitting import fit_curve
from pipeline.errors import FitError
from pipeline.fitting.groups import FIT_PLAN, FITTED_QUANTITIES, SOURCE_RANK, reference_point
from pipeline.fitting.write import Writer, fit_id_of
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
    timings: dict[str, float] = field(default_factory=dict)      # wall s per part (not stored)
    cpu_timings: dict[str, float] = field(default_factory=dict)  # CPU s of this process per part

    def count(self, status: str) -> int:
        return sum(g.status == status for g in self.groups)

    @property
    def changed(self) -> bool:
        return any(g.status != "unchanged" for g in self.groups)

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "groups": [dict(vars(g)) for g in self.groups]}

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


# per-row numbers of every current observation of the fitted quantities (no strings per row)
_OBS_SQL = """
SELECT obs_id, file_id, list_position(?, quantity) - 1 AS q, T_K, u_T_K, value_si, u_value_si
FROM observation_current
WHERE list_contains(?, quantity) AND fluid_id IS NOT NULL AND boundary IS NOT NULL
  AND solid_phase IS NOT NULL {where}
"""
# per-file facts: the group keys and the rank of the source kind
_FILE_SQL = """
SELECT f.file_id, f.fluid_id, f.boundary, f.solid_phase, s.kind
FROM raw_file f JOIN source s USING (source_id)
WHERE f.superseded_by IS NULL AND f.fluid_id IS NOT NULL {where}
"""
_FP_SQL = """
SELECT p.fp_id, p.fluid_id, p.kind, p.phases, p.T_K, p.u_T_K, p.p_Pa, p.rho_kg_m3, p.source_id,
       s.kind AS source_kind
FROM fixed_point_current p JOIN source s USING (source_id) {where}
"""
_COLUMNS = ("obs_id", "T_K", "u_T_K", "value_si", "u_value_si")


@dataclass
class Rows:
    """The observations of the stage as numpy columns, ordered by group, T and obs_id;
    group ``j`` holds rows ``offsets[j]:offsets[j+1]`` and has key ``keys[j]``."""

    obs_id: np.ndarray
    T_K: np.ndarray
    u_T_K: np.ndarray
    value_si: np.ndarray
    u_value_si: np.ndarray
    rank: np.ndarray                 # SOURCE_RANK of the row's source kind (9: unknown)
    keys: list[tuple]
    offsets: np.ndarray


def read_rows(con: duckdb.DuckDBPyConnection, fluids: list[str] | None) -> Rows:
    """Every current observation of the fitted quantities (restricted to ``fluids``)."""
    where, params = ("AND list_contains(?, fluid_id)", [fluids]) if fluids else ("", [])
    quantities = sorted(FITTED_QUANTITIES)
    cols = con.execute(_OBS_SQL.format(where=where), [quantities, quantities, *params]
                       ).fetchnumpy()
    files = sorted(con.execute(_FILE_SQL.format(where=where.replace("fluid_id", "f.fluid_id")),
                               params).fetchall())
    # group code of a row = (rank of its file's (fluid, boundary, phase)) * nq + quantity
    fkeys = sorted({(f, b, p) for _, f, b, p, _ in files if b is not None and p is not None})
    fkey_index = {k: i for i, k in enumerate(fkeys)}
    file_ids = np.array([r[0] for r in files], dtype=np.int64)
    file_key = np.array([fkey_index.get((f, b, p), -1) for _, f, b, p, _ in files] + [-1],
                        dtype=np.int64)
    file_rank = np.array([SOURCE_RANK.get(kind, 9) for *_, kind in files] + [9], dtype=float)
    obs_file = _column(cols["file_id"], np.int64)
    at = np.searchsorted(file_ids, obs_file)
    found = at < len(file_ids)
    found[found] = file_ids[at[found]] == obs_file[found]
    at[~found] = len(file_ids)                   # the sentinel: no group
    nq = len(quantities)
    fk = file_key[at]
    code = np.where(fk >= 0, fk * nq + _column(cols["q"], np.int64), -1)
    obs_id, T = _column(cols["obs_id"], np.int64), _column(cols["T_K"], float)
    idx = np.flatnonzero(code >= 0)
    idx = idx[np.lexsort((obs_id[idx], T[idx], code[idx]))]
    code = code[idx]
    starts = np.flatnonzero(np.diff(code, prepend=-2) != 0)
    keys = [(*fkeys[c // nq], quantities[c % nq]) for c in code[starts].tolist()]
    return Rows(obs_id[idx], T[idx], _column(cols["u_T_K"], float)[idx],
                _column(cols["value_si"], float)[idx], _column(cols["u_value_si"], float)[idx],
                file_rank[at[idx]], keys, np.append(starts, len(code)))


def _column(values, dtype) -> np.ndarray:
    """A fetched column as a plain array; SQL NULL as NaN (the value pandas gives it)."""
    if isinstance(values, np.ma.MaskedArray):
        return np.ma.filled(values.astype(float), np.nan) if dtype is float \
            else values.filled(-1).astype(dtype)
    return np.asarray(values, dtype=dtype)


def run_fit(con: duckdb.DuckDBPyConnection, *, fluids: list[str] | None = None,
            settings: FitSettings = FitSettings(), full: bool = False,
            exclusions: dict[int, str] | None = None, run_id: str | None = None,
            workers: int | None = None, path: str = "batched") -> FitRunResult:
    """Fit every group with data (restricted to ``fluids``); refit only changed groups unless
    ``full``. ``exclusions`` maps obs_id -> curation decision id (points left out of fits).
    ``workers``: processes that fit the groups (default: :func:`fit_workers`). ``path``:
    "batched" (:func:`pipeline.correlations.batched.fit_curves`, the stage's way) or
    "per-group" (the reference :func:`pipeline.correlations.fitting.fit_curve` for each group
    in this process; the same results, for tests and benchmarks)."""
    if path not in ("batched", "per-group"):
        raise KeyError(f"path must be 'batched' or 'per-group', not {path!r}")
    clock = _Clock()
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
        rows = read_rows(con, fluids)
        where = "WHERE list_contains(?, p.fluid_id)" if fluids else ""
        fixed = con.execute(_FP_SQL.format(where=where),
                            [fluids] if fluids else []).df()      # small; NULL numbers as NaN
        points: dict[str, list[dict]] = {}
        for record in fixed.to_dict("records"):    # split per fluid once, as plain records
            points.setdefault(record["fluid_id"], []).append(record)
        current = dict(((r[0], r[1], r[2], r[3]), r[4]) for r in con.execute(
            "SELECT fluid_id, boundary, solid_phase, quantity, input_hash FROM fit WHERE is_current"
        ).fetchall())
        clock.lap("read")
        excluded_rows = np.isin(rows.obs_id, np.fromiter(exclusions, dtype=np.int64,
                                                         count=len(exclusions)))
        jobs = []
        for j, key in enumerate(rows.keys):
            if (key[1], key[3]) not in FIT_PLAN and key[3] != "pressure":
                continue  # single-point properties (densities, enthalpies on solid boundaries)
            lo, hi = int(rows.offsets[j]), int(rows.offsets[j + 1])
            jobs.append(_prepare(key, rows, lo, hi, excluded_rows[lo:hi], points.get(key[0], []),
                                 settings, exclusions, current, full))
        clock.lap("prepare")
        todo = [j for j in jobs if j.series is not None]
        if path == "per-group":
            _fit_each(todo, settings)
        else:
            _fit_all(todo, settings, workers)
        clock.lap("fit")
        result, writer = FitRunResult(run_id), Writer(run_id, rows)
        result.groups = [_finish(j, writer) for j in jobs]
        clock.lap("finish")
        writer.write(con)
    except BaseException as err:
        end_run(con, run_id, err)
        raise
    status = "ok" if result.changed else "no-changes"
    con.execute("UPDATE run SET finished_at = ?, status = ?, summary_json = ? WHERE run_id = ?",
                [utcnow(), status, json.dumps(result.asdict(), sort_keys=True, default=str), run_id])
    clock.lap("write")
    result.timings, result.cpu_timings = clock.laps, clock.cpu
    return result


class _Clock:
    """Wall and CPU seconds spent in each part of the stage, in order."""

    def __init__(self):
        self.laps: dict[str, float] = {}
        self.cpu: dict[str, float] = {}
        self.t, self.c = time.perf_counter(), time.process_time()

    def lap(self, name: str) -> None:
        now, cpu = time.perf_counter(), time.process_time()
        self.laps[name], self.cpu[name] = now - self.t, cpu - self.c
        self.t, self.c = now, cpu


@dataclass
class _Job:
    """One group on its way through the stage: prepared, fitted (maybe elsewhere), written."""

    res: GroupResult
    key: tuple
    digest: str
    lo: int
    hi: int
    excluded: dict
    used: np.ndarray                     # rows of the group that are not excluded
    forms: tuple = ()
    series: Series | None = None         # None: nothing to fit
    outcome: object = None


def _hash_inputs(rows: Rows, lo: int, hi: int, ref, forms, settings: FitSettings,
                 excluded: dict) -> str:
    h = hashlib.sha256()
    for col in _COLUMNS:
        h.update(np.ascontiguousarray(getattr(rows, col)[lo:hi], dtype=float).tobytes())
    h.update(json.dumps({"ref": _flat_dict(ref) if ref else None, "forms": forms,
                         "settings": _flat_dict(settings),
                         "excluded": sorted((int(k), v) for k, v in excluded.items())},
                        sort_keys=True).encode())
    return h.hexdigest()


def _flat_dict(obj) -> dict:
    """``dataclasses.asdict`` of a dataclass whose fields are plain values (no recursion)."""
    return {f.name: getattr(obj, f.name) for f in fields(obj)}


def _prepare(key, rows: Rows, lo, hi, excluded_rows, fixed, settings, exclusions, current,
             full) -> _Job:
    fluid, boundary, phase, quantity = key
    res = GroupResult(fluid, boundary, phase, quantity, "skipped", n_points=hi - lo)
    plan = FIT_PLAN.get((boundary, quantity))
    ref = reference_point(fixed, boundary, phase) if plan else None
    forms = list(plan[1]) if plan else []
    excluded = {int(o): exclusions[int(o)] for o in rows.obs_id[lo:hi][excluded_rows]}
    job = _Job(res, key, _hash_inputs(rows, lo, hi, ref, forms, settings, excluded), lo, hi,
               excluded, ~excluded_rows, tuple(forms))
    if not full and current.get(key) == job.digest:
        res.status, res.fit_id = "unchanged", fit_id_of(key, job.digest)
        return job
    if plan is None:
        res.reason = f"no correlation form is defined for {quantity} on the {boundary} boundary"
    elif ref is None:
        point = "critical point" if plan[0] == "critical" else \
            f"triple point of {phase or 'solid'} with {'liquid' if boundary == 'solid-liquid' else 'vapour'}"
        res.reason = f"no stated {point} to anchor the correlation"
    if res.reason:
        return job
    use = slice(lo, hi) if job.used.all() else np.flatnonzero(job.used) + lo
    y = rows.value_si[use]
    u_y = rows.u_value_si[use]
    with np.errstate(invalid="ignore"):
        u_y = np.where(np.isfinite(u_y) & (u_y > 0), u_y, settings.default_relative_u * np.abs(y))
    rank = rows.rank[use]
    job.series = Series(rows.T_K[use], y, u_y, np.nan_to_num(rows.u_T_K[use], nan=0.0),
                        {"T_ref_K": ref.T_K}, rank == rank.min() if rank.size else rank == 0)
    return job


def _finish(job: _Job, writer: Writer) -> GroupResult:
    res = job.res
    if res.status == "unchanged":
        return res
    outcome = job.outcome
    res.fit_id = writer.add(job.key, job.digest, job.lo, job.hi, outcome, res.reason,
                            job.used, job.excluded)
    if outcome is None:
        return res
    if outcome.fitted:
        res.status, res.form = "fitted", outcome.form
        res.n_used, res.n_flagged = outcome.n_used, outcome.n_flagged
        res.reduced_chi2 = None if not np.isfinite(outcome.reduced_chi2) \
            else float(outcome.reduced_chi2)
    else:
        res.reason = outcome.skipped_reason
    return res


PARALLEL_MIN_FITS = 500
"""With ``workers`` left automatic, groups are fitted in several processes from this many on
(below it, starting a process - about 0.5 s of CPU for its imports - costs more than it
saves)."""
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


def _fit_all(jobs: list[_Job], settings: FitSettings, workers: int | None) -> None:
    """Fit every job's series, all groups with the same candidate forms in one batch; with
    ``fit_workers`` > 1, every batch is cut into that many shares: one is fitted here while
    spawned processes fit the others.

    The outcome of a series does not depend on the others in its batch nor on the process
    (tests/fitting compares one process with two). Spawned, not forked: the parent holds
    DuckDB's threads, which a fork must not copy.
    """
    kwargs = dict(outlier_z=settings.outlier_z, min_points=settings.min_points,
                  criterion=settings.criterion, above_reference="exclude")
    batches: dict[tuple, list[_Job]] = {}
    for j in jobs:
        batches.setdefault(j.forms, []).append(j)
    n = fit_workers(len(jobs), workers)
    shares = [[(forms, part) for forms, batch in batches.items()
               for part in _shares(batch, n)[i:i + 1]] for i in range(n)]
    calls = [[(forms, [j.series for j in part], kwargs) for forms, part in share]
             for share in shares]
    if n <= 1 or len(jobs) < 2:
        results = [[fit_batch(c) for c in calls[0]]] if calls else []
    else:
        from concurrent.futures import ProcessPoolExecutor
        from multiprocessing import get_context

        with ProcessPoolExecutor(max_workers=n - 1, mp_context=get_context("spawn")) as pool:
            futures = [pool.submit(fit_batches, c) for c in calls[1:]]
            results = [fit_batches(calls[0])] + [f.result() for f in futures]
    for share, outcomes in zip(shares, results):
        for (_, part), batch_outcomes in zip(share, outcomes):
            for job, outcome in zip(part, batch_outcomes):
                job.outcome = outcome


def _fit_each(jobs: list[_Job], settings: FitSettings) -> None:
    """The reference path: :func:`fit_curve` for one group after the other."""
    kwargs = dict(outlier_z=settings.outlier_z, min_points=settings.min_points,
                  criterion=settings.criterion, above_reference="exclude")
    for j in jobs:
        s = j.series
        j.outcome = fit_curve(list(j.forms), s.T, s.y, s.u_y, s.u_T, s.ref, trusted=s.trusted,
                              **kwargs)


def _shares(batch: list, n: int) -> list[list]:
    """``batch`` cut into ``n`` contiguous shares of nearly equal length (no empty ones)."""
    size = -(-len(batch) // max(1, n))
    return [batch[i:i + size] for i in range(0, len(batch), size)]
