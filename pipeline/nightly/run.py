"""The nightly job's orchestrator: the list of stages it runs, in order (see the package
docstring for the recipe)."""

from __future__ import annotations

import json
import logging
import time
from pathlib import Path
from typing import Callable, Sequence

from pipeline import __version__
from pipeline.checks.engine import _utc, new_run_id
from pipeline.errors import EXIT_CHECK_FAILED, EXIT_OK, BatchError, CheckError
from pipeline.nightly.curation import Curation
from pipeline.nightly.logs import run_log
from pipeline.nightly.model import (VERDICT_EXIT, NightlyOptions, NightlyResult, Stage, usage_text,
                                   verdict)
from pipeline.nightly.publishing import publish_adapter, publish_stage, value_changes
from pipeline.nightly.reporting import report_stage
from pipeline.nightly.stages import check_stage, fit_stage, ingest_stage, verify_stage
from pipeline.nightly.state import current_fits, data_fingerprints, digest, previous_state
from pipeline.report.changes import status_changes
from pipeline.report.files import FILES, ValidatedItems, update_latest, write_report
from pipeline.stagemeter import Meter, measure
from pipeline.store import open_store
from pipeline.store.runs import end_run

log = logging.getLogger("pipeline.nightly")


def _measured(name: str, stage: Stage, usage, level: int = logging.INFO) -> Stage:
    """Attach the stage's measured time and memory and log them with what it did."""
    stage.usage = usage.asdict()
    log.log(level, "%s: %s [%s]", name, stage.text, usage_text(stage.usage))
    return stage


def select_fluids(con, wanted: Sequence[str] | None) -> list[str]:
    known = [r[0] for r in con.execute("SELECT fluid_id FROM fluid ORDER BY 1").fetchall()]
    if not wanted:
        return known
    unknown = [f for f in dict.fromkeys(wanted) if f not in known]
    if unknown:
        raise CheckError(f"unknown fluid(s) {', '.join(unknown)}; the store holds: "
                         f"{', '.join(known) or '(none)'}")
    return [f for f in known if f in set(wanted)]


def run_nightly(options: NightlyOptions, *, publisher: Callable | None = None) -> NightlyResult:
    """Run the nightly job (the recipe is in the package docstring); returns the run record.

    ``publisher`` replaces :func:`publish_adapter` (same keyword arguments and return value).
    """
    if not options.raw.is_dir():
        raise BatchError("raw folder does not exist", file=str(options.raw))
    curation = Curation.load(options)     # a malformed decisions file stops here (exit 2)
    run_id = new_run_id("nightly")
    folder = options.reports / run_id
    folder.mkdir(parents=True, exist_ok=True)
    result = NightlyResult(run_id, _utc(), parameters=options.parameters())
    t0 = time.perf_counter()
    with run_log(folder / FILES["log"], options.verbose), open_store(options.store) as store:
        con = store.con
        log.info("nightly %s: store %s, raw %s, report %s", run_id, store.path, options.raw,
                 folder)
        con.execute("INSERT INTO run VALUES (?, 'nightly', ?, NULL, ?, ?, 'running', NULL)",
                    [run_id, result.started_at.rstrip("Z"), __version__,
                     json.dumps(result.parameters, sort_keys=True)])
        try:
            state = _run(con, options, result, folder, publisher or publish_adapter, t0,
                         store.path, curation)
        except BaseException as err:
            end_run(con, run_id, err)
            log.error("nightly %s ended with %s: %s", run_id, type(err).__name__, err)
            raise
        status = {"pass": "no-changes" if result.no_changes else "ok", "fail": "failed"}.get(
            result.verdict, "error")
        summary = dict(result.asdict(), state=state["fluids"], contexts=state["contexts"])
        con.execute("UPDATE run SET finished_at = ?, status = ?, summary_json = ? WHERE "
                    "run_id = ?", [_utc().rstrip("Z"), status,
                                   json.dumps(summary, sort_keys=True), run_id])
        log.info("nightly %s: %s (exit %d) in %.2f s; report %s", run_id, result.verdict,
                 result.exit_code, time.perf_counter() - t0, result.report.get("html"))
    result.report["latest"] = update_latest(options.reports, run_id)
    return result


def _run(con, opts: NightlyOptions, result: NightlyResult, folder: Path, publisher, t0,
         store_path, curation: Curation) -> dict:
    prev = previous_state(con, result.run_id)
    result.previous_run_id = prev.run_id
    contexts: dict = {}
    with measure() as usage:
        ingest = ingest_stage(con, opts, prev, contexts)
    result.stages["ingest"] = _measured("ingest", ingest, usage)
    selected = select_fluids(con, opts.fluids)
    data_fp = data_fingerprints(con)
    with measure() as usage:
        fit = fit_stage(con, opts, prev, contexts, selected, data_fp, curation)
    result.stages["fit"] = _measured("fit", fit, usage)
    fits_now = current_fits(con)
    check_fp = {f: digest(data_fp.get(f), sorted(fits_now.get(f, {}).items())) for f in selected}
    with measure() as usage:
        check_run, check = check_stage(con, opts, prev, contexts, selected, check_fp,
                                       result.run_id, curation)
    result.stages["check"] = _measured("check", check, usage)
    result.check_run_id = check_run.run_id
    result.counts = check_run.counts()
    result.no_changes = (prev.run_id is not None and ingest.status == "no-changes"
                         and fit.status == "no-changes" and check.status == "reused")
    baseline = [prev.of(f)["check_run"] for f in selected if prev.of(f).get("check_run")]
    result.changes.update(status_changes(con, baseline, check_run.run_id, selected))
    with measure() as usage:
        pub_stage, pub = publish_stage(con, opts, prev, result, ingest, publisher, store_path,
                                       curation)
    result.stages["publish"] = _measured("publish", pub_stage, usage)
    result.publish = {k: pub.get(k) for k in ("status", "release_id", "reason")}
    values, basis = value_changes(con, prev, pub, selected, fits_now)
    result.changes.update(values=values, values_basis=basis)
    with measure() as usage:
        verify = verify_stage(con, store_path, result.run_id, prev, pub, contexts)
    result.stages["verify"] = _measured("verify", verify, usage,
                                        logging.INFO if verify.status == "ok" else logging.ERROR)
    result.verdict = verdict(result.counts, ingest, pub, verify)
    code = VERDICT_EXIT[result.verdict]
    result.exit_code = EXIT_OK if opts.exit_zero and code == EXIT_CHECK_FAILED else code
    t_report = time.perf_counter()
    meter = Meter()                      # stopped after write_report, like report.duration_s
    report, page = report_stage(con, opts, result, check_run, selected, check_fp, curation,
                                folder)
    result.stages["report"] = report
    result.finished_at = _utc()
    result.duration_s = time.perf_counter() - t0
    result.report = {"dir": str(folder), **{k: str(folder / v) for k, v in FILES.items()}}
    page.nightly = result.asdict()
    # kept under --full too: an item valid against these schemas (the key) stays valid
    memo = ValidatedItems(opts.reports / ".cache" /
                          f"valid-results-{ValidatedItems.schema_key()}.txt")
    t_files = time.perf_counter()
    write_report(folder, page.nightly, page, memo=memo)
    report.detail["files_s"] = round(time.perf_counter() - t_files, 3)   # run row only
    report.duration_s = time.perf_counter() - t_report   # the run row gets the full time
    _measured("report", report, meter.stop())
    state = {f: {"data": data_fp.get(f), "check": check_fp[f], "check_run": check_run.run_id,
                 "fits": fits_now.get(f, {})} for f in selected}
    return {"fluids": state, "contexts": contexts}
