"""The record of a check run: its results as columns (:class:`ResultTable`), one
:class:`CheckResult` per row when asked for, and the :class:`CheckRun` around them.

The engine builds the table from each check's findings; the store takes its columns in one
insert, every row's evidence encoded to JSON once (:func:`evidence_json`: the C encoder, with
the slow walk of :func:`jsonable` only for evidence holding NaN); :class:`CheckResult` objects
are made only for the rows a caller reads. ``CheckRun.asdict()`` is the machine form
(validated against ``schemas/check-results.schema.json`` when written); ``CheckRun.asstr()``
the human summary.
"""

from __future__ import annotations

import json
import math
from collections import Counter
from dataclasses import dataclass, field, replace
from typing import Any, Iterable, Iterator, Mapping, Sequence

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


#: the fields of a result, in the order of :class:`CheckResult`
RESULT_FIELDS = ("check_id", "fluid_id", "subject", "status", "severity", "message", "measured",
                 "limit", "statistic", "evidence", "thresholds", "input_hash", "decision_id",
                 "duration_s")


def _plain(value: Any) -> Any:
    """What the JSON encoder cannot take as is: numpy scalars and arrays."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def _encoder():
    """The C encoder of ``json.dumps(..., sort_keys=True, allow_nan=False)``, made once (the
    pure-Python one where the C one is missing)."""
    try:
        from json.encoder import c_make_encoder, encode_basestring_ascii
    except ImportError:  # pragma: no cover (CPython has it)
        c_make_encoder = None
    if c_make_encoder is None:  # pragma: no cover
        return json.JSONEncoder(sort_keys=True, allow_nan=False, default=_plain).encode
    make = c_make_encoder(None, _plain, encode_basestring_ascii, None, ": ", ", ", True, False,
                          False)
    return lambda obj: "".join(make(obj, 0))


_ENCODE = _encoder()


def evidence_json(evidence: Any) -> str:
    """``json.dumps(jsonable(evidence), sort_keys=True)``, mostly without the walk.

    The C encoder takes the evidence as it is (numpy scalars through ``default``); evidence
    holding a non-finite number (which ``jsonable`` turns into null) or keys that are not
    strings falls back to the walk. Both give the same text.
    """
    try:
        return _ENCODE(evidence)
    except (ValueError, TypeError):
        return json.dumps(jsonable(evidence), sort_keys=True)


def _scalar(value: Any) -> Any:
    """A measured value or limit as stored: a float, None for None and non-finite numbers."""
    if type(value) is float:
        return value if math.isfinite(value) else None
    return None if value is None else jsonable(value)


class _StoredEvidence:
    """Evidence read back from the store as its JSON text, parsed when a row is first read."""

    __slots__ = ("text",)

    def __init__(self, text: str):
        self.text = text


class ResultTable:
    """Check results as columns: one list per field of :class:`CheckResult`, one row each.

    ``evidence`` holds each row's evidence as the check gave it (made JSON-safe only when a
    row is read or stored); ``thresholds`` the JSON-safe thresholds, one shared mapping per
    check and set of per-fluid overrides. Iterating (or :meth:`results`) gives
    :class:`CheckResult` objects, made for the rows read and kept.
    """

    def __init__(self, columns: Mapping[str, list] | None = None):
        self.columns = {f: list(columns[f]) if columns else [] for f in RESULT_FIELDS}
        n = len(self.columns["check_id"])
        self._objects: list[CheckResult | None] = [None] * n
        self._json: list[str | None] = [None] * n

    def __len__(self) -> int:
        return len(self._objects)

    def __repr__(self) -> str:
        return f"<ResultTable: {len(self)} results>"

    def __iter__(self) -> Iterator["CheckResult"]:
        return iter(self.results())

    def __getitem__(self, i: int) -> "CheckResult":
        return self.result(i)

    # -- building --------------------------------------------------------------------------------
    def add_rows(self, rows: Mapping[str, Sequence]) -> None:
        """Append rows given as columns (every field of :data:`RESULT_FIELDS`)."""
        n = len(rows["check_id"])
        for f in RESULT_FIELDS:
            col = rows[f]
            if len(col) != n:
                raise ValueError(f"column {f} has {len(col)} rows, check_id {n}")
            self.columns[f].extend(col)
        self._objects.extend([None] * n)
        self._json.extend([None] * n)

    def append(self, result: "CheckResult") -> None:
        for f in RESULT_FIELDS:
            self.columns[f].append(getattr(result, f))
        self._objects.append(result)
        self._json.append(None)

    def replace(self, i: int, result: "CheckResult") -> None:
        """Row ``i`` becomes ``result``."""
        for f in RESULT_FIELDS:
            self.columns[f][i] = getattr(result, f)
        self._objects[i] = result
        self._json[i] = None

    @classmethod
    def from_results(cls, results: Iterable["CheckResult"]) -> "ResultTable":
        table = cls()
        for r in results:
            table.append(r)
        return table

    @classmethod
    def from_stored(cls, columns: Mapping[str, list], evidence_json: list[str]) -> "ResultTable":
        """Rows read back from ``check_result`` (every field but ``evidence``, which comes as
        its stored JSON text): that text is kept for the store and parsed only when a row is
        read (a nightly run reuses most results unread)."""
        table = cls({**columns, "evidence": [_StoredEvidence(t) for t in evidence_json]})
        table._json = list(evidence_json)
        return table

    @classmethod
    def concat(cls, tables: Iterable["ResultTable"]) -> "ResultTable":
        out = cls()
        for t in tables:
            for f in RESULT_FIELDS:
                out.columns[f].extend(t.columns[f])
            out._objects.extend(t._objects)
            out._json.extend(t._json)
        return out

    # -- reading ---------------------------------------------------------------------------------
    def result(self, i: int) -> "CheckResult":
        """Row ``i`` as a :class:`CheckResult` (evidence and numbers JSON-safe)."""
        r = self._objects[i]
        if r is None:
            c = self.columns
            evidence = c["evidence"][i]
            evidence = json.loads(evidence.text) if type(evidence) is _StoredEvidence \
                else jsonable(evidence)
            r = self._objects[i] = CheckResult(
                c["check_id"][i], c["fluid_id"][i], c["subject"][i], c["status"][i],
                c["severity"][i], c["message"][i], c["measured"][i], c["limit"][i],
                c["statistic"][i], evidence, c["thresholds"][i],
                c["input_hash"][i], c["decision_id"][i], c["duration_s"][i])
        return r

    def results(self) -> list["CheckResult"]:
        """Every row as a :class:`CheckResult`."""
        return [self.result(i) for i in range(len(self))]

    def keys(self) -> list[tuple[str, str, str]]:
        """(check_id, fluid_id, subject) of every row."""
        c = self.columns
        return list(zip(c["check_id"], c["fluid_id"], c["subject"]))

    def evidence_json(self) -> list[str]:
        """Every row's evidence as sorted-key JSON (encoded once per row)."""
        out, evidence = self._json, self.columns["evidence"]
        for i, text in enumerate(out):
            if text is None:
                out[i] = evidence_json(evidence[i])
        return list(out)

    def thresholds_json(self) -> list[str]:
        """Every row's thresholds as sorted-key JSON (encoded once per distinct mapping)."""
        seen: dict[int, str] = {}
        out = []
        for th in self.columns["thresholds"]:
            text = seen.get(id(th))
            if text is None:
                text = seen[id(th)] = json.dumps(jsonable(th), sort_keys=True)
            out.append(text)
        return out


class CheckRun:
    """A whole check run: which checks over which fluids, every result, and the verdict.

    ``results`` may be given as a :class:`ResultTable` (the engine) or a list of
    :class:`CheckResult`; ``table`` is the columns, ``results`` the rows as objects.
    """

    def __init__(self, run_id: str, started_at: str, finished_at: str, pipeline_version: str,
                 parameters: dict[str, Any], checks: list[str], fluids: list[str],
                 results: "ResultTable | Iterable[CheckResult]", duration_s: float = 0.0):
        self.run_id, self.started_at, self.finished_at = run_id, started_at, finished_at
        self.pipeline_version, self.parameters = pipeline_version, parameters
        self.checks, self.fluids, self.duration_s = checks, fluids, duration_s
        self.table = results if isinstance(results, ResultTable) else ResultTable.from_results(results)

    def __repr__(self) -> str:
        return f"<CheckRun {self.run_id}: {len(self.table)} results>"

    @property
    def results(self) -> list[CheckResult]:
        return self.table.results()

    def counts(self) -> dict[str, int]:
        """Number of results per status (every status present, zeros included)."""
        c = Counter(self.table.columns["status"])
        return {s: c.get(s, 0) for s in STATUS_ORDER}

    def by_status(self, statuses: Iterable[str] = STATUS_ORDER) -> list[CheckResult]:
        """Results of the given statuses, in :data:`STATUS_ORDER`, then check, fluid, subject."""
        rank = {s: i for i, s in enumerate(STATUS_ORDER)}
        wanted = set(statuses)
        rows = [i for i, s in enumerate(self.table.columns["status"]) if s in wanted]
        results = [self.table.result(i) for i in rows]
        return sorted(results, key=lambda r: (rank[r.status], r.check_id, r.fluid_id, r.subject))

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
