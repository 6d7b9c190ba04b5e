"""The nightly job: ingest what is new, refit what changed, check, publish when clean, report.

Recipe (:func:`run_nightly`):

1. **ingest** -- a pre-scan hashes every batch folder of ``raw/`` and compares the hashes with
   the current ``raw_file`` rows; only new or changed batches go to
   :func:`pipeline.ingest.stage.run_ingest` (the whole root when a batch disappeared, when
   ``fluids.toml`` changed, or with ``--full``, so retirements and fluid updates happen there).
2. **fit** -- each fluid's *data fingerprint* (its current raw files, fixed points, stated
   constants and molar mass, from the store) is compared with the one the previous nightly run
   recorded; :func:`pipeline.fitting.stage.run_fit` runs for the fluids that differ (and it
   skips their groups whose input hash is unchanged).
3. **check** -- a fluid's *check fingerprint* is its data fingerprint plus its current fit ids;
   fluids whose fingerprint is unchanged (and with the same check code, thresholds and
   decisions) reuse their results from the previous check run, the others are checked
   afresh. The combined check run is stored (kind ``check``), so every run keeps all results.
4. **changes** -- status transitions against the previous run
   (:func:`pipeline.report.history.transitions`) and changed recommended values.
5. **publish** -- only when nothing failed, errored or failed to ingest, through
   :func:`publish_adapter`; otherwise the reason is recorded.
6. **verify** -- :func:`pipeline.verify.verify_connection` (what ``fluidledger verify`` does)
   over the run's own connection and the releases in the store's folder; a finding makes the
   verdict ``error``.
7. **report** -- ``reports/<run-id>/`` with report.html, results.json, junit.xml, summary.md
   and nightly.log; ``reports/latest`` points to it.

A ``run`` row (kind ``nightly``) holds the parameters and the result record plus the
per-fluid state the next run compares with. Exit codes: 0 pass (warnings allowed), 1 a check
failed (0 with ``exit_zero``), 2 a batch could not be ingested, 3 a check raised, the
publish failed, verify found damage, or an internal error.
"""

from __future__ import annotations

import hashlib
import json
import logging
import math
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

from pipeline import __version__
from pipeline.errors import (
    EXIT_CHECK_FAILED,
    EXIT_INTERNAL,
    EXIT_OK,
    EXIT_USAGE,
    BatchError,
    CheckError,
    environment_problem,
    is_interrupt,
)
from pipeline.progress import stage_progress
from pipeline.safetext import SafeFormatter
from pipeline.store.runs import end_run

log = logging.getLogger(__name__)

#: Fluids checked per call of the check engine (one progress step each).
CHECK_CHUNK = 100
#: Previous nightly runs read to find each fluid's last state.
STATE_LOOKBACK = 50
VERDICT_EXIT = {"pass": EXIT_OK, "fail": EXIT_CHECK_FAILED, "input-error": EXIT_USAGE,
                "error": EXIT_INTERNAL}


@dataclass(frozen=True)
class NightlyOptions:
    """What to run on: paths and switches of ``fluidledger nightly``."""

    store: str | Path | None = None
    raw: Path = Path("raw")
    reports: Path = Path("reports")
    fluids: tuple[str, ...] | None = None
    full: bool = False
    quiet: bool = False
    verbose: bool = False
    exit_zero: bool = False
    decisions: Path | None = None

    def parameters(self) -> dict:
        return {"store": str(self.store) if self.store else None, "raw": str(self.raw),
                "reports": str(self.reports), "fluids": list(self.fluids) if self.fluids else None,
                "full": self.full, "exit_zero": self.exit_zero,
                "decisions": str(self.decisions) if self.decisions else None}


@dataclass
class Stage:
    """What one stage of the run did."""

    status: str
    duration_s: float
    text: str
    detail: dict = field(default_factory=dict)

    def asdict(self) -> dict:
        return {"status": self.status, "duration_s": round(self.duration_s, 6),
                "text": self.text, "detail": self.detail}


@dataclass
class NightlyResult:
    """The record of one nightly run: ``asdict()`` for machines, ``asstr()`` for people."""

    run_id: str
    started_at: str
    finished_at: str = ""
    duration_s: float = 0.0
    parameters: dict = field(default_factory=dict)
    verdict: str = "error"
    exit_code: int = EXIT_INTERNAL
    no_changes: bool = False
    previous_run_id: str | None = None
    check_run_id: str | None = None
    counts: dict = field(default_factory=dict)
    stages: dict[str, Stage] = field(default_factory=dict)
    changes: dict = field(default_factory=lambda: {"new_failures": [], "fixed": [],
                                                  "changed": [], "values": [],
                                                  "values_basis": ""})
    publish: dict = field(default_factory=lambda: {"status": "skipped", "release_id": None,
                                                  "reason": None})
    report: dict = field(default_factory=dict)

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "kind": "nightly", "started_at": self.started_at,
                "finished_at": self.finished_at, "duration_s": round(self.duration_s, 6),
                "pipeline_version": __version__, "parameters": self.parameters,
                "verdict": self.verdict, "exit_code": self.exit_code,
                "no_changes": self.no_changes, "previous_run_id": self.previous_run_id,
                "check_run_id": self.check_run_id, "counts": self.counts,
                "stages": {k: s.asdict() for k, s in self.stages.items()},
                "changes": self.changes, "publish": self.publish, "report": self.report}

    def verdict_line(self) -> str:
        """The run in one line: verdict, exit code, counts, publication and the report path
        (what ``fluidledger nightly`` prints off a terminal, e.g. from cron)."""
        counts = ", ".join(f"{n} {s}" for s, n in self.counts.items() if n)
        pub = self.publish
        return (f"nightly {self.run_id}: {self.verdict.upper()} (exit {self.exit_code}); "
                f"checks: {counts or 'none'}" + ("; no changes" if self.no_changes else "")
                + f"; publish: {pub['status']}"
                + (f" {pub['release_id']}" if pub.get("release_id") else "")
                + (f"; report: {self.report['html']}" if self.report.get("html") else ""))

    def asstr(self) -> str:
        counts = ", ".join(f"{n} {s}" for s, n in self.counts.items() if n)
        lines = [f"nightly {self.run_id}: {self.verdict.upper()} (exit {self.exit_code}); "
                 f"checks: {counts or 'none'}"]
        refused = refused_batches(self.asdict())
        if refused:
            lines.append(f"refused batch(es), not ingested ({len(refused)}; the others were): "
                         + ", ".join(refused))
        if self.no_changes:
            lines.append(f"no changes since {self.previous_run_id}: nothing ingested, nothing "
                         "refitted, check results reused")
        for name, s in self.stages.items():
            lines.append(f"  {name:<8} {s.status:<11} {s.duration_s:7.2f} s  {s.text}")
        ch = self.changes
        if self.previous_run_id is None:
            lines.append("first nightly run on this store: nothing to compare with")
        for title, key in (("new failures", "new_failures"), ("fixed", "fixed")):
            if ch[key]:
                lines.append(f"{title} ({len(ch[key])}):")
                lines += [f"  {t['check_id']} {t['fluid_id']}: {t['before'] or 'new'} -> "
                          f"{t['after']}" for t in ch[key][:20]]
                if len(ch[key]) > 20:
                    lines.append(f"  ... and {len(ch[key]) - 20} more")
        if ch["values"]:
            lines.append(f"changed values: {len(ch['values'])} (see the report)")
        pub = self.publish
        lines.append(f"publish: {pub['status']}"
                     + (f" ({pub['release_id'] or pub['reason']})"
                        if pub['release_id'] or pub['reason'] else ""))
        if self.report.get("html"):
            lines.append(f"report: {self.report['html']}")
        return "\n".join(lines)


def refused_batches(nightly: Mapping[str, Any]) -> list[str]:
    """Names of the batches the run's ingest stage refused (from the run record)."""
    stage = nightly.get("stages", {}).get("ingest", {})
    return [e["batch"] for e in stage.get("detail", {}).get("errors", [])]


# -- fingerprints and state ------------------------------------------------------------------
def _h(*parts: Any) -> str:
    return hashlib.sha256(json.dumps(parts, sort_keys=True, default=str).encode()).hexdigest()[:32]


_DATA_FP_SQL = """
WITH parts AS (
    SELECT fluid_id, 'file:' || file_id AS part FROM raw_file_current
        WHERE role = 'table' AND fluid_id IS NOT NULL
    UNION ALL SELECT fluid_id, 'fp:' || fp_id FROM fixed_point_current
    UNION ALL SELECT fluid_id, 'const:' || const_id FROM stated_constant_current
    UNION ALL SELECT fluid_id, 'mm:' || molar_mass_kg_mol FROM fluid
)
SELECT fluid_id, sha256(string_agg(part, '|' ORDER BY part)) FROM parts
WHERE fluid_id IN (SELECT fluid_id FROM fluid) GROUP BY fluid_id
"""


def data_fingerprints(con) -> dict[str, str]:
    """Per fluid, a hash of the ids of everything it holds (file versions and fixed-point
    rows are immutable, so equal ids mean equal data)."""
    return {fid: h[:32] for fid, h in con.execute(_DATA_FP_SQL).fetchall()}


def current_fits(con) -> dict[str, dict[str, str]]:
    """Per fluid, group ('boundary/phase/quantity') -> current fit id."""
    out: dict[str, dict[str, str]] = {}
    for fid, b, ph, q, fit_id in con.execute(
            "SELECT fluid_id, boundary, solid_phase, quantity, fit_id FROM fit WHERE is_current"
    ).fetchall():
        out.setdefault(fid, {})[f"{b}/{ph or '-'}/{q}"] = fit_id
    return out


def _code_hash(package: str) -> str:
    import importlib

    pkg = importlib.import_module(package)
    folder = Path(pkg.__file__).parent
    h = hashlib.sha256(__version__.encode())
    for p in sorted(folder.glob("*.py")) + sorted(folder.glob("*.toml")):
        h.update(p.name.encode() + p.read_bytes())
    return h.hexdigest()[:32]


@dataclass
class Curation:
    """The curation decisions the run honours, and the hooks each stage calls.

    Decisions come from ``--decisions`` or ``<raw>/decisions.toml`` (none when absent) through
    :mod:`pipeline.decisions`; without that package every hook is a no-op and the report shows
    its placeholder heading. ``fingerprint`` changes whenever the file does (and daily while a
    waiver is in force, since waivers expire by date), which re-runs every fit and check.
    """

    decisions: Any = None
    path: str | None = None
    fingerprint: str = ""

    @classmethod
    def load(cls, opts: NightlyOptions) -> "Curation":
        try:
            from pipeline import decisions as mod
        except ImportError:
            return cls()
        path = opts.decisions or (opts.raw / "decisions.toml")
        if opts.decisions is None and not path.is_file():
            return cls(mod.DecisionSet(path=str(path)), None, "")
        decisions = mod.load_decisions(path)
        h = [hashlib.sha256(Path(path).read_bytes()).hexdigest()]
        if any(d.kind == "waive_check" for d in decisions):
            from datetime import date

            h.append(date.today().isoformat())
        return cls(decisions, str(path), _h(*h))

    def fit_exclusions(self, con) -> dict[int, str]:
        if self.decisions is None:
            return {}
        from pipeline.decisions import exclusions_for_fit

        return exclusions_for_fit(con, self.decisions)

    def thresholds(self, thresholds):
        if self.decisions is None:
            return thresholds
        from pipeline.decisions import with_threshold_overrides

        return with_threshold_overrides(thresholds, self.decisions)

    def check_exclusions(self, con):
        """What the checks leave out (computed once per run); None without decisions."""
        if self.decisions is None:
            return None
        from pipeline.decisions.checks import check_exclusions

        return check_exclusions(con, self.decisions)

    def check_inputs(self, data: dict, exclusions, thresholds) -> tuple[dict, tuple]:
        """The fluids as the checks read them (excluded data left out) and the post-processing
        steps: the engine's, the exclusion step (findings resting on excluded data become
        ``excluded``), the waiver step."""
        from pipeline.checks.engine import POSTPROCESSORS

        if self.decisions is None:
            return data, POSTPROCESSORS
        from pipeline.decisions.checks import check_inputs

        kept, steps = check_inputs(None, self.decisions, data, thresholds, exclusions)
        return kept, (*POSTPROCESSORS, *steps)

    def publish_decisions(self, con):
        from pipeline.publish.policy import NO_DECISIONS

        if self.decisions is None:
            return NO_DECISIONS
        from pipeline.decisions import publish_decisions

        return publish_decisions(con, self.decisions)

    def report_rows(self, con, check_run_id: str) -> list[dict] | None:
        """Rows of the report's decisions section; None without the decisions feature."""
        if self.decisions is None:
            return None
        from pipeline.decisions import report_rows

        return report_rows(con, self.decisions, check_run_id=check_run_id)


@dataclass
class PreviousState:
    """What earlier nightly runs recorded: per fluid its fingerprints, fits and check run."""

    run_id: str | None = None
    fluids: dict[str, dict] = field(default_factory=dict)
    contexts: dict = field(default_factory=dict)
    publish: dict = field(default_factory=dict)

    def of(self, fluid_id: str) -> dict:
        return self.fluids.get(fluid_id, {})


def previous_state(con, current_run_id: str) -> PreviousState:
    """The latest finished nightly run's record, with each fluid's state taken from the most
    recent run that covered it (runs restricted with ``--fluid`` cover some fluids only)."""
    rows = con.execute(
        "SELECT run_id, summary_json FROM run WHERE kind = 'nightly' AND run_id <> ? AND "
        "summary_json IS NOT NULL AND status <> 'running' ORDER BY started_at DESC, rowid DESC "
        "LIMIT ?", [current_run_id, STATE_LOOKBACK]).fetchall()
    state = PreviousState()
    for run_id, text in rows:
        summary = json.loads(text)
        if "state" not in summary:
            continue
        if state.run_id is None:
            state.run_id = run_id
            state.contexts = summary.get("contexts", {})
            state.publish = summary.get("publish", {})
        for fid, s in summary["state"].items():
            state.fluids.setdefault(fid, s)
    return state


# -- stage 1: ingest -------------------------------------------------------------------------
def _sha(path: Path) -> str:
    from pipeline.ingest.rawread import read_regular

    return hashlib.sha256(read_regular(path, str(path))).hexdigest()


def prescan(con, raw: Path) -> tuple[list[Path], list[str], int]:
    """(changed batch folders, batches of the store missing from ``raw``, unchanged count).

    A batch is unchanged when its batch.toml and every table file it names hash to the
    current versions in the store (the ingest stage would skip it too: the way a file is read
    is part of batch.toml). Files are read like the ingest stage reads them (regular files
    only, bounded TOML), so an odd batch is passed on to the ingest stage, never a hang."""
    from pipeline.ingest.discover import batch_file_hashes, discover_batches

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
        want = batch_file_hashes(raw, folder, rel)
        if known is None or want != known:
            changed.append(folder)
        else:
            unchanged += 1
    return changed, sorted(stored), unchanged


def _ingest(con, opts: NightlyOptions, prev: PreviousState, contexts: dict) -> Stage:
    from pipeline.ingest.stage import run_ingest

    t0 = time.perf_counter()
    changed, removed, unchanged = prescan(con, opts.raw)
    fluids_file = opts.raw / "fluids.toml"
    if not fluids_file.is_file():
        raise BatchError("fluids.toml not found in the raw folder", file=str(fluids_file))
    contexts["fluids_toml"] = _sha(fluids_file)
    whole = (opts.full or bool(removed) or prev.run_id is None
             or prev.contexts.get("fluids_toml") != contexts["fluids_toml"])
    paths = [opts.raw] if whole else changed
    if not paths:
        return Stage("no-changes", time.perf_counter() - t0,
                     f"no changes: {unchanged} batches unchanged (pre-scan)",
                     {"loaded": [], "unchanged": unchanged, "removed": [], "errors": [],
                      "ingest_run_id": None})
    from pipeline.ingest.stage import discover_batches

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


# -- stage 2: fit ----------------------------------------------------------------------------
def _fit(con, opts: NightlyOptions, prev: PreviousState, contexts: dict, selected: list[str],
         data_fp: dict[str, str], curation: Curation) -> Stage:
    from pipeline.fitting.stage import run_fit

    t0 = time.perf_counter()
    contexts["fit"] = _h(_code_hash("pipeline.fitting"), _code_hash("pipeline.correlations"))
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


# -- stage 3: check --------------------------------------------------------------------------
def _reused_results(con, run_id: str, fluids: list[str]) -> list:
    from pipeline.checks.results import CheckResult

    rows = con.execute(
        "SELECT check_id, fluid_id, subject, status, severity, message, measured, limit_value, "
        "statistic, evidence_json, thresholds_json, input_hash, decision_id, duration_s "
        "FROM check_result WHERE run_id = ? AND list_contains(?, fluid_id)",
        [run_id, fluids]).fetchall()

    def num(x):
        return None if x is None or (isinstance(x, float) and math.isnan(x)) else float(x)

    return [CheckResult(c, f, s, st, sev, msg, num(m), num(lim), stat, json.loads(ev),
                        json.loads(th), ih, dec, num(dur))
            for c, f, s, st, sev, msg, m, lim, stat, ev, th, ih, dec, dur in rows]


def _check(con, opts: NightlyOptions, prev: PreviousState, contexts: dict, selected: list[str],
           check_fp: dict[str, str], run_id: str, curation: Curation):
    from pipeline.checks import Thresholds, load_fluid_data, run_checks, select_checks, store_run
    from pipeline.checks.engine import _utc, new_run_id
    from pipeline.checks.results import CheckRun, ResultTable

    t0, started = time.perf_counter(), _utc()
    specs = select_checks(None, None)
    thresholds = curation.thresholds(Thresholds.load())
    contexts["check"] = _h(_code_hash("pipeline.checks"), [s.id for s in specs],
                           curation.fingerprint)
    context_changed = prev.run_id is not None and prev.contexts.get("check") != contexts["check"]
    recheck, reuse = [], {}
    for f in selected:
        p = prev.of(f)
        if opts.full or context_changed or p.get("check") != check_fp[f] or not p.get("check_run"):
            recheck.append(f)
        else:
            reuse.setdefault(p["check_run"], []).append(f)
    tables = [ResultTable.from_results(_reused_results(con, old_run, fluids))
              for old_run, fluids in reuse.items()]
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
    store_run(con, check_run)
    n_reused = sum(len(f) for f in reuse.values())
    why = " (check code, thresholds or decisions changed)" if context_changed else ""
    text = (f"{len(recheck)} fluid(s) checked{why}, {n_reused} reused from the previous run; "
            + check_run.asstr())
    stage = Stage("rechecked" if recheck else "reused", time.perf_counter() - t0, text,
                  {"check_run_id": check_run.run_id, "rechecked": recheck[:200],
                   "n_rechecked": len(recheck), "n_reused": n_reused,
                   "reused_from": sorted(reuse)})
    return check_run, stage


# -- stage 4: publish ------------------------------------------------------------------------
def publish_adapter(con, *, store_path, curation: Curation, check_run_id: str) -> dict:
    """Make (or re-publish) a release through the publish stage; the one place the nightly
    job calls it. Returns ``{"status", "release_id", "reason", "created", "previous"}``
    (``previous``: the release published before, for the diff)."""
    try:
        from pipeline.publish import publish
    except ImportError:
        return {"status": "skipped", "release_id": None,
                "reason": "publish skipped: stage unavailable"}
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
            "created": outcome.created, "previous": row[0] if row else None}


def _publish(con, opts, prev, result: NightlyResult, ingest: Stage, publisher: Callable,
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
                 {k: v for k, v in pub.items() if k not in ("status", "reason")}), pub


def _value_changes(con, prev: PreviousState, pub: dict, selected, fits_now) -> tuple[list, str]:
    from pipeline.report.changes import FIT_BASIS, fit_value_changes, release_value_changes

    if pub.get("created") and pub.get("previous"):
        return (release_value_changes(con, pub["previous"], pub["release_id"]),
                f"Recommended values of release {pub['release_id']} against release "
                f"{pub['previous']} (the publish stage's diff); change / u is the change in "
                "units of the combined standard uncertainty.")
    before = {f: prev.of(f)["fits"] for f in selected if "fits" in prev.of(f)}
    return fit_value_changes(con, before, fits_now), FIT_BASIS


# -- stage 5: report -------------------------------------------------------------------------
def _decide_context(con, opts, curation: Curation, results) -> Any:
    """What the report's decide commands need: store and decisions file of the run, the source
    of each raw file, and the rows of the files that findings are about."""
    from pipeline.report.actions import DecideContext

    files = sorted({r.subject[len("file:"):].split("|", 1)[0] for r in results
                    if r.status in ("warn", "fail") and r.subject.startswith("file:")})
    sources = dict(con.execute("SELECT path, source_id FROM raw_file_current WHERE role = "
                               "'table'").fetchall())
    rows: dict[str, list[int]] = {}
    for path, row in con.execute("SELECT file_path, row_number FROM observation_current WHERE "
                                 "list_contains(?, file_path) ORDER BY 1, 2", [files]).fetchall():
        rows.setdefault(path, []).append(int(row))
    decisions = curation.path or str(opts.raw / "decisions.toml")
    return DecideContext(str(opts.store) if opts.store else None, decisions, sources, rows)


def _report(con, opts, result: NightlyResult, check_run, selected, check_fp,
            curation: Curation, folder: Path) -> tuple[Stage, Any]:
    from pipeline.report.html import ReportPage
    from pipeline.report.views import fluid_views

    t0 = time.perf_counter()
    # figures are redrawn only when their inputs' digest changes, also under --full
    views = fluid_views(con, check_run=check_run, selected=selected, check_fp=check_fp,
                        reports=opts.reports, folder=folder, prune=not opts.fluids,
                        quiet=opts.quiet)
    page = ReportPage({}, check_run, views.sections, views.figures,
                      decisions=curation.report_rows(con, check_run.run_id),
                      fluid_order=selected,
                      decide=_decide_context(con, opts, curation, check_run.results),
                      pages=views.pages)
    return Stage("written", time.perf_counter() - t0, views.text(), views.detail), page


# -- the run ---------------------------------------------------------------------------------
class _LogFilter(logging.Filter):
    """The run log keeps FluidLedger's own records and others' warnings."""

    def filter(self, record: logging.LogRecord) -> bool:
        own = record.name.startswith(("pipeline", "fluidledger"))
        return own or record.levelno >= logging.WARNING


@contextmanager
def run_log(path: Path, verbose: bool):
    """Copy log records to ``path`` (INFO, or DEBUG with ``verbose``) while the run lasts,
    without changing what the console shows."""
    root = logging.getLogger()
    level = logging.DEBUG if verbose else logging.INFO
    handler = logging.FileHandler(path, encoding="utf-8")
    handler.setLevel(level)
    handler.addFilter(_LogFilter())
    handler.setFormatter(SafeFormatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    old_root = root.level
    old = [(h, h.level) for h in root.handlers]
    for h, lvl in old:
        h.setLevel(max(lvl, old_root))
    root.setLevel(min(old_root, level))
    root.addHandler(handler)
    try:
        yield handler
    finally:
        root.removeHandler(handler)
        handler.close()
        root.setLevel(old_root)
        for h, lvl in old:
            h.setLevel(lvl)


def _verify(con, store_path, run_id: str) -> Stage:
    """``fluidledger verify`` inside the run: the store rules over the run's own connection,
    the release manifests in the store's folder (where the run publishes) and every release
    the store lists as published there."""
    from dataclasses import asdict

    from pipeline.verify import verify_connection

    t0 = time.perf_counter()
    from pipeline.publish.integrity import repair_published

    repaired = repair_published(con, Path(store_path).parent)
    res = verify_connection(con, str(store_path), Path(store_path).parent, running=(run_id,))
    head = (f"{len(res.rules_run)} store rules, {len(res.releases)} release(s) with "
            f"{res.files_hashed} files hashed")
    text = f"{head}: OK" if res.ok else (f"{head}: {len(res.findings)} finding(s): "
                                         + "; ".join(f.asstr() for f in res.findings[:3]))
    if repaired:
        text += f"; {repaired['text']}"
    detail = {"rules": len(res.rules_run), "releases": len(res.releases),
              "files_hashed": res.files_hashed, "findings": [asdict(f) for f in res.findings],
              "notes": res.notes, "repaired": repaired}
    status = "failed" if not res.ok else "repaired" if repaired else "ok"
    return Stage(status, time.perf_counter() - t0, text, detail)


def _verdict(counts: Mapping[str, int], ingest: Stage, publish: dict,
             verify: Stage | None = None) -> str:
    if counts.get("error") or publish.get("status") == "failed":
        return "error"
    if verify is not None and verify.status == "failed":
        return "error"
    if any(e.get("internal") for e in ingest.detail.get("errors", [])):
        return "error"       # a batch refused by a fault of the code (the others loaded)
    if ingest.detail.get("errors"):
        return "input-error"
    return "fail" if counts.get("fail") else "pass"


def _select(con, wanted: Sequence[str] | None) -> list[str]:
    known = [r[0] for r in con.execute("SELECT fluid_id FROM fluid ORDER BY 1").fetchall()]
    if not wanted:
        return known
    unknown = [f for f in dict.fromkeys(wanted) if f not in known]
    if unknown:
        raise CheckError(f"unknown fluid(s) {', '.join(unknown)}; the store holds: "
                         f"{', '.join(known) or '(none)'}")
    return [f for f in known if f in set(wanted)]


def run_nightly(options: NightlyOptions, *, publisher: Callable | None = None) -> NightlyResult:
    """Run the nightly job (see the module docstring); returns the run record.

    ``publisher`` replaces :func:`publish_adapter` (same keyword arguments and return value).
    """
    from pipeline.checks.engine import _utc, new_run_id
    from pipeline.report.files import FILES, update_latest
    from pipeline.store import open_store

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
    from pipeline.checks.engine import _utc
    from pipeline.report.changes import status_changes
    from pipeline.report.files import FILES, ValidatedItems, write_report

    prev = previous_state(con, result.run_id)
    result.previous_run_id = prev.run_id
    contexts: dict = {}
    ingest = result.stages["ingest"] = _ingest(con, opts, prev, contexts)
    log.info("ingest: %s", ingest.text)
    selected = _select(con, opts.fluids)
    data_fp = data_fingerprints(con)
    fit = result.stages["fit"] = _fit(con, opts, prev, contexts, selected, data_fp, curation)
    log.info("fit: %s", fit.text)
    fits_now = current_fits(con)
    check_fp = {f: _h(data_fp.get(f), sorted(fits_now.get(f, {}).items())) for f in selected}
    check_run, check = _check(con, opts, prev, contexts, selected, check_fp, result.run_id,
                              curation)
    result.stages["check"] = check
    log.info("check: %s", check.text)
    result.check_run_id = check_run.run_id
    result.counts = check_run.counts()
    result.no_changes = (prev.run_id is not None and ingest.status == "no-changes"
                         and fit.status == "no-changes" and check.status == "reused")
    baseline = [prev.of(f)["check_run"] for f in selected if prev.of(f).get("check_run")]
    result.changes.update(status_changes(con, baseline, check_run.run_id, selected))
    pub_stage, pub = _publish(con, opts, prev, result, ingest, publisher, store_path, curation)
    result.stages["publish"] = pub_stage
    result.publish = {k: pub.get(k) for k in ("status", "release_id", "reason")}
    log.info("publish: %s", pub_stage.text)
    values, basis = _value_changes(con, prev, pub, selected, fits_now)
    result.changes.update(values=values, values_basis=basis)
    verify = result.stages["verify"] = _verify(con, store_path, result.run_id)
    (log.info if verify.status == "ok" else log.error)("verify: %s", verify.text)
    result.verdict = _verdict(result.counts, ingest, pub, verify)
    code = VERDICT_EXIT[result.verdict]
    result.exit_code = EXIT_OK if opts.exit_zero and code == EXIT_CHECK_FAILED else code
    t_report = time.perf_counter()
    report, page = _report(con, opts, result, check_run, selected, check_fp, curation,
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
    state = {f: {"data": data_fp.get(f), "check": check_fp[f], "check_run": check_run.run_id,
                 "fits": fits_now.get(f, {})} for f in selected}
    return {"fluids": state, "contexts": contexts}
