"""The check registry: a check is a small function registered with :func:`register_check`.

Two shapes of check function exist:

- vectorised (``vectorised=True``, every built-in check): ``fn(batch: CheckBatch,
  th: ThresholdView) -> Findings``, called once with all selected fluids; it reads what it
  needs for all of them at once (stacked observations, curve points through
  :meth:`CheckBatch.prefetch`) and returns its findings as columns
  (:class:`~pipeline.checks.findings.Findings`; an iterable of Finding is accepted too). The
  engine re-runs it fluid by fluid only when it raises, to isolate the fluid at fault;
- per fluid (``vectorised=False``): ``fn(fluid: FluidData, th: Mapping) -> Iterable[Finding]``,
  called once per fluid with that fluid's thresholds.

The decorator returns a vectorised function wrapped so that it may also be called with one
:class:`~pipeline.checks.data.FluidData` (or a mapping or sequence of them) and a plain mapping
of thresholds, as the tests call it; the registry keeps the function itself.

The function's docstring is the check's explanation (physics, equation, usual causes of a
failure, references); ``fluidledger explain`` prints it.
"""

from __future__ import annotations

import functools
import importlib
import inspect
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Mapping

import numpy as np

from pipeline.errors import CheckError
from pipeline.checks.findings import SEVERITIES

#: Topic modules holding the built-in checks (imported on first use of the registry).
CHECK_MODULES = (
    "triple_point", "clapeyron", "critical", "metastable", "phase_rule", "data_level",
    "unit_mixup", "sources", "acentric", "fit_quality",
)

_REGISTRY: dict[str, "CheckSpec"] = {}
_loaded = False


@dataclass(frozen=True)
class CheckSpec:
    """A registered check: its id, purpose, tags, default severity and function."""

    id: str
    purpose: str
    tags: tuple[str, ...]
    severity: str
    function: Callable
    vectorised: bool

    @property
    def explain(self) -> str:
        """Physics, equation, usual causes of a failure (the function's docstring)."""
        return inspect.getdoc(self.function) or ""

    def __repr__(self) -> str:
        return f"<Check {self.id} [{self.severity}; {', '.join(self.tags)}]: {self.purpose}>"


class FixedThresholds:
    """A plain mapping of thresholds used as a :class:`~pipeline.checks.thresholds.ThresholdView`
    (the same values for every fluid): for calling a vectorised check directly."""

    def __init__(self, values: Mapping[str, Any]):
        self.values = dict(values)

    def __call__(self, fluid_id: str | None = None) -> dict[str, Any]:
        return self.values

    def __getitem__(self, key: str) -> Any:
        return self.values[key]

    def array(self, key: str, fluid_ids: Iterable[str]) -> np.ndarray:
        return np.full(len(list(fluid_ids)), self.values[key], dtype=float)


def as_batch(data: Any):
    """A :class:`~pipeline.checks.data.CheckBatch` of ``data``: a batch, one FluidData, or a
    mapping or sequence of them."""
    from pipeline.checks.data import CheckBatch, FluidData

    if isinstance(data, CheckBatch):
        return data
    if isinstance(data, FluidData):
        return CheckBatch({data.fluid_id: data})
    if isinstance(data, Mapping):
        return CheckBatch(dict(data))
    return CheckBatch({f.fluid_id: f for f in data})


def _accepting_one_fluid(fn: Callable) -> Callable:
    """``fn(batch, view)`` callable with one fluid and a mapping of thresholds as well."""
    @functools.wraps(fn)
    def call(data, th):
        return fn(as_batch(data), th if callable(th) else FixedThresholds(th))

    call.check_function = fn
    return call


def register_check(check_id: str, *, purpose: str, tags: Iterable[str], severity: str = "fail",
                   vectorised: bool = False) -> Callable[[Callable], Callable]:
    """Decorator registering ``fn`` as check ``check_id``.

    Returns ``fn`` unchanged for a per-fluid check; a vectorised check is returned wrapped so
    that it also takes one fluid and a plain mapping of thresholds (the registry keeps ``fn``).
    """
    if severity not in SEVERITIES:
        raise ValueError(f"check {check_id}: severity {severity!r} is not one of {SEVERITIES}")

    def decorate(fn: Callable) -> Callable:
        if check_id in _REGISTRY and _REGISTRY[check_id].function is not fn:
            raise ValueError(f"check id {check_id} is registered twice")
        if not inspect.getdoc(fn):
            raise ValueError(f"check {check_id}: the function needs a docstring (its explanation)")
        _REGISTRY[check_id] = CheckSpec(check_id, purpose, tuple(tags), severity, fn, vectorised)
        return _accepting_one_fluid(fn) if vectorised else fn

    return decorate


def _load_builtin() -> None:
    global _loaded
    if not _loaded:
        for name in CHECK_MODULES:
            importlib.import_module(f"pipeline.checks.{name}")
        _loaded = True


def _rank(spec: CheckSpec) -> int:
    module = spec.function.__module__.rsplit(".", 1)[-1]
    return CHECK_MODULES.index(module) if module in CHECK_MODULES else len(CHECK_MODULES)


def all_checks() -> dict[str, CheckSpec]:
    """Every registered check by id: catalogue (module) order, then definition order."""
    _load_builtin()
    order = {cid: i for i, cid in enumerate(_REGISTRY)}
    ranked = sorted(_REGISTRY.values(), key=lambda s: (_rank(s), order[s.id]))
    return {spec.id: spec for spec in ranked}


def all_tags() -> list[str]:
    """Every tag used by a registered check, sorted."""
    return sorted({t for spec in all_checks().values() for t in spec.tags})


def get_check(check_id: str) -> CheckSpec:
    """The check ``check_id``; :class:`CheckError` listing the valid ids if unknown."""
    checks = all_checks()
    if check_id not in checks:
        raise CheckError(f"unknown check id {check_id!r}; valid ids: {', '.join(checks)}")
    return checks[check_id]


def select_checks(ids: Iterable[str] | None = None,
                  tags: Iterable[str] | None = None) -> list[CheckSpec]:
    """Checks named in ``ids`` or carrying any of ``tags``; all checks when both are empty."""
    ids, tags = list(ids or []), list(tags or [])
    checks = all_checks()
    for check_id in ids:
        get_check(check_id)
    unknown = [t for t in tags if t not in all_tags()]
    if unknown:
        raise CheckError(f"unknown tag(s) {', '.join(unknown)}; valid tags: {', '.join(all_tags())}")
    if not ids and not tags:
        return list(checks.values())
    return [spec for spec in checks.values()
            if spec.id in ids or any(t in spec.tags for t in tags)]
