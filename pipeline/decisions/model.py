"""Curation decisions as frozen pydantic models (parsed after JSON Schema validation).

One :class:`Decision` carries who, when and why, and exactly one action: one of the
``*Action`` models below, named by the TOML key it is written under (``ACTIONS``).
"""

from __future__ import annotations

from datetime import date
from typing import Union

from pydantic import BaseModel, ConfigDict

#: TOML key of each action, in the order the documentation and listings use.
ACTIONS = ("exclude_observations", "exclude_source", "prefer_source", "waive_check",
           "override_threshold")


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid", allow_inf_nan=False)


class ExcludeObservations(_Frozen):
    """Observations left out of fits: file rows (``file`` + ``rows``) or a filter."""

    source: str
    file: str | None = None
    rows: tuple[int, ...] = ()
    file_sha256: str | None = None
    fluid: str | None = None
    boundary: str | None = None
    solid_phase: str | None = None
    T_min_K: float | None = None
    T_max_K: float | None = None
    quantity: str | None = None

    @property
    def by_rows(self) -> bool:
        return self.file is not None

    def describe(self) -> str:
        what = f" {self.quantity}" if self.quantity else ""
        if self.by_rows:
            rows = ", ".join(map(str, self.rows))
            return f"exclude{what} rows {rows} of {self.file} ({self.source})"
        lo = f"{self.T_min_K:g} K" if self.T_min_K is not None else "-inf"
        hi = f"{self.T_max_K:g} K" if self.T_max_K is not None else "+inf"
        phase = f"/{self.solid_phase}" if self.solid_phase else ""
        return (f"exclude{what} observations of {self.source} for {self.fluid} "
                f"{self.boundary}{phase}, T in [{lo}, {hi}]")


class ExcludeSource(_Frozen):
    """A source left out for a fluid, or only for one constant (and fixed point) of it."""

    fluid: str
    source: str
    constant: str | None = None
    point: str | None = None

    def describe(self) -> str:
        scope = f" for {_constant(self.constant, self.point)}" if self.constant else " (all data)"
        return f"exclude source {self.source} for {self.fluid}{scope}"


class PreferSource(_Frozen):
    """The value a source states is the recommended value of a constant."""

    fluid: str
    constant: str
    source: str
    point: str | None = None

    def describe(self) -> str:
        return (f"prefer {self.source} for {self.fluid} "
                f"{_constant(self.constant, self.point)}")


class WaiveCheck(_Frozen):
    """Findings of a check reported as ``waived`` until a date or until its inputs change."""

    check: str
    fluid: str
    subject: str | None = None
    until: date | None = None
    input_hash: str | None = None

    def matches(self, check_id: str, fluid_id: str, subject: str) -> bool:
        """True for a result of this check and fluid whose subject is the one waived (any
        subject when none is named; ``subject#2`` counts as ``subject``)."""
        if check_id != self.check or fluid_id != self.fluid:
            return False
        return self.subject is None or subject.split("#", 1)[0] == self.subject

    def describe(self) -> str:
        subject = f" subject {self.subject!r}" if self.subject else ""
        terms = []
        if self.until:
            terms.append(f"until {self.until.isoformat()}")
        if self.input_hash:
            terms.append(f"while inputs are {self.input_hash[:12]}")
        return f"waive {self.check} for {self.fluid}{subject} ({', '.join(terms)})"


class OverrideThreshold(_Frozen):
    """One named threshold of a check set for one fluid."""

    check: str
    fluid: str
    threshold: str
    value: Union[bool, float, int, str]

    def describe(self) -> str:
        return f"set {self.check} {self.threshold} = {self.value!r} for {self.fluid}"


Action = Union[ExcludeObservations, ExcludeSource, PreferSource, WaiveCheck, OverrideThreshold]


class Decision(_Frozen):
    """A curation decision: who took it, when, why, and what it does."""

    id: str
    who: str
    when: date
    why: str
    exclude_observations: ExcludeObservations | None = None
    exclude_source: ExcludeSource | None = None
    prefer_source: PreferSource | None = None
    waive_check: WaiveCheck | None = None
    override_threshold: OverrideThreshold | None = None

    @property
    def kind(self) -> str:
        """TOML key of the action (``exclude_observations``, ...)."""
        return next(a for a in ACTIONS if getattr(self, a) is not None)

    @property
    def action(self) -> Action:
        return getattr(self, self.kind)

    @property
    def fluid(self) -> str | None:
        """Fluid the decision is about (None for a row reference, known from the store)."""
        return getattr(self.action, "fluid", None)

    def describe(self) -> str:
        return self.action.describe()

    def __repr__(self) -> str:
        return f"<Decision {self.id} by {self.who} on {self.when}: {self.describe()}>"


class DecisionSet(_Frozen):
    """The decisions of one file, in file order, with the file they came from."""

    path: str
    decisions: tuple[Decision, ...] = ()

    def __iter__(self):
        return iter(self.decisions)

    def __len__(self) -> int:
        return len(self.decisions)

    def of_kind(self, kind: str) -> list[Decision]:
        return [d for d in self.decisions if d.kind == kind]

    def get(self, decision_id: str) -> Decision | None:
        return next((d for d in self.decisions if d.id == decision_id), None)

    @property
    def ids(self) -> list[str]:
        return [d.id for d in self.decisions]


def _constant(constant: str | None, point: str | None) -> str:
    return f"{point}/{constant}" if point else str(constant)
