"""``fluidledger history``: the check runs kept in the store and how each check's status moved."""

from __future__ import annotations

NAME = "history"
HELP = ("List recent check runs (nightly or manual) with their counts and every status change "
        "of a check for a fluid, e.g. 'sources.agreement nitrogen: fail -> pass'.")


def add_arguments(p) -> None:
    p.add_argument("--fluid", action="append", metavar="ID",
                   help="only this fluid (repeatable)")
    p.add_argument("--limit", type=int, default=20, metavar="N",
                   help="show the latest N runs (default 20)")
    p.add_argument("--json", action="store_true", help="print JSON instead of text")


def run(args) -> int:
    from pipeline.errors import FluidLedgerError
    from pipeline.report.history import history_json, run_history
    from pipeline.store import open_store

    if args.limit < 1:
        raise FluidLedgerError(f"--limit must be at least 1, not {args.limit}")
    with open_store(args.store, read_only=True) as store:
        entries = run_history(store.con, fluids=args.fluid, limit=args.limit)
    if args.json:
        print(history_json(entries))
        return 0
    if not entries:
        which = f" for {', '.join(args.fluid)}" if args.fluid else ""
        print(f"no check runs in the store{which}; run 'fluidledger nightly' or "
              "'fluidledger check'")
        return 0
    print("\n".join(e.asstr() for e in entries))
    return 0
