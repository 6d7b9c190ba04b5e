"""What a check says: findings, as columns (:class:`Findings`) or one by one (:class:`Finding`).

A check function returns its findings as columns (:class:`Findings`: one list per field, one
entry per finding; a list of :class:`Finding` objects is accepted too); the engine turns them
into stored results. A finding's ``status`` is one of :data:`FINDING_STATUSES`:

- ``pass`` — the rule holds;
- ``violated`` — the rule is broken; the engine records the check's severity (``warn`` or
  ``fail``, from configuration) as the result status;
- ``warn`` — an advisory that is never more than a warning, whatever the severity;
- ``skip`` — the check could not be applied (the message says why);
- ``error`` — set by the engine only, when the check raised.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import Enum
from typing import Any, Iterable, Iterator, Mapping


class Status(str, Enum):
    """Status of a stored check result."""

    PASS = "pass"
    WARN = "warn"
    FAIL = "fail"
    SKIP = "skip"
    ERROR = "error"
    WAIVED = "waived"
    EXCLUDED = "excluded"


PASS, VIOLATED, WARN, SKIP, ERROR = "pass", "violated", "warn", "skip", "error"
FINDING_STATUSES = (PASS, VIOLATED, WARN, SKIP, ERROR)
SEVERITIES = ("warn", "fail")


@dataclass(frozen=True)
class Finding:
    """One statement of a check about one fluid and subject (e.g. a triple point or a file)."""

    fluid_id: str
    subject: str
    status: str
    message: str
    measured: float | None = None
    limit: float | None = None
    statistic: str | None = None
    evidence: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        if self.status not in FINDING_STATUSES:
            raise ValueError(f"finding status {self.status!r} is not one of {FINDING_STATUSES}")

    def __repr__(self) -> str:
        return f"<Finding {self.status} {self.fluid_id} {self.subject!r}: {self.message}>"


def num(x: float | None, digits: int = 3) -> str:
    """Format a number for a message: ``digits`` significant figures, 'n/a' for None or NaN."""
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "n/a"
    return f"{x:.{digits}g}"


def comparison(statistic: str, measured: float, limit: float, ok: bool, *,
               upper: bool = True) -> str:
    """The rule as read by a person, e.g. ``|z| = 4.2 > 3`` or ``ratio = 1.13 >= 1``."""
    if upper:
        op = "<=" if ok else ">"
    else:
        op = ">=" if ok else "<"
    return f"{statistic} = {num(measured)} {op} {num(limit)}"


def _judged(fluid_id: str, subject: str, measured: float | None, limit: float, statistic: str,
            context: str, evidence: Mapping[str, Any] | None, upper: bool, ok: bool | None) -> tuple:
    """The fields of a judged finding (see :func:`judge`)."""
    if measured is None or not math.isfinite(measured):
        return (fluid_id, subject, SKIP, f"{context}: {statistic} could not be evaluated", None,
                None, None, dict(evidence or {}))
    if ok is None:
        ok = measured <= limit if upper else measured >= limit
    message = f"{context}: {comparison(statistic, measured, limit, ok, upper=upper)}"
    return (fluid_id, subject, PASS if ok else VIOLATED, message, float(measured), float(limit),
            statistic, dict(evidence or {}))


def judge(fluid_id: str, subject: str, *, measured: float, limit: float, statistic: str,
          context: str, evidence: Mapping[str, Any] | None = None, upper: bool = True,
          ok: bool | None = None) -> Finding:
    """A pass or violated finding from a statistic and its limit.

    ``upper=True``: the statistic must not exceed ``limit``; ``upper=False``: it must reach it.
    ``ok`` overrides the comparison when the rule is not a plain bound (the message still shows
    the statistic). A NaN statistic gives a skip naming the context.
    """
    return Finding(*_judged(fluid_id, subject, measured, limit, statistic, context, evidence,
                            upper, ok))


def skipped(fluid_id: str, subject: str, reason: str,
            evidence: Mapping[str, Any] | None = None) -> Finding:
    """A finding saying the check could not be applied, and why."""
    return Finding(fluid_id, subject, SKIP, reason, evidence=dict(evidence or {}))


class Findings:
    """A check's findings as columns: one list per :class:`Finding` field, one entry per finding.

    Build it with :meth:`judge`, :meth:`skip` and :meth:`add` (or :meth:`append` a
    :class:`Finding`); the engine reads the columns. Iterating (or indexing) gives
    :class:`Finding` objects, for tests and callers that want them.
    """

    FIELDS = ("fluid_id", "subject", "status", "message", "measured", "limit", "statistic",
              "evidence")
    __slots__ = FIELDS

    def __init__(self) -> None:
        for name in self.FIELDS:
            setattr(self, name, [])

    def __len__(self) -> int:
        return len(self.fluid_id)

    def __repr__(self) -> str:
        return f"<Findings: {len(self)}>"

    def __getitem__(self, i: int) -> Finding:
        return Finding(*(getattr(self, name)[i] for name in self.FIELDS))

    def __iter__(self) -> Iterator[Finding]:
        return (self[i] for i in range(len(self)))

    def add(self, fluid_id: str, subject: str, status: str, message: str,
            measured: float | None = None, limit: float | None = None,
            statistic: str | None = None, evidence: Mapping[str, Any] | None = None) -> None:
        """One finding, field by field (``evidence`` kept as given, {} for None)."""
        if status not in FINDING_STATUSES:
            raise ValueError(f"finding status {status!r} is not one of {FINDING_STATUSES}")
        self.fluid_id.append(fluid_id)
        self.subject.append(subject)
        self.status.append(status)
        self.message.append(message)
        self.measured.append(measured)
        self.limit.append(limit)
        self.statistic.append(statistic)
        self.evidence.append({} if evidence is None else evidence)

    def append(self, finding: Finding) -> None:
        if not isinstance(finding, Finding):
            raise TypeError(f"check returned {type(finding).__name__}, not a Finding")
        self.add(finding.fluid_id, finding.subject, finding.status, finding.message,
                 finding.measured, finding.limit, finding.statistic, finding.evidence)

    def extend(self, findings: "Findings | Iterable[Finding]") -> None:
        if isinstance(findings, Findings):
            for name in self.FIELDS:
                getattr(self, name).extend(getattr(findings, name))
        else:
            for f in findings:
                self.append(f)

    def judge(self, fluid_id: str, subject: str, *, measured: float, limit: float,
              statistic: str, context: str, evidence: Mapping[str, Any] | None = None,
              upper: bool = True, ok: bool | None = None) -> None:
        """A judged finding (see :func:`judge`)."""
        self.add(*_judged(fluid_id, subject, measured, limit, statistic, context, evidence,
                          upper, ok))

    def skip(self, fluid_id: str, subject: str, reason: str,
             evidence: Mapping[str, Any] | None = None) -> None:
        """A finding saying the check could not be applied, and why (see :func:`skipped`)."""
        self.add(fluid_id, subject, SKIP, reason, evidence=dict(evidence or {}))
