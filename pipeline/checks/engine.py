"""The check engine: runs selected checks over selected fluids and does the bookkeeping.

A check only returns findings, as columns (:class:`~pipeline.checks.findings.Findings`). The
engine resolves a violation to the check's severity, adds the thresholds in force, the
fluid's input hash and the time taken, turns an exception into an ``error`` result for that
check and fluid (and carries on), gives fluids a check said nothing about a ``skip`` result,
applies post-processing steps (the waiver hook), and writes the ``run`` row and every
``check_result`` row in one transaction. Results stay columns (:class:`ResultTable`) from the
checks to the store: no result object and no JSON conversion per result on the way, the
evidence encoded once when it is stored.
"""

from __future__ import annotations

import json
import logging
import secrets
import time
import traceback
from datetime import datetime, timezone
from typing import Callable, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from pipeline import __version__
from pipeline.checks.budget import Budget
from pipeline.checks.inputs import CheckBatch, FluidData
from pipeline.checks.findings import SKIP, VIOLATED, Finding, Findings, Status
from pipeline.checks.registry import CheckSpec, select_checks
from pipeline.checks.results import CheckResult, CheckRun, ResultTable, _scalar, jsonable
from pipeline.checks.thresholds import Thresholds, ThresholdView
from pipeline.errors import CheckError
from pipeline.gcquiet import quiet_collector

log = logging.getLogger(__name__)

#: A post-processing step: takes the results of a run (a :class:`ResultTable`; iterating it
#: gives CheckResult objects) and the batch, and returns the results, possibly changed (e.g.
#: a curation decision turning a failure into ``waived`` via ``CheckResult.waive``), as a
#: ResultTable or an iterable of CheckResult.
Postprocessor = Callable[[ResultTable, "CheckBatch"], "ResultTable | Iterable[CheckResult]"]
#: Steps applied to every run after the checks (issue 8 adds the waiver step here).
POSTPROCESSORS: tuple[Postprocessor, ...] = ()
_NOTHING = "nothing to check for this fluid (no data the check reads)"


def new_run_id(kind: str = "check") -> str:
    """``check-YYYYmmddTHHMMSS-xxxxxx`` (UTC time and a random suffix)."""
    return f"{kind}-{datetime.now(timezone.utc):%Y%m%dT%H%M%S}-{secrets.token_hex(3)}"


def _utc() -> str:
    return datetime.now(timezone.utc).replace(tzinfo=None).isoformat(timespec="seconds") + "Z"


def _error_finding(fluid_id: str, err: BaseException) -> Finding:
    tb = traceback.format_exception(type(err), err, err.__traceback__)
    return Finding(fluid_id, "", "error", f"the check raised {type(err).__name__}: {err}",
                   evidence={"exception": type(err).__name__, "traceback": "".join(tb[-3:])})


def _call(fn, arg, view_arg, fluid_ids) -> Findings:
    returned = fn(arg, view_arg)
    found = returned if isinstance(returned, Findings) else Findings()
    if found is not returned and returned is not None:
        found.extend(returned)
    unknown = set(found.fluid_id) - set(fluid_ids)
    if unknown:
        raise ValueError(f"check returned a finding for fluid {sorted(unknown)[0]!r} it was not "
                         "given")
    return found


def _evaluate(spec: CheckSpec, batch: CheckBatch, view: ThresholdView):
    """Findings of the batch and seconds per fluid; an exception becomes that fluid's error."""
    if spec.vectorised:
        t0 = time.perf_counter()
        try:
            found = _call(spec.function, batch, view, batch.fluids)
            share = (time.perf_counter() - t0) / max(len(batch), 1)
            return found, dict.fromkeys(batch.ids, share)
        except Exception as err:  # isolate: re-run fluid by fluid
            log.warning("check %s raised %s over the batch; re-running fluid by fluid",
                        spec.id, type(err).__name__)
    found, seconds = Findings(), {}
    for fid, fluid in batch.fluids.items():
        t0 = time.perf_counter()
        try:
            if spec.vectorised:
                found.extend(_call(spec.function, batch.subset([fid]), view, (fid,)))
            else:
                found.extend(_call(spec.function, fluid, view(fid), (fid,)))
        except Exception as err:  # a check's own bug: record it, run the rest
            log.debug("check %s raised for %s", spec.id, fid, exc_info=True)
            found.append(_error_finding(fid, err))
        seconds[fid] = time.perf_counter() - t0
    return found, seconds


def _resolve(status: str, severity: str) -> str:
    return severity if status == VIOLATED else status


def _results(spec: CheckSpec, batch: CheckBatch, view: ThresholdView, found: Findings,
             seconds: Mapping[str, float]) -> dict[str, list]:
    """The result rows of one check as columns, fluid by fluid in batch order, each fluid's
    findings in the order the check gave them (a fluid without any gets a skip)."""
    ids = batch.ids
    at = {fid: i for i, fid in enumerate(ids)}
    owner = [at[fid] for fid in found.fluid_id]
    order = sorted(range(len(owner)), key=owner.__getitem__)        # stable: the check's order
    counts = [0] * len(ids)
    for i in owner:
        counts[i] += 1
    # per fluid: severity, thresholds (as JSON-safe values, one per distinct mapping), hash, time
    plain: dict[int, dict] = {}
    severity, th_json = [], []
    for fid in ids:
        th = view(fid)
        js = plain.get(id(th))
        if js is None:
            js = plain[id(th)] = jsonable(th)
        severity.append(th["severity"])
        th_json.append(js)
    hashes = [f.input_hash for f in batch.fluids.values()]
    took = [seconds.get(fid) for fid in ids]
    # each row's fluid (a fluid without findings: one skip row) and, for findings, its index
    row_fluid = [i for i, c in enumerate(counts) for _ in range(c or 1)]
    taken = iter(order)
    source = [next(taken) if counts[i] else -1 for i in row_fluid]
    subject, status, message = found.subject, found.status, found.message
    measured, limit, statistic, evidence = found.measured, found.limit, found.statistic, found.evidence
    seen: dict[tuple[int, str], int] = {}
    subjects = []
    for i, k in zip(row_fluid, source):
        if k < 0:
            subjects.append("")
            continue
        s = subject[k]
        n = seen[(i, s)] = seen.get((i, s), 0) + 1
        subjects.append(s if n == 1 else f"{s}#{n}")
    n = len(row_fluid)
    return {
        "fluid_id": [ids[i] for i in row_fluid], "subject": subjects,
        "status": [SKIP if k < 0 else _resolve(status[k], severity[i])
                   for i, k in zip(row_fluid, source)],
        "severity": [severity[i] for i in row_fluid],
        "message": [_NOTHING if k < 0 else message[k] for k in source],
        "measured": [None if k < 0 else _scalar(measured[k]) for k in source],
        "limit": [None if k < 0 else _scalar(limit[k]) for k in source],
        "statistic": [None if k < 0 else statistic[k] for k in source],
        "evidence": [{} if k < 0 else evidence[k] for k in source],
        "thresholds": [th_json[i] for i in row_fluid],
        "input_hash": [hashes[i] for i in row_fluid],
        "duration_s": [took[i] for i in row_fluid],
        "check_id": [spec.id] * n, "decision_id": [None] * n}


def _as_batch(fluids) -> CheckBatch:
    if isinstance(fluids, CheckBatch):
        return fluids
    if isinstance(fluids, Mapping):
        return CheckBatch(dict(fluids))
    return CheckBatch({f.fluid_id: f for f in fluids})


def run_checks(fluids: Mapping[str, FluidData] | Sequence[FluidData] | CheckBatch, *,
               checks: Iterable[str] | None = None, tags: Iterable[str] | None = None,
               fluid_ids: Iterable[str] | None = None, thresholds: Thresholds | None = None,
               con=None, parameters: Mapping | None = None,
               postprocessors: Sequence[Postprocessor] = POSTPROCESSORS) -> CheckRun:
    """Run the selected checks over the selected fluids; store the run when ``con`` is given.

    Parameters
    ----------
    fluids : mapping of fluid id to FluidData, sequence of FluidData, or CheckBatch
        The data (see :func:`pipeline.checks.loader.load_fluid_data`).
    checks, tags : iterable of str, optional
        Check ids and tags to run (a check is selected by either); all checks when both empty.
    fluid_ids : iterable of str, optional
        Fluids to check; all given fluids when None.
    thresholds : Thresholds, optional
        Thresholds in force; the package defaults when None.
    con : duckdb.DuckDBPyConnection, optional
        When given, the ``run`` row and the results are written in one transaction.
    parameters : mapping, optional
        Recorded in the run (e.g. the command line).
    postprocessors : sequence of callables
        Applied in order to the results before they are stored.
    """
    batch = _as_batch(fluids)
    if fluid_ids is not None:
        wanted = list(dict.fromkeys(fluid_ids))
        unknown = [f for f in wanted if f not in batch.fluids]
        if unknown:
            raise CheckError(f"unknown fluid(s) {', '.join(unknown)}; known: "
                             f"{', '.join(batch.ids) or '(none)'}")
        batch = batch.subset(wanted)
    specs = select_checks(checks, tags)
    thresholds = thresholds or Thresholds.load()
    for fid, fluid in batch.fluids.items():   # one uncertainty budget for every check
        fluid.use_budget(Budget.from_thresholds(thresholds, fid))
    run_id, started, t0 = new_run_id(), _utc(), time.perf_counter()
    table = ResultTable()
    with quiet_collector():
        for spec in specs:
            view = thresholds.view(spec.id)
            found, seconds = _evaluate(spec, batch, view)
            table.add_rows(_results(spec, batch, view, found, seconds))
        for step in postprocessors:
            out = step(table, batch)
            table = out if isinstance(out, ResultTable) else ResultTable.from_results(list(out))
    params = dict(parameters or {})
    params.setdefault("checks", [s.id for s in specs])
    params.setdefault("threshold_files", list(thresholds.files))
    run = CheckRun(run_id, started, _utc(), __version__, params, [s.id for s in specs],
                   batch.ids, table, time.perf_counter() - t0)
    if con is not None:
        store_run(con, run)
    return run


_RESULT_COLUMNS = ("run_id", "check_id", "fluid_id", "subject", "status", "severity", "measured",
                   "limit_value", "statistic", "message", "evidence_json", "thresholds_json",
                   "input_hash", "decision_id", "duration_s")


def _result_frame(run: CheckRun, skip: int = 0) -> pd.DataFrame:
    """The ``check_result`` rows of a run (from row ``skip`` on), straight from its columns."""
    table = run.table
    if skip:
        table = ResultTable({f: col[skip:] for f, col in table.columns.items()})
        table._json = run.table._json[skip:]
    c = table.columns
    frame = pd.DataFrame({
        "run_id": [run.run_id] * len(table), "check_id": c["check_id"], "fluid_id": c["fluid_id"],
        "subject": c["subject"], "status": c["status"], "severity": c["severity"],
        "measured": np.array(c["measured"], dtype=float),
        "limit_value": np.array(c["limit"], dtype=float),
        "statistic": c["statistic"], "message": c["message"],
        "evidence_json": table.evidence_json(), "thresholds_json": table.thresholds_json(),
        "input_hash": c["input_hash"], "decision_id": c["decision_id"],
        "duration_s": np.array(c["duration_s"], dtype=float)},
        columns=list(_RESULT_COLUMNS))
    return frame


def store_run(con, run: CheckRun, *,
              copied: Sequence[tuple[str, Sequence[str], int]] = ()) -> None:
    """Write the ``run`` row (kind 'check') and all ``check_result`` rows in one transaction.

    ``copied``: (earlier run, fluids, number of rows) whose stored results are the first rows
    of ``run``, in that order (the nightly job's reused results, read from the store): they
    are copied within the store by SQL, the other rows inserted from the table."""
    n_copied = sum(n for _, _, n in copied)
    if n_copied > len(run.table):
        raise ValueError(f"{n_copied} copied check results, the run holds {len(run.table)}")
    frame = _result_frame(run, n_copied)
    con.execute("BEGIN TRANSACTION")
    try:
        con.execute(
            "INSERT INTO run (run_id, kind, started_at, finished_at, pipeline_version, "
            "parameters_json, status, summary_json) VALUES (?, 'check', ?, ?, ?, ?, ?, ?)",
            [run.run_id, run.started_at.rstrip("Z"), run.finished_at.rstrip("Z"),
             run.pipeline_version, json.dumps(jsonable(run.parameters), sort_keys=True),
             run.status, json.dumps(run.summary(), sort_keys=True)])
        cols = ", ".join(_RESULT_COLUMNS)
        for old_run, fluids, n in copied:
            done = con.execute(
                f"INSERT INTO check_result ({cols}) SELECT ?, {', '.join(_RESULT_COLUMNS[1:])} "
                "FROM check_result WHERE run_id = ? AND list_contains(?, fluid_id)",
                [run.run_id, old_run, list(fluids)]).fetchone()[0]
            if done != n:
                raise ValueError(f"copied {done} results of check run {old_run}, read {n}")
        con.register("fl_check_results", frame)
        con.execute(f"INSERT INTO check_result ({cols}) SELECT {cols} FROM fl_check_results")
        con.unregister("fl_check_results")
        con.execute("COMMIT")
    except BaseException:  # any interruption: leave the store as it was, then re-raise
        con.execute("ROLLBACK")
        raise


__all__ = ["CheckBatch", "POSTPROCESSORS", "Postprocessor", "ResultTable", "new_run_id",
           "run_checks", "store_run", "Status"]
