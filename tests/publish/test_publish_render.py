"""The fast renderer of the text exports: byte for byte what ``json`` and ``csv`` write."""

from __future__ import annotations

import csv
import io
import math

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from pipeline.errors import PublishError
from pipeline.publish import exports
from pipeline.publish.render import RenderError, TableCodec, csv_field

# text that exercises escaping: quotes, commas, backslashes, control characters, line and
# paragraph separators, non-ASCII letters and characters outside the basic plane
TEXT = st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cs",))
               | st.sampled_from(list('",\\\n\r\t\x00\x1f\u2028\u00e9\U0001f600 ')),
               max_size=12)
NUMBER = st.floats(allow_nan=False, allow_infinity=False) | st.sampled_from(
    [0.0, -0.0, 1e-300, 5e-324, 1e300, 0.1, 1 / 3])


def _value(field: pa.Field):
    """A hypothesis strategy of Python values of an Arrow field."""
    typ = field.type
    if pa.types.is_list(typ):
        base = st.lists(_value(typ.value_field), max_size=4)
    elif pa.types.is_struct(typ):
        base = st.fixed_dictionaries({typ.field(i).name: _value(typ.field(i))
                                      for i in range(typ.num_fields)})
    elif pa.types.is_string(typ):
        base = TEXT
    elif pa.types.is_floating(typ):
        base = NUMBER
    elif pa.types.is_boolean(typ):
        base = st.booleans()
    elif typ == pa.int32():
        base = st.integers(-2**31, 2**31 - 1)
    else:
        base = st.integers(-2**63, 2**63 - 1)
    return st.none() | base if field.nullable else base


def _rows(table: str):
    schema = exports.SCHEMAS[table]
    return st.lists(st.fixed_dictionaries({f.name: _value(f) for f in schema}), max_size=4)


def _rendered(table: str, release_id: str, rows: list[dict]) -> tuple[bytes, bytes]:
    block = exports.rendered_block(table, "", rows)
    folder = exports.ExportTable(table, exports.arrow_table(table, rows), (block,))
    json_text, csv_text, _ = exports._text_files(release_id, folder)
    return json_text, csv_text


@pytest.mark.parametrize("table", sorted(exports.SCHEMAS))
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_rendered_text_equals_what_json_and_csv_write(table, data):
    """For any rows of an export table, the renderer writes exactly json.dumps(sort_keys,
    indent=1) of the document and csv.writer's lines, and the CSV reads back as the rows."""
    rows = data.draw(_rows(table))
    try:
        json_text, csv_text = _rendered(table, "r-0123456789ab", rows)
    except PublishError as err:       # texts a CSV cell cannot give back are refused
        assert any(f.nullable and r[f.name] == "" or "\r" in r[f.name]
                   for r in rows for f in exports.SCHEMAS[table]
                   if pa.types.is_string(f.type) and r[f.name] is not None), err
        return
    assert json_text == exports.json_bytes(exports.json_document("r-0123456789ab", table, rows))
    assert csv_text == exports.csv_bytes(table, rows)
    expected = [{f.name: r[f.name] for f in exports.SCHEMAS[table]} for r in rows]
    assert exports.read_csv_rows(table, csv_text) == expected


def test_the_demo_release_renders_as_the_reference_writers_write_it(published_demo):
    """The demo release's files equal json.dumps, csv.writer and pyarrow of its rows."""
    folder = published_demo["out"] / published_demo["release"]
    for table in exports.SCHEMAS:
        rows = pq.read_table(folder / f"{table}.parquet").to_pylist()
        json_text, csv_text = _rendered(table, published_demo["release"], rows)
        assert json_text == (folder / f"{table}.json").read_bytes() == exports.json_bytes(
            exports.json_document(published_demo["release"], table, rows))
        assert csv_text == (folder / f"{table}.csv").read_bytes() == exports.csv_bytes(table, rows)
        assert (folder / f"{table}.parquet").read_bytes() == exports.parquet_bytes(table, rows)


@pytest.mark.parametrize("code", [*range(0x80), 0x85, 0xa0, 0x2028, 0x2029])
def test_a_csv_field_is_quoted_as_csv_writer_quotes_it(code):
    """Every ASCII character and the Unicode line separators: quoted exactly when csv.writer
    quotes them (common practice: RFC 4180 quoting, doubled quotes)."""
    text = f"a{chr(code)}b"
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow(["x", text])
    assert "x," + csv_field(text) + "\n" == buf.getvalue()


@pytest.mark.parametrize("column, value, message", [
    ("n_used", True, "n_used: True is not an integer"),
    ("value_si", math.nan, "value_si: nan is not a finite number"),
    ("value_si", "1.5", "value_si: '1.5' is not a number"),
    ("source_ids", ["a", 3], "source_ids\\[\\]: 3 is not a string"),
    ("unit", None, "unit: None is not a string"),
])
def test_a_value_of_the_wrong_type_is_refused_naming_its_column(column, value, message):
    """The renderer checks every value against its column's Arrow type."""
    row = {"release_id": "r-1", "value_id": "argon/constant/Tc", "fluid_id": "argon",
           "point": "", "property": "Tc", "value_si": 150.687, "u_si": 0.015, "unit": "K",
           "method": "stated", "method_detail": "stated", "n_candidates": 1, "n_used": 1,
           "birge_ratio": None, "source_ids": ["s"], "check_status": "pass"}
    exports.rendered_block("constants", "", [row])
    with pytest.raises(PublishError, match=message):
        exports.rendered_block("constants", "", [{**row, column: value}])


@pytest.mark.parametrize("column, value, message", [
    ("fit_id", "", "fit_id: an empty text in a column that may be NULL"),
    ("was_generated_by", "fit\r\nrun", "was_generated_by: .* holds a carriage return"),
])
def test_a_text_the_csv_file_could_not_give_back_is_refused(column, value, message):
    """What the CSV cell would not read back as (the old exports refused it when reading the
    file back) is refused with the column named."""
    row = {"release_id": "r-1", "value_id": "a/b", "fluid_id": "a", "value_kind": "curve",
           "method": "fitted", "fit_id": None, "was_generated_by": "x",
           "was_attributed_to": [], "was_derived_from": [], "checks": [], "decision_ids": []}
    exports.rendered_block("provenance", "", [row])
    if "\r" in value and csv_field("\r") != "\r":
        pytest.skip("this Python's csv.writer quotes carriage returns")
    with pytest.raises(PublishError, match=message):
        exports.rendered_block("provenance", "", [{**row, column: value}])


def test_a_struct_with_other_fields_is_refused():
    """A provenance entity must hold exactly the fields of the schema."""
    codec = TableCodec("provenance", exports.SCHEMAS["provenance"])
    row = {"release_id": "r-1", "value_id": "a/b", "fluid_id": "a", "value_kind": "curve",
           "method": "fitted", "fit_id": None, "was_generated_by": "x",
           "was_attributed_to": [{"source_id": "s", "kind": None, "citation": None,
                                  "doi": None, "used": True, "extra": 1}],
           "was_derived_from": [], "checks": [], "decision_ids": []}
    with pytest.raises(RenderError, match="was_attributed_to\\[\\]: fields"):
        codec.json_row(row)
