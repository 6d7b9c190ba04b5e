"""The raw batch contract: ``raw/fluids.toml`` and ``<batch>/batch.toml``.

A manifest is read once (:mod:`pipeline.ingest.rawread`: regular files only, bounded in size
and nesting depth), parsed with :mod:`tomllib`, validated against its JSON Schema (2020-12) in
``schemas/`` before any row is read, and then parsed into frozen pydantic models. A violation
is reported with the file, the key path and what was expected, quoting at most a short
excerpt of the offending value.

JSON has no NaN or infinity, so the schemas' ``number`` means a finite number here (TOML
allows ``nan`` and ``inf``; they are refused), and a ``pattern`` has its ECMA-262 meaning:
``$`` matches only at the end of the text (Python's ``$`` also matches before a final
newline, which let ``"argon\\n"`` pass as a slug).
"""

from __future__ import annotations

import hashlib
import json
import math
import re
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import jsonschema
from jsonschema import validators
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from pipeline.errors import BatchError, ConfigError
from pipeline.ingest.rawread import MAX_TOML_BYTES, parse_toml, read_regular

SCHEMA_DIR = Path(__file__).resolve().parents[2] / "schemas"
QUANTITY_COLUMNS = ("rho_liquid", "rho_vapour", "rho_solid",
                    "h_vaporization", "h_fusion", "h_sublimation")
DEFAULT_PHASES = {"triple": ("vapour", "liquid", "solid"), "critical": ("liquid", "vapour")}


@lru_cache(maxsize=None)
def load_schema(name: str) -> dict:
    """A JSON Schema from ``schemas/`` (falls back to the installed package data)."""
    path = SCHEMA_DIR / name
    if path.exists():
        return json.loads(path.read_text("utf-8"))
    return json.loads(resources.files("pipeline").joinpath("schemas", name).read_text("utf-8"))


def key_path(parts) -> str:
    """Render a JSON path like ``table[0].pressure.unit``."""
    out = ""
    for part in parts:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top level)"


#: Longest excerpt of an offending value quoted in a schema error [characters]
EXCERPT = 60


def _finite_number(checker, instance) -> bool:
    return (isinstance(instance, (int, float)) and not isinstance(instance, bool)
            and (not isinstance(instance, float) or math.isfinite(instance)))


@lru_cache(maxsize=None)
def ecma_pattern(pattern: str) -> re.Pattern:
    """``pattern`` compiled with ECMA-262's ``$``: the end of the text, never before a final
    newline (every unescaped ``$`` outside a character class becomes ``\\Z``)."""
    out, escaped, in_class = [], False, False
    for ch in pattern:
        if escaped:
            escaped = False
        elif ch == "\\":
            escaped = True
        elif ch == "[":
            in_class = True
        elif ch == "]":
            in_class = False
        elif ch == "$" and not in_class:
            ch = r"\Z"
        out.append(ch)
    return re.compile("".join(out))


def _pattern(validator, pattern, instance, schema):
    if validator.is_type(instance, "string") and not ecma_pattern(pattern).search(instance):
        yield jsonschema.ValidationError(f"{instance!r} does not match {pattern!r}")


#: Draft 2020-12 with finite numbers and ECMA-262 patterns (see the module docstring): the
#: batch, fluids and decisions files are validated with it
Validator = validators.extend(
    jsonschema.Draft202012Validator,
    validators={"pattern": _pattern},
    type_checker=jsonschema.Draft202012Validator.TYPE_CHECKER.redefine("number", _finite_number))


def excerpt(value: Any, limit: int = EXCERPT) -> str:
    """``repr(value)`` cut to ``limit`` characters, saying how long the whole was."""
    text = repr(value)
    if len(text) <= limit:
        return text
    return f"{text[:limit]}... ({len(text):,} characters)"


def schema_message(err: jsonschema.ValidationError) -> str:
    """What a violation expected, quoting at most a short excerpt of the value."""
    instance = err.instance
    if err.validator == "type" and isinstance(instance, float) and not math.isfinite(instance):
        return f"{instance!r} is not a finite number (NaN and infinity are refused)"
    message = err.message
    if len(message) > 4 * EXCERPT:
        long = repr(instance)
        message = message.replace(long, excerpt(instance)) if long in message else \
            message[:4 * EXCERPT] + f"... ({len(message):,} characters)"
    if err.validator == "pattern" and isinstance(err.schema, dict) and \
            err.schema.get("description"):
        message += f" ({err.schema['description']})"
    return message


@lru_cache(maxsize=None)
def _validator(schema_name: str):
    """One validator per schema, built once (building it costs more than a small document's
    validation)."""
    return Validator(load_schema(schema_name))


#: Most values a schema node remembers as valid (its memo is emptied when it is full), and
#: the longest canonical JSON text of a value remembered [characters]
_MEMO_VALUES = 20_000
_MEMO_TEXT = 4096
#: Keywords that look at which properties or items other keywords evaluated: a schema using
#: one is validated whole
_NOT_SPLIT = {"unevaluatedProperties", "unevaluatedItems", "prefixItems", "$dynamicRef",
              "$recursiveRef"}


def inlined(node: Any, defs: dict, depth: int = 0) -> Any:
    """``node`` with every ``{"$ref": "#/$defs/name"}`` replaced by the definition itself
    (``allOf`` with its sibling keywords, if any): the same constraints, checked without
    resolving references (about 3x faster to validate). Raises ``KeyError`` for any other
    reference and ``RecursionError`` for a recursive definition."""
    if depth > 64:
        raise RecursionError("recursive schema definition")
    if isinstance(node, list):
        return [inlined(v, defs, depth + 1) for v in node]
    if not isinstance(node, dict):
        return node
    out = {k: inlined(v, defs, depth + 1) for k, v in node.items() if k not in ("$ref", "$defs")}
    if "$ref" in node:
        ref = node["$ref"]
        if not (isinstance(ref, str) and ref.startswith("#/$defs/")):
            raise KeyError(ref)
        target = inlined(defs[ref[len("#/$defs/"):]], defs, depth + 1)
        return {"allOf": [target], **out} if out else target
    return out


class _Node:
    """One schema node of the fast check: the node with ``true`` for the subschemas of
    ``properties`` and ``items`` (its *shell*, validated by jsonschema), a node per property and one for the items, and a
    memo of the values found valid here (by their canonical JSON text).

    A value is valid against a schema when it satisfies every keyword; ``properties``
    holds when each present property is valid against its subschema and ``items`` when
    each item is valid against its own (a node using a keyword of :data:`_NOT_SPLIT` is
    validated whole). So a value is valid when the shell accepts it and its properties or
    items are valid at their nodes, where a repeated value (the same ``temperature``
    mapping of every table of a campaign) is looked up instead of validated again."""

    def __init__(self, schema: Any):
        self.properties: dict[str, _Node] = {}
        self.items: _Node | None = None
        self.memo: set[str] = set()
        if isinstance(schema, dict) and not (set(schema) & _NOT_SPLIT):
            props = schema.get("properties")
            if isinstance(props, dict):
                self.properties = {k: _Node(v) for k, v in props.items()}
            if isinstance(schema.get("items"), (dict, bool)):
                self.items = _Node(schema["items"])
            # the shell keeps the property names (additionalProperties depends on them)
            schema = dict(schema)
            if self.properties:
                schema["properties"] = {k: True for k in props}
            if self.items is not None:
                schema["items"] = True
        self.shell = Validator(schema)

    def valid(self, value: Any) -> bool:
        try:
            key = json.dumps(value, sort_keys=True, allow_nan=False)
        except (TypeError, ValueError):     # a TOML date or a non-finite number
            key = None
        if key is not None and key in self.memo:
            return True
        if not self.shell.is_valid(value):
            return False
        if isinstance(value, dict) and not all(node.valid(value[name]) for name, node in
                                               self.properties.items() if name in value):
            return False
        if isinstance(value, list) and self.items is not None and \
                not all(self.items.valid(item) for item in value):
            return False
        if key is not None and len(key) <= _MEMO_TEXT:
            if len(self.memo) >= _MEMO_VALUES:
                self.memo.clear()
            self.memo.add(key)
        return True


@lru_cache(maxsize=None)
def _fast(schema_name: str) -> _Node | None:
    """The fast check's root node (references inlined), None when a reference cannot be
    inlined."""
    schema = load_schema(schema_name)
    try:
        return _Node(inlined(schema, schema.get("$defs", {})))
    except (KeyError, RecursionError):
        return None


def is_valid(document: Any, schema_name: str) -> bool:
    """Whether ``document`` satisfies the schema: the same answer as an empty
    :func:`schema_errors`, several times faster for many manifests of the same shape (see
    :class:`_Node`; ``tests/ingest/test_contract.py`` holds the two equal)."""
    root = _fast(schema_name)
    if root is None:
        return _validator(schema_name).is_valid(document)
    return root.valid(document)


def schema_errors(document: Any, schema_name: str) -> list[tuple[str, str]]:
    """All violations of a schema, as (key path, what was expected), sorted by path."""
    validator = _validator(schema_name)
    found = []
    for err in validator.iter_errors(document):
        found.append((key_path(err.absolute_path), schema_message(err)))
    return sorted(found)


def read_toml(path: Path, error=BatchError, *, data: bytes | None = None,
              label: str | None = None) -> dict:
    """Parse a TOML file (or its bytes ``data``, already read); a syntax error names the file,
    line and column. Only a regular file is read, and only within the size and depth bounds
    of :mod:`pipeline.ingest.rawread`."""
    label = label or str(path)
    if data is None:
        data = read_regular(path, label, limit=MAX_TOML_BYTES, error=error)
    return parse_toml(data, label, error)


def validated(path: Path, schema_name: str, error=BatchError, *, data: bytes | None = None,
              label: str | None = None) -> dict:
    """Parse and validate a manifest; raise ``error`` listing every violation."""
    label = label or str(path)
    document = read_toml(path, error, data=data, label=label)
    problems = [] if is_valid(document, schema_name) else schema_errors(document, schema_name)
    if problems:
        key, what = problems[0]
        more = f" (and {len(problems) - 1} more: " + "; ".join(
            f"{k}: {w}" for k, w in problems[1:4]) + ")" if len(problems) > 1 else ""
        raise error(f"does not match {schema_name}: {what}{more}", file=label, key=key)
    return document


def canonical_hash(obj: Any) -> str:
    """SHA-256 of sort-keyed compact JSON: the fingerprint used for inputs everywhere."""
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid", populate_by_name=True,
                              allow_inf_nan=False)


class QuantityValue(_Frozen):
    value: float
    unit: str


class Fluid(_Frozen):
    id: str
    name: str
    formula: str = ""
    cas_rn: str = ""
    solid_phases: tuple[str, ...] = ()
    molar_mass: QuantityValue

    @property
    def molar_mass_kg_mol(self) -> float:
        return self.molar_mass.value * (1e-3 if self.molar_mass.unit == "g/mol" else 1.0)


class Source(_Frozen):
    id: str
    kind: str
    citation: str
    doi: str = ""
    license: str = ""
    notes: str = ""


class ColumnSpec(_Frozen):
    column: str
    unit: str
    scale: str = "ITS-90"
    reference: str = "absolute"
    ambient: QuantityValue | None = None


class UncertaintySpec(_Frozen):
    unit: str = "1"
    value: float | None = None
    relative: float | None = None
    column: str | None = None
    coverage: float = 1.0


class TableSpec(_Frozen):
    file: str
    fluid: str
    boundary: str
    solid_phase: str = ""
    temperature: ColumnSpec
    pressure: ColumnSpec | None = None
    delimiter: str = ","
    decimal: str = "."
    encoding: str = "utf-8"
    quote: str = '"'
    comment: str = ""
    null_values: tuple[str, ...] = ()
    extra_columns: str = "error"
    sheet: str = ""                      # workbook tables: the worksheet (pipeline.ingest.workbook)
    header_row: int | None = None        # workbook tables: spreadsheet row of the header
    range: str = ""                      # workbook tables: optional cell range, e.g. B3:E40
    uncertainty: dict[str, UncertaintySpec] = Field(default_factory=dict)
    columns: dict[str, ColumnSpec] = Field(default_factory=dict)

    def value_columns(self) -> dict[str, ColumnSpec]:
        """quantity -> column spec, the boundary pressure first."""
        out = {"pressure": self.pressure} if self.pressure else {}
        out.update(self.columns)
        return out


class PointValue(_Frozen):
    value: float
    unit: str
    u: float | None = None
    coverage: float = 1.0
    scale: str = "ITS-90"
    reference: str = "absolute"
    ambient: QuantityValue | None = None


class FixedPointSpec(_Frozen):
    fluid: str
    kind: str
    phases: tuple[str, ...] = ()
    T: PointValue
    p: PointValue | None = None
    rho: PointValue | None = None

    def phase_list(self) -> tuple[str, ...]:
        return self.phases or DEFAULT_PHASES[self.kind]


class ConstantSpec(_Frozen):
    fluid: str
    name: str
    value: float
    unit: str
    u: float | None = None
    coverage: float = 1.0
    scale: str = "ITS-90"


class BatchManifest(_Frozen):
    format_version: int = 1
    source: Source
    table: tuple[TableSpec, ...] = ()
    fixed_point: tuple[FixedPointSpec, ...] = ()
    constant: tuple[ConstantSpec, ...] = ()


def parse_model(model: type[BaseModel], document: Any, label: str, error=BatchError,
                prefix: tuple = ()):
    """``model`` built from a schema-valid document; what the schema cannot say (a finite
    number where the schema's types allow more) is refused naming the key."""
    try:
        return model.model_validate(document)
    except ValidationError as err:
        first = err.errors()[0]
        raise error(f"does not match the batch contract: {first['msg']} (value "
                    f"{excerpt(first.get('input'))})", file=label,
                    key=key_path([*prefix, *first["loc"]])) from None


def load_fluids(path: Path) -> dict[str, Fluid]:
    """``raw/fluids.toml`` validated and parsed; duplicate ids are an error."""
    doc = validated(path, "fluids.schema.json", ConfigError)
    fluids: dict[str, Fluid] = {}
    for i, entry in enumerate(doc["fluid"]):
        fluid = parse_model(Fluid, entry, str(path), ConfigError, ("fluid", i))
        if fluid.id in fluids:
            raise ConfigError(f"fluid id '{fluid.id}' is listed twice", file=str(path),
                              key=f"fluid[{i}].id")
        fluids[fluid.id] = fluid
    return fluids


def load_batch(path: Path, *, data: bytes | None = None,
               label: str | None = None) -> tuple[BatchManifest, dict]:
    """A batch.toml (or its bytes ``data``, already read) validated and parsed; returns the
    model and the raw document."""
    doc = validated(path, "batch.schema.json", data=data, label=label)
    return parse_model(BatchManifest, doc, label or str(path)), doc
