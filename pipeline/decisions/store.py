"""Reading the decisions file: TOML, JSON Schema, then the checks the schema cannot express.

Recipe: (1) parse the TOML (a syntax error names the line); (2) turn dates into ISO strings
and validate against ``schemas/decisions.schema.json``, collecting every violation; (3) check
what needs the code: unique ids, one action per decision, known check ids and threshold names
with values of the right type, a temperature range that is a range; (4) parse into pydantic
models. Every problem names the decision (its id, or its position when it has none) and the
key, e.g. ``raw/decisions.toml: decision 'D-0003', key 'waive_check.until': ...``.

Nothing here reads the store: whether a reference still points at something is
:mod:`pipeline.decisions.apply`'s business (a *dangling* decision is reported, not an error).
"""

from __future__ import annotations

from datetime import date, datetime
from pathlib import Path
from typing import Any, Mapping

import jsonschema

from pipeline.decisions.model import ACTIONS, Decision, DecisionSet
from pipeline.errors import ConfigError
from pipeline.ingest.contract import Validator, key_path, load_schema, schema_message
from pipeline.ingest.rawread import MAX_TOML_BYTES, parse_toml, read_regular

SCHEMA_NAME = "decisions.schema.json"
DEFAULT_PATH = Path("raw") / "decisions.toml"
FORMAT_VERSION = 1


class DecisionsError(ConfigError):
    """The decisions file is malformed; names the decision and the key at fault (exit 2)."""

    def __init__(self, message: str, *, file: str | None = None, decision: str | None = None,
                 key: str | None = None):
        self.decision = decision
        super().__init__(message, file=file, key=key)

    def _compose(self) -> str:
        where = [str(self.file)] if self.file else []
        if self.decision:
            where.append(f"decision {self.decision!r}")
        if self.key:
            where.append(f"key '{self.key}'")
        return (", ".join(where) + ": " if where else "") + self.detail


# -- the public entry points -------------------------------------------------------------------
def resolve_path(path: str | Path | None) -> Path:
    """The decisions file in use: ``path`` when given, else ``raw/decisions.toml``."""
    return Path(path) if path else DEFAULT_PATH


def load_decisions(path: str | Path | None = None) -> DecisionSet:
    """Read and validate the decisions file.

    Parameters
    ----------
    path : str or Path, optional
        The file. When None, ``raw/decisions.toml``; a missing default file means no decisions,
        a missing file that was named is an error.

    Raises
    ------
    DecisionsError
        On a TOML syntax error or any violation, naming the decision and key.
    """
    target = resolve_path(path)
    if path is None and not target.exists():
        return DecisionSet(path=str(target))
    return parse_document(read_document(target), str(target))


def add_decisions_argument(parser) -> None:
    """The ``--decisions PATH`` option every stage command that honours decisions shares."""
    parser.add_argument("--decisions", metavar="PATH", default=None,
                        help=f"curation decisions file (default: {DEFAULT_PATH}; none when absent)")


def read_document(path: Path) -> dict:
    """The parsed TOML of ``path``; a syntax error names the file and the line. Only a regular
    file is read, within the size and nesting bounds of :mod:`pipeline.ingest.rawread`."""
    data = read_regular(path, str(path), limit=MAX_TOML_BYTES, error=_read_error)
    return parse_toml(data, str(path), _read_error)


def _read_error(message: str, *, file: str | None = None) -> DecisionsError:
    """How :mod:`pipeline.ingest.rawread` reports a problem of the decisions file."""
    if message == "file not found":
        message = "decisions file not found"
    return DecisionsError(message, file=file)


def parse_document(document: Mapping[str, Any], label: str) -> DecisionSet:
    """Validate a parsed decisions document and build the models (see the module recipe)."""
    plain = _plain(document)
    problems = problems_in(plain)
    if problems:
        first, rest = problems[0], problems[1:]
        more = ""
        if rest:
            more = f" (and {len(rest)} more: " + "; ".join(
                f"{_where(d, k)}: {m}" for d, k, m in rest[:4]) + ")"
        raise DecisionsError(first[2] + more, file=label, decision=first[0], key=first[1])
    return DecisionSet(path=label, decisions=tuple(
        Decision.model_validate(entry) for entry in plain.get("decision", [])))


def problems_in(plain: Mapping[str, Any]) -> list[tuple[str | None, str | None, str]]:
    """Every problem of a plain (JSON-like) document as (decision, key, message), in order."""
    entries = plain.get("decision", [])
    names = _names(entries)
    found = _schema_problems(plain, names) + _action_problems(entries, names)
    if not found:
        found = _semantic_problems(entries, names)
    order = {n: i for i, n in enumerate(names)}
    return sorted(dict.fromkeys(found),
                  key=lambda p: (order.get(p[0], -1), p[1] is None, p[1] or "", p[2]))


# -- step 2: JSON Schema -----------------------------------------------------------------------
def _plain(value: Any) -> Any:
    """Dates as ISO strings (datetimes keep their time, so the schema rejects them)."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    if isinstance(value, (date, datetime)):
        return value.isoformat()
    return value


def _names(entries: Any) -> list[str]:
    """How each decision is named in messages: its id, or ``#n`` (1-based) without one."""
    if not isinstance(entries, list):
        return []
    return [e["id"] if isinstance(e, Mapping) and isinstance(e.get("id"), str) and e["id"]
            else f"#{i + 1}" for i, e in enumerate(entries)]


_FRIENDLY = {
    ("waive_check", "anyOf"): "give 'until' (a date) or 'input_hash' (or both): a waiver must "
                              "be able to lapse",
}


def _schema_problems(plain, names: list[str]) -> list[tuple[str | None, str | None, str]]:
    validator = Validator(load_schema(SCHEMA_NAME),
                          format_checker=jsonschema.Draft202012Validator.FORMAT_CHECKER)
    out = []
    for err in validator.iter_errors(plain):
        path = list(err.absolute_path)
        if err.validator == "oneOf":
            continue  # one action per decision, and the two reference forms: _action_problems
        decision, rel = None, path
        if len(path) >= 2 and path[0] == "decision" and isinstance(path[1], int):
            decision, rel = names[path[1]] if path[1] < len(names) else f"#{path[1] + 1}", path[2:]
        key = key_path(rel) if rel else None
        message = schema_message(err)
        if err.validator == "required":
            missing = [p for p in err.validator_value if p not in err.instance]
            key = ".".join(filter(None, [key, missing[0]])) if missing else key
            message = "required key is missing"
        elif err.validator == "additionalProperties":
            allowed = set(err.schema.get("properties", {}))
            extra = sorted(set(err.instance) - allowed)
            key = ".".join(filter(None, [key, extra[0]])) if extra else key
            message = f"unknown key; valid keys: {', '.join(sorted(allowed))}"
        elif err.validator == "pattern" and rel and rel[-1] in ("why", "who"):
            message = "must not be empty"
        elif rel and (rel[0], err.validator) in _FRIENDLY:
            message = _FRIENDLY[(rel[0], err.validator)]
        elif err.validator == "format" and err.validator_value == "date":
            message = f"{err.instance!r} is not a valid date (YYYY-MM-DD)"
        if decision is None and key is None:
            key = "(top level)"
        out.append((decision, key, message))
    return out


def _action_problems(entries, names) -> list[tuple[str | None, str | None, str]]:
    """One action per decision; an observation reference is rows of a file or a filter."""
    out = []
    if not isinstance(entries, list):
        return out
    for name, entry in zip(names, entries):
        if not isinstance(entry, Mapping):
            continue
        present = [a for a in ACTIONS if a in entry]
        if len(present) != 1:
            found = f"found {', '.join(present)}" if present else "found none"
            out.append((name, None, f"give exactly one action ({', '.join(ACTIONS)}); {found}"))
        ref = entry.get("exclude_observations")
        if isinstance(ref, Mapping):
            rows_form = [k for k in ("file", "rows", "file_sha256") if k in ref]
            filter_form = [k for k in ("fluid", "boundary", "solid_phase", "T_min_K", "T_max_K")
                           if k in ref]
            if rows_form and filter_form:
                out.append((name, f"exclude_observations.{filter_form[0]}",
                            "give either file and rows, or a filter (fluid, boundary, T_min_K, "
                            f"T_max_K), not both (found {', '.join(rows_form + filter_form)})"))
            elif rows_form:
                for k in ("file", "rows"):
                    if k not in ref:
                        out.append((name, f"exclude_observations.{k}",
                                    "required key is missing (a row reference gives source, "
                                    "file and rows)"))
            else:
                for k in ("fluid", "boundary"):
                    if k not in ref:
                        out.append((name, f"exclude_observations.{k}",
                                    "required key is missing (give file and rows, or a filter: "
                                    "fluid, boundary and optionally T_min_K, T_max_K)"))
    return out


# -- step 3: what the schema cannot say --------------------------------------------------------
def _semantic_problems(entries, names) -> list[tuple[str | None, str | None, str]]:
    from pipeline.checks.findings import SEVERITIES
    from pipeline.checks.registry import all_checks

    checks = all_checks()
    out = []
    seen: dict[str, str] = {}
    thresholds = None
    for name, entry in zip(names, entries):
        if entry["id"] in seen:
            out.append((name, "id", f"duplicate id (also decision {seen[entry['id']]!r} before "
                                    "it); ids must be unique"))
        seen.setdefault(entry["id"], name)
        ref = entry.get("exclude_observations") or {}
        lo, hi = ref.get("T_min_K"), ref.get("T_max_K")
        if lo is not None and hi is not None and lo > hi:
            out.append((name, "exclude_observations.T_max_K",
                        f"T_max_K = {hi:g} K is below T_min_K = {lo:g} K"))
        for kind in ("waive_check", "override_threshold"):
            action = entry.get(kind)
            if action is None:
                continue
            if action["check"] not in checks:
                out.append((name, f"{kind}.check", f"unknown check id {action['check']!r}; "
                                                   f"valid ids: {', '.join(checks)}"))
                continue
            if kind != "override_threshold":
                continue
            if thresholds is None:
                from pipeline.checks.thresholds import Thresholds

                thresholds = Thresholds.load()
            known = thresholds.for_check(action["check"])
            key, value = action["threshold"], action["value"]
            if key not in known:
                out.append((name, f"{kind}.threshold",
                            f"unknown threshold {key!r} of {action['check']}; valid: "
                            f"{', '.join(known) or '(none)'}"))
            elif not _same_kind(known[key], value):
                out.append((name, f"{kind}.value", f"value {value!r} has the wrong type for "
                                                   f"{key} (default is {known[key]!r})"))
            elif key == "severity" and value not in SEVERITIES:
                out.append((name, f"{kind}.value", f"severity must be one of {SEVERITIES}"))
    return out


def _same_kind(default: Any, value: Any) -> bool:
    """Numbers replace numbers, booleans booleans, strings strings."""
    if isinstance(default, bool) or isinstance(value, bool):
        return isinstance(default, bool) and isinstance(value, bool)
    if isinstance(default, (int, float)):
        return isinstance(value, (int, float))
    return type(default) is type(value)


def _where(decision: str | None, key: str | None) -> str:
    parts = ([f"decision {decision!r}"] if decision else []) + ([f"key '{key}'"] if key else [])
    return ", ".join(parts) or "(top level)"

