"""Every row of a release table checked against its JSON Schema at once, column by column.

``jsonschema`` walks a document value by value: about 750,000 Python calls for the provenance
of 1,000 fluids, 43 % of a publish. The rows of a release are a typed Arrow table, so part of
what the schema says holds by type (a ``float64`` column holds numbers, ``list<int64>`` arrays
of integers); what remains are constraints on values - ``type`` (nulls and a column's type),
``enum``, ``const``, ``pattern``, string lengths, numeric bounds, item counts, ``uniqueItems``,
the properties of objects - and Arrow compute checks each for a whole column in one call.

:func:`compile_rows` turns the ``rows`` array of a release schema into such checks, once per
schema and Arrow schema (cached). A keyword it does not implement raises :class:`Unsupported`
at compile time, and :func:`check_rows` then validates the rows with ``jsonschema`` one by one:
a keyword is never skipped silently (``tests/publish/test_publish_schemacheck.py`` compiles
every release schema and compares the verdicts of both on valid and broken rows). Where the
two could differ the bulk check is the stricter: numbers must be finite (JSON has no NaN or
infinity), and ``$`` in a pattern means the end of the text, as in ECMA-262, where Python's
``re`` (which ``jsonschema`` uses) also accepts a final newline before it.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Callable

import jsonschema
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from pipeline.errors import PublishError
from pipeline.ingest.contract import ecma_pattern, load_schema

#: keywords that say nothing about validity
ANNOTATIONS = frozenset({"description", "title", "$comment", "default", "examples", "$schema",
                         "$id", "deprecated", "readOnly", "writeOnly"})


class Unsupported(ValueError):
    """The schema uses a keyword (or a combination) the bulk check does not implement."""


@dataclass(frozen=True, order=True)
class Problem:
    """The first violation found: the position in the array checked, the path below it."""

    index: int
    where: tuple = ()
    message: str = ""

    def below(self, index: int, *parts) -> "Problem":
        return Problem(index, (*parts, *self.where), self.message)


Check = Callable[[pa.Array], "Problem | None"]


def _json_type(typ: pa.DataType) -> str:
    if pa.types.is_string(typ) or pa.types.is_large_string(typ):
        return "string"
    if pa.types.is_floating(typ):
        return "number"
    if pa.types.is_integer(typ):
        return "integer"
    if pa.types.is_boolean(typ):
        return "boolean"
    if pa.types.is_list(typ) or pa.types.is_large_list(typ):
        return "array"
    if pa.types.is_struct(typ):
        return "object"
    raise Unsupported(f"Arrow type {typ} has no JSON counterpart here")


def _first(mask: pa.Array) -> int | None:
    """Index of the first true of a boolean array (nulls count as false)."""
    idx = pc.indices_nonzero(pc.fill_null(mask, False))
    return int(idx[0].as_py()) if len(idx) else None


def _show(value) -> str:
    return repr(value.as_py() if isinstance(value, pa.Scalar) else value)


def _bad_at(arr: pa.Array, mask: pa.Array, message: Callable[[object], str]) -> Problem | None:
    i = _first(mask)
    return None if i is None else Problem(i, (), message(arr[i].as_py()))


# --- one keyword each ----------------------------------------------------------------------------

def _type_check(types: set[str], jtype: str) -> Check | None:
    ok = jtype in types or (jtype == "integer" and "number" in types)
    if ok:
        return None
    shown = sorted(types)[0] if len(types) == 1 else sorted(types)
    return lambda arr: _bad_at(arr, pc.is_valid(arr), lambda v: f"{v!r} is not of type {shown!r}")


def _enum_check(values: list, typ: pa.DataType, jtype: str, keyword: str) -> Check:
    def same_kind(v) -> bool:   # enum equality as JSON Schema has it: True is not 1
        if isinstance(v, bool):
            return jtype == "boolean"
        if isinstance(v, (int, float)):
            return jtype in ("integer", "number")
        return isinstance(v, str) and jtype == "string"

    if jtype not in ("string", "integer", "number", "boolean"):
        raise Unsupported(f"{keyword} on {jtype} values")
    usable = [v for v in values if v is not None and same_kind(v)]
    try:
        value_set = pa.array(usable, type=typ)
    except (pa.ArrowInvalid, pa.ArrowTypeError, OverflowError):
        raise Unsupported(f"{keyword} values {values!r} for {typ} values") from None
    shown = values[0] if keyword == "const" else values
    text = (lambda v: f"{shown!r} was expected") if keyword == "const" else \
        (lambda v: f"{v!r} is not one of {shown!r}")
    return lambda arr: _bad_at(
        arr, pc.and_(pc.is_valid(arr), pc.invert(pc.is_in(arr, value_set=value_set))), text)


def _pattern_check(pattern: str) -> Check:
    regex = ecma_pattern(pattern)

    def check(arr):
        distinct = pc.unique(arr.filter(pc.is_valid(arr))).to_pylist()
        bad = [v for v in distinct if not regex.search(v)]
        if not bad:
            return None
        return _bad_at(arr, pc.is_in(arr, value_set=pa.array(bad, type=arr.type)),
                       lambda v: f"{v!r} does not match {pattern!r}")
    return check


def _length_check(limit: int, longest: bool) -> Check:
    def check(arr):
        n = pc.utf8_length(arr)
        mask = pc.greater(n, limit) if longest else pc.less(n, limit)
        return _bad_at(arr, mask, lambda v: f"{v!r} is too {'long' if longest else 'short'}")
    return check


_BOUNDS = {"minimum": (pc.less, "less than the minimum of"),
           "maximum": (pc.greater, "greater than the maximum of"),
           "exclusiveMinimum": (pc.less_equal, "less than or equal to the minimum of"),
           "exclusiveMaximum": (pc.greater_equal, "greater than or equal to the maximum of")}


def _bound_check(keyword: str, limit: float) -> Check:
    compare, words = _BOUNDS[keyword]
    return lambda arr: _bad_at(arr, compare(arr, limit), lambda v: f"{v!r} is {words} {limit!r}")


def _finite_check(arr: pa.Array) -> Problem | None:
    return _bad_at(arr, pc.invert(pc.is_finite(arr)),
                   lambda v: f"{v!r} is not a finite number (JSON has none)")


def _items_count_check(limit: int, most: bool) -> Check:
    def check(arr):
        n = pc.list_value_length(arr)
        mask = pc.greater(n, limit) if most else pc.less(n, limit)
        return _bad_at(arr, mask, lambda v: f"{v!r} has too {'many' if most else 'few'} "
                                            f"items ({'at most' if most else 'at least'} {limit})")
    return check


def _unique_check(value_type: pa.DataType) -> Check:
    if _json_type(value_type) not in ("string", "integer", "boolean"):
        raise Unsupported(f"uniqueItems over {value_type} items")

    def check(arr):
        parents = pc.list_parent_indices(arr)
        if len(parents) == 0:
            return None
        pairs = pa.table({"p": parents, "v": arr.flatten()})
        counts = pairs.group_by(["p", "v"]).aggregate([([], "count_all")])
        dup = counts.filter(pc.greater(counts["count_all"], 1))
        if dup.num_rows == 0:
            return None
        i = int(pc.min(dup["p"]).as_py())
        return Problem(i, (), f"{arr[i].as_py()!r} has non-unique elements")
    return check


def _items_check(child: Check) -> Check:
    def check(arr):
        values = arr.flatten()
        if len(values) == 0:
            return None
        found = child(values)
        if found is None:
            return None
        parents = pc.list_parent_indices(arr).to_numpy()
        parent = int(parents[found.index])
        position = found.index - int(np.searchsorted(parents, parent, "left"))
        return found.below(parent, position)
    return check


def _struct_check(schema: dict, typ: pa.StructType, where: str) -> list[Check]:
    names = [typ.field(i).name for i in range(typ.num_fields)]
    props = schema.get("properties", {})
    checks: list[Check] = []
    missing = [r for r in schema.get("required", []) if r not in names]
    extra = [n for n in names if n not in props]
    if missing:
        checks.append(lambda arr: _bad_at(arr, pc.is_valid(arr),
                                          lambda v: f"{missing[0]!r} is a required property"))
    additional = schema.get("additionalProperties", True)
    if additional is False and extra:
        checks.append(lambda arr: _bad_at(
            arr, pc.is_valid(arr), lambda v: f"additional property {extra[0]!r} is not allowed"))
    elif additional not in (True, False, {}):
        raise Unsupported(f"additionalProperties {additional!r} at {where}")
    for name in names:
        sub = props.get(name, True)
        if sub is True or sub == {}:
            continue
        child = _node(sub, typ.field(name).type, f"{where}.{name}")

        def field_check(arr, name=name, child=child):
            found = child(pc.struct_field(arr, name))
            return None if found is None else found.below(found.index, name)
        checks.append(field_check)
    return checks


# --- a schema node -------------------------------------------------------------------------------

_KNOWN = {"type", "enum", "const", "pattern", "minLength", "maxLength", "minimum", "maximum",
          "exclusiveMinimum", "exclusiveMaximum", "minItems", "maxItems", "uniqueItems", "items",
          "properties", "required", "additionalProperties", "oneOf"}


def _node(schema: dict, typ: pa.DataType, where: str) -> Check:
    """The checks of one schema node over an Arrow array of type ``typ``."""
    schema = {k: v for k, v in schema.items() if k not in ANNOTATIONS}
    unknown = sorted(set(schema) - _KNOWN)
    if unknown:
        raise Unsupported(f"keyword(s) {unknown} at {where}")
    null_ok = "type" not in schema
    if "oneOf" in schema:   # only the nullable form: oneOf [{"type": "null"}, X]
        branches = schema.pop("oneOf")
        others = [b for b in branches if b != {"type": "null"}]
        other_types = others[0].get("type") if len(others) == 1 else None
        if len(branches) != 2 or len(others) != 1 or other_types is None or \
                "null" in ([other_types] if isinstance(other_types, str) else other_types):
            raise Unsupported(f"oneOf other than a type and null at {where}")
        if set(schema) & set(others[0]):
            raise Unsupported(f"oneOf beside the same keywords at {where}")
        schema = {**schema, **others[0]}
        null_ok = True
    jtype = _json_type(typ)
    checks: list[Check] = []
    if "type" in schema:
        types = {schema["type"]} if isinstance(schema["type"], str) else set(schema["type"])
        null_ok = null_ok or "null" in types
        bad_type = _type_check(types - {"null"}, jtype)
        if bad_type is not None:     # every value is of the wrong type; nothing else applies
            checks.append(bad_type)
            jtype = "mismatch"
    for keyword in ("enum", "const"):
        if keyword in schema:
            values = schema[keyword] if keyword == "enum" else [schema[keyword]]
            null_ok = null_ok and None in values
            checks.append(_enum_check(values, typ, jtype, keyword))
    if not null_ok:
        checks.insert(0, lambda arr: _bad_at(arr, pc.is_null(arr),
                                             lambda v: f"None is not of type {jtype!r}"))
    if jtype == "string":
        if "pattern" in schema:
            checks.append(_pattern_check(schema["pattern"]))
        if "minLength" in schema:
            checks.append(_length_check(schema["minLength"], longest=False))
        if "maxLength" in schema:
            checks.append(_length_check(schema["maxLength"], longest=True))
    elif jtype in ("number", "integer"):
        if jtype == "number":
            checks.append(_finite_check)
        checks += [_bound_check(k, schema[k]) for k in _BOUNDS if k in schema]
    elif jtype == "array":
        if "minItems" in schema:
            checks.append(_items_count_check(schema["minItems"], most=False))
        if "maxItems" in schema:
            checks.append(_items_count_check(schema["maxItems"], most=True))
        if schema.get("uniqueItems"):
            checks.append(_unique_check(typ.value_type))
        items = schema.get("items", True)
        if not isinstance(items, dict) and items is not True:
            raise Unsupported(f"items {items!r} at {where}")
        if isinstance(items, dict) and items:
            checks.append(_items_check(_node(items, typ.value_type, f"{where}[]")))
    elif jtype == "object":
        return _with_null_structs(checks[:1] if not null_ok else [],
                                  checks[0 if null_ok else 1:] + _struct_check(schema, typ, where))

    def check(arr):
        found = [p for p in (c(arr) for c in checks) if p is not None]
        return min(found) if found else None
    return check


def _with_null_structs(null_checks: list[Check], checks: list[Check]) -> Check:
    """Struct checks run on the non-null structs only (a null struct has no fields to check;
    whether it may be null at all is the null check's business)."""
    def check(arr):
        found = [p for p in (c(arr) for c in null_checks) if p is not None]
        valid = arr
        index = None
        if arr.null_count:
            index = pc.indices_nonzero(pc.is_valid(arr)).to_numpy()
            valid = arr.filter(pc.is_valid(arr))
        for c in checks:
            p = c(valid)
            if p is not None:
                found.append(p if index is None else Problem(int(index[p.index]), p.where,
                                                             p.message))
        return min(found) if found else None
    return check


# --- release schemas -----------------------------------------------------------------------------

def inline_refs(node, defs):
    """The schema with local ``#/$defs/...`` references replaced by their targets (the release
    schemas are not recursive)."""
    if isinstance(node, dict):
        if "$ref" in node and str(node["$ref"]).startswith("#/$defs/"):
            target = inline_refs(defs[node["$ref"].split("/")[-1]], defs)
            rest = {k: inline_refs(v, defs) for k, v in node.items() if k != "$ref"}
            return {**target, **rest} if rest else target
        return {k: inline_refs(v, defs) for k, v in node.items() if k != "$defs"}
    if isinstance(node, list):
        return [inline_refs(v, defs) for v in node]
    return node


@functools.lru_cache(maxsize=None)
def _resolved(schema_name: str) -> dict:
    schema = load_schema(schema_name)
    return inline_refs(schema, schema.get("$defs", {}))


@functools.lru_cache(maxsize=None)
def _validator(schema_name: str, part: str) -> jsonschema.Draft202012Validator:
    """A validator of the whole document (``part="document"``), of the document without its
    rows (``"envelope"``) or of one row (``"row"``), built once."""
    schema = _resolved(schema_name)
    if part == "envelope":
        schema = {**schema, "required": [r for r in schema.get("required", []) if r != "rows"],
                  "properties": {k: v for k, v in schema["properties"].items() if k != "rows"}}
    elif part == "row":
        schema = schema["properties"]["rows"]["items"]
    return jsonschema.Draft202012Validator(schema)


def validate_json(document, schema_name: str, what: str, part: str = "document") -> None:
    """Raise :class:`PublishError` naming the first violation of ``schema_name`` (jsonschema)."""
    validator = _validator(schema_name, part)
    if validator.is_valid(document):
        return
    errors = sorted(validator.iter_errors(document), key=lambda e: list(e.absolute_path))
    where = ".".join(str(p) for p in errors[0].absolute_path) or "(top level)"
    raise PublishError(f"{what} does not match {schema_name} at {where}: {errors[0].message} "
                       f"({len(errors)} problem(s))")


@functools.lru_cache(maxsize=None)
def compile_rows(schema_name: str, arrow_schema: pa.Schema) -> Check:
    """The bulk check of the ``rows`` of ``schema_name`` for rows typed by ``arrow_schema``
    (a check over the table as one struct array); :class:`Unsupported` when it cannot be one."""
    rows = _resolved(schema_name)["properties"]["rows"]
    rows = {k: v for k, v in rows.items() if k not in ANNOTATIONS}
    if set(rows) - {"type", "items", "minItems", "maxItems"} or rows.get("type") != "array":
        raise Unsupported(f"rows of {schema_name}: {sorted(rows)}")
    item = _node(rows.get("items", {}), pa.struct(list(arrow_schema)), "rows[]")
    lo, hi = rows.get("minItems", 0), rows.get("maxItems")

    def check(arr):
        if len(arr) < lo or (hi is not None and len(arr) > hi):
            return Problem(-1, (), f"{len(arr)} rows, expected {lo} to {hi or 'any'}")
        return item(arr) if len(arr) else None
    return check


def _path(problem: Problem) -> str:
    out = "rows" if problem.index < 0 else f"rows[{problem.index}]"
    for part in problem.where:
        out += f"[{part}]" if isinstance(part, int) else f".{part}"
    return out


def check_rows(table: pa.Table, schema_name: str, what: str) -> str:
    """Validate every row of ``table`` against the rows of ``schema_name``; returns how
    ("bulk" or "jsonschema"), raises :class:`PublishError` naming the first violation."""
    try:
        check = compile_rows(schema_name, table.schema)
    except Unsupported:
        for i, row in enumerate(table.to_pylist()):
            validate_json(row, schema_name, f"{what} row {i}", part="row")
        return "jsonschema"
    arr = pa.StructArray.from_arrays([c.combine_chunks() for c in table.columns],
                                     fields=list(table.schema)) if table.num_columns else \
        pa.array([{}] * table.num_rows)
    problem = check(arr)
    if problem is not None:
        raise PublishError(f"{what} does not match {schema_name} at {_path(problem)}: "
                           f"{problem.message}")
    return "bulk"

