"""Rows checked against their JSON Schema in bulk: the verdict jsonschema gives, row by row."""

from __future__ import annotations

import copy

import jsonschema
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.errors import PublishError
from pipeline.publish import exports, schemacheck

# values a mutation puts in a column, by Arrow type (valid and invalid for the schemas alike:
# enum members and others, the patterns' shapes and others, bounds and beyond)
STRINGS = ["", "x", "r-0123456789ab", "R-X", "-r", "a" * 65, "0" * 64, "0" * 63 + "g",
           "critical:vapour,liquid", "triple:vapour,liquid,Ih", "critical:", "Tc", "pc",
           "stated", "derived", "fitted", "recommended", "pass", "fail", "waived", "none",
           "observations", "fit", "value", "K", "Pa", "1", "log", "identity", "curve",
           "liquid-vapour", "pressure", "rho_liquid", "manifest.json", "a b", "\u00e9"]
FLOATS = [-1.0, -1e-300, 0.0, 1e-300, 1.0, 273.16, 1e300]
INTS = [-1, 0, 1, 2, 7]


def _scalars(typ: pa.DataType) -> list:
    if pa.types.is_string(typ):
        return STRINGS
    if pa.types.is_floating(typ):
        return FLOATS
    if pa.types.is_boolean(typ):
        return [True, False]
    return INTS


def _mutations(field: pa.Field, value) -> list:
    """Values of the field's type to put in place of ``value`` (some valid, some not)."""
    typ = field.type
    out = [None] if field.nullable else []
    if pa.types.is_list(typ):
        item = typ.value_field
        out += [[], [v for v in _scalars(item.type)[:2]] if not pa.types.is_struct(item.type)
                and not pa.types.is_list(item.type) else []]
        if value:
            out.append(value + value[:1])             # a repeated item
            out.append(value[:1])
    elif not pa.types.is_struct(typ):
        out += _scalars(typ)
    return out


def _paths(field: pa.Field, value, prefix=()):
    """(path, field) of every place in a value that a mutation can change."""
    yield prefix, field
    typ = field.type
    if value is None:
        return
    if pa.types.is_list(typ):
        for i, item in enumerate(value[:3]):
            yield from _paths(typ.value_field, item, (*prefix, i))
    elif pa.types.is_struct(typ):
        for j in range(typ.num_fields):
            sub = typ.field(j)
            yield from _paths(sub, value[sub.name], (*prefix, sub.name))


def _set(row: dict, path: tuple, value) -> None:
    target = row
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value


def _jsonschema_valid(table: str, rows: list[dict]) -> bool:
    schema = schemacheck._resolved(exports.JSON_SCHEMAS[table])["properties"]["rows"]
    return jsonschema.Draft202012Validator(schema).is_valid(rows)


def _bulk_valid(table: str, rows: list[dict]) -> bool:
    try:
        schemacheck.check_rows(exports.arrow_table(table, rows), exports.JSON_SCHEMAS[table],
                               f"{table}.json")
    except PublishError:
        return False
    return True


@pytest.fixture(scope="module")
def demo_rows(published_demo) -> dict[str, list[dict]]:
    folder = published_demo["out"] / published_demo["release"]
    return {t: pq.read_table(folder / f"{t}.parquet").to_pylist() for t in exports.SCHEMAS}


@pytest.mark.parametrize("table", sorted(exports.SCHEMAS))
def test_every_release_schema_compiles_to_the_bulk_check(table):
    """No release schema falls back to row-by-row validation: each keyword has a bulk form."""
    schemacheck.compile_rows(exports.JSON_SCHEMAS[table], exports.SCHEMAS[table])


@pytest.mark.parametrize("table", sorted(exports.SCHEMAS))
def test_the_demo_release_is_valid_in_bulk_and_for_jsonschema(table, demo_rows):
    """The demo's rows pass both checks."""
    rows = demo_rows[table]
    assert _bulk_valid(table, rows) and _jsonschema_valid(table, rows)


@pytest.mark.parametrize("table", sorted(exports.SCHEMAS))
@settings(max_examples=80, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_bulk_verdict_equals_jsonschema_verdict_on_broken_rows(table, demo_rows, data):
    """Rows of the demo with one to three values replaced (by values of the column's type,
    valid or not): the bulk check accepts exactly what jsonschema accepts."""
    rows = copy.deepcopy(demo_rows[table][:6])
    schema = exports.SCHEMAS[table]
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(rows) - 1))
        name = data.draw(st.sampled_from(schema.names))
        places = list(_paths(schema.field(name), rows[i][name], (name,)))
        path, field = data.draw(st.sampled_from(places))
        current = rows[i]
        for key in path:
            current = current[key]
        choices = _mutations(field, current)
        if choices:
            _set(rows[i], path, copy.deepcopy(data.draw(st.sampled_from(choices))))
    assert _bulk_valid(table, rows) == _jsonschema_valid(table, rows)


def test_a_violation_is_named_by_row_and_column(demo_rows):
    """The message names the row, the nested position and the rule, as jsonschema would."""
    rows = copy.deepcopy(demo_rows["provenance"])
    rows[3]["was_derived_from"][0]["entity"] = "guess"
    with pytest.raises(PublishError, match=r"provenance.json does not match "
                       r"release-provenance.schema.json at rows\[3\].was_derived_from\[0\]"
                       r".entity: 'guess' is not one of"):
        schemacheck.check_rows(exports.arrow_table("provenance", rows),
                               "release-provenance.schema.json", "provenance.json")


def test_numbers_must_be_finite_and_a_pattern_end_is_the_end_of_the_text(demo_rows):
    """Stricter than jsonschema where JSON itself is: no NaN (JSON has none), and $ does not
    let a final newline through (ECMA-262, the regex dialect JSON Schema names)."""
    rows = copy.deepcopy(demo_rows["constants"])
    rows[0]["value_si"] = float("nan")
    assert not _bulk_valid("constants", rows)
    rows = copy.deepcopy(demo_rows["constants"])
    rows[0]["release_id"] = rows[0]["release_id"] + "\n"
    assert _jsonschema_valid("constants", rows) and not _bulk_valid("constants", rows)


def test_a_keyword_without_a_bulk_form_falls_back_to_jsonschema(monkeypatch, demo_rows):
    """A schema with a keyword the bulk check does not know is validated row by row."""
    schema = copy.deepcopy(schemacheck._resolved("release-constants.schema.json"))
    schema["properties"]["rows"]["items"]["properties"]["unit"]["not"] = {"const": "K"}
    monkeypatch.setattr(schemacheck, "_resolved", lambda name: schema)
    schemacheck.compile_rows.cache_clear()
    schemacheck._validator.cache_clear()
    try:
        table = exports.arrow_table("constants", demo_rows["constants"])
        with pytest.raises(schemacheck.Unsupported, match="not"):
            schemacheck.compile_rows("release-constants.schema.json", table.schema)
        with pytest.raises(PublishError, match="should not be valid"):
            schemacheck.check_rows(table, "release-constants.schema.json", "constants.json")
        ok = table.filter(pa.compute.not_equal(table["unit"], "K"))
        assert schemacheck.check_rows(ok, "release-constants.schema.json", "x") == "jsonschema"
    finally:
        schemacheck.compile_rows.cache_clear()
        schemacheck._validator.cache_clear()
