"""Releases: build the content from the inputs, refuse or mark failures, write it everywhere.

Recipe of :func:`publish`:

1. read the inputs (:func:`pipeline.publish.inputs.load_inputs`, a few set-based queries): the
   release rests on the latest check run; none -> :class:`PublishError`;
2. refuse (:class:`ReleaseRefused`, exit code 1) when a finding of that run failed or errored,
   unless ``allow_failures`` - then the release is marked ``with_failed_checks``;
3. fingerprint the inputs; the release id is the given name or ``r-<12 hex of the fingerprint>``;
   an existing release of that id must have the same fingerprint (releases are immutable);
4. plan (:mod:`pipeline.publish.incremental`): fluids whose inputs are those of the previous
   release are copied from it, the others recomputed;
5. build the content of the recomputed fluids (:func:`content_rows`): recommended constants,
   curves, one provenance record per value - a pure function of inputs, policy and decisions;
   join the copied rows (one query per table) and the release row;
6. write the exports into a temporary folder and validate them; write the published DuckDB
   file as a temporary file (temporary files left by a killed publish are removed first);
7. rename the export folder into place (an atomic rename; a folder already there must hold
   the same manifest);
8. one store transaction: the release rows if new (copied fluids by ``INSERT ... SELECT``, the
   others from Arrow) and its per-fluid state, a release_publication row, the SQL macros;
9. swap the published file in (``os.replace``).

A re-publish of unchanged inputs adds only a publication row; the files come out identical.

The order makes every crash recoverable by running the publish again: killed before 7, only
temporary files remain; between 7 and 8, the folder is a complete, verifiable release that
the store does not list yet, and the rerun adopts it (same manifest); between 8 and 9 the
store lists the release while readers still see the previous published file, and the rerun
republishes it. :mod:`pipeline.crashpoints` names these places for the tests.
"""

from __future__ import annotations

import json
import math
import re
import shutil
from dataclasses import asdict, dataclass, field
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.compute as pc

from pipeline import __version__
from pipeline.correlations import Curve
from pipeline.crashpoints import crash_point
from pipeline.errors import EXIT_CHECK_FAILED, PublishError
from pipeline.ingest.stage import new_run_id, utcnow
from pipeline.publish import exports, incremental, provenance as prov, published, sqlmacros
from pipeline.publish.inputs import ReleaseInputs, load_inputs
from pipeline.publish.integrity import file_parts, parts_digest
from pipeline.publish.policy import NO_DECISIONS, Decisions, Policy
from pipeline.publish.recommend import Recommendation, recommend_all
from pipeline.store.runs import end_run
from pipeline.verify import file_stamp

RELEASE_NAME = re.compile(r"^[a-z0-9][a-z0-9._-]{0,63}\Z")  # \Z: no trailing newline
CURVE_UNITS = {"pressure": "Pa", "rho_liquid": "kg/m^3", "rho_vapour": "kg/m^3"}


class ReleaseRefused(PublishError):
    """The check run a release would rest on has failed or errored findings (exit code 1)."""

    exit_code = EXIT_CHECK_FAILED


@dataclass
class PublishResult:
    """What a publish did: the release, whether it was new, where it went, what is missing."""

    release_id: str
    fingerprint: str
    check_run_id: str
    created: bool
    with_failed_checks: bool
    checks_failed: int
    checks_errored: int
    n_constants: int
    n_curves: int
    export_dir: str
    published_file: str
    exports_written: bool
    unresolved: list[dict] = field(default_factory=list)
    fluids_copied: int = 0         # fluids whose rows were copied from the previous release
    fluids_computed: int = 0       # fluids whose rows were computed
    #: digests of the published file's parts, kept in the run row for ``verify``
    published_content: dict = field(default_factory=dict, repr=False)
    #: the fluids whose rows may differ from the previous release's (recomputed, or no longer
    #: released); None when nothing was copied from it (all may differ)
    changed_fluids: list[str] | None = field(default=None, repr=False)
    #: resolved path -> :func:`pipeline.verify.file_stamp` of each export file this publish
    #: wrote and read back against its manifest (none when the folder was already there) and
    #: of the published file whose parts it read (``published_content``)
    file_stamps: dict[str, list] = field(default_factory=dict, repr=False)

    def asdict(self) -> dict:
        out = asdict(self)
        out.pop("published_content")
        out.pop("changed_fluids")
        out.pop("file_stamps")
        return out

    def asstr(self) -> str:
        state = "made" if self.created else "re-published (unchanged)"
        lines = [f"release {self.release_id} {state}: {self.n_constants} constants, "
                 f"{self.n_curves} curves, fingerprint {self.fingerprint[:16]}..., resting on "
                 f"check run {self.check_run_id}"]
        if self.with_failed_checks:
            lines.append(f"  MARKED: published with {self.checks_failed} failed and "
                         f"{self.checks_errored} errored findings (--allow-failures)")
        lines.append(f"  exports: {self.export_dir}"
                     + ("" if self.exports_written else " (already in place, identical)"))
        lines.append(f"  published file: {self.published_file}")
        if self.fluids_copied:
            lines.append(f"  {self.fluids_computed} fluid(s) computed, {self.fluids_copied} "
                         "unchanged fluid(s) copied from the previous release")
        for u in self.unresolved:
            lines.append(f"  no value: {u['fluid_id']} {u['property']}: {u['reason']}")
        return "\n".join(lines)


def _constant_row(r: Recommendation, release_id: str, status: str) -> dict:
    return {"release_id": release_id, "value_id": r.value_id, "fluid_id": r.fluid_id,
            "point": r.point, "property": r.prop, "value_si": float(r.value), "u_si": r.u,
            "unit": r.unit, "method": r.method, "method_detail": r.detail,
            "n_candidates": len(r.used) + len(r.left_out), "n_used": len(r.used),
            "birge_ratio": r.birge_ratio,
            "source_ids": sorted({c.source_id for c in r.used if c.source_id}),
            "check_status": status}


def _fit_decision_ids(inputs: ReleaseInputs, fit_ids) -> list[str]:
    """Issue 8: curation decisions that excluded points of these fits (fit_residual.excluded_by)."""
    return sorted({r["excluded_by"] for f in fit_ids for r in inputs.fit_rows.get(f, [])
                   if r["excluded_by"]})


def _constant_record(inputs: ReleaseInputs, r: Recommendation, policy: Policy,
                     checks: prov.CheckIndex, policy_sha256: str | None = None) -> prov.Record:
    entities = []
    for c in r.used:
        entities.append({**c.entities[0], "used": True, "note": c.entities[0]["note"]
                         or "used"})
        entities += list(c.entities[1:])
    for c, why in r.left_out:
        entities.append({**c.entities[0], "used": False, "note": why})
    refs = prov.Refs(subjects=frozenset({r.key}))
    for c in r.used:
        refs = refs | c.refs
    fits = sorted({c.fit_id for c in r.used if c.fit_id})
    activity = (f"fluidledger publish: recommendation by policy "
                f"{(policy_sha256 or policy.sha256)[:12]} "
                f"({r.method}: {r.detail})")
    return prov.Record(r.value_id, r.fluid_id, "constant", r.method,
                       fits[0] if len(fits) == 1 else None, activity, entities,
                       checks.bearing(r.fluid_id, refs),
                       list(r.decision_ids) + _fit_decision_ids(inputs, fits))  # issue 8


#: statuses of critical.curve-end "p(Tc)" that let a vapour-pressure curve be published to Tc
REACHES_TC = ("pass", "waived")


def valid_to_tc(fit: dict, curve: Curve, checks: prov.CheckIndex) -> bool:
    """True when a vapour-pressure fit is anchored at Tc and shown to end there.

    The fit fixes Tc as its reference temperature; when ``critical.curve-end`` found that it
    reaches Tc within the extrapolation policy and that p_vap(Tc) agrees with pc ("p(Tc)"
    passed or was waived), the curve is published valid up to Tc, where it gives its fitted pc.
    """
    T_ref = curve.ref.get("T_ref_K")
    return (fit["boundary"] == "liquid-vapour" and fit["quantity"] == "pressure"
            and curve.correlation_form.reference_point == "critical"
            and T_ref is not None and math.isfinite(T_ref) and T_ref > curve.T_max_K
            and checks.status(fit["fluid_id"], "critical.curve-end", "p(Tc)") in REACHES_TC)


def _curve_rows(inputs: ReleaseInputs, fit: dict, release_id: str,
                checks: prov.CheckIndex) -> tuple[dict, prov.Record]:
    curve = inputs.curve(fit)
    to_tc = valid_to_tc(fit, curve, checks)
    form = curve.correlation_form
    exps = list(curve.ref["exponents"])
    sqlmacros.check_curve_fits(len(curve.params), len(exps), curve.form)
    key = fit["boundary"] + (f":{fit['solid_phase']}" if fit["solid_phase"] else "")
    value_id = f"{fit['fluid_id']}/curve:{key}/{fit['quantity']}"
    bearing = checks.bearing(fit["fluid_id"], prov.fit_refs(inputs, fit))
    cov = [list(row) for row in curve.covariance] if curve.covariance is not None else None
    if cov is not None and not all(math.isfinite(v) for row in cov for v in row):
        cov = None
    row = {"release_id": release_id, "value_id": value_id, "curve_id": fit["fit_id"],
           "fluid_id": fit["fluid_id"], "boundary": fit["boundary"],
           "solid_phase": fit["solid_phase"], "quantity": fit["quantity"],
           "unit": CURVE_UNITS[fit["quantity"]], "form": curve.form,
           "form_citation": form.citation, "link": form.link, "T_ref_K": curve.ref["T_ref_K"],
           "reference_value_si": float(curve.reference_value),
           "param_names": list(sqlmacros.param_names(form, len(curve.params))), "params": list(curve.params),
           "exponents": exps, "covariance": cov, "T_min_K": curve.T_min_K,
           "T_max_K": curve.ref["T_ref_K"] if to_tc else curve.T_max_K,
           "n_points": fit["n_points"], "n_used": fit["n_used"],
           "n_flagged": fit["n_flagged"], "weighted_rms": fit["weighted_rms"],
           "reduced_chi2": fit["reduced_chi2"], "input_hash": fit["input_hash"],
           "check_status": prov.worst_status(c["status"] for c in bearing)}
    reach = (f"; valid to Tc = {curve.ref['T_ref_K']:.6g} K (data to {curve.T_max_K:.6g} K; "
             "anchored at the critical point, critical.curve-end p(Tc) passed)") if to_tc else ""
    record = prov.Record(value_id, fit["fluid_id"], "curve", "fitted", fit["fit_id"],
                         f"fluidledger fit run {fit['fit_run_id']} (form {curve.form}){reach}",
                         prov.fit_entities(inputs, fit), bearing,
                         _fit_decision_ids(inputs, [fit["fit_id"]]))  # issue 8
    return row, record


@dataclass
class Content:
    """The tables of a release (rows sorted by value_id) and what could not be recommended."""

    tables: dict[str, list[dict]]
    unresolved: list[dict]


def content_rows(inputs: ReleaseInputs, policy: Policy, decisions: Decisions,
                 release_id: str) -> tuple[dict[str, list[dict]], list[dict]]:
    """The constants, curves and provenance rows (each sorted by value_id) of the fluids of
    ``inputs``, and the constants left without a value: a pure function of the inputs, the
    policy and the decisions."""
    checks = prov.CheckIndex(inputs.checks)
    recs, unresolved = recommend_all(inputs, policy, decisions, checks)
    constants, curves, records = [], [], []
    policy_sha256 = policy.sha256
    for r in recs:
        record = _constant_record(inputs, r, policy, checks, policy_sha256)
        constants.append(_constant_row(r, release_id,
                                       prov.worst_status(c["status"] for c in record.checks)))
        records.append(record)
    for fit in inputs.fits:
        row, record = _curve_rows(inputs, fit, release_id, checks)
        curves.append(row)
        records.append(record)
    curves.sort(key=lambda r: r["value_id"])
    records.sort(key=lambda r: r.value_id)
    return ({"constants": constants, "curves": curves,
             "provenance": [rec.row(inputs, release_id) for rec in records]}, unresolved)


def release_row(inputs: ReleaseInputs, policy: Policy, decisions: Decisions, release_id: str,
                fingerprint: str, n_rows: dict[str, int]) -> dict:
    """The release's own row (``n_rows``: rows of constants, curves and provenance)."""
    counts = inputs.counts()
    return {"release_id": release_id, "fingerprint": fingerprint,
            "pipeline_version": inputs.pipeline_version,
            "with_failed_checks": bool(inputs.bad_checks()),
            "checks_failed": counts.get("fail", 0), "checks_errored": counts.get("error", 0),
            "checks_warned": counts.get("warn", 0), "n_constants": n_rows["constants"],
            "n_curves": n_rows["curves"], "n_provenance": n_rows["provenance"],
            "policy_sha256": policy.sha256,
            "policy_json": json.dumps(policy.asdict(), sort_keys=True),
            "decisions_json": json.dumps(decisions.asdict(), sort_keys=True)}


def build_content(inputs: ReleaseInputs, policy: Policy, decisions: Decisions,
                  release_id: str, fingerprint: str) -> Content:
    """The release tables of every fluid, computed (what a full publish writes)."""
    rows, unresolved = content_rows(inputs, policy, decisions, release_id)
    release = release_row(inputs, policy, decisions, release_id, fingerprint,
                          {t: len(r) for t, r in rows.items()})
    return Content({"release": [release], **rows}, unresolved)


def _unresolved(fresh: list[dict], p: incremental.Plan) -> tuple[list[dict], dict]:
    """Constants without a value, in the order a full publish lists them (point constants by
    fluid, then the others by fluid), and per fluid for the release state."""
    per_fluid: dict[str, list[dict]] = {f: [] for f in p.digests}
    for u in fresh:
        per_fluid.setdefault(u["fluid_id"], []).append(u)
    for f in p.reuse:
        per_fluid[f] = list(p.previous.unresolved.get(f, []))
    order = sorted(per_fluid)
    merged = [u for f in order for u in per_fluid[f] if "point" in u] + \
        [u for f in order for u in per_fluid[f] if "point" not in u]
    return merged, per_fluid


def _refusal(inputs: ReleaseInputs) -> ReleaseRefused:
    bad = inputs.bad_checks()
    sample = "; ".join(f"{c['check_id']} {c['fluid_id']}"
                       + (f" {c['subject']}" if c["subject"] else "") + f" ({c['status']})"
                       for c in bad[:5])
    more = f" and {len(bad) - 5} more" if len(bad) > 5 else ""
    return ReleaseRefused(f"check run {inputs.check_run_id} has {len(bad)} failed or errored "
                          f"finding(s): {sample}{more}; fix them, or publish with "
                          "--allow-failures to make a release marked as such")


def publish(con: duckdb.DuckDBPyConnection, store_path: Path, *, name: str | None = None,
            allow_failures: bool = False, out: Path | None = None,
            policy: Policy | None = None, decisions: Decisions = NO_DECISIONS,
            full: bool = False) -> PublishResult:
    """Make (or re-publish) a release from the store open on ``con`` (writable).

    Parameters
    ----------
    con : duckdb connection
        The working store, opened for writing (the publish holds its lock throughout).
    store_path : path
        Where the store lives; the output root defaults to its folder.
    name : str, optional
        Release name (lower-case slug); default ``r-`` + 12 hex digits of the fingerprint.
    allow_failures : bool
        Publish although the check run has failed or errored findings; the release is marked.
    out : path, optional
        Output root: ``<out>/<release>/`` for the exports and ``<out>/published.duckdb``.
    policy, decisions
        Recommendation policy (default: the package's policy.toml) and curation decisions.
    full : bool
        Recompute every fluid instead of copying the rows of fluids whose inputs are those of
        the previous release (the result is the same; see :mod:`pipeline.publish.incremental`).
    """
    policy = policy or Policy.load()
    if name is not None and not RELEASE_NAME.match(name):
        raise PublishError(f"release name {name!r} must be a lower-case slug "
                           f"({RELEASE_NAME.pattern})", key="--release")
    root = Path(out) if out is not None else Path(store_path).parent
    run_id = new_run_id("publish")
    params = {"release": name, "allow_failures": allow_failures, "out": str(root),
              "full": full}
    con.execute("INSERT INTO run VALUES (?, 'publish', ?, NULL, ?, ?, 'running', NULL)",
                [run_id, utcnow(), __version__,
                 json.dumps(params, sort_keys=True)])
    try:
        result = _publish(con, root, run_id, name, allow_failures, policy, decisions, full)
    except ReleaseRefused as err:
        _finish(con, run_id, "failed", {"refused": str(err)})
        raise
    except BaseException as err:
        end_run(con, run_id, err)
        raise
    _finish(con, run_id, "ok" if result.created else "no-changes",
            {**result.asdict(), "published_content": result.published_content})
    return result


def _finish(con, run_id: str, status: str, summary: dict) -> None:
    con.execute("UPDATE run SET finished_at = ?, status = ?, summary_json = ? WHERE run_id = ?",
                [utcnow(), status, json.dumps(summary, sort_keys=True, default=str), run_id])


def _publish(con, root: Path, run_id: str, name, allow_failures, policy, decisions, full):
    inputs = load_inputs(con)
    if inputs.bad_checks() and not allow_failures:
        raise _refusal(inputs)
    fingerprint, digests = inputs.fingerprints(policy.asdict(), decisions)
    release_id = name or f"r-{fingerprint[:12]}"
    row = con.execute("SELECT fingerprint, check_run_id, created_at FROM release "
                      "WHERE release_id = ?", [release_id]).fetchone()
    if row is not None and row[0] != fingerprint:
        raise PublishError(f"release {release_id} exists with other inputs (fingerprint "
                           f"{row[0][:12]} vs {fingerprint[:12]}); releases are immutable: "
                           "publish under another name", key="--release")
    plan = incremental.plan(con, digests, incremental=not full)
    fresh, fresh_unresolved = content_rows(inputs.subset(plan.recompute), policy, decisions,
                                           release_id)
    tables = incremental.assemble(con, plan, fresh, release_id)
    release = release_row(inputs, policy, decisions, release_id, fingerprint,
                          {t: tables[t].rows.num_rows for t in incremental.TEXT_TABLES})
    tables = {"release": exports.export_table("release", [release]), **tables}
    unresolved, unresolved_per_fluid = _unresolved(fresh_unresolved, plan)
    now = utcnow()
    extra = {"check_run_id": row[1] if row else inputs.check_run_id,
             "created_at": row[2] if row else now, "publish_run_id": run_id}
    final_dir = root / release_id
    target = root / published.PUBLISHED_NAME
    exports.remove_leftovers(root)
    published.remove_leftovers(target)
    stamps: dict[str, list] = {}
    tmp_dir, manifest, spans = exports.prepare_release_folder(root, release_id, fingerprint,
                                                              tables, stamps)
    crash_point("publish:exports-written")
    publication = {"release_id": release_id, "published_at": now, "publish_run_id": run_id,
                   "export_dir": str(final_dir)}
    arrow = {t: table.rows for t, table in tables.items()}
    tmp_pub = None
    try:
        already = exports.existing_folder_matches(final_dir, manifest)
        tmp_pub = published.build_published_file(target, arrow, extra, publication)
        content_parts = file_parts(tmp_pub)
        crash_point("publish:file-built")
        written = exports.commit_release_folder(tmp_dir, final_dir, already)
    except BaseException:
        shutil.rmtree(tmp_dir, ignore_errors=True)
        if tmp_pub is not None:
            tmp_pub.unlink(missing_ok=True)
        raise
    crash_point("publish:folder-renamed")
    con.execute("BEGIN TRANSACTION")
    try:
        if row is None:
            incremental.copy_store_rows(con, plan, release_id)
            published.insert_release_rows(con, _not_copied(arrow, plan), extra)
            incremental.insert_state(con, plan, release_id, unresolved_per_fluid, spans)
        con.execute("INSERT INTO release_publication VALUES "
                    "(nextval('release_publication_seq'), ?, ?, ?, ?, ?)",
                    [release_id, now, run_id, str(final_dir), str(target)])
        sqlmacros.install_macros(con)
        sqlmacros.comment_view_columns(con, sqlmacros.CURATED_VIEWS)
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        tmp_pub.unlink(missing_ok=True)
        if written:      # the store does not list it: take back the folder this run added
            shutil.rmtree(final_dir, ignore_errors=True)
        raise
    crash_point("publish:store-committed")
    published.swap_in(tmp_pub, target)
    crash_point("publish:swapped")
    # the stamp of the file whose parts were just read (renamed into place: a new ctime)
    file_stamps = {str(target.resolve()): file_stamp(target, parts_digest(content_parts))}
    if written:
        file_stamps.update({str((final_dir / name).resolve()): stamp
                            for name, stamp in stamps.items()})
    counts = inputs.counts()
    return PublishResult(release_id, fingerprint, inputs.check_run_id, row is None,
                         bool(inputs.bad_checks()), counts.get("fail", 0),
                         counts.get("error", 0), tables["constants"].rows.num_rows,
                         tables["curves"].rows.num_rows, str(final_dir), str(target), written,
                         unresolved, len(plan.reuse), len(plan.recompute), content_parts,
                         plan.changed(), file_stamps)


def _not_copied(arrow: dict[str, pa.Table], plan: incremental.Plan) -> dict[str, pa.Table]:
    """The rows the store does not get by copying: the release row, the recomputed fluids'."""
    if not plan.reuse:
        return arrow
    copied = pa.array(plan.reuse, pa.string())
    return {t: rows if t not in incremental.TEXT_TABLES else
            rows.filter(pc.invert(pc.is_in(rows["fluid_id"], value_set=copied)))
            for t, rows in arrow.items()}
