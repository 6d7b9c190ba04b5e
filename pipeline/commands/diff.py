"""``fluidledger diff RELEASE_A RELEASE_B``: what changed between two releases, and why."""

from __future__ import annotations

import json
import sys

from pipeline.textout import print_table

NAME = "diff"
HELP = ("Compare two releases of the store: values added, removed and changed (old, new, the "
        "change in units of the combined uncertainty; a curve by its value at its reference "
        "temperature) and the sources that caused each change.")


def add_arguments(p) -> None:
    p.add_argument("release_a", metavar="RELEASE_A", help="the older release")
    p.add_argument("release_b", metavar="RELEASE_B", help="the newer release")
    p.add_argument("--json", action="store_true", help="print the differences as JSON")
    p.add_argument("--csv", action="store_true", help="print the table as CSV")


def _num(x) -> str:
    return "" if x is None else f"{x:.7g}"


def run(args) -> int:
    from pipeline.publish.diff import diff_releases
    from pipeline.publish.published import open_read_only
    from pipeline.store import resolve_store_path

    con = open_read_only(resolve_store_path(args.store))
    try:
        result = diff_releases(con, args.release_a, args.release_b)
    finally:
        con.close()
    if args.json:
        print(json.dumps(result.asdict(), indent=2, sort_keys=True))
        return 0
    rows = [(c.change, c.value_id, _num(c.old), _num(c.new),
             c.unit + (f" at {c.T_ref_K:.6g} K" if c.T_ref_K is not None else ""),
             "" if c.z is None else f"{c.z:+.3g}",
             "; ".join(c.causes + [f"source added: {s}" for s in c.sources_added]
                       + [f"source dropped: {s}" for s in c.sources_removed]) or c.detail)
            for c in result.changes]
    if not args.quiet and not args.csv:
        print(result.asstr())
    if rows:
        print_table(("change", "value", "old", "new", "unit", "z (Δ/u_comb)", "why"), rows,
                    as_csv=args.csv, stream=sys.stdout)
    return 0
