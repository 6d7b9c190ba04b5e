"""Publishing from the nightly job: the adapter to the publish stage, the rule of when a run
publishes, and the changed recommended values the report lists."""

from __future__ import annotations

import logging
import time
from pathlib import Path
from typing import Callable

from pipeline.errors import environment_problem, is_interrupt
from pipeline.nightly.curation import Curation
from pipeline.nightly.model import NightlyResult, Stage
from pipeline.nightly.state import PreviousState
from pipeline.publish import publish
from pipeline.report.changes import FIT_BASIS, fit_value_changes, release_value_changes

log = logging.getLogger("pipeline.nightly")


def publish_adapter(con, *, store_path, curation: Curation, check_run_id: str) -> dict:
    """Make (or re-publish) a release through the publish stage; the one place the nightly
    job calls it. Returns ``{"status", "release_id", "reason", "created", "previous"}``
    (``previous``: the release published before, for the diff)."""
    row = con.execute("SELECT release_id FROM release_publication "
                      "ORDER BY publication_seq DESC LIMIT 1").fetchone()
    outcome = publish(con, Path(store_path), decisions=curation.publish_decisions(con))
    if outcome.check_run_id != check_run_id:
        raise RuntimeError(f"the release {outcome.release_id} rests on check run "
                           f"{outcome.check_run_id}, not on this run's {check_run_id}")
    state = "new release" if outcome.created else "re-published unchanged"
    return {"status": "published", "release_id": outcome.release_id,
            "reason": f"{state}: {outcome.n_constants} constants, {outcome.n_curves} curves, "
                      f"exports in {outcome.export_dir}",
            "created": outcome.created, "previous": row[0] if row else None,
            "changed_fluids": outcome.changed_fluids
            if row is not None and outcome.release_id != row[0] else None,
            "file_stamps": outcome.file_stamps}


def publish_stage(con, opts, prev, result: NightlyResult, ingest: Stage, publisher: Callable,
                  store_path, curation: Curation) -> tuple[Stage, dict]:
    t0 = time.perf_counter()
    counts = result.counts
    reason = None
    if ingest.detail.get("errors"):
        reason = (f"not published: {len(ingest.detail['errors'])} batch(es) could not be "
                  "ingested")
    elif counts.get("error"):
        reason = f"not published: {counts['error']} check error(s)"
    elif counts.get("fail"):
        reason = f"not published: {counts['fail']} check finding(s) failed"
    elif opts.fluids:
        reason = "not published: the run was restricted with --fluid"
    if reason:
        pub = {"status": "skipped", "release_id": None, "reason": reason}
    elif result.no_changes and prev.publish.get("status") == "published":
        pub = {"status": "skipped", "release_id": prev.publish.get("release_id"),
               "reason": f"no changes: release {prev.publish.get('release_id')} stays current"}
    else:
        try:
            pub = publisher(con, store_path=store_path, curation=curation,
                            check_run_id=result.check_run_id)
        except Exception as err:  # recorded and reported; the run ends with exit code 3
            if is_interrupt(err) or environment_problem(err) is not None:
                raise               # Ctrl-C, or the machine's fault: not the release's
            log.exception("publish failed")
            pub = {"status": "failed", "release_id": None,
                   "reason": f"publish failed: {type(err).__name__}: {err}"}
    text = pub["reason"] or f"release {pub['release_id']}"
    return Stage(pub["status"], time.perf_counter() - t0, text,
                 {k: v for k, v in pub.items()
                  if k not in ("status", "reason", "changed_fluids", "file_stamps")}), pub


def value_changes(con, prev: PreviousState, pub: dict, selected, fits_now) -> tuple[list, str]:
    if pub.get("created") and pub.get("previous"):
        # only the fluids the release recomputed or dropped: the others' rows were copied
        return (release_value_changes(con, pub["previous"], pub["release_id"],
                                      pub.get("changed_fluids")),
                f"Recommended values of release {pub['release_id']} against release "
                f"{pub['previous']} (the publish stage's diff); change / u is the change in "
                "units of the combined standard uncertainty.")
    before = {f: prev.of(f)["fits"] for f in selected if "fits" in prev.of(f)}
    return fit_value_changes(con, before, fits_now), FIT_BASIS
