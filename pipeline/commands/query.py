"""``fluidledger query "SQL"``: run read-only SQL against the store or the published file.

The database is opened read-only with file access outside it disabled; statements other than
SELECT (DESCRIBE, SHOW, SUMMARIZE, FROM-first), EXPLAIN, PRAGMA and CALL are refused before
they run (exit 2). The working store may be busy while a stage writes it (exit 75): the
published file (``--published``) is never locked by a writer.

``--published`` is a plain switch (the published file beside the store), so
``fluidledger query --published "SQL"`` reads the SQL as SQL; another published file is named
with ``--published-file PATH``, which implies ``--published``.
"""

from __future__ import annotations

import sys
from pathlib import Path

from pipeline.store import resolve_store_path
from pipeline.textout import print_table

NAME = "query"
HELP = ("Run read-only SQL against the store (or, with --published, the published file) and "
        "print a table or CSV; e.g. fluidledger query \"SELECT fluid_id, "
        "fl_vapour_pressure(fluid_id, 100.0) FROM curated_constants\".")


def add_arguments(p) -> None:
    p.add_argument("sql", metavar="SQL", help="one or more read statements; the last one's "
                                              "result is printed")
    p.add_argument("--csv", action="store_true", help="print CSV instead of a table")
    p.add_argument("--published", action="store_true",
                   help="query the published file (published.duckdb beside the store)")
    p.add_argument("--published-file", metavar="PATH", default=None,
                   help="query this published file (implies --published)")


def target_path(args) -> Path:
    from pipeline.publish.published import PUBLISHED_NAME

    if args.published_file:
        return Path(args.published_file)
    store = resolve_store_path(args.store)
    return store.parent / PUBLISHED_NAME if args.published else store


def run(args) -> int:
    from pipeline.publish.published import open_read_only, read_only_query

    con = open_read_only(target_path(args))
    try:
        columns, rows = read_only_query(con, args.sql)
    finally:
        con.close()
    print_table(columns, rows, as_csv=args.csv, stream=sys.stdout)
    return 0
