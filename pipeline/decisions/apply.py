"""Applying decisions on every run: resolve references against the store, feed the stages.

What the stages call:

- :func:`exclusions_for_fit` — ``obs_id -> decision id`` for
  :func:`pipeline.fitting.stage.run_fit`;
- :class:`WaiverStep` — a check post-processor: a waived warn/fail finding becomes ``waived``
  with its decision id, unless the waiver lapsed (expired, or the check's input hash changed),
  then the finding keeps its status and the lapse is noted;
- :func:`with_threshold_overrides` — the Thresholds with the decisions' per-fluid overrides;
- :func:`publish_decisions` — excluded and preferred sources per fluid and constant, as the
  publish stage's :class:`pipeline.publish.policy.Decisions` (decisions behind excluded fit
  points reach the provenance through ``fit_residual.excluded_by``);
- :func:`resolve_all` / :func:`report_rows` — what each decision touches now (observations,
  fits, values, checks), dangling and lapsed ones first, for ``fluidledger decisions`` and the
  nightly report.

A decision whose reference no longer resolves (file changed or gone, row gone, source or fluid
absent) is **dangling**: it is reported and not applied, never an error.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field, replace
from datetime import date
from typing import Any, Iterable, Sequence

from pipeline.decisions.model import Decision, DecisionSet, ExcludeObservations, WaiveCheck
from pipeline.store.runs import latest_check_run_id as latest_check_run

log = logging.getLogger(__name__)

#: Order in which people read decision states: what needs a curator first.
STATE_ORDER = ("dangling", "lapsed", "pending", "active", "idle")
#: Constants stated at fixed points: property -> (fixed-point kind, column of fixed_point).
POINT_CONSTANTS = {"Tc": ("critical", "T_K"), "pc": ("critical", "p_Pa"),
                   "rhoc": ("critical", "rho_kg_m3"), "Tt": ("triple", "T_K"),
                   "pt": ("triple", "p_Pa")}
_VIOLATIONS = ("warn", "fail")


# -- points and constants ----------------------------------------------------------------------
def parse_point(point: str | None) -> tuple[str, frozenset[str]] | None:
    """``triple:Ih,III,liquid`` -> ('triple', {'Ih', 'III', 'liquid'}); phase order is free."""
    if not point:
        return None
    kind, _, phases = point.partition(":")
    return kind, frozenset(p.strip() for p in phases.split(",") if p.strip())


def same_point(a: str | None, b: str | None) -> bool:
    """True when ``a`` names no point (any point) or the same point as ``b``."""
    return a is None or parse_point(a) == parse_point(b)


# -- resolving observation references ----------------------------------------------------------
@dataclass(frozen=True)
class Resolved:
    """What a reference points at now: observation ids, or why it dangles."""

    obs_ids: tuple[int, ...] = ()
    dangling: str | None = None


def _rows_text(rows: Iterable[int]) -> str:
    return ", ".join(map(str, sorted(rows)))


def _resolve_rows(con, ref: ExcludeObservations) -> Resolved:
    current = con.execute(
        "SELECT file_id, sha256, source_id FROM raw_file_current WHERE path = ? AND role = 'table'",
        [ref.file]).fetchone()
    if current is None:
        gone = con.execute("SELECT count(*) FROM raw_file WHERE path = ?", [ref.file]).fetchone()[0]
        why = "was removed from raw/" if gone else "is not in the store"
        return Resolved(dangling=f"file {ref.file} {why}")
    file_id, sha, source = current
    if source != ref.source:
        return Resolved(dangling=f"file {ref.file} belongs to source {source}, not {ref.source}")
    if ref.file_sha256 and sha != ref.file_sha256:
        return Resolved(dangling=f"file {ref.file} changed: its SHA-256 is now {sha[:12]}, the "
                                 f"decision was taken on {ref.file_sha256[:12]}")
    sql = ("SELECT obs_id, row_number FROM observation WHERE file_id = ? "
           "AND list_contains(?, row_number)")
    params: list[Any] = [file_id, list(ref.rows)]
    if ref.quantity:
        sql, params = sql + " AND quantity = ?", params + [ref.quantity]
    found = con.execute(sql + " ORDER BY obs_id", params).fetchall()
    missing = sorted(set(ref.rows) - {r for _, r in found})
    if missing:
        quarantined = con.execute(
            "SELECT DISTINCT row_number FROM quarantine WHERE file_id = ? "
            "AND list_contains(?, row_number)", [file_id, missing]).fetchall()
        q = f" (quarantined: {_rows_text(r for (r,) in quarantined)})" if quarantined else ""
        what = f" {ref.quantity}" if ref.quantity else ""
        return Resolved(dangling=f"row(s) {_rows_text(missing)} of {ref.file} hold no{what} "
                                 f"observation in the current file{q}")
    return Resolved(tuple(o for o, _ in found))


def _resolve_filter(con, ref: ExcludeObservations) -> Resolved:
    sql = ("SELECT obs_id FROM observation_current WHERE fluid_id = ? AND source_id = ? "
           "AND boundary = ?")
    params: list[Any] = [ref.fluid, ref.source, ref.boundary]
    for cond, value in (("solid_phase = ?", ref.solid_phase), ("T_K >= ?", ref.T_min_K),
                        ("T_K <= ?", ref.T_max_K), ("quantity = ?", ref.quantity)):
        if value is not None:
            sql, params = f"{sql} AND {cond}", params + [value]
    found = con.execute(sql + " ORDER BY obs_id", params).fetchall()
    if not found:
        return Resolved(dangling="the filter matches no current observation")
    return Resolved(tuple(o for (o,) in found))


def _source_presence(con, fluid: str, source: str) -> dict[str, int]:
    row = con.execute(
        "SELECT (SELECT count(*) FROM observation_current WHERE fluid_id = $f AND source_id = $s),"
        " (SELECT count(*) FROM fixed_point_current WHERE fluid_id = $f AND source_id = $s),"
        " (SELECT count(*) FROM stated_constant_current WHERE fluid_id = $f AND source_id = $s)",
        {"f": fluid, "s": source}).fetchone()
    return dict(zip(("observations", "fixed_points", "constants"), row))


def states_constant(con, fluid: str, source: str, constant: str, point: str | None) -> bool:
    """True when ``source`` states ``constant`` (at ``point``, when given) for ``fluid``."""
    if constant in POINT_CONSTANTS:
        kind, column = POINT_CONSTANTS[constant]
        rows = con.execute(
            f"SELECT phases FROM fixed_point_current WHERE fluid_id = ? AND source_id = ? "
            f"AND kind = ? AND {column} IS NOT NULL", [fluid, source, kind]).fetchall()
        return any(same_point(point, f"{kind}:{phases}") for (phases,) in rows)
    return con.execute("SELECT count(*) FROM stated_constant_current WHERE fluid_id = ? AND "
                       "source_id = ? AND name = ?", [fluid, source, constant]).fetchone()[0] > 0


def fluid_known(con, fluid: str | None) -> bool:
    return fluid is not None and con.execute(
        "SELECT count(*) FROM fluid WHERE fluid_id = ?", [fluid]).fetchone()[0] > 0


def resolve_observations(con, decision: Decision) -> Resolved:
    """The current observations an exclusion (of observations, or of a whole source) names."""
    action = decision.action
    if decision.kind == "exclude_observations":
        return _resolve_rows(con, action) if action.by_rows else _resolve_filter(con, action)
    if decision.kind == "exclude_source" and action.constant is None:
        if not fluid_known(con, action.fluid):
            return Resolved(dangling=f"fluid {action.fluid} is not in the store")
        found = con.execute("SELECT obs_id FROM observation_current WHERE fluid_id = ? "
                            "AND source_id = ? ORDER BY obs_id",
                            [action.fluid, action.source]).fetchall()
        if not found and not any(_source_presence(con, action.fluid, action.source).values()):
            return Resolved(dangling=f"source {action.source} has no data for {action.fluid}")
        return Resolved(tuple(o for (o,) in found))
    return Resolved()


# -- the fit stage -----------------------------------------------------------------------------
def exclusions_for_fit(con, decisions: DecisionSet | Sequence[Decision]) -> dict[int, str]:
    """Observations to leave out of fits: ``obs_id -> decision id`` (first decision wins).

    Exclusions of observations and of whole sources count; dangling ones are logged and left
    out (they exclude nothing until the curator renews them).
    """
    out: dict[int, str] = {}
    for d in decisions:
        if d.kind not in ("exclude_observations", "exclude_source"):
            continue
        resolved = resolve_observations(con, d)
        if resolved.dangling:
            log.warning("decision %s is dangling (%s); not applied", d.id, resolved.dangling)
            continue
        for obs_id in resolved.obs_ids:
            out.setdefault(int(obs_id), d.id)
    return out


# -- the check stage ---------------------------------------------------------------------------
def waiver_lapse(waiver: WaiveCheck, input_hash: str | None, today: date) -> str | None:
    """Why a waiver no longer holds for a result with ``input_hash`` (None while it holds)."""
    if waiver.until is not None and today > waiver.until:
        return f"expired on {waiver.until.isoformat()}"
    if waiver.input_hash is not None and input_hash != waiver.input_hash:
        now = (input_hash or "none")[:12]
        return (f"the check's inputs changed (input hash {now}, waived for "
                f"{waiver.input_hash[:12]})")
    return None


@dataclass
class WaiverStep:
    """Check post-processor applying ``waive_check`` decisions (see the module docstring).

    After a run, ``applied`` maps decision id -> waived result keys and ``lapsed`` maps
    decision id -> (reason, result keys that keep their status).
    """

    decisions: DecisionSet | Sequence[Decision]
    today: date | None = None
    applied: dict[str, list[tuple[str, str, str]]] = field(default_factory=dict)
    lapsed: dict[str, tuple[str, list[tuple[str, str, str]]]] = field(default_factory=dict)

    def __post_init__(self):
        self._waivers = [d for d in self.decisions if d.kind == "waive_check"]

    def __call__(self, results, batch=None):
        """The results with the waivers applied: a ResultTable of them (only the violations
        are read as CheckResult objects; the other rows are not touched)."""
        from pipeline.checks.results import ResultTable

        today = self.today or date.today()
        self.applied, self.lapsed = {}, {}
        table = results if isinstance(results, ResultTable) else ResultTable.from_results(results)
        for i, status in enumerate(table.columns["status"]):
            if status in _VIOLATIONS:
                r = table.result(i)
                changed = self._apply(r, today)
                if changed is not r:
                    table.replace(i, changed)
        return table

    def _apply(self, r, today: date):
        lapse_note = None
        key = (r.check_id, r.fluid_id, r.subject)
        for d in self._waivers:
            if not d.waive_check.matches(*key):
                continue
            reason = waiver_lapse(d.waive_check, r.input_hash, today)
            if reason is None:
                self.applied.setdefault(d.id, []).append(key)
                return r.waive(d.id, d.why)
            self.lapsed.setdefault(d.id, (reason, []))[1].append(key)
            lapse_note = lapse_note or f" [waiver {d.id} lapsed: {reason}]"
        if lapse_note:
            return replace(r, message=r.message + lapse_note)
        return r

    def notes(self) -> list[str]:
        """One line per waiver applied or lapsed in the last run (for the CLI)."""
        lines = [f"decision {i}: waived {len(keys)} finding(s) "
                 f"({', '.join(_result_key(k) for k in keys[:3])})"
                 for i, keys in self.applied.items()]
        lines += [f"decision {i}: waiver LAPSED ({reason}); {len(keys)} finding(s) keep their "
                  f"status ({', '.join(_result_key(k) for k in keys[:3])})"
                  for i, (reason, keys) in self.lapsed.items()]
        return lines


def _result_key(key: tuple[str, str, str]) -> str:
    check, fluid, subject = key
    return f"{check} {fluid}" + (f" {subject}" if subject else "")


def with_threshold_overrides(thresholds, decisions: DecisionSet | Sequence[Decision],
                             label: str | None = None):
    """``thresholds`` with every ``override_threshold`` decision merged per fluid.

    Uses only the public face of :class:`pipeline.checks.thresholds.Thresholds`: the defaults
    per check, the existing per-fluid overrides, and the constructor. Returns ``thresholds``
    itself when there is nothing to merge. Later decisions win over earlier ones.
    """
    overrides = [d for d in decisions if d.kind == "override_threshold"]
    if not overrides:
        return thresholds
    from pipeline.checks.thresholds import Thresholds

    defaults = {c: dict(thresholds.for_check(c)) for c in thresholds.check_ids()}
    per_fluid: dict[str, dict[str, dict[str, Any]]] = {}
    for c in thresholds.check_ids():
        for fluid, table in thresholds.overrides(c).items():
            per_fluid.setdefault(fluid, {})[c] = dict(table)
    for d in overrides:
        o = d.override_threshold
        per_fluid.setdefault(o.fluid, {}).setdefault(o.check, {})[o.threshold] = o.value
    label = label or getattr(decisions, "path", "decisions")
    return Thresholds(defaults, per_fluid, [*thresholds.files, label])


# -- the publish stage -------------------------------------------------------------------------
def constant_keys(con, fluid: str, constant: str | None, point: str | None) -> list[str]:
    """The publish stage's names of a constant (``"<point>|<property>"``, e.g.
    ``critical:vapour,liquid|Tc``, ``constant|normal_boiling_T``; ``"*"`` for every constant).

    Tt or pt without a point name every triple point the store holds for the fluid.
    """
    from pipeline.publish.recommend import point_label

    if constant is None:
        return ["*"]
    if constant not in POINT_CONSTANTS:
        return [f"constant|{constant}"]
    kind = POINT_CONSTANTS[constant][0]
    if point is not None:
        return [f"{point_label(kind, point.partition(':')[2])}|{constant}"]
    phases = [r[0] for r in con.execute(
        "SELECT DISTINCT phases FROM fixed_point_current WHERE fluid_id = ? AND kind = ? "
        "ORDER BY phases", [fluid, kind]).fetchall()]
    return sorted({f"{point_label(kind, ph)}|{constant}" for ph in phases})


def source_rule_dangling(con, d: Decision) -> str | None:
    """Why an exclude_source or prefer_source decision resolves to nothing (None: it resolves)."""
    a = d.action
    if not fluid_known(con, a.fluid):
        return f"fluid {a.fluid} is not in the store"
    presence = _source_presence(con, a.fluid, a.source)
    if not any(presence.values()):
        return f"source {a.source} has no data for {a.fluid}"
    if a.constant and not states_constant(con, a.fluid, a.source, a.constant, a.point):
        at = f" at {a.point}" if a.point else ""
        return f"source {a.source} states no {a.constant}{at} for {a.fluid}"
    return None


def publish_decisions(con, decisions: DecisionSet | Sequence[Decision]):
    """The source exclusions and preferences that resolve in the store, as the publish stage
    takes them (:class:`pipeline.publish.policy.Decisions`).

    An exclusion without a constant covers every constant of the fluid; the first decision
    excluding a source for a constant names it, the last preference of a constant wins.
    Decisions behind points excluded from fits reach the provenance through the fits'
    residual rows (``fit_residual.excluded_by``).
    """
    from pipeline.publish.policy import Decisions

    exclude: dict[tuple[str, str], dict[str, str]] = {}
    prefer: dict[tuple[str, str], tuple[str, str]] = {}
    for d in decisions:
        if d.kind not in ("exclude_source", "prefer_source"):
            continue
        dangling = source_rule_dangling(con, d)
        if dangling:
            log.warning("decision %s is dangling (%s); not applied", d.id, dangling)
            continue
        a = d.action
        for key in constant_keys(con, a.fluid, a.constant, a.point):
            if d.kind == "exclude_source":
                exclude.setdefault((a.fluid, key), {}).setdefault(a.source, d.id)
            else:
                prefer[(a.fluid, key)] = (a.source, d.id)
    return Decisions(exclude=exclude, prefer=prefer)


# -- what each decision touches now ------------------------------------------------------------
@dataclass
class Touch:
    """One decision and what it touches now."""

    decision: Decision
    state: str = "active"           # see STATE_ORDER
    reason: str = ""
    observations: list[dict] = field(default_factory=list)   # obs_id, file, row, quantity
    fits: list[str] = field(default_factory=list)
    values: list[str] = field(default_factory=list)
    checks: list[dict] = field(default_factory=list)         # check_id, fluid_id, subject, status

    def counts(self) -> dict[str, int]:
        return {"observations": len(self.observations), "fits": len(self.fits),
                "values": len(self.values), "checks": len(self.checks)}

    def asdict(self) -> dict[str, Any]:
        d = self.decision
        return {"id": d.id, "kind": d.kind, "state": self.state, "reason": self.reason,
                "who": d.who, "when": d.when.isoformat(), "why": d.why,
                "what": d.describe(), "fluid": d.fluid, "touches": self.counts(),
                "observations": self.observations, "fits": self.fits, "values": self.values,
                "checks": self.checks}


def _has_table(con, name: str) -> bool:
    return con.execute("SELECT count(*) FROM information_schema.tables WHERE table_name = ?",
                       [name]).fetchone()[0] > 0


def _observations(con, obs_ids: Sequence[int]) -> list[dict]:
    if not obs_ids:
        return []
    rows = con.execute("SELECT obs_id, file_path, row_number, quantity, fluid_id FROM "
                       "observation_current WHERE list_contains(?, obs_id) ORDER BY obs_id",
                       [list(obs_ids)]).fetchall()
    return [dict(zip(("obs_id", "file", "row", "quantity", "fluid_id"), r)) for r in rows]


def _fits_excluding(con, decision_id: str) -> tuple[list[str], set[int]]:
    rows = con.execute("SELECT r.fit_id, r.obs_id FROM fit_residual r JOIN fit f ON "
                       "f.fit_id = r.fit_id WHERE f.is_current AND r.excluded_by = ? "
                       "ORDER BY r.fit_id, r.obs_id", [decision_id]).fetchall()
    return sorted({f for f, _ in rows}), {int(o) for _, o in rows}


def _values(con, decision_id: str) -> list[str]:
    if not _has_table(con, "release_provenance"):
        return []
    rows = con.execute("SELECT value_id FROM curated_provenance WHERE "
                       "list_contains(decision_ids, ?) "
                       "ORDER BY value_id", [decision_id]).fetchall()
    return [r[0] for r in rows]


def _check_rows(con, run_id: str | None, check_id: str, fluid_id: str) -> list[dict]:
    if run_id is None:
        return []
    rows = con.execute("SELECT check_id, fluid_id, subject, status, input_hash, decision_id "
                       "FROM check_result WHERE run_id = ? AND check_id = ? AND fluid_id = ? "
                       "ORDER BY subject", [run_id, check_id, fluid_id]).fetchall()
    return [dict(zip(("check_id", "fluid_id", "subject", "status", "input_hash", "decision_id"), r))
            for r in rows]


def _excluded_checks(con, run_id: str | None, decision_id: str) -> list[dict]:
    """Findings of the check run that rest on data the decision excluded."""
    if run_id is None:
        return []
    rows = con.execute("SELECT check_id, fluid_id, subject, status FROM check_result WHERE "
                       "run_id = ? AND decision_id = ? AND status = 'excluded' ORDER BY ALL",
                       [run_id, decision_id]).fetchall()
    return [dict(zip(("check_id", "fluid_id", "subject", "status"), r)) for r in rows]


def _touch_exclusion(con, t: Touch) -> None:
    resolved = resolve_observations(con, t.decision)
    if resolved.dangling:
        t.state, t.reason = "dangling", resolved.dangling
        return
    t.observations = _observations(con, resolved.obs_ids)
    t.fits, excluded_now = _fits_excluding(con, t.decision.id)
    if set(resolved.obs_ids) - excluded_now:
        t.state = "pending"
        t.reason = "not yet applied to the current fits (run 'fluidledger fit' or the nightly)"
    elif not resolved.obs_ids and t.decision.kind == "exclude_source":
        t.state, t.reason = "idle", "the source has no observations (applies to its stated values)"


def _touch_waiver(con, t: Touch, run_id: str | None, today: date) -> None:
    w = t.decision.waive_check
    if not fluid_known(con, w.fluid):
        t.state, t.reason = "dangling", f"fluid {w.fluid} is not in the store"
        return
    rows = [r for r in _check_rows(con, run_id, w.check, w.fluid)
            if w.matches(r["check_id"], r["fluid_id"], r["subject"])]
    waived = [r for r in rows if r["decision_id"] == t.decision.id]
    unwaived = [r for r in rows if r["status"] in _VIOLATIONS]
    t.checks = [{k: r[k] for k in ("check_id", "fluid_id", "subject", "status")}
                for r in waived + unwaived]
    expired = waiver_lapse(w.model_copy(update={"input_hash": None}), None, today)
    lapses = [waiver_lapse(w, r["input_hash"], today) for r in unwaived]
    if expired:
        t.state, t.reason = "lapsed", expired
    elif any(lapses):
        t.state, t.reason = "lapsed", next(x for x in lapses if x)
    elif unwaived:
        t.state = "pending"
        t.reason = "granted after the latest check run (run 'fluidledger check' or the nightly)"
    elif not waived:
        t.state = "idle"
        t.reason = ("no warn or fail finding of this check in the latest check run"
                    if run_id else "no check run yet")


def _touch_override(con, t: Touch, run_id: str | None) -> None:
    o = t.decision.override_threshold
    if not fluid_known(con, o.fluid):
        t.state, t.reason = "dangling", f"fluid {o.fluid} is not in the store"
        return
    t.checks = [{k: r[k] for k in ("check_id", "fluid_id", "subject", "status")}
                for r in _check_rows(con, run_id, o.check, o.fluid)]
    if not t.checks:
        t.state, t.reason = "pending", "no result of the check for the fluid in the latest run"


def resolve_all(con, decisions: DecisionSet | Sequence[Decision], *,
                today: date | None = None, check_run_id: str | None = None) -> list[Touch]:
    """What every decision touches now, ordered dangling, lapsed, pending, active, idle, then
    in file order."""
    today = today or date.today()
    run_id = check_run_id or latest_check_run(con)
    out = []
    for d in decisions:
        t = Touch(d)
        if d.kind in ("exclude_observations", "exclude_source"):
            _touch_exclusion(con, t)
            t.checks = _excluded_checks(con, run_id, d.id)
            if t.state == "idle" and t.checks:
                t.state, t.reason = "active", ""
        if d.kind in ("exclude_source", "prefer_source") and t.state != "dangling":
            dangling = source_rule_dangling(con, d)
            if dangling:
                t.state, t.reason = "dangling", dangling
        if d.kind == "waive_check":
            _touch_waiver(con, t, run_id, today)
        elif d.kind == "override_threshold":
            _touch_override(con, t, run_id)
        if t.state != "dangling":
            t.values = _values(con, d.id)
        out.append(t)
    rank = {s: i for i, s in enumerate(STATE_ORDER)}
    return [t for _, t in sorted(enumerate(out), key=lambda p: (rank[p[1].state], p[0]))]


def touch_text(counts: dict[str, int]) -> str:
    """``1 observation, 1 fit, 2 values`` (or ``nothing``)."""
    parts = [f"{n} {k[:-1] if n == 1 else k}" for k, n in counts.items() if n]
    return ", ".join(parts) or "nothing"


def report_rows(con, decisions: DecisionSet | Sequence[Decision], *,
                today: date | None = None, check_run_id: str | None = None) -> list[dict]:
    """Rows of the report's decisions section, most urgent first (dangling, lapsed, pending,
    applied, idle): flat text columns ``state, id, action, what, touches, note, why, who,
    when``. ``state`` reads ``applied`` for a decision in force."""
    rows = []
    for t in resolve_all(con, decisions, today=today, check_run_id=check_run_id):
        d = t.decision
        rows.append({"state": "applied" if t.state == "active" else t.state, "id": d.id,
                     "action": d.kind, "what": d.describe(), "touches": touch_text(t.counts()),
                     "note": t.reason, "why": d.why, "who": d.who, "when": d.when.isoformat()})
    return rows
