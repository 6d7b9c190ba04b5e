"""Exports of a release: Parquet, CSV and JSON of each table, and manifest.json.

Layout of ``<root>/<release>/``: ``<table>.parquet``, ``<table>.csv``, ``<table>.json`` for the
tables ``release``, ``constants``, ``curves``, ``provenance``, and ``manifest.json``
(``{"release_id", "fingerprint", "files": [{"path", "sha256", "bytes"}]}``, written last).

The files are a deterministic function of the rows (no timestamps, fixed column order, rows
sorted by value_id, floats written as their shortest round-trip text), so equal inputs give
byte-identical files. CSV cells of list and struct columns hold sort-keyed compact JSON; an
empty cell is NULL only in a nullable column. :func:`json_bytes` of :func:`json_document` and
:func:`csv_bytes` define the text files; :mod:`pipeline.publish.render` writes the same bytes
fast, in blocks of rows (:class:`Block`), so that a release can take the text of the rows it
copies from the previous one (:mod:`pipeline.publish.incremental`).

:func:`prepare_release_folder` writes into a temporary folder beside the final one and
validates it (:func:`validate_folder`) before :func:`commit_release_folder` renames it into
place (an atomic rename). Every exported row is schema-valid because

* every row of every table is checked against ``schemas/release-<table>.schema.json`` as a
  typed Arrow table, column by column (:mod:`pipeline.publish.schemacheck`; the document
  around the rows and the first row with ``jsonschema`` too, so both keep agreeing);
* the Parquet file is read back and must equal that table;
* the JSON and CSV files are renderings of the same values: the renderer checks each value
  against its column's Arrow type as it writes it, and text copied from the previous release
  is that release's validated text (its manifest hash checked) with the release id replaced,
  its rows counted and its first and last row the ones the store copies;
* every file's SHA-256 and size are read back against the manifest.
"""

from __future__ import annotations

import csv
import functools
import hashlib
import io
import json
import os
import shutil
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from pipeline.errors import PublishError
from pipeline.publish import schemacheck
from pipeline.publish.render import RenderError, TableCodec

MANIFEST = "manifest.json"
FORMATS = ("parquet", "csv", "json")

_STR, _F64, _I32, _I64, _BOOL = pa.string(), pa.float64(), pa.int32(), pa.int64(), pa.bool_()


def _f(name: str, typ: pa.DataType, nullable: bool = False) -> pa.Field:
    return pa.field(name, typ, nullable=nullable)


_SOURCE = pa.struct([_f("source_id", _STR), _f("kind", _STR, True), _f("citation", _STR, True),
                     _f("doi", _STR, True), _f("used", _BOOL)])
_ENTITY = pa.struct([_f("entity", _STR), _f("entity_id", _STR), _f("source_id", _STR, True),
                     _f("file_sha256", _STR, True), _f("file_path", _STR, True),
                     _f("row_numbers", pa.list_(_I64)), _f("obs_ids", pa.list_(_I64)),
                     _f("value_si", _F64, True), _f("u_si", _F64, True), _f("used", _BOOL),
                     _f("note", _STR), _f("cells", pa.list_(_STR))])
_FINDING = pa.struct([_f("check_id", _STR), _f("subject", _STR), _f("status", _STR),
                      _f("message", _STR)])

#: table -> Arrow schema (column order = the store's table; nullable = NULL allowed)
SCHEMAS: dict[str, pa.Schema] = {
    "release": pa.schema([
        _f("release_id", _STR), _f("fingerprint", _STR), _f("pipeline_version", _STR),
        _f("with_failed_checks", _BOOL), _f("checks_failed", _I32), _f("checks_errored", _I32),
        _f("checks_warned", _I32), _f("n_constants", _I32), _f("n_curves", _I32),
        _f("n_provenance", _I32), _f("policy_sha256", _STR), _f("policy_json", _STR),
        _f("decisions_json", _STR)]),
    "constants": pa.schema([
        _f("release_id", _STR), _f("value_id", _STR), _f("fluid_id", _STR), _f("point", _STR),
        _f("property", _STR), _f("value_si", _F64), _f("u_si", _F64, True), _f("unit", _STR),
        _f("method", _STR), _f("method_detail", _STR), _f("n_candidates", _I32),
        _f("n_used", _I32), _f("birge_ratio", _F64, True), _f("source_ids", pa.list_(_STR)),
        _f("check_status", _STR)]),
    "curves": pa.schema([
        _f("release_id", _STR), _f("value_id", _STR), _f("curve_id", _STR), _f("fluid_id", _STR),
        _f("boundary", _STR), _f("solid_phase", _STR), _f("quantity", _STR), _f("unit", _STR),
        _f("form", _STR), _f("form_citation", _STR), _f("link", _STR),
        _f("T_ref_K", _F64, True), _f("reference_value_si", _F64),
        _f("param_names", pa.list_(_STR)), _f("params", pa.list_(_F64)),
        _f("exponents", pa.list_(_F64)), _f("covariance", pa.list_(pa.list_(_F64)), True),
        _f("T_min_K", _F64), _f("T_max_K", _F64), _f("n_points", _I32), _f("n_used", _I32),
        _f("n_flagged", _I32), _f("weighted_rms", _F64, True), _f("reduced_chi2", _F64, True),
        _f("input_hash", _STR), _f("check_status", _STR)]),
    "provenance": pa.schema([
        _f("release_id", _STR), _f("value_id", _STR), _f("fluid_id", _STR),
        _f("value_kind", _STR), _f("method", _STR), _f("fit_id", _STR, True),
        _f("was_generated_by", _STR), _f("was_attributed_to", pa.list_(_SOURCE)),
        _f("was_derived_from", pa.list_(_ENTITY)), _f("checks", pa.list_(_FINDING)),
        _f("decision_ids", pa.list_(_STR))]),
}
#: table -> store table it fills
STORE_TABLES = {"release": "release", "constants": "release_constant",
                "curves": "release_curve", "provenance": "release_provenance"}
JSON_SCHEMAS = {"release": "release-info.schema.json",
                "constants": "release-constants.schema.json",
                "curves": "release-curves.schema.json",
                "provenance": "release-provenance.schema.json"}
MANIFEST_SCHEMA = "release-manifest.schema.json"


def arrow_table(table: str, rows: list[dict]) -> pa.Table:
    """The rows of one export table as Arrow with its fixed schema."""
    schema = SCHEMAS[table]
    return pa.Table.from_pylist([{f.name: r[f.name] for f in schema} for r in rows], schema=schema)


# --- text forms -----------------------------------------------------------------------------

def _json_text(value) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False)


def _cell(value, typ: pa.DataType) -> str:
    if value is None:
        return ""
    if pa.types.is_list(typ) or pa.types.is_struct(typ):
        return _json_text(value)
    if pa.types.is_boolean(typ):
        return "true" if value else "false"
    if pa.types.is_floating(typ):
        return repr(float(value))
    return str(value)


def _uncell(text: str, field: pa.Field):
    if text == "" and field.nullable:
        return None
    typ = field.type
    if pa.types.is_list(typ) or pa.types.is_struct(typ):
        return json.loads(text)
    if pa.types.is_boolean(typ):
        return {"true": True, "false": False}[text]
    if pa.types.is_floating(typ):
        return float(text)
    if pa.types.is_integer(typ):
        return int(text)
    return text


def csv_bytes(table: str, rows: list[dict]) -> bytes:
    schema = SCHEMAS[table]
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(schema.names)
    for r in rows:
        writer.writerow([_cell(r[f.name], f.type) for f in schema])
    return buf.getvalue().encode("utf-8")


def read_csv_rows(table: str, data: bytes) -> list[dict]:
    schema = SCHEMAS[table]
    reader = csv.reader(io.StringIO(data.decode("utf-8"), newline=""))
    header = next(reader)
    if header != schema.names:
        raise PublishError(f"{table}.csv header {header} is not {schema.names}")
    return [{f.name: _uncell(v, f) for f, v in zip(schema, line)} for line in reader]


def json_document(release_id: str, table: str, rows: list[dict]) -> dict:
    return {"release_id": release_id, "table": table, "columns": SCHEMAS[table].names,
            "rows": [{f.name: r[f.name] for f in SCHEMAS[table]} for r in rows]}


def json_bytes(document: dict) -> bytes:
    return (json.dumps(document, sort_keys=True, indent=1, ensure_ascii=False, allow_nan=False)
            + "\n").encode("utf-8")


def parquet_bytes(table: str, rows: list[dict] | pa.Table) -> bytes:
    data = rows if isinstance(rows, pa.Table) else arrow_table(table, rows)
    sink = pa.BufferOutputStream()
    pq.write_table(data.combine_chunks(), sink, compression="zstd", write_statistics=True)
    return sink.getvalue().to_pybytes()


# --- blocks of rows ----------------------------------------------------------------------------

@dataclass(frozen=True)
class Block:
    """The text of consecutive rows of an export table: one fluid's rows, or the release row.

    ``json``: the rows as they stand in the ``rows`` array of the JSON document, joined by
    ``,\n  ``; ``csv``: their CSV lines."""

    key: str
    n_rows: int
    json: bytes
    csv: bytes


@dataclass(frozen=True)
class ExportTable:
    """One export table: all its rows as Arrow (sorted by value_id) and their text in blocks,
    in the same order."""

    name: str
    rows: pa.Table
    blocks: tuple[Block, ...]


@functools.lru_cache(maxsize=None)
def codec(table: str) -> TableCodec:
    return TableCodec(table, SCHEMAS[table])


def rendered_block(table: str, key: str, rows: list[dict]) -> Block:
    """The text of ``rows`` (dicts), each value checked against its column's Arrow type."""
    c = codec(table)
    try:
        text = c.JSON_SEPARATOR.join([c.json_row(r) for r in rows])
        lines = c.csv_rows(rows)
    except RenderError as err:
        raise PublishError(str(err)) from None
    return Block(key, len(rows), text.encode("utf-8"), lines.encode("utf-8"))


def export_table(table: str, rows: list[dict]) -> ExportTable:
    """An export table of dict rows in one block."""
    return ExportTable(table, arrow_table(table, rows), (rendered_block(table, "", rows),))


# --- validation ------------------------------------------------------------------------------

def check_schema(document, schema_name: str, what: str) -> None:
    """Raise :class:`PublishError` naming the first violation of ``schema_name``."""
    schemacheck.validate_json(document, schema_name, what)


def validate_table(release_id: str, table: str, rows: pa.Table) -> None:
    """Every row of one table against its schema (in bulk), the document around the rows and
    the first row with ``jsonschema``."""
    name, what = JSON_SCHEMAS[table], f"{table}.json"
    schemacheck.validate_json({"release_id": release_id, "table": table,
                               "columns": SCHEMAS[table].names}, name, what, part="envelope")
    schemacheck.check_rows(rows, name, what)
    if rows.num_rows:
        schemacheck.validate_json(rows.slice(0, 1).to_pylist()[0], name, f"{what} row 0",
                                  part="row")


def validate_folder(folder: Path, release_id: str,
                    tables: dict[str, pa.Table | list[dict]],
                    stamps: dict[str, list] | None = None) -> None:
    """An export folder: every table's rows against its schema (:func:`validate_table`), the
    Parquet files read back as those rows, and every file against the manifest's hash and size
    (the JSON and CSV files are renderings of the same rows, see the module docstring).

    ``stamps``, when given, gets each file's :func:`pipeline.verify.file_stamp` as it was read
    back and hashed (by file name): what lets the nightly verify prove it unchanged later."""
    from pipeline.verify import file_stamp

    for table, rows in tables.items():
        data = rows if isinstance(rows, pa.Table) else arrow_table(table, rows)
        validate_table(release_id, table, data)
        try:
            back = pq.read_table(folder / f"{table}.parquet")
        except (OSError, pa.ArrowException) as err:
            raise PublishError(f"{table}.parquet cannot be read back: {err}") from None
        if not back.equals(data):
            raise PublishError(f"{table}.parquet does not read back as written")
    manifest = json.loads((folder / MANIFEST).read_text("utf-8"))
    check_schema(manifest, MANIFEST_SCHEMA, MANIFEST)
    for entry in manifest["files"]:
        path = folder / entry["path"]
        before = file_stamp(path, entry["sha256"]) if stamps is not None else None
        data = path.read_bytes()
        if hashlib.sha256(data).hexdigest() != entry["sha256"] or len(data) != entry["bytes"]:
            raise PublishError(f"{entry['path']} does not match its manifest entry")
        if stamps is not None and file_stamp(path, entry["sha256"]) == before:
            stamps[entry["path"]] = before


# --- writing -----------------------------------------------------------------------------------

@dataclass(frozen=True)
class ExportResult:
    folder: Path
    manifest: dict
    written: bool     # False when an identical folder was already in place


def _text_files(release_id: str, table: ExportTable) -> tuple[bytes, bytes, dict]:
    """The JSON and CSV files of a table from its blocks, and where each block stands in them:
    key -> {"json": [start, end], "csv": [start, end], "rows": n}."""
    c = codec(table.name)
    head = c.json_head(release_id, table.rows.num_rows).encode("utf-8")
    sep = c.JSON_SEPARATOR.encode("utf-8")
    json_parts, csv_parts, spans = [head], [c.csv_header().encode("utf-8")], {}
    at_json, at_csv = len(head), len(csv_parts[0])
    for i, block in enumerate(b for b in table.blocks if b.n_rows):
        if i:
            json_parts.append(sep)
            at_json += len(sep)
        json_parts.append(block.json)
        csv_parts.append(block.csv)
        spans[block.key] = {"json": [at_json, at_json + len(block.json)],
                            "csv": [at_csv, at_csv + len(block.csv)], "rows": block.n_rows}
        at_json += len(block.json)
        at_csv += len(block.csv)
    if table.rows.num_rows:
        json_parts.append(c.json_tail().encode("utf-8"))
    if sum(b.n_rows for b in table.blocks) != table.rows.num_rows:
        raise PublishError(f"{table.name}: the text blocks hold "
                           f"{sum(b.n_rows for b in table.blocks)} rows, the table "
                           f"{table.rows.num_rows}")
    return b"".join(json_parts), b"".join(csv_parts), spans


def _write_files(folder: Path, release_id: str, fingerprint: str,
                 tables: dict[str, ExportTable]) -> tuple[dict, dict]:
    files, spans = {}, {}
    for name, table in tables.items():
        files[f"{name}.parquet"] = parquet_bytes(name, table.rows)
        files[f"{name}.json"], files[f"{name}.csv"], spans[name] = _text_files(release_id, table)
    entries = []
    for name in sorted(files):
        _write_read_only(folder / name, files[name])
        entries.append({"path": name, "sha256": hashlib.sha256(files[name]).hexdigest(),
                        "bytes": len(files[name])})
    manifest = {"release_id": release_id, "fingerprint": fingerprint, "files": entries}
    _write_read_only(folder / MANIFEST, json_bytes(manifest))
    return manifest, spans


def _write_read_only(path: Path, data: bytes) -> None:
    """Write a release file and make it read-only (mode 0444): releases are immutable."""
    path.write_bytes(data)
    os.chmod(path, 0o444)


def process_alive(pid: int) -> bool:
    """True when a process ``pid`` exists (it may belong to another user)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def leftover_pid(name: str, prefix: str, suffix: str = "") -> int | None:
    """The PID in a temporary name ``<prefix>...-<pid><suffix>`` (or ``.<pid><suffix>``)."""
    if not (name.startswith(prefix) and name.endswith(suffix)):
        return None
    stem = name[len(prefix):len(name) - len(suffix)] if suffix else name[len(prefix):]
    digits = stem.rsplit("-", 1)[-1].rsplit(".", 1)[-1]
    return int(digits) if digits.isdigit() else None


def remove_dead_leftovers(folder: Path, prefix: str, suffixes: tuple[str, ...] = ("",), *,
                          folders: bool) -> list[Path]:
    """Remove the entries of ``folder`` named ``<prefix>...<pid><suffix>`` - folders when
    ``folders``, else files - whose writing process ``pid`` is gone (what a killed publish
    leaves); those of live processes, another publish into the same folder, are left alone.
    Returns what was removed.
    """
    removed = []
    if not folder.is_dir():
        return removed
    for path in folder.iterdir():
        suffix = next((x for x in suffixes if path.name.endswith(x)), None)
        pid = leftover_pid(path.name, prefix, suffix) if suffix is not None else None
        if pid is None or pid == os.getpid() or path.is_dir() != folders or process_alive(pid):
            continue
        if folders:
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
        removed.append(path)
    return removed


def remove_leftovers(root: Path) -> list[Path]:
    """Remove temporary release folders ``.tmp-<release>-<pid>`` under ``root`` left by a
    publish killed before its rename (see :func:`remove_dead_leftovers`)."""
    return remove_dead_leftovers(root, ".tmp-", folders=True)


def prepare_release_folder(root: Path, release_id: str, fingerprint: str,
                           tables: dict[str, ExportTable | list[dict]],
                           stamps: dict[str, list] | None = None
                           ) -> tuple[Path, dict, dict]:
    """Write and validate the exports in a temporary folder under ``root``; return it, the
    manifest and where each block of rows stands in the text files (see :func:`_text_files`).
    ``stamps``: see :func:`validate_folder`.
    """
    tables = {name: t if isinstance(t, ExportTable) else export_table(name, t)
              for name, t in tables.items()}
    root.mkdir(parents=True, exist_ok=True)
    tmp = root / f".tmp-{release_id}-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        manifest, spans = _write_files(tmp, release_id, fingerprint, tables)
        validate_folder(tmp, release_id, {name: t.rows for name, t in tables.items()}, stamps)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return tmp, manifest, spans


def existing_folder_matches(final: Path, manifest: dict) -> bool:
    """True when ``final`` already holds this release (same manifest); False when absent.

    Releases are immutable: a folder of the same name with other content is an error.
    """
    if not final.exists():
        return False
    try:
        have = json.loads((final / MANIFEST).read_text("utf-8"))
    except (OSError, json.JSONDecodeError):
        have = None
    if have != manifest:
        raise PublishError("an export folder of this release exists with other content; "
                           "releases are immutable (remove it or publish another name)",
                           file=str(final))
    return True


def commit_release_folder(tmp: Path, final: Path, already: bool) -> bool:
    """Rename the validated folder into place (atomic), or drop it when ``already`` there."""
    if already:
        shutil.rmtree(tmp, ignore_errors=True)
        return False
    os.rename(tmp, final)
    return True
