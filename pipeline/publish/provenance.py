"""Provenance: which checks bear on a value, and the per-value record in W3C PROV terms.

A finding of the check run *bears on* a value when it is about the same fluid and names one of
the value's inputs: a fixed point (``fp_ids`` in its evidence), an observation (``obs_id``), a
fit (``fit_id``), a stated constant (``basis: stated NAME (SOURCE)``), or when its subject is the
value's own (``critical:vapour,liquid|Tc``, ``constant|normal_boiling_T``, ``curve:<boundary>``,
``file:<path>|<boundary>`` for a file the curve was fitted to...).

Each released value gets one record (:func:`record`): ``was_derived_from`` lists the entities
(fixed-point entries, stated constants, raw files with row numbers and observation ids, fits,
other released values) with the candidate values and whether each was used;
``was_attributed_to`` the sources with their citations; ``was_generated_by`` the activity;
``checks`` the bearing findings; ``decision_ids`` the curation decisions that shaped it.
(PROV terms: T. Lebo, S. Sahoo, D. McGuinness (eds.), PROV-O: The PROV Ontology, W3C
Recommendation, 30 April 2013.)
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable

from pipeline.publish.inputs import BAD_STATUSES, ReleaseInputs

#: Worst first; a value with no bearing finding has status "none".
STATUS_SEVERITY = ("fail", "error", "warn", "waived", "excluded", "pass", "skip")


def worst_status(statuses: Iterable[str]) -> str:
    found = set(statuses)
    for status in STATUS_SEVERITY:
        if status in found:
            return status
    return "none"


@dataclass(frozen=True)
class Refs:
    """The inputs of a value, as the check index matches them."""

    fp_ids: frozenset[int] = frozenset()
    obs_ids: frozenset[int] = frozenset()
    fit_ids: frozenset[str] = frozenset()
    stated: frozenset[tuple[str, str]] = frozenset()
    subjects: frozenset[str] = frozenset()
    files: frozenset[tuple[str, str]] = frozenset()   # (file path, curve key)

    def __or__(self, other: "Refs") -> "Refs":
        return Refs(*((a | b) if a and b else (a or b) for a, b in (
            (self.fp_ids, other.fp_ids), (self.obs_ids, other.obs_ids),
            (self.fit_ids, other.fit_ids), (self.stated, other.stated),
            (self.subjects, other.subjects), (self.files, other.files))))


class CheckIndex:
    """The findings of one check run, indexed per fluid for the bearing rules.

    Each fluid's findings are indexed by what they name (subject, fixed points, observations,
    fits, stated constants, files), so that :meth:`bearing` looks up a value's inputs instead
    of testing every finding against every value.
    """

    def __init__(self, checks: list[dict]):
        self._by_fluid: dict[str, list[dict]] = {}
        for c in checks:
            self._by_fluid.setdefault(c["fluid_id"], []).append(c)
        self._index: dict[str, _FluidFindings] = {}

    def _of(self, fluid_id: str) -> "_FluidFindings":
        found = self._index.get(fluid_id)
        if found is None:
            found = self._index[fluid_id] = _FluidFindings(self._by_fluid.get(fluid_id, []))
        return found

    def bearing(self, fluid_id: str, refs: Refs) -> list[dict]:
        """Findings for ``fluid_id`` that name one of ``refs`` (ordered by check id, subject)."""
        return self._of(fluid_id).bearing(refs)

    def discrepant(self, fluid_id: str, subject: str) -> dict[str, str]:
        """Sources a failed ``sources.agreement`` finding on ``subject`` names -> its message."""
        out = {}
        for c in self._of(fluid_id).by_check.get(("sources.agreement", subject), ()):
            if c["status"] in BAD_STATUSES:
                for source in c["refs"]["discrepant"]:
                    out[source] = c["status"]
        return out

    def status(self, fluid_id: str, check_id: str, subject: str) -> str | None:
        """Status of one finding (``check_id``, ``subject``) of ``fluid_id``, None if absent."""
        found = self._of(fluid_id).by_check.get((check_id, subject))
        return found[0]["status"] if found else None

    def bad(self, fluid_id: str, refs: Refs) -> list[dict]:
        return [c for c in self.bearing(fluid_id, refs) if c["status"] in BAD_STATUSES]


class _FluidFindings:
    """One fluid's findings, and which of them name each subject, id and file."""

    def __init__(self, findings: list[dict]):
        self.findings = findings
        self.by_check: dict[tuple[str, str], list[dict]] = {}
        self.keys: dict[str, dict] = {k: {} for k in ("subjects", "fp_ids", "obs_ids", "fit_ids",
                                                      "stated", "files")}
        for i, c in enumerate(findings):
            self.by_check.setdefault((c["check_id"], c["subject"]), []).append(c)
            r = c["refs"]
            named = {"subjects": [c["subject"]], "fp_ids": r["fp_ids"], "obs_ids": r["obs_ids"],
                     "fit_ids": r["fit_ids"], "stated": [tuple(x) for x in r["stated"]],
                     "files": []}
            if c["subject"].startswith("file:"):
                path, _, key = c["subject"][len("file:"):].rpartition("|")
                named["files"] = [(path, key)]
            for kind, values in named.items():
                index = self.keys[kind]
                for v in values:
                    index.setdefault(v, []).append(i)

    def bearing(self, refs: Refs) -> list[dict]:
        hits: set[int] = set()
        for kind, index in self.keys.items():
            wanted = getattr(refs, kind)
            if not index or not wanted:
                continue
            if len(wanted) <= len(index):
                for v in wanted:
                    hits.update(index.get(v, ()))
            else:
                for v, found in index.items():
                    if v in wanted:
                        hits.update(found)
        return [self.findings[i] for i in sorted(hits)]


def check_entries(checks: Iterable[dict]) -> list[dict]:
    """The ``checks`` column: unique findings, sorted."""
    seen = {}
    for c in checks:
        seen[(c["check_id"], c["subject"])] = {"check_id": c["check_id"], "subject": c["subject"],
                                               "status": c["status"], "message": c["message"]}
    return [seen[k] for k in sorted(seen)]


def entity(kind: str, entity_id, *, source_id: str | None = None, file: dict | None = None,
           rows: Iterable[int] = (), obs_ids: Iterable[int] = (), value: float | None = None,
           u: float | None = None, used: bool = True, note: str = "",
           cells: Iterable[str] = ()) -> dict:
    """One ``was_derived_from`` entry (``cells``: the workbook cells of the values, one per
    observation id; empty for CSV files)."""
    return {"entity": kind, "entity_id": str(entity_id), "source_id": source_id,
            "file_sha256": file["sha256"] if file else None,
            "file_path": file["path"] if file else None,
            "row_numbers": list(map(int, rows)), "obs_ids": list(map(int, obs_ids)),
            "value_si": value, "u_si": u, "used": bool(used), "note": note,
            "cells": list(map(str, cells))}


_ROLE_NOTES = {"used": "used by the fit",
               "outlier": "flagged as an outlier by the fit (kept, not used)",
               "outside": "not used by the fit: outside the form's domain (e.g. above Tc)",
               "excluded": "excluded by curation decision {excluded_by}"}


def fit_entities(inputs: ReleaseInputs, fit: dict) -> list[dict]:
    """The raw files and rows behind a fit (used, flagged or excluded) and its anchoring point."""
    out = []
    for r in inputs.fit_rows.get(fit["fit_id"], []):
        raw = inputs.raw_files[int(r["file_id"])]
        used, note = r["role"] == "used", _ROLE_NOTES[r["role"]].format(**r)
        out.append(entity("observations", r["file_id"], source_id=raw["source_id"], file=raw,
                          rows=r["row_numbers"], obs_ids=r["obs_ids"], used=used, note=note,
                          cells=r["cells"]))
    T_ref = fit["curve"]["ref"].get("T_ref_K")
    kind = "critical" if fit["boundary"] == "liquid-vapour" else "triple"
    for fp in inputs.fixed_points_of(fit["fluid_id"], kind):
        if T_ref is not None and fp["T_K"] == T_ref:
            out.append(entity("fixed_point", fp["fp_id"], source_id=fp["source_id"],
                              file=inputs.raw_files.get(int(fp["file_id"])),
                              rows=[fp["entry_number"]], value=fp["T_K"], u=fp["u_T_K"],
                              note="reference temperature of the correlation form"))
    return out


def fit_refs(inputs: ReleaseInputs, fit: dict) -> Refs:
    """What the checks may name about a fitted curve: the fit, the observations it used, the
    files they came from, and the curve's own subjects (``curve:<boundary>[:<phase>][/<qty>]``)."""
    key = fit["boundary"] + (f":{fit['solid_phase']}" if fit["solid_phase"] else "")
    used = [r for r in inputs.fit_rows.get(fit["fit_id"], []) if r["role"] == "used"]
    subjects = {f"curve:{key}/{fit['quantity']}"}
    files: frozenset[tuple[str, str]] = frozenset()
    if fit["quantity"] == "pressure":
        subjects.add(f"curve:{key}")
        files = frozenset((inputs.raw_files[int(r["file_id"])]["path"], key) for r in used)
    return Refs(fit_ids=frozenset({fit["fit_id"]}),
                obs_ids=frozenset(o for r in used for o in r["obs_ids"]),
                subjects=frozenset(subjects), files=files)


def attributed(inputs: ReleaseInputs, entities: list[dict]) -> list[dict]:
    """``was_attributed_to``: the sources of the entities; used when any of its entities is."""
    used: dict[str, bool] = {}
    for e in entities:
        if e["source_id"]:
            used[e["source_id"]] = used.get(e["source_id"], False) or e["used"]
    out = []
    for sid in sorted(used):
        src = inputs.sources.get(sid, {})
        out.append({"source_id": sid, "kind": src.get("kind"), "citation": src.get("citation"),
                    "doi": src.get("doi") or None, "used": used[sid]})
    return out


@dataclass
class Record:
    """One provenance record before it becomes a release_provenance row."""

    value_id: str
    fluid_id: str
    value_kind: str
    method: str
    fit_id: str | None
    was_generated_by: str
    was_derived_from: list[dict] = field(default_factory=list)
    checks: list[dict] = field(default_factory=list)
    decision_ids: list[str] = field(default_factory=list)

    def row(self, inputs: ReleaseInputs, release_id: str) -> dict:
        return {"release_id": release_id, "value_id": self.value_id, "fluid_id": self.fluid_id,
                "value_kind": self.value_kind, "method": self.method, "fit_id": self.fit_id,
                "was_generated_by": self.was_generated_by,
                "was_attributed_to": attributed(inputs, self.was_derived_from),
                "was_derived_from": self.was_derived_from,
                "checks": check_entries(self.checks),
                "decision_ids": sorted(set(self.decision_ids))}
