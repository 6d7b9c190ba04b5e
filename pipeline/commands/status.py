"""``fluidledger status``: what the store holds, per fluid and source."""

from __future__ import annotations

from pipeline.store import open_store
from pipeline.textout import print_table

NAME = "status"
HELP = "Per fluid and source: observations, fixed points, quarantined rows, latest ingest."

_SQL = """
WITH obs AS (SELECT fluid_id, source_id, count(*) AS n FROM observation_current GROUP BY ALL),
     fp AS (SELECT fluid_id, source_id, count(*) AS n FROM fixed_point_current GROUP BY ALL),
     q AS (SELECT f.fluid_id, f.source_id, count(*) AS n FROM quarantine_current q
           JOIN raw_file f USING (file_id) GROUP BY ALL),
     latest AS (SELECT source_id, max(ingested_at) AS at FROM raw_file_current GROUP BY ALL),
     pairs AS (SELECT fluid_id, source_id FROM obs UNION SELECT fluid_id, source_id FROM fp
               UNION SELECT fluid_id, source_id FROM q WHERE fluid_id IS NOT NULL)
SELECT p.fluid_id, p.source_id, coalesce(obs.n, 0), coalesce(fp.n, 0), coalesce(q.n, 0),
       strftime(latest.at, '%Y-%m-%d %H:%M:%S')
FROM pairs p LEFT JOIN obs USING (fluid_id, source_id) LEFT JOIN fp USING (fluid_id, source_id)
LEFT JOIN q USING (fluid_id, source_id) LEFT JOIN latest USING (source_id)
ORDER BY p.fluid_id, p.source_id
"""


def add_arguments(p) -> None:
    p.add_argument("--csv", action="store_true", help="print CSV instead of a table")


def summary(con) -> dict:
    """Counts for the whole store (used by ingest and nightly summaries too)."""
    row = con.execute("""SELECT (SELECT count(*) FROM fluid), (SELECT count(*) FROM source),
        (SELECT count(*) FROM raw_file_current), (SELECT count(*) FROM observation_current),
        (SELECT count(*) FROM fixed_point_current), (SELECT count(*) FROM quarantine_current),
        (SELECT max(finished_at) FROM run WHERE kind = 'ingest')""").fetchone()
    keys = ["fluids", "sources", "files", "observations", "fixed_points", "quarantined",
            "latest_ingest"]
    return dict(zip(keys, row))


def run(args) -> int:
    with open_store(args.store, read_only=True) as store:
        rows = store.con.execute(_SQL).fetchall()
        s = summary(store.con)
        manifest_q = store.con.execute(
            "SELECT f.path, q.row_number, q.reason_code FROM quarantine_current q "
            "JOIN raw_file f USING (file_id) WHERE f.role = 'manifest'").fetchall()
    print_table(["fluid", "source", "observations", "fixed points", "quarantined", "latest ingest"],
                rows, as_csv=args.csv)
    if not args.csv:
        print(f"\n{s['fluids']} fluids, {s['sources']} sources, {s['files']} current files, "
              f"{s['observations']} observations, {s['fixed_points']} fixed points, "
              f"{s['quarantined']} quarantined rows; latest ingest {s['latest_ingest']}")
        for path, row, code in manifest_q:
            print(f"quarantined manifest entry: {path} entry {row}: {code}")
    return 0
