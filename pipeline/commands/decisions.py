"""``fluidledger decisions``: every curation decision and what it touches now.

Dangling decisions (their reference no longer resolves) and lapsed waivers come first, then
pending ones (not yet applied by a run), active and idle ones. Always exits 0 when the file
is valid: a dangling decision is news for the curator, not a failure.
"""

from __future__ import annotations

import json

from pipeline.decisions.apply import resolve_all, touch_text
from pipeline.decisions.store import add_decisions_argument, load_decisions
from pipeline.store import open_store, resolve_store_path
from pipeline.textout import print_table

NAME = "decisions"
HELP = ("List the curation decisions with what each touches now (observations, fits, values, "
        "checks); dangling and lapsed ones first.")


def add_arguments(p) -> None:
    add_decisions_argument(p)
    p.add_argument("--json", metavar="PATH", help="also write the listing as JSON ('-': stdout)")
    p.add_argument("--csv", action="store_true", help="print CSV instead of a table")


def _listing(decisions, store_path) -> list[dict]:
    if not store_path.exists():
        return [{"id": d.id, "kind": d.kind, "state": "unresolved",
                 "reason": f"no store at {store_path}", "who": d.who, "when": d.when.isoformat(),
                 "why": d.why, "what": d.describe(), "fluid": d.fluid,
                 "touches": {}, "observations": [], "fits": [], "values": [], "checks": []}
                for d in decisions]
    with open_store(store_path, read_only=True) as store:
        return [t.asdict() for t in resolve_all(store.con, decisions)]


def run(args) -> int:
    decisions = load_decisions(args.decisions)
    rows = _listing(decisions, resolve_store_path(args.store))
    if args.json:
        text = json.dumps({"file": decisions.path, "decisions": rows}, indent=2, default=str)
        if args.json == "-":
            print(text)
            return 0
        with open(args.json, "w", encoding="utf-8") as fh:
            fh.write(text + "\n")
    if not rows:
        if not args.quiet:
            print(f"no decisions in {decisions.path}")
        return 0
    table = [(r["state"].upper(), r["id"], r["kind"], r["who"], r["when"], touch_text(r["touches"]),
              r["what"] + (f" -- {r['reason']}" if r["reason"] else ""), r["why"]) for r in rows]
    if args.quiet:
        table = [t for t in table if t[0] in ("DANGLING", "LAPSED")]
    print_table(["state", "id", "kind", "who", "when", "touches now", "what", "why"], table,
                title=f"decisions in {decisions.path}", as_csv=args.csv)
    return 0

