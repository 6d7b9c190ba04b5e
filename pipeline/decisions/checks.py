"""Curation decisions in the checks: excluded data leave the check inputs too.

An exclusion takes its data out of what the checks read, as it does for the fits and the
recommended values:

- ``exclude_observations`` and ``exclude_source`` without a constant: the observations (the
  same ones :func:`~pipeline.decisions.apply.exclusions_for_fit` leaves out of the fits);
- ``exclude_source`` without a constant: also every fixed point and constant the source states
  for the fluid;
- ``exclude_source`` with a constant: that value only (a point constant such as Tc becomes
  "not stated" in the source's fixed-point row; a named constant is dropped).

The findings that rested on excluded data are not lost: :class:`ExclusionStep`, a check
post-processor, checks the fluids with exclusions a second time with every datum, and each
violation of that run which the run without the excluded data does not repeat is kept with
status ``excluded`` and the id of the decision whose data it names (its message says so), so a
failure that went away shows why. Dangling decisions exclude nothing (they are reported by
``fluidledger decisions`` and the report).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from pipeline.decisions.apply import (
    POINT_CONSTANTS,
    exclusions_for_fit,
    parse_point,
    source_rule_dangling,
)
from pipeline.decisions.model import Decision, DecisionSet

log = logging.getLogger(__name__)

_VIOLATIONS = ("warn", "fail")


@dataclass(frozen=True)
class CheckExclusions:
    """What the checks leave out, each item with the id of the decision behind it."""

    observations: Mapping[int, str] = field(default_factory=dict)        # obs_id -> decision
    sources: Mapping[tuple[str, str], str] = field(default_factory=dict)  # (fluid, source)
    #: (fluid, source, constant) -> (point or None, decision)
    constants: Mapping[tuple[str, str, str], tuple[str | None, str]] = field(default_factory=dict)
    why: Mapping[str, str] = field(default_factory=dict)                 # decision -> reason

    def __bool__(self) -> bool:
        return bool(self.observations or self.sources or self.constants)

    def source_decisions(self, fluid_id: str) -> dict[str, str]:
        """Excluded sources of a fluid (whole, or one of their constants) -> decision id."""
        out = {s: d for (f, s), d in self.sources.items() if f == fluid_id}
        for (f, s, _), (_, d) in self.constants.items():
            if f == fluid_id:
                out.setdefault(s, d)
        return out


def check_exclusions(con, decisions: DecisionSet | Sequence[Decision]) -> CheckExclusions:
    """The exclusions of ``decisions`` that resolve in the store, as the checks apply them."""
    observations = exclusions_for_fit(con, decisions)
    sources: dict[tuple[str, str], str] = {}
    constants: dict[tuple[str, str, str], tuple[str | None, str]] = {}
    for d in decisions:
        if d.kind != "exclude_source" or source_rule_dangling(con, d):
            continue   # dangling ones are logged by exclusions_for_fit / publish_decisions
        a = d.action
        if a.constant is None:
            sources.setdefault((a.fluid, a.source), d.id)
        else:
            constants.setdefault((a.fluid, a.source, a.constant), (a.point, d.id))
    why = {d.id: d.why for d in decisions}
    return CheckExclusions(observations, sources, constants, why)


def _without_constants(fixed, consts, fluid_id: str, excl: CheckExclusions):
    """Fixed points and constants of a fluid with the excluded stated values taken out."""
    whole = {s for (f, s) in excl.sources if f == fluid_id}
    fixed = fixed[~fixed["source_id"].isin(whole)] if whole else fixed
    consts = consts[~consts["source_id"].isin(whole)] if whole else consts
    for (f, source, constant), (point, _) in excl.constants.items():
        if f != fluid_id:
            continue
        if constant in POINT_CONSTANTS:
            kind, column = POINT_CONSTANTS[constant]
            want = parse_point(point)
            hit = (fixed["source_id"] == source) & (fixed["kind"] == kind)
            if want is not None:
                hit &= [parse_point(f"{kind}:{ph}") == want for ph in fixed["phases"]]
            if hit.any():
                fixed = fixed.copy()
                fixed.loc[hit, [column, "u_" + column]] = math.nan
        else:
            consts = consts[~((consts["source_id"] == source) & (consts["name"] == constant))]
    return fixed.reset_index(drop=True), consts.reset_index(drop=True)


def without_excluded(fluid, excl: CheckExclusions):
    """``fluid`` (a :class:`~pipeline.checks.data.FluidData`) without its excluded data; the
    same object when nothing of it is excluded."""
    from pipeline.checks.data import FluidData

    ids = fluid.observation_ids()
    hit = np.isin(ids, np.fromiter(excl.observations, dtype=np.int64, count=len(excl.observations)))
    if not hit.any() and not excl.source_decisions(fluid.fluid_id):
        return fluid     # nothing of this fluid is excluded: its tables are not even read
    obs = fluid.observations
    drop = obs["obs_id"].isin(list(excl.observations)).to_numpy() if len(obs) else np.zeros(0, bool)
    fixed, consts = _without_constants(fluid.fixed_points, fluid.constants, fluid.fluid_id, excl)
    if not drop.any() and len(fixed) == len(fluid.fixed_points) and \
            len(consts) == len(fluid.constants) and fixed.equals(fluid.fixed_points):
        return fluid
    kept = obs[~drop].reset_index(drop=True) if drop.any() else obs
    return FluidData(fluid.fluid_id, fluid.molar_mass, kept, fixed, consts, fluid.curves)


def split_fluids(fluids: Mapping[str, Any], excl: CheckExclusions
                 ) -> tuple[dict[str, Any], dict[str, Any]]:
    """(every fluid as the checks read it, the unchanged data of the fluids that lost some)."""
    kept, full = {}, {}
    for fid, fluid in fluids.items():
        kept[fid] = without_excluded(fluid, excl) if excl else fluid
        if kept[fid] is not fluid:
            full[fid] = fluid
    return kept, full


def _is_id(x) -> bool:
    return isinstance(x, (int, np.integer)) and not isinstance(x, bool)


def _strings_and_ids(value: Any, strings: set[str], ids: set[int]) -> None:
    """Every string and every observation id (``obs_id``, ``obs_ids``) found in ``value``."""
    if isinstance(value, Mapping):
        for k, v in value.items():
            if k == "obs_id" and _is_id(v):
                ids.add(int(v))
            elif k == "obs_ids" and isinstance(v, list):
                ids.update(int(x) for x in v if _is_id(x))
            else:
                _strings_and_ids(v, strings, ids)
    elif isinstance(value, (list, tuple)):
        for v in value:
            _strings_and_ids(v, strings, ids)
    elif isinstance(value, str):
        strings.add(value)


def decisions_behind(result, fluid, excl: CheckExclusions) -> list[str]:
    """Decisions whose excluded data a finding names: observation ids in its evidence, the
    raw file it is about (``file:<path>|...``), an excluded source it names; all decisions
    touching the fluid when it names none of them (the exclusion changed it indirectly)."""
    strings: set[str] = set()
    ids: set[int] = set()
    _strings_and_ids(result.evidence, strings, ids)
    found: list[str] = [excl.observations[i] for i in sorted(ids) if i in excl.observations]
    if result.subject.startswith("file:"):
        path = result.subject[len("file:"):].split("|", 1)[0]
        obs = fluid.observations
        in_file = obs["obs_id"][obs["file_path"] == path].tolist() if len(obs) else []
        found += [excl.observations[int(i)] for i in in_file if int(i) in excl.observations]
    sources = excl.source_decisions(fluid.fluid_id)
    found += [d for s, d in sources.items() if s in strings]
    if not found:
        obs_ids = set(fluid.observations["obs_id"].tolist()) if len(fluid.observations) else set()
        found = [d for i, d in excl.observations.items() if i in obs_ids]
        found += list(sources.values())
    return list(dict.fromkeys(found))


@dataclass
class ExclusionStep:
    """Check post-processor restoring, as ``excluded``, the violations that only the excluded
    data produce (see the module docstring).

    ``full`` holds the unchanged data of the fluids that lost some to exclusions (the second
    element of :func:`split_fluids`); ``thresholds`` are those of the run. After a call,
    ``applied`` maps decision id -> the (check, fluid, subject) keys it excluded.
    """

    exclusions: CheckExclusions
    full: Mapping[str, Any]
    thresholds: Any = None
    applied: dict[str, list[tuple[str, str, str]]] = field(default_factory=dict)

    def __call__(self, results, batch=None):
        """The results with the violations only the excluded data produce restored as
        ``excluded`` (a ResultTable; the rows of the other fluids are not touched)."""
        from pipeline.checks.engine import run_checks
        from pipeline.checks.results import ResultTable

        self.applied = {}
        table = results if isinstance(results, ResultTable) else ResultTable.from_results(results)
        fluids = [f for f in dict.fromkeys(table.columns["fluid_id"]) if f in self.full]
        if not fluids:
            return table
        checks = sorted(set(table.columns["check_id"]))
        full_run = run_checks({f: self.full[f] for f in fluids}, checks=checks,
                              thresholds=self.thresholds, postprocessors=())
        index = {key: i for i, key in enumerate(table.keys())}
        status = table.columns["status"]
        for j, (key, found) in enumerate(zip(full_run.table.keys(), full_run.table.columns["status"])):
            if found not in _VIOLATIONS:
                continue
            i = index.get(key)
            if i is not None and status[i] in (*_VIOLATIONS, "error"):
                continue   # found without the excluded data as well: it stands
            r = full_run.table.result(j)
            behind = decisions_behind(r, self.full[r.fluid_id], self.exclusions)
            if not behind:
                continue
            reasons = "; ".join(f"{d}: {self.exclusions.why.get(d, '')}".rstrip(": ")
                                for d in behind)
            note = (f"excluded by {reasons}; the checks without the excluded data do not "
                    "find it")
            kept_hash = batch.fluids[r.fluid_id].input_hash if batch is not None and \
                r.fluid_id in getattr(batch, "fluids", {}) else r.input_hash
            marked = replace(r.exclude(behind[0], note), input_hash=kept_hash)
            if i is None:
                index[key] = len(table)
                table.append(marked)
            else:
                table.replace(i, marked)
            self.applied.setdefault(behind[0], []).append(key)
        return table

    def notes(self) -> list[str]:
        """One line per decision whose exclusions took findings out of the run (for the CLI)."""
        return [f"decision {d}: {len(keys)} finding(s) rest on data it excluded, listed as "
                f"excluded ({', '.join(' '.join(x for x in k if x) for k in keys[:3])})"
                for d, keys in self.applied.items()]


def check_inputs(con, decisions, fluids: Mapping[str, Any], thresholds,
                 exclusions: CheckExclusions | None = None) -> tuple[dict[str, Any], list]:
    """The fluids as the checks read them and the post-processing steps, in order: the
    exclusion step (when anything is excluded), then the waiver step.

    ``exclusions`` may be given when computed once for many calls (:func:`check_exclusions`).
    """
    from pipeline.decisions.apply import WaiverStep

    excl = exclusions if exclusions is not None else check_exclusions(con, decisions)
    kept, full = split_fluids(fluids, excl)
    steps: list = [ExclusionStep(excl, full, thresholds)] if full else []
    return kept, steps + [WaiverStep(decisions)]


def all_notes(steps: Iterable) -> list[str]:
    """The CLI notes of every step that has them."""
    return [line for s in steps if hasattr(s, "notes") for line in s.notes()]
