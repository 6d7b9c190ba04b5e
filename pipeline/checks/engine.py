"""The check engine: runs selected checks over selected fluids and does the bookkeeping.

A check only returns findings. The engine resolves a violation to the check's severity, adds
the thresholds in force, the fluid's input hash and the time taken, turns an exception into an
``error`` result for that check and fluid (and carries on), gives fluids a check said nothing
about a ``skip`` result, applies post-processing steps (the waiver hook), and writes the ``run``
row and every ``check_result`` row in one transaction.
"""

from __future__ import annotations

import gc
import json
import logging
import secrets
import time
import traceback
from contextlib import contextmanager
from datetime import datetime, timezone
from typing import Callable, Iterable, Mapping, Sequence

import pandas as pd

from pipeline import __version__
from pipeline.checks.budget import Budget
from pipeline.checks.data import CheckBatch, FluidData
from pipeline.checks.findings import SKIP, VIOLATED, Finding, Status
from pipeline.checks.registry import CheckSpec, select_checks
from pipeline.checks.results import CheckResult, CheckRun, jsonable
from pipeline.checks.thresholds import Thresholds, ThresholdView
from pipeline.errors import CheckError

log = logging.getLogger(__name__)

#: A post-processing step: takes the results of a run and returns them, possibly changed
#: (e.g. a curation decision turning a failure into ``waived`` via ``CheckResult.waive``).
Postprocessor = Callable[[list[CheckResult], "CheckBatch"], list[CheckResult]]
#: Steps applied to every run after the checks (issue 8 adds the waiver step here).
POSTPROCESSORS: tuple[Postprocessor, ...] = ()


def new_run_id(kind: str = "check") -> str:
    """``check-YYYYmmddTHHMMSS-xxxxxx`` (UTC time and a random suffix)."""
    return f"{kind}-{datetime.now(timezone.utc):%Y%m%dT%H%M%S}-{secrets.token_hex(3)}"


def _utc() -> str:
    return datetime.now(timezone.utc).replace(tzinfo=None).isoformat(timespec="seconds") + "Z"


def _error_finding(fluid_id: str, err: BaseException) -> Finding:
    tb = traceback.format_exception(type(err), err, err.__traceback__)
    return Finding(fluid_id, "", "error", f"the check raised {type(err).__name__}: {err}",
                   evidence={"exception": type(err).__name__, "traceback": "".join(tb[-3:])})


def _call(fn, arg, view_arg, fluid_ids: Sequence[str]) -> list[Finding]:
    findings = list(fn(arg, view_arg) or [])
    for f in findings:
        if not isinstance(f, Finding):
            raise TypeError(f"check returned {type(f).__name__}, not a Finding")
        if f.fluid_id not in fluid_ids:
            raise ValueError(f"check returned a finding for fluid {f.fluid_id!r} it was not given")
    return findings


def _evaluate(spec: CheckSpec, batch: CheckBatch, view: ThresholdView):
    """Findings per fluid and seconds per fluid; an exception becomes that fluid's error."""
    findings: dict[str, list[Finding]] = {fid: [] for fid in batch.ids}
    seconds: dict[str, float] = {}
    if spec.vectorised:
        t0 = time.perf_counter()
        try:
            for f in _call(spec.function, batch, view, batch.ids):
                findings[f.fluid_id].append(f)
            share = (time.perf_counter() - t0) / max(len(batch), 1)
            return findings, dict.fromkeys(batch.ids, share)
        except Exception as err:  # isolate: re-run fluid by fluid
            log.warning("check %s raised %s over the batch; re-running fluid by fluid",
                        spec.id, type(err).__name__)
            findings = {fid: [] for fid in batch.ids}
    for fid, fluid in batch.fluids.items():
        t0 = time.perf_counter()
        try:
            if spec.vectorised:
                found = _call(spec.function, batch.subset([fid]), view, [fid])
            else:
                found = _call(spec.function, fluid, view(fid), [fid])
        except Exception as err:  # a check's own bug: record it, run the rest
            log.debug("check %s raised for %s", spec.id, fid, exc_info=True)
            found = [_error_finding(fid, err)]
        findings[fid].extend(found)
        seconds[fid] = time.perf_counter() - t0
    return findings, seconds


@contextmanager
def _frozen_heap():
    """Keep the cyclic garbage collector from rescanning the run's long-lived inputs.

    A run over thousands of fluids holds hundreds of thousands of objects; every full
    collection would walk them all (measured: ~15 % of a 300-fluid run). ``gc.freeze`` moves the
    objects alive at the start to a permanent generation for the duration of the run.
    """
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def _resolve(status: str, severity: str) -> str:
    return severity if status == VIOLATED else status


def _results(spec: CheckSpec, batch: CheckBatch, view: ThresholdView,
             findings: Mapping[str, list[Finding]], seconds: Mapping[str, float]) -> list[CheckResult]:
    out = []
    for fid, found in findings.items():
        th = view(fid)
        th_json = jsonable(th)
        if not found:
            found = [Finding(fid, "", SKIP, "nothing to check for this fluid (no data the check "
                                            "reads)")]
        seen: dict[str, int] = {}
        for f in found:
            seen[f.subject] = seen.get(f.subject, 0) + 1
            subject = f.subject if seen[f.subject] == 1 else f"{f.subject}#{seen[f.subject]}"
            out.append(CheckResult(
                spec.id, fid, subject, _resolve(f.status, th["severity"]), th["severity"],
                f.message, jsonable(f.measured), jsonable(f.limit), f.statistic,
                jsonable(f.evidence), th_json, batch.fluids[fid].input_hash, None,
                seconds.get(fid)))
    return out


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
        The data (see :func:`pipeline.checks.data.load_fluid_data`).
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
    results: list[CheckResult] = []
    with _frozen_heap():
        for spec in specs:
            view = thresholds.view(spec.id)
            findings, seconds = _evaluate(spec, batch, view)
            results.extend(_results(spec, batch, view, findings, seconds))
    for step in postprocessors:
        results = list(step(results, batch))
    params = dict(parameters or {})
    params.setdefault("checks", [s.id for s in specs])
    params.setdefault("threshold_files", list(thresholds.files))
    run = CheckRun(run_id, started, _utc(), __version__, params, [s.id for s in specs],
                   batch.ids, results, time.perf_counter() - t0)
    if con is not None:
        store_run(con, run)
    return run


_RESULT_COLUMNS = ("run_id", "check_id", "fluid_id", "subject", "status", "severity", "measured",
                   "limit_value", "statistic", "message", "evidence_json", "thresholds_json",
                   "input_hash", "decision_id", "duration_s")


def _result_frame(run: CheckRun) -> pd.DataFrame:
    rows = [(run.run_id, r.check_id, r.fluid_id, r.subject, r.status, r.severity, r.measured,
             r.limit, r.statistic, r.message, json.dumps(r.evidence, sort_keys=True),
             json.dumps(r.thresholds, sort_keys=True), r.input_hash, r.decision_id, r.duration_s)
            for r in run.results]
    frame = pd.DataFrame(rows, columns=list(_RESULT_COLUMNS))
    return frame.astype({"measured": float, "limit_value": float, "duration_s": float})


def store_run(con, run: CheckRun) -> None:
    """Write the ``run`` row (kind 'check') and all ``check_result`` rows in one transaction."""
    frame = _result_frame(run)
    con.execute("BEGIN TRANSACTION")
    try:
        con.execute(
            "INSERT INTO run (run_id, kind, started_at, finished_at, pipeline_version, "
            "parameters_json, status, summary_json) VALUES (?, 'check', ?, ?, ?, ?, ?, ?)",
            [run.run_id, run.started_at.rstrip("Z"), run.finished_at.rstrip("Z"),
             run.pipeline_version, json.dumps(jsonable(run.parameters), sort_keys=True),
             run.status, json.dumps(run.summary(), sort_keys=True)])
        con.register("fl_check_results", frame)
        cols = ", ".join(_RESULT_COLUMNS)
        con.execute(f"INSERT INTO check_result ({cols}) SELECT {cols} FROM fl_check_results")
        con.unregister("fl_check_results")
        con.execute("COMMIT")
    except BaseException:  # any interruption: leave the store as it was, then re-raise
        con.execute("ROLLBACK")
        raise


__all__ = ["CheckBatch", "POSTPROCESSORS", "Postprocessor", "new_run_id", "run_checks",
           "store_run", "Status"]
