"""What ``fluidledger decide`` records from the store before a decision is written.

A new decision must point at something now: the rows exist in the current file (and its
SHA-256 is recorded), the source states the constant, the check has a result whose input hash
is recorded. :func:`draft` completes an action's keys from the store and refuses a decision
that would be dangling the moment it is written.
"""

from __future__ import annotations

import math

from datetime import date
from typing import Any, Callable, Mapping

from pipeline.decisions.apply import (
    fluid_known,
    source_rule_dangling,
    latest_check_run,
    resolve_observations,
)
from pipeline.decisions.model import Decision
from pipeline.decisions.store import DecisionsError

_TRUE, _FALSE = ("true", "yes", "1", "on"), ("false", "no", "0", "off")


def _probe(kind: str, spec: Mapping[str, Any]) -> Decision:
    """A throw-away decision carrying ``spec``, to resolve it like a stored one."""
    return Decision.model_validate({"id": "new", "who": "-", "when": date.today(), "why": "-",
                                    kind: dict(spec)})


def _refuse(kind: str, message: str) -> DecisionsError:
    return DecisionsError(f"not recorded: {message}", key=kind)


def _exclude_observations(con, spec: dict) -> dict:
    if spec.get("file"):
        row = con.execute("SELECT sha256 FROM raw_file_current WHERE path = ? AND role = 'table'",
                          [spec["file"]]).fetchone()
        if row is None:
            known = [r[0] for r in con.execute(
                "SELECT path FROM raw_file_current WHERE role = 'table' AND source_id = ? "
                "ORDER BY path", [spec["source"]]).fetchall()]
            raise _refuse("exclude_observations", f"file {spec['file']} is not in the store "
                          f"(files of {spec['source']}: {', '.join(known) or 'none'})")
        spec.setdefault("file_sha256", row[0])
    resolved = resolve_observations(con, _probe("exclude_observations", spec))
    if resolved.dangling:
        raise _refuse("exclude_observations", resolved.dangling)
    return spec


def _source_rule(kind: str) -> Callable[[Any, dict], dict]:
    def complete(con, spec: dict) -> dict:
        dangling = source_rule_dangling(con, _probe(kind, spec))
        if dangling:
            raise _refuse(kind, dangling)
        return spec
    return complete


def _waive_check(con, spec: dict) -> dict:
    if not fluid_known(con, spec["fluid"]):
        raise _refuse("waive_check", f"fluid {spec['fluid']} is not in the store")
    if spec.get("until") is not None and spec.get("input_hash") is None:
        return spec  # a waiver by date only
    run_id = latest_check_run(con)
    rows = [] if run_id is None else con.execute(
        "SELECT subject, status, input_hash FROM check_result WHERE run_id = ? AND check_id = ? "
        "AND fluid_id = ? ORDER BY subject", [run_id, spec["check"], spec["fluid"]]).fetchall()
    if not rows:
        raise _refuse("waive_check", f"no result of {spec['check']} for {spec['fluid']} in the "
                      "latest check run; run 'fluidledger check' first, or give --until DATE")
    subject = spec.get("subject")
    if subject is not None:
        picked = [r for r in rows if r[0].split("#", 1)[0] == subject]
        if not picked:
            raise _refuse("waive_check", f"{spec['check']} has no subject {subject!r} for "
                          f"{spec['fluid']}; subjects: {', '.join(repr(r[0]) for r in rows)}")
        rows = picked
    if spec.get("input_hash") in (None, "current"):
        spec["input_hash"] = next((r[2] for r in rows if r[2]), None)
        if spec["input_hash"] is None:
            raise _refuse("waive_check", "the check results carry no input hash; give --until")
    return spec


def coerce_value(text: str, default: Any) -> Any:
    """A threshold value typed on the command line, given the type of the default."""
    if isinstance(default, bool):
        low = text.strip().lower()
        if low in _TRUE or low in _FALSE:
            return low in _TRUE
        raise DecisionsError(f"expected true or false, got {text!r}",
                             key="override_threshold.value")
    if isinstance(default, (int, float)):
        try:
            number = float(text)
        except ValueError:
            raise DecisionsError(f"expected a number, got {text!r}",
                                 key="override_threshold.value") from None
        if not math.isfinite(number):
            raise DecisionsError(f"expected a finite number, got {text!r} (NaN and infinity "
                                 "would make every comparison with the threshold false)",
                                 key="override_threshold.value")
        return int(number) if isinstance(default, int) and number.is_integer() else number
    return text


def _override_threshold(con, spec: dict) -> dict:
    from pipeline.checks.thresholds import Thresholds

    if not fluid_known(con, spec["fluid"]):
        raise _refuse("override_threshold", f"fluid {spec['fluid']} is not in the store")
    known = Thresholds.load().for_check(spec["check"])
    if spec["threshold"] in known and isinstance(spec["value"], str):
        spec["value"] = coerce_value(spec["value"], known[spec["threshold"]])
    return spec  # check id and threshold name are validated with the whole file


_COMPLETE: dict[str, Callable[[Any, dict], dict]] = {
    "exclude_observations": _exclude_observations,
    "exclude_source": _source_rule("exclude_source"),
    "prefer_source": _source_rule("prefer_source"),
    "waive_check": _waive_check,
    "override_threshold": _override_threshold,
}


def draft(con, kind: str, spec: Mapping[str, Any]) -> dict:
    """``spec`` completed from the store (file_sha256, input_hash, typed values), without
    None values; raises :class:`DecisionsError` when the decision would be dangling."""
    return _COMPLETE[kind](con, {k: v for k, v in spec.items() if v is not None})
