"""The text exports of a release, byte for byte as ``json`` and ``csv`` write them, but fast.

A release's JSON file is ``json.dumps(document, sort_keys=True, indent=1, ensure_ascii=False,
allow_nan=False)`` and its CSV file has one line per row, list and struct cells as sort-keyed
compact JSON. Python's ``json`` renders an indented document with its pure-Python encoder
(about 1 s for the provenance of 1,000 fluids). A :class:`TableCodec` renders the same bytes
with everything that depends only on the table's Arrow schema decided once - key order,
indentation, one renderer per column - and lists of numbers and strings joined by C-level
calls. It renders row by row, so a release can keep the text of rows it copies from the
previous release (:mod:`pipeline.publish.incremental`) and render only the others.

Every value is checked against its column's Arrow type as it is rendered (a string column
holds a ``str``, an integer column an ``int`` and never a ``bool``, a float column a finite
number, a struct exactly its fields), so the text holds the very values of the Arrow table
that the schema check validates and the Parquet file stores; a value that is not raises
:class:`RenderError` naming its column. So does a text the CSV file could not give back: an
empty text in a column that may be NULL (an empty cell reads as NULL there), and a carriage
return where ``csv.writer`` leaves it unquoted.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from json.encoder import encode_basestring as _enc
from typing import Callable

import pyarrow as pa

Renderer = Callable[[object], str]
_FLOAT_REPR, _INT_REPR = float.__repr__, int.__repr__
_COMPACT = json.JSONEncoder(sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                            allow_nan=False)


def _csv_triggers() -> re.Pattern:
    """The characters that make this Python's ``csv.writer`` (default dialect, ``\n`` line
    ends) quote a field, found by asking it once (3.11 quotes ``,`` ``"`` ``\n``; later
    versions may add ``\r``)."""
    found = []
    for code in [*range(256), 0x2028, 0x2029]:
        buf = io.StringIO()
        csv.writer(buf, lineterminator="\n").writerow(["a", f"x{chr(code)}y"])
        if buf.getvalue().startswith('a,"'):
            found.append(chr(code))
    return re.compile("[" + "".join(re.escape(c) for c in found) + "]")


_CSV_QUOTE = _csv_triggers()


def csv_field(text: str) -> str:
    """A field as ``csv.writer`` writes it (QUOTE_MINIMAL, doubled quotes) in a row of more
    than one field."""
    if _CSV_QUOTE.search(text):
        return '"' + text.replace('"', '""') + '"'
    return text


class RenderError(ValueError):
    """A row value that does not fit its column's type."""


def _bad(where: str, value, what: str) -> RenderError:
    return RenderError(f"{where}: {value!r} is not {what}")


def _number(v, where: str) -> str:
    t = type(v)
    if t is float:
        if not math.isfinite(v):
            raise _bad(where, v, "a finite number (JSON has none)")
        return _FLOAT_REPR(v)
    if t is int:
        return _INT_REPR(v)
    raise _bad(where, v, "a number")


def _scalar(typ: pa.DataType, nullable: bool, where: str) -> Renderer:
    """JSON text of one scalar of Arrow type ``typ``."""
    if pa.types.is_string(typ):
        def render(v):
            if type(v) is str:
                return _enc(v)
            if v is None and nullable:
                return "null"
            raise _bad(where, v, "a string")
    elif pa.types.is_floating(typ):
        def render(v):
            if v is None and nullable:
                return "null"
            return _number(v, where)
    elif pa.types.is_integer(typ):
        def render(v):
            if type(v) is int:
                return _INT_REPR(v)
            if v is None and nullable:
                return "null"
            raise _bad(where, v, "an integer")
    elif pa.types.is_boolean(typ):
        def render(v):
            if v is True:
                return "true"
            if v is False:
                return "false"
            if v is None and nullable:
                return "null"
            raise _bad(where, v, "a boolean")
    else:
        raise TypeError(f"no JSON renderer for {typ} ({where})")
    return render


def _scalar_items(typ: pa.DataType) -> Callable[[list], list[str] | None] | None:
    """Texts of a list of scalars when every item has the column's exact type (checked and
    converted in C-level calls); None otherwise, and the items are then rendered one by one."""
    if pa.types.is_integer(typ):
        def texts(v):
            return list(map(_INT_REPR, v)) if set(map(type, v)) <= {int} else None
    elif pa.types.is_floating(typ):
        def texts(v):
            if set(map(type, v)) == {float} and all(map(math.isfinite, v)):
                return list(map(_FLOAT_REPR, v))
            return None
    elif pa.types.is_string(typ):
        def texts(v):
            return list(map(_enc, v)) if set(map(type, v)) <= {str} else None
    else:
        return None
    return texts


def _value(field: pa.Field, depth: int, where: str) -> Renderer:
    """JSON text, as ``json.dumps(indent=1)`` writes it at nesting ``depth``, of a value of
    ``field``."""
    typ, nullable = field.type, field.nullable
    if pa.types.is_list(typ):
        return _list(typ.value_field, nullable, depth, where)
    if pa.types.is_struct(typ):
        return _struct(typ, nullable, depth, where)
    return _scalar(typ, nullable, where)


def _list(item: pa.Field, nullable: bool, depth: int, where: str) -> Renderer:
    inner = "\n" + " " * (depth + 1)
    sep, close = "," + inner, "\n" + " " * depth + "]"
    fast = _scalar_items(item.type)
    each = _value(item, depth + 1, where + "[]")

    def render(v):
        if type(v) is list or type(v) is tuple:
            if not v:
                return "[]"
            texts = fast(v) if fast else None
            return "[" + inner + sep.join(map(each, v) if texts is None else texts) + close
        if v is None and nullable:
            return "null"
        raise _bad(where, v, "a list")
    return render


def _struct(typ: pa.StructType, nullable: bool, depth: int, where: str) -> Renderer:
    fields = sorted((typ.field(i) for i in range(typ.num_fields)), key=lambda f: f.name)
    names = [f.name for f in fields]
    keys = set(names)
    inner = "\n" + " " * (depth + 1)
    heads = ["{" + inner + _enc(names[0]) + ": "] + \
        ["," + inner + _enc(n) + ": " for n in names[1:]]
    parts = list(zip(names, heads, [_value(f, depth + 1, f"{where}.{f.name}") for f in fields]))
    close = "\n" + " " * depth + "}"

    def render(v):
        if type(v) is dict and v.keys() == keys:
            return "".join([h + r(v[n]) for n, h, r in parts]) + close
        if v is None and nullable:
            return "null"
        if type(v) is dict:
            raise RenderError(f"{where}: fields {sorted(v)} are not {names}")
        raise _bad(where, v, "an object")
    return render


def _csv_cell(field: pa.Field) -> Callable[[object], str]:
    """The CSV cell of a value (already checked by the JSON renderer): empty for NULL, compact
    sort-keyed JSON for lists and structs, the shortest round-trip text for floats."""
    typ = field.type
    if pa.types.is_list(typ) or pa.types.is_struct(typ):
        encode = _COMPACT.encode
        return lambda v: "" if v is None else encode(v)
    if pa.types.is_boolean(typ):
        return lambda v: "" if v is None else ("true" if v else "false")
    if pa.types.is_floating(typ):
        return lambda v: "" if v is None else _FLOAT_REPR(float(v))
    if pa.types.is_string(typ):
        where, nullable = field.name, field.nullable

        def text(v):
            if v is None:
                return ""
            if v == "" and nullable:
                raise RenderError(f"{where}: an empty text in a column that may be NULL would "
                                  "read back from the CSV file as NULL")
            if "\r" in v and not _CSV_QUOTE.search("\r"):
                raise RenderError(f"{where}: {v!r} holds a carriage return, which csv.writer "
                                  "leaves unquoted and a CSV reader takes for a line end")
            return v
        return text
    return lambda v: "" if v is None else str(v)


class TableCodec:
    """JSON and CSV text of the rows of one export table with a fixed Arrow schema."""

    def __init__(self, table: str, schema: pa.Schema):
        self.table, self.schema = table, schema
        self.names = schema.names
        ordered = sorted(schema, key=lambda f: f.name)
        inner = "\n" + " " * 3          # a row is rendered at depth 2 (document > rows > row)
        self._row_parts = [(f.name, ("{" if i == 0 else ",") + inner + _enc(f.name) + ": ",
                            _value(f, 3, f"{table}.{f.name}")) for i, f in enumerate(ordered)]
        self._row_close = "\n  }"
        self._cells = [(f.name, _csv_cell(f)) for f in schema]
        if len(self._cells) < 2:     # csv.writer writes a lone empty field as ""
            raise ValueError(f"{table}: a CSV export needs two columns or more")

    def json_row(self, row: dict) -> str:
        """The text of a row inside the ``rows`` array of the JSON document."""
        try:
            return "".join([h + r(row[n]) for n, h, r in self._row_parts]) + self._row_close
        except KeyError as err:
            raise RenderError(f"{self.table}: row has no column {err.args[0]!r}") from None

    def csv_rows(self, rows: list[dict]) -> str:
        """CSV lines of rows (each ending in a newline), as ``csv.writer`` writes them."""
        cells = self._cells
        return "".join([",".join([csv_field(cell(r[n])) for n, cell in cells]) + "\n"
                        for r in rows])

    def csv_header(self) -> str:
        buf = io.StringIO()
        csv.writer(buf, lineterminator="\n").writerow(self.names)
        return buf.getvalue()

    def json_head(self, release_id: str, n_rows: int) -> str:
        """The document up to its first row (``"rows": []`` and the rest when there is none)."""
        columns = "[\n  " + ",\n  ".join(map(_enc, self.names)) + "\n ]"
        head = f'{{\n "columns": {columns},\n "release_id": {_enc(release_id)},\n "rows": '
        return head + ("[\n  " if n_rows else "[]" + self.json_tail()[3:])

    def json_tail(self) -> str:
        """The document after its last row."""
        return f'\n ],\n "table": {_enc(self.table)}\n}}\n'

    JSON_SEPARATOR = ",\n  "
    """Between two rows of the JSON document."""
