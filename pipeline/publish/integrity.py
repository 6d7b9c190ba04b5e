"""Is ``published.duckdb`` still the release the store says it published? Rebuild it if not.

The published file is written read-only (mode 0444), but a stock client can still open it
writable where the file system lets it (as root, or after a chmod), and an UPDATE of a
curated constant or a replaced macro would then be served to every SQL user. So its content
is compared with a reference file built from the store (which holds every release's rows)
the way the publish stage builds it, with the same storage version (DuckDB renders view and
macro definitions by storage version, so only files of the same kind compare):

* every row of ``release`` (but for ``publish_run_id``, the run that last wrote the file),
  ``release_constant``, ``release_curve``, ``release_provenance`` and
  ``release_publication`` (but for its sequence number);
* the definition of every macro, view and table, and their names: an object added to the
  file, or one missing from it, is a difference too.

Each part of the rows is a count and a SHA-256 over the rows cast to text in a fixed order.
The publish stage records the parts of the file it built in its run row, so a verify of an
intact file only reads the file; the reference is built only when they differ (or were not
recorded), and a file that matches either is intact. :func:`check_published` returns the
differences; :func:`rebuild_published` writes the file again from the store (what the
nightly job does when the check finds one).
"""

from __future__ import annotations

import hashlib
import json
import logging
import tempfile
from dataclasses import dataclass
from pathlib import Path

import duckdb

from pipeline.publish import published

log = logging.getLogger(__name__)

#: release table -> (export table name, the column its rows are ordered by when rebuilt)
TABLES = {"release": ("release", "release_id"), "release_constant": ("constants", "value_id"),
          "release_curve": ("curves", "value_id"),
          "release_provenance": ("provenance", "value_id")}
#: columns left out of the comparison: which run last wrote the file, where and in what order
VOLATILE = {"release": ("publish_run_id",), "release_publication": ("publication_seq",)}


@dataclass(frozen=True)
class Publication:
    """A publication of the store into a published file."""

    release_id: str
    published_at: object
    publish_run_id: str
    export_dir: str
    published_file: str


@dataclass(frozen=True)
class PublishedCheck:
    """How a published file compares with the store.

    ``differences``: the parts that differ from the store's latest publication into the file
    (a finding: the file was altered, or is missing); ``stale``: set when the file is, part
    for part, an earlier publication of the store (a publish stopped before it swapped the
    new file in -- a note, not damage; the next publish or nightly run brings it up to date).
    """

    differences: tuple[str, ...] = ()
    stale: str | None = None

    @property
    def ok(self) -> bool:
        return not self.differences and self.stale is None


def publications(con: duckdb.DuckDBPyConnection, target: Path | None = None
                 ) -> list[Publication]:
    """The store's publications (those whose published file is ``target``), latest first."""
    rows = con.execute("SELECT release_id, published_at, publish_run_id, export_dir, "
                       "published_file FROM release_publication "
                       "ORDER BY publication_seq DESC").fetchall()
    if target is not None:
        target = Path(target).resolve()
        rows = [row for row in rows if Path(row[4]).resolve() == target]
    return [Publication(*row) for row in rows]


def latest_publication(con: duckdb.DuckDBPyConnection, target: Path) -> Publication | None:
    """The store's latest publication whose published file is ``target`` (None if none)."""
    found = publications(con, target)
    return found[0] if found else None


def _rows_digest(con, table: str, where: str, params: list) -> str:
    exclude = VOLATILE.get(table, ())
    cols = f"* EXCLUDE ({', '.join(exclude)})" if exclude else "*"
    n, digest = con.execute(
        f"SELECT count(*), sha256(coalesce(string_agg(CAST(t AS VARCHAR), chr(10) ORDER BY "
        f"CAST(t AS VARCHAR)), '')) FROM (SELECT {cols} FROM {table} {where}) t",
        params).fetchone()
    return f"{n} row(s), sha256 {digest[:16]}"


def _objects(con) -> dict[str, str]:
    """Every user macro and view with its definition, and every table with its columns."""
    parts: dict[str, str] = {}
    for name, params, definition in con.execute(
            "SELECT function_name, CAST(parameters AS VARCHAR), macro_definition "
            "FROM duckdb_functions() WHERE NOT internal AND database_name = current_database() "
            "AND function_type IN ('macro', 'table_macro') ORDER BY ALL").fetchall():
        key = f"macro {name}"
        parts[key] = parts.get(key, "") + f"({params}) {definition};"
    for name, sql in con.execute("SELECT view_name, sql FROM duckdb_views() WHERE NOT internal "
                                 "AND database_name = current_database()").fetchall():
        parts[f"view {name}"] = sql
    for name, sql in con.execute("SELECT table_name, sql FROM duckdb_tables() "
                                 "WHERE database_name = current_database()").fetchall():
        parts[f"table {name}"] = sql
    return parts


def content_of_file(con: duckdb.DuckDBPyConnection) -> dict[str, str]:
    """The parts of an open published file (see the module docstring)."""
    parts = _objects(con)
    for table in (*TABLES, "release_publication"):
        if f"table {table}" in parts:
            parts[f"rows {table}"] = _rows_digest(con, table, "", [])
    return parts


def file_parts(path: Path) -> dict[str, str]:
    """The parts of the published file at ``path`` (the publish stage records them)."""
    return _parts(path)[0]


def recorded_parts(con: duckdb.DuckDBPyConnection, pub: Publication) -> dict[str, str] | None:
    """The parts the publish run of ``pub`` recorded for the file it built (None when it
    recorded none: an older FluidLedger, or a publish killed before it finished)."""
    row = con.execute("SELECT summary_json FROM run WHERE run_id = ?",
                      [pub.publish_run_id]).fetchone()
    try:
        recorded = json.loads(row[0]).get("published_content") if row and row[0] else None
    except (ValueError, AttributeError):
        return None
    return recorded or None


def _parts(path: Path) -> tuple[dict[str, str], str | None]:
    """The parts of the published file at ``path``, and the run its publication row names."""
    con = published.open_read_only(path)
    try:
        parts = content_of_file(con)
        run = None
        if "table release_publication" in parts:
            row = con.execute("SELECT max(publish_run_id) FROM release_publication").fetchone()
            run = row[0] if row else None
        return parts, run
    finally:
        con.close()


def _reference(con, pub: Publication, target: Path) -> dict[str, str]:
    """The parts the published file of ``pub`` has when built from the store now."""
    with tempfile.TemporaryDirectory(prefix="fluidledger-verify-") as folder:
        return _parts(_build(con, pub, Path(folder) / target.name, target))[0]


def _build(con, pub: Publication, target: Path, recorded: Path) -> Path:
    """Build the published file of ``pub`` from the store beside ``target`` (temporary name);
    its publication row names ``recorded``."""
    tables = {}
    for store_table, (name, order) in TABLES.items():
        cur = con.execute(f"SELECT * FROM {store_table} WHERE release_id = ? ORDER BY {order}",
                          [pub.release_id])
        columns = [d[0] for d in cur.description]
        tables[name] = [dict(zip(columns, row)) for row in cur.fetchall()]
    release = tables["release"][0]
    extra = {"check_run_id": release["check_run_id"], "created_at": release["created_at"],
             "publish_run_id": pub.publish_run_id}
    publication = {"release_id": pub.release_id, "published_at": pub.published_at,
                   "publish_run_id": pub.publish_run_id, "export_dir": pub.export_dir,
                   "published_file": pub.published_file}
    return published.build_published_file(target, tables, extra, publication)


def parts_digest(parts: dict[str, str]) -> str:
    """SHA-256 of a file's parts (what a stamp of the published file records)."""
    return hashlib.sha256(json.dumps(parts, sort_keys=True).encode("utf-8")).hexdigest()


def check_published(con: duckdb.DuckDBPyConnection, target: Path, *,
                    stamps: dict[str, list] | None = None,
                    intact: dict[str, list] | None = None) -> PublishedCheck:
    """Compare the published file ``target`` with the store's publications into it (see
    :class:`PublishedCheck`); all clear when the store never published into ``target``.

    ``stamps``: path -> :func:`pipeline.verify.file_stamp` (with :func:`parts_digest` of the
    parts recorded for the latest publication) taken when those parts were read from the
    file; a file whose stamp is that record is not read again. ``intact`` gets the stamp of
    a file found to hold the recorded parts."""
    from pipeline.verify import file_stamp

    target = Path(target)
    pubs = publications(con, target)
    if not pubs:
        return PublishedCheck()
    if not target.exists():
        return PublishedCheck((f"{target.name} is missing (the store published release "
                               f"{pubs[0].release_id} into it)",))
    recorded = recorded_parts(con, pubs[0])
    key = str(target.resolve())
    before = file_stamp(target, parts_digest(recorded)) if recorded is not None else None
    if before is not None and (stamps or {}).get(key) == before:
        if intact is not None:
            intact[key] = before
        return PublishedCheck()
    try:
        have, run = _parts(target)
    except Exception as err:  # noqa: BLE001 - a file that cannot be read is the finding itself
        return PublishedCheck((f"{target.name} cannot be read: {str(err).splitlines()[0]}",))
    if have == recorded:
        if intact is not None and file_stamp(target, parts_digest(recorded)) == before:
            intact[key] = before
        return PublishedCheck()
    want = _reference(con, pubs[0], target)      # the installed FluidLedger's macros
    if have == want:
        return PublishedCheck()
    # the publication the file says it holds, wherever the store recorded it (a store and its
    # releases copied elsewhere keep their recorded paths)
    earlier = next((p for p in publications(con) if p.publish_run_id == run
                    and p != pubs[0]), None)
    if earlier is not None and (have == recorded_parts(con, earlier)
                                or have == _reference(con, earlier, target)):
        return PublishedCheck(stale=(
            f"{target.name} holds release {earlier.release_id} of publish run "
            f"{earlier.publish_run_id}, not the latest publication (release "
            f"{pubs[0].release_id}): a publish stopped before swapping the new file in; the "
            "next publish or nightly run brings it up to date"))
    diffs = []
    for key in sorted(set(have) | set(want)):
        if have.get(key) != want.get(key):
            what = ("added to the file" if key not in want else "missing from the file"
                    if key not in have else "differs from the store's release")
            diffs.append(f"{key}: {what}")
    return PublishedCheck(tuple(diffs))


def rebuild_published(con: duckdb.DuckDBPyConnection, target: Path) -> str | None:
    """Write ``target`` again from the store's latest publication into it (the release rows,
    views and macros); returns the release id, or None when the store never published there.
    The new file replaces the old one atomically, like a publish."""
    target = Path(target)
    pub = latest_publication(con, target)
    if pub is None:
        return None
    published.remove_leftovers(target)
    published.swap_in(_build(con, pub, target, target), target)
    return pub.release_id


def repair_published(con: duckdb.DuckDBPyConnection, root: Path, *,
                     stamps: dict[str, list] | None = None,
                     intact: dict[str, list] | None = None) -> dict | None:
    """Rebuild ``<root>/published.duckdb`` from the store when it differs from the store's
    latest publication into it (altered, missing, or stale after a stopped publish); what was
    found and done, or None when it was right (what the nightly job's verify stage does).
    ``stamps`` and ``intact``: see :func:`check_published`."""
    target = Path(root) / published.PUBLISHED_NAME
    found = check_published(con, target, stamps=stamps, intact=intact)
    if found.ok:
        return None
    release = rebuild_published(con, target)
    diffs = list(found.differences)
    why = (f"differed from the store's release {release} ({'; '.join(diffs[:3])}"
           f"{'; ...' if len(diffs) > 3 else ''})" if diffs else f"was stale: {found.stale}")
    text = f"{target.name} {why}: rebuilt from the store"
    (log.warning if diffs else log.info)("verify: %s", text)
    return {"text": text, "release_id": release, "differences": diffs}


__all__ = ["PublishedCheck", "check_published", "parts_digest", "rebuild_published", "repair_published",
           "latest_publication", "publications", "content_of_file", "file_parts",
           "recorded_parts"]
