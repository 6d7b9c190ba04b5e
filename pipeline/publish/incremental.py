"""Incremental releases: the rows of fluids whose inputs did not change are copied.

A release's rows of one fluid are a function of that fluid's inputs alone
(:meth:`~pipeline.publish.inputs.ReleaseInputs.subset`: its rows of every input table, the raw
files and sources they name, the findings about it), the policy, the curation decisions about
it and the pipeline version; the release id only fills the ``release_id`` column. So the
publish stage records, per release and fluid, the SHA-256 of those inputs (store table
``release_fluid``, with the constants left without a value and where the fluid's rows stand
in the text exports), and the next publish compares. Where a fluid's digest equals the one the
previous release recorded, its rows are copied instead of recomputed:

* in the store, by one ``INSERT ... SELECT`` per table under the new release id
  (:func:`copy_store_rows`);
* as Arrow, by one query per table, for the Parquet files and the published file
  (:func:`copied_rows`);
* in the JSON and CSV exports, as the previous release's text of those rows - read from its
  export folder once its files match its manifest - with the release id replaced
  (:func:`spliced_block`).

Only the other fluids are recomputed and rendered. Anything that does not match falls back to
recomputing (a fluid) or rendering (its text): no previous release or no state for it, other
inputs, policy or decisions, an export folder moved or altered, a block whose rows are not
where the state says. An incremental release equals a full release of the same inputs byte for
byte (``tests/publish/test_publish_incremental.py``); ``fluidledger publish --full`` recomputes
every fluid.
"""

from __future__ import annotations

import hashlib
import json
from collections import Counter
from dataclasses import dataclass, field
from json.encoder import encode_basestring as _enc
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.compute as pc

from pipeline.publish import exports, sqlmacros
from pipeline.publish.inputs import ReleaseInputs
from pipeline.publish.policy import Decisions, Policy
from pipeline.publish.render import csv_field

TEXT_TABLES = ("constants", "curves", "provenance")
"""The tables whose rows belong to one fluid each (the release table is one row, rendered)."""
STATE_TABLE = "release_fluid"
_KEEP = "fl_publish_keep"     # registered Arrow table of the fluids copied


def fluid_digests(inputs: ReleaseInputs, policy: Policy, decisions: Decisions) -> dict[str, str]:
    """fluid -> SHA-256 of everything its released rows depend on (see the module docstring)."""
    return inputs.fingerprints(policy.asdict(), decisions)[1]


@dataclass
class Previous:
    """The release published last, as far as a new release can copy from it."""

    release_id: str
    digests: dict[str, str]
    unresolved: dict[str, list[dict]]
    spans: dict[str, dict]
    texts: dict[str, bytes] = field(default_factory=dict)   # verified text files by name


def _arrow(relation) -> pa.Table:
    fetch = getattr(relation, "to_arrow_table", None) or relation.fetch_arrow_table
    return fetch()


def _verified_texts(folder: Path, release_id: str, fingerprint: str) -> dict[str, bytes]:
    """The JSON and CSV files of a release folder whose manifest is that release's and whose
    bytes match it; empty when anything does not (the text is then rendered afresh)."""
    try:
        manifest = json.loads((folder / exports.MANIFEST).read_text("utf-8"))
        if manifest.get("release_id") != release_id or manifest.get("fingerprint") != fingerprint:
            return {}
        entries = {e["path"]: e for e in manifest["files"]}
        texts = {}
        for table in TEXT_TABLES:
            for name in (f"{table}.json", f"{table}.csv"):
                data = (folder / name).read_bytes()
                entry = entries[name]
                if len(data) != entry["bytes"] or \
                        hashlib.sha256(data).hexdigest() != entry["sha256"]:
                    return {}
                texts[name] = data
        return texts
    except (OSError, ValueError, KeyError, TypeError):
        return {}


def previous_release(con: duckdb.DuckDBPyConnection) -> Previous | None:
    """The release of the store's latest publication with its per-fluid state, or None."""
    row = con.execute("SELECT p.release_id, p.export_dir, r.fingerprint FROM release_publication "
                      "p JOIN release r USING (release_id) ORDER BY p.publication_seq DESC "
                      "LIMIT 1").fetchone()
    if row is None:
        return None
    states = con.execute(f"SELECT fluid_id, inputs_sha256, unresolved_json, spans_json FROM "
                         f"{STATE_TABLE} WHERE release_id = ?", [row[0]]).fetchall()
    if not states:
        return None
    return Previous(row[0], {f: d for f, d, _, _ in states},
                    {f: json.loads(u) for f, _, u, _ in states},
                    {f: json.loads(s) for f, _, _, s in states},
                    _verified_texts(Path(row[1]), row[0], row[2]))


@dataclass
class Plan:
    """Which fluids a release copies from the previous one and which it recomputes."""

    digests: dict[str, str]
    previous: Previous | None = None
    reuse: list[str] = field(default_factory=list)
    recompute: list[str] = field(default_factory=list)

    def changed(self) -> list[str] | None:
        """The fluids whose rows may differ from the previous release's: those recomputed and
        those it held that this release does not; None without a previous release."""
        if self.previous is None:
            return None
        return sorted(set(self.recompute) | (set(self.previous.digests) - set(self.digests)))


def plan(con, digests: dict[str, str], *, incremental: bool = True) -> Plan:
    """Copy the fluids whose digest (:func:`fluid_digests`) the previous release recorded."""
    previous = previous_release(con) if incremental else None
    reuse = sorted(f for f, d in digests.items()
                   if previous is not None and previous.digests.get(f) == d)
    return Plan(digests, previous, reuse, sorted(set(digests) - set(reuse)))


# --- copying rows --------------------------------------------------------------------------------

def _select(table: str) -> str:
    """Rows of the copied fluids of a release, under another release id, in export columns."""
    columns = ", ".join(sqlmacros.ident(n) for n in exports.SCHEMAS[table].names[1:])
    return (f"SELECT CAST(? AS VARCHAR) AS release_id, {columns} FROM "
            f"{sqlmacros.ident(exports.STORE_TABLES[table])} WHERE release_id = ? AND "
            f"fluid_id IN (SELECT fluid_id FROM {_KEEP})")


def _with_keep(con, fluids: list[str], work):
    con.register(_KEEP, pa.table({"fluid_id": pa.array(fluids, pa.string())}))
    try:
        return work()
    finally:
        con.unregister(_KEEP)


def copied_rows(con, table: str, p: Plan, release_id: str) -> pa.Table:
    """The copied fluids' rows of ``table`` from the previous release, as Arrow."""
    def read():
        data = _arrow(con.sql(_select(table), params=[release_id, p.previous.release_id]))
        return data.cast(exports.SCHEMAS[table])
    return _with_keep(con, p.reuse, read)


def copy_store_rows(con, p: Plan, release_id: str) -> None:
    """Insert the copied fluids' rows of every content table under ``release_id`` (in the
    caller's transaction)."""
    if not p.reuse:
        return

    def insert():
        for table in TEXT_TABLES:
            target = sqlmacros.ident(exports.STORE_TABLES[table])
            con.execute(f"INSERT INTO {target} {_select(table)}",
                        [release_id, p.previous.release_id])
    _with_keep(con, p.reuse, insert)


def insert_state(con, p: Plan, release_id: str, unresolved: dict[str, list[dict]],
                 spans: dict[str, dict]) -> None:
    """The new release's per-fluid state (in the caller's transaction)."""
    fluids = sorted(p.digests)
    per_fluid: dict[str, dict] = {f: {} for f in fluids}
    for table, blocks in spans.items():
        for fluid, where in blocks.items():
            if fluid in per_fluid:
                per_fluid[fluid][table] = where
    data = pa.table({"release_id": [release_id] * len(fluids), "fluid_id": fluids,
                     "inputs_sha256": [p.digests[f] for f in fluids],
                     "unresolved_json": [json.dumps(unresolved.get(f, []), sort_keys=True)
                                         for f in fluids],
                     "spans_json": [json.dumps(per_fluid[f], sort_keys=True) for f in fluids]})
    con.register("fl_release_fluid_rows", data)
    try:
        con.execute(f"INSERT INTO {STATE_TABLE} SELECT * FROM fl_release_fluid_rows")
    finally:
        con.unregister("fl_release_fluid_rows")


# --- text ----------------------------------------------------------------------------------

def _csv_prefix(release_id: str, value_id: str) -> bytes:
    """How a CSV row of these ids begins (release_id and value_id are the first two columns)."""
    return f"{csv_field(release_id)},{csv_field(value_id)},".encode("utf-8")


def spliced_block(p: Plan, table: str, fluid: str, value_ids: list[str],
                  release_id: str) -> exports.Block | None:
    """The previous release's text of a fluid's rows with the new release id, or None when it
    cannot be taken over (no verified text, the rows are not where the state says)."""
    prev = p.previous
    where = prev.spans.get(fluid, {}).get(table) if prev is not None else None
    json_text, csv_text = (prev.texts.get(f"{table}.{x}") for x in ("json", "csv")) \
        if prev is not None else (None, None)
    n = len(value_ids)
    if not where or where.get("rows") != n or json_text is None or csv_text is None:
        return None
    (j0, j1), (c0, c1) = where["json"], where["csv"]
    jb, cb = json_text[j0:j1], csv_text[c0:c1]
    old_line = b',\n   "release_id": ' + _enc(prev.release_id).encode("utf-8") + b',\n'
    new_line = b',\n   "release_id": ' + _enc(release_id).encode("utf-8") + b',\n'
    if not (jb.startswith(b"{\n") and jb.endswith(b"\n  }")) or jb.count(old_line) != n:
        return None
    jb = jb.replace(old_line, new_line)
    old_row, new_row = (x.encode("utf-8") + b"," for x in (prev.release_id, release_id))
    if not (cb.startswith(old_row) and cb.endswith(b"\n")) or \
            cb.count(b"\n" + old_row) != n - 1:
        return None
    cb = new_row + cb[len(old_row):].replace(b"\n" + old_row, b"\n" + new_row)
    # the block holds n rows (counted above by their release ids, and here by the separators
    # between rows, which only rows have: deeper objects are indented further), beginning with
    # the first row's id and ending with the last's
    sep = b"\n  },\n  {\n"
    if jb.count(sep) != n - 1:
        return None
    first_json = jb[:jb.find(sep)] if n > 1 else jb
    last_json = jb[jb.rfind(sep):] if n > 1 else jb
    needle = (lambda vid: b'\n   "value_id": ' + _enc(vid).encode("utf-8") + b",\n")
    if needle(value_ids[0]) not in first_json or needle(value_ids[-1]) not in last_json:
        return None
    last_csv = cb[cb.rfind(b"\n" + new_row) + 1:] if n > 1 else cb
    if not (cb.startswith(_csv_prefix(release_id, value_ids[0]))
            and last_csv.startswith(_csv_prefix(release_id, value_ids[-1]))):
        return None
    return exports.Block(fluid, n, jb, cb)


def _runs(fluids: list[str]) -> list[tuple[str, int, int]]:
    """(fluid, start, end) of each run of equal fluid ids."""
    runs, start = [], 0
    for i in range(1, len(fluids) + 1):
        if i == len(fluids) or fluids[i] != fluids[start]:
            runs.append((fluids[start], start, i))
            start = i
    return runs


def assemble(con, p: Plan, fresh: dict[str, list[dict]], release_id: str
             ) -> dict[str, exports.ExportTable]:
    """The content tables of a release: the fresh rows (dicts, of the recomputed fluids) and
    the copied ones, sorted by value_id, with their text in one block per fluid."""
    out = {}
    for table in TEXT_TABLES:
        parts = [exports.arrow_table(table, fresh[table])]
        if p.reuse:
            parts.append(copied_rows(con, table, p, release_id))
        rows = pa.concat_tables(parts)
        rows = rows.take(pc.sort_indices(rows, [("value_id", "ascending")])).combine_chunks()
        fluids = rows.column("fluid_id").to_pylist()
        value_ids = rows.column("value_id").to_pylist()
        runs = _runs(fluids)
        counted = Counter(r[0] for r in runs)
        several = {f for f, k in counted.items() if k > 1}
        by_fluid: dict[str, list[dict]] = {}
        for r in fresh[table]:
            by_fluid.setdefault(r["fluid_id"], []).append(r)
        blocks = []
        for fluid, start, end in runs:
            key = "" if fluid in several else fluid
            block = None
            if fluid in p.reuse and fluid not in several:
                block = spliced_block(p, table, fluid, value_ids[start:end], release_id)
            if block is None:
                mine = by_fluid.get(fluid) if fluid not in p.reuse and fluid not in several \
                    else None
                if mine is None or len(mine) != end - start:
                    mine = rows.slice(start, end - start).to_pylist()
                block = exports.rendered_block(table, key, mine)
            blocks.append(block)
        out[table] = exports.ExportTable(table, rows, tuple(blocks))
    return out
