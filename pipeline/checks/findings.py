"""What a check says: :class:`Finding` records and the helpers that build them.

A check function returns findings; the engine turns each into a stored result. A finding's
``status`` is one of :data:`FINDING_STATUSES`:

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
from typing import Any, Mapping


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


def judge(fluid_id: str, subject: str, *, measured: float, limit: float, statistic: str,
          context: str, evidence: Mapping[str, Any] | None = None, upper: bool = True,
          ok: bool | None = None) -> Finding:
    """A pass or violated finding from a statistic and its limit.

    ``upper=True``: the statistic must not exceed ``limit``; ``upper=False``: it must reach it.
    ``ok`` overrides the comparison when the rule is not a plain bound (the message still shows
    the statistic). A NaN statistic gives a skip naming the context.
    """
    if measured is None or not math.isfinite(measured):
        return skipped(fluid_id, subject, f"{context}: {statistic} could not be evaluated",
                       evidence)
    if ok is None:
        ok = measured <= limit if upper else measured >= limit
    message = f"{context}: {comparison(statistic, measured, limit, ok, upper=upper)}"
    return Finding(fluid_id, subject, PASS if ok else VIOLATED, message, float(measured),
                   float(limit), statistic, dict(evidence or {}))


def skipped(fluid_id: str, subject: str, reason: str,
            evidence: Mapping[str, Any] | None = None) -> Finding:
    """A finding saying the check could not be applied, and why."""
    return Finding(fluid_id, subject, SKIP, reason, evidence=dict(evidence or {}))
