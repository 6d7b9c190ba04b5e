"""The ingest, fit, check and verify stages as the nightly job runs them: each decides what
changed since the previous run, calls its stage and returns a :class:`Stage` record."""

from __future__ import annotations

import hashlib
import json
import logging
import math
import time
from dataclasses import asdict
from pathlib import Path

from pipeline import __version__
from pipeline.checks import Thresholds, load_fluid_data, run_checks, select_checks, store_run
from pipeline.checks.engine import _utc, new_run_id
from pipeline.checks.results import CheckRun, ResultTable
from pipeline.errors import BatchError
from pipeline.fitting.stage import run_fit
from pipeline.ingest.discover import batch_file_hashes, discover_batches
from pipeline.ingest.rawread import read_regular
from pipeline.ingest.stage import run_ingest
from pipeline.nightly.curation import Curation
from pipeline.nightly.model import NightlyOptions, Stage
from pipeline.nightly.state import PreviousState, code_hash, digest
from pipeline.progress import stage_progress
from pipeline.publish.integrity import repair_published
from pipeline.verify import verify_connection

log = logging.getLogger("pipeline.nightly")

#: Fluids checked per call of the check engine (one progress step each).
CHECK_CHUNK = 100


def file_sha(path: Path) -> str:
    return hashlib.sha256(read_regular(path, str(path))).hexdigest()


def prescan(con, raw: Path) -> tuple[list[Path], list[str], int]:
    """(changed batch folders, batches of the store missing from ``raw``, unchanged count).

    A batch is unchanged when its batch.toml and every table file it names hash to the
    current versions in the store (the ingest stage would skip it too: the way a file is read
    is part of batch.toml). Files are read like the ingest stage reads them (regular files
    only, bounded TOML), so an odd batch is passed on to the ingest stage, never a hang."""
    stored: dict[str, dict[str, str]] = {}
    for batch, path, sha in con.execute(
            "SELECT batch, path, sha256 FROM raw_file WHERE superseded_by IS NULL").fetchall():
        stored.setdefault(batch, {})[path] = sha
    changed, unchanged = [], 0
    for folder in discover_batches(raw):
        if folder == raw:
            changed.append(folder)
            continue
        rel = folder.relative_to(raw).as_posix()
        known = stored.pop(rel, None)
        want = batch_file_hashes(raw, folder, rel, known)
        if known is None or want != known:
            changed.append(folder)
        else:
            unchanged += 1
    return changed, sorted(stored), unchanged


def ingest_stage(con, opts: NightlyOptions, prev: PreviousState, contexts: dict) -> Stage:
    t0 = time.perf_counter()
    changed, removed, unchanged = prescan(con, opts.raw)
    fluids_file = opts.raw / "fluids.toml"
    if not fluids_file.is_file():
        raise BatchError("fluids.toml not found in the raw folder", file=str(fluids_file))
    contexts["fluids_toml"] = file_sha(fluids_file)
    whole = (opts.full or bool(removed) or prev.run_id is None
             or prev.contexts.get("fluids_toml") != contexts["fluids_toml"])
    paths = [opts.raw] if whole else changed
    if not paths:
        return Stage("no-changes", time.perf_counter() - t0,
                     f"no changes: {unchanged} batches unchanged (pre-scan)",
                     {"loaded": [], "unchanged": unchanged, "removed": [], "errors": [],
                      "ingest_run_id": None})

    total = sum(len(discover_batches(p)) for p in paths)
    with stage_progress("ingest", total, quiet=opts.quiet) as tick:
        result = run_ingest(con, paths, fluids_file=fluids_file, progress=lambda b: tick(b.name))
    loaded = [b for b in result.batches if b.status == "loaded"]
    errors = [{"batch": b.batch, "error": b.error or "", "internal": b.internal}
              for b in result.errors]
    rows = [sum(b.rows[i] for b in loaded) for i in range(3)]
    n_unchanged = unchanged + sum(b.status == "unchanged" for b in result.batches)
    text = (f"{len(loaded)} batch(es) loaded ({rows[0]} rows read, {rows[1]} loaded, {rows[2]} "
            f"quarantined), {n_unchanged} unchanged, {len(result.removed)} file(s) retired, "
            f"{len(errors)} batch error(s)")
    for err in errors:
        log.error("ingest: %s: %s", err["batch"], err["error"])
    status = "error" if errors else ("loaded" if result.changed else "no-changes")
    return Stage(status, time.perf_counter() - t0, text,
                 {"loaded": [b.batch for b in loaded], "unchanged": n_unchanged,
                  "removed": result.removed, "errors": errors, "ingest_run_id": result.run_id,
                  "rows": dict(zip(("read", "loaded", "quarantined"), rows))})


def fit_stage(con, opts: NightlyOptions, prev: PreviousState, contexts: dict, selected: list[str],
              data_fp: dict[str, str], curation: Curation) -> Stage:
    t0 = time.perf_counter()
    contexts["fit"] = digest(code_hash("pipeline.fitting"), code_hash("pipeline.correlations"))
    contexts["decisions"] = curation.fingerprint
    code_changed = prev.run_id is not None and prev.contexts.get("fit") != contexts["fit"]
    decided = prev.run_id is not None and prev.contexts.get("decisions") != curation.fingerprint
    if opts.full or code_changed or decided or prev.run_id is None:
        todo = list(selected)
    else:
        todo = [f for f in selected if prev.of(f).get("data") != data_fp.get(f)]
    if not todo:
        return Stage("no-changes", time.perf_counter() - t0,
                     "no changes: no fluid's data changed since the previous run",
                     {"fluids": [], "fitted": 0, "skipped": 0, "unchanged": 0,
                      "fit_run_id": None})
    with stage_progress("fit", 1, quiet=opts.quiet) as tick:
        result = run_fit(con, fluids=todo, full=opts.full or code_changed,
                         exclusions=curation.fit_exclusions(con))
        tick(f"{len(result.groups)} groups")
    n = {k: result.count(k) for k in ("fitted", "skipped", "unchanged")}
    why = (" (fit code changed)" if code_changed else " (decisions changed)" if decided
           else " (--full)" if opts.full else "")
    text = (f"{len(todo)} fluid(s) with changed data{why}: {n['fitted']} group(s) fitted, "
            f"{n['skipped']} skipped, {n['unchanged']} unchanged")
    return Stage("refitted" if result.changed else "no-changes", time.perf_counter() - t0, text,
                 {"fluids": todo[:200], "n_fluids": len(todo), **n,
                  "refitted_fluids": sorted({g.fluid_id for g in result.groups
                                             if g.status != "unchanged"})[:200],
                  "fit_run_id": result.run_id})


def reused_results(con, run_id: str, fluids: list[str]) -> ResultTable:
    """The stored results of ``fluids`` in check run ``run_id``, as a table whose evidence
    stays JSON text until a row is read (stored again as the same text); thresholds parsed
    once per distinct text."""
    rows = con.execute(
        "SELECT check_id, fluid_id, subject, status, severity, message, measured, limit_value, "
        "statistic, evidence_json, thresholds_json, input_hash, decision_id, duration_s "
        "FROM check_result WHERE run_id = ? AND list_contains(?, fluid_id)",
        [run_id, fluids]).fetchall()

    def num(x):
        return None if x is None or (isinstance(x, float) and math.isnan(x)) else float(x)

    cols = list(zip(*rows)) if rows else [()] * 14
    thresholds: dict[str, dict] = {}
    for text in cols[10]:
        if text not in thresholds:
            thresholds[text] = json.loads(text)
    columns = {"check_id": list(cols[0]), "fluid_id": list(cols[1]), "subject": list(cols[2]),
               "status": list(cols[3]), "severity": list(cols[4]), "message": list(cols[5]),
               "measured": [num(x) for x in cols[6]], "limit": [num(x) for x in cols[7]],
               "statistic": list(cols[8]), "thresholds": [thresholds[t] for t in cols[10]],
               "input_hash": list(cols[11]), "decision_id": list(cols[12]),
               "duration_s": [num(x) for x in cols[13]]}
    return ResultTable.from_stored(columns, list(cols[9]))


def check_stage(con, opts: NightlyOptions, prev: PreviousState, contexts: dict, selected: list[str],
                check_fp: dict[str, str], run_id: str, curation: Curation):
    t0, started = time.perf_counter(), _utc()
    specs = select_checks(None, None)
    thresholds = curation.thresholds(Thresholds.load())
    contexts["check"] = digest(code_hash("pipeline.checks"), [s.id for s in specs],
                           curation.fingerprint)
    context_changed = prev.run_id is not None and prev.contexts.get("check") != contexts["check"]
    recheck, reuse = [], {}
    for f in selected:
        p = prev.of(f)
        if opts.full or context_changed or p.get("check") != check_fp[f] or not p.get("check_run"):
            recheck.append(f)
        else:
            reuse.setdefault(p["check_run"], []).append(f)
    tables = [reused_results(con, old_run, fluids) for old_run, fluids in reuse.items()]
    copied = [(old_run, fluids, len(t)) for (old_run, fluids), t in zip(reuse.items(), tables)]
    chunks = [recheck[i:i + CHECK_CHUNK] for i in range(0, len(recheck), CHECK_CHUNK)]
    exclusions = curation.check_exclusions(con) if recheck else None
    with stage_progress("check", len(chunks), quiet=opts.quiet) as tick:
        for chunk in chunks:
            data, steps = curation.check_inputs(load_fluid_data(con, chunk), exclusions,
                                                thresholds)
            tables.append(run_checks(data, thresholds=thresholds, postprocessors=steps).table)
            tick(f"{chunk[0]}..{chunk[-1]}")
    results = ResultTable.concat(tables)
    check_run = CheckRun(
        new_run_id(), started, _utc(), __version__,
        {"nightly_run_id": run_id, "fluids": opts.fluids, "rechecked_fluids": len(recheck),
         "reused": {r: len(f) for r, f in reuse.items()}, "checks": [s.id for s in specs],
         "threshold_files": list(thresholds.files), "full": opts.full,
         "decisions": curation.path},
        [s.id for s in specs], list(selected), results, time.perf_counter() - t0)
    store_run(con, check_run, copied=copied)   # the reused rows copied within the store
    n_reused = sum(len(f) for f in reuse.values())
    why = " (check code, thresholds or decisions changed)" if context_changed else ""
    text = (f"{len(recheck)} fluid(s) checked{why}, {n_reused} reused from the previous run; "
            + check_run.asstr())
    stage = Stage("rechecked" if recheck else "reused", time.perf_counter() - t0, text,
                  {"check_run_id": check_run.run_id, "rechecked": recheck[:200],
                   "n_rechecked": len(recheck), "n_reused": n_reused,
                   "reused_from": sorted(reuse)})
    return check_run, stage


def verify_stage(con, store_path, run_id: str, prev: PreviousState | None = None,
                 pub: dict | None = None, contexts: dict | None = None) -> Stage:
    """``fluidledger verify`` inside the run: the store rules over the run's own connection,
    the release manifests in the store's folder (where the run publishes) and every release
    the store lists as published there.

    A release file is hashed, and the published file's content compared with the store's,
    unless it is proved unchanged since that was last done: by the previous run's verify (its
    stamps, kept in ``contexts["verified_files"]``) or by this run's publish, which read back
    the files it wrote (``pub["file_stamps"]``); see :func:`pipeline.verify.file_stamp`. The
    published file is compared once (by the repair step; again only after a rebuild). The
    stamps found intact now go to ``contexts``.
    """
    t0 = time.perf_counter()
    stamps = dict((prev.contexts.get("verified_files") or {}) if prev is not None else {})
    stamps.update((pub or {}).get("file_stamps") or {})
    published_ok: dict[str, list] = {}
    repaired = repair_published(con, Path(store_path).parent, stamps=stamps,
                                intact=published_ok)
    res = verify_connection(con, str(store_path), Path(store_path).parent, running=(run_id,),
                            stamps=stamps, published_checked=repaired is None)
    if contexts is not None:
        contexts["verified_files"] = {**res.stamps, **published_ok}
    head = (f"{len(res.rules_run)} store rules, {len(res.releases)} release(s) with "
            f"{res.files_hashed} files hashed"
            + (f" ({res.files_unchanged} proved unchanged since hashed)"
               if res.files_unchanged else ""))
    text = f"{head}: OK" if res.ok else (f"{head}: {len(res.findings)} finding(s): "
                                         + "; ".join(f.asstr() for f in res.findings[:3]))
    if repaired:
        text += f"; {repaired['text']}"
    detail = {"rules": len(res.rules_run), "releases": len(res.releases),
              "files_hashed": res.files_hashed, "files_unchanged": res.files_unchanged,
              "findings": [asdict(f) for f in res.findings],
              "notes": res.notes, "repaired": repaired}
    status = "failed" if not res.ok else "repaired" if repaired else "ok"
    return Stage(status, time.perf_counter() - t0, text, detail)
