"""``fluidledger ingest [PATH...]``: load raw batches into the store."""

from __future__ import annotations

import sys
from pathlib import Path

from pipeline.errors import EXIT_INTERNAL, EXIT_OK, EXIT_USAGE
from pipeline.progress import stage_progress
from pipeline.store import open_store

NAME = "ingest"
HELP = "Load raw batches (batch.toml + CSV) into the store; bad rows go to quarantine."


def add_arguments(p) -> None:
    p.add_argument("paths", nargs="*", type=Path, default=[Path("raw")], metavar="PATH",
                   help="raw root or batch folders (default: raw/)")
    p.add_argument("--fluids", type=Path, default=None,
                   help="fluids.toml (default: found in PATH or its parents)")


def run(args) -> int:
    from pipeline.ingest.stage import discover_batches, run_ingest

    with open_store(args.store) as store:
        total = sum(len(discover_batches(p)) for p in args.paths if p.exists())
        with stage_progress("ingest", total, quiet=args.quiet) as tick:
            result = run_ingest(store.con, args.paths, fluids_file=args.fluids,
                                progress=lambda b: tick(b.name))
    if not args.quiet:
        print(result.asstr())
        if not result.changed and not result.errors:
            print("no changes: every batch is already in the store")
    for b in result.errors:
        print(f"fluidledger ingest: error: {b.error}", file=sys.stderr)
    if any(b.internal for b in result.errors):
        return EXIT_INTERNAL     # the other batches were loaded; a fault of the code remains
    return EXIT_USAGE if result.errors else EXIT_OK
