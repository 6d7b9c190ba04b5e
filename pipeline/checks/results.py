"""The record of a check run: :class:`CheckResult` rows and the :class:`CheckRun` around them.

``CheckRun.asdict()`` is the machine form (validated against
``schemas/check-results.schema.json`` when written); ``CheckRun.asstr()`` the human summary.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Mapping

import numpy as np

from pipeline.errors import EXIT_CHECK_FAILED, EXIT_INTERNAL, EXIT_OK
from pipeline.checks.findings import Status

#: Order in which people read results: what needs action first.
STATUS_ORDER = ("fail", "error", "warn", "waived", "excluded", "skip", "pass")


def jsonable(value: Any) -> Any:
    """``value`` with numpy scalars, tuples and non-finite floats made JSON-safe (NaN -> None)."""
    kind = type(value)
    if kind is str or kind is int or value is None or kind is bool:
        return value
    if kind is float:
        return value if math.isfinite(value) else None
    if kind is dict:
        return {str(k): jsonable(v) for k, v in value.items()}
    if kind is list:
        return [jsonable(v) for v in value]
    if isinstance(value, Mapping):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [jsonable(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer, int)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        return float(value) if math.isfinite(value) else None
    return value


@dataclass(frozen=True)
class CheckResult:
    """One stored finding: what a check found for one fluid and subject, with bookkeeping."""

    check_id: str
    fluid_id: str
    subject: str
    status: str
    severity: str
    message: str
    measured: float | None = None
    limit: float | None = None
    statistic: str | None = None
    evidence: Mapping[str, Any] = field(default_factory=dict)
    thresholds: Mapping[str, Any] = field(default_factory=dict)
    input_hash: str | None = None
    decision_id: str | None = None
    duration_s: float | None = None

    def waive(self, decision_id: str, reason: str = "") -> "CheckResult":
        """This result waived by a curation decision (status ``waived``, message kept; the status
        it had is kept in the evidence as ``waived_status``)."""
        note = f" [waived by {decision_id}{': ' + reason if reason else ''}]"
        return replace(self, status=Status.WAIVED.value, decision_id=decision_id,
                       message=self.message + note,
                       evidence={**(self.evidence or {}), "waived_status": self.status})

    def exclude(self, decision_id: str, note: str) -> "CheckResult":
        """This violation marked ``excluded``: it rests on data a curation decision excluded
        (the run without those data does not find it); message kept, ``note`` appended."""
        return replace(self, status=Status.EXCLUDED.value, decision_id=decision_id,
                       message=f"{self.message} [{note}]")

    def asdict(self) -> dict[str, Any]:
        return {"check_id": self.check_id, "fluid_id": self.fluid_id, "subject": self.subject,
                "status": self.status, "severity": self.severity, "message": self.message,
                "measured": jsonable(self.measured), "limit": jsonable(self.limit),
                "statistic": self.statistic, "evidence": jsonable(self.evidence),
                "thresholds": jsonable(self.thresholds), "input_hash": self.input_hash,
                "decision_id": self.decision_id, "duration_s": self.duration_s}


@dataclass
class CheckRun:
    """A whole check run: which checks over which fluids, every result, and the verdict."""

    run_id: str
    started_at: str
    finished_at: str
    pipeline_version: str
    parameters: dict[str, Any]
    checks: list[str]
    fluids: list[str]
    results: list[CheckResult]
    duration_s: float = 0.0

    def counts(self) -> dict[str, int]:
        """Number of results per status (every status present, zeros included)."""
        c = Counter(r.status for r in self.results)
        return {s: c.get(s, 0) for s in STATUS_ORDER}

    def by_status(self, statuses: Iterable[str] = STATUS_ORDER) -> list[CheckResult]:
        """Results of the given statuses, in :data:`STATUS_ORDER`, then check, fluid, subject."""
        rank = {s: i for i, s in enumerate(STATUS_ORDER)}
        wanted = set(statuses)
        return sorted((r for r in self.results if r.status in wanted),
                      key=lambda r: (rank[r.status], r.check_id, r.fluid_id, r.subject))

    def exit_code(self, fail_on: str = "fail") -> int:
        """0 all pass (warnings allowed unless ``fail_on='warn'``), 1 any fail, 3 any error."""
        counts = self.counts()
        if counts["error"]:
            return EXIT_INTERNAL
        if counts["fail"] or (fail_on == "warn" and counts["warn"]):
            return EXIT_CHECK_FAILED
        return EXIT_OK

    @property
    def status(self) -> str:
        """Run status for the ``run`` table: error | failed | ok."""
        counts = self.counts()
        return "error" if counts["error"] else "failed" if counts["fail"] else "ok"

    def summary(self) -> dict[str, Any]:
        return {"run_id": self.run_id, "status": self.status, "counts": self.counts(),
                "checks": len(self.checks), "fluids": len(self.fluids),
                "duration_s": self.duration_s}

    def asdict(self) -> dict[str, Any]:
        return {"run": {"run_id": self.run_id, "kind": "check", "started_at": self.started_at,
                        "finished_at": self.finished_at, "duration_s": self.duration_s,
                        "pipeline_version": self.pipeline_version,
                        "parameters": jsonable(self.parameters), "status": self.status,
                        "checks": list(self.checks), "fluids": list(self.fluids),
                        "counts": self.counts()},
                "results": [r.asdict() for r in self.by_status()]}

    def asstr(self) -> str:
        counts = self.counts()
        parts = ", ".join(f"{counts[s]} {s}" for s in STATUS_ORDER if counts[s])
        return (f"check run {self.run_id}: {len(self.checks)} checks over {len(self.fluids)} "
                f"fluids in {self.duration_s:.2f} s: {parts or 'no results'}")
