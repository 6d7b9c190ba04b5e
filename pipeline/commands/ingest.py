"""``fluidledger ingest [PATH...]``: load raw batches into the store."""

from __future__ import annotations

import sys
from pathlib import Path

from pipeline.errors import EXIT_INTERNAL, EXIT_OK, EXIT_USAGE
from pipeline.progress import brief, stage_progress
from pipeline.store import open_store

NAME = "ingest"
HELP = "Load raw batches (batch.toml + CSV) into the store; bad rows go to quarantine."


def add_arguments(p) -> None:
    p.add_argument("paths", nargs="*", type=Path, default=[Path("raw")], metavar="PATH",
                   help="raw root or batch folders (default: raw/)")
    p.add_argument("--fluids", type=Path, default=None,
                   help="fluids.toml (default: found in PATH or its parents)")


def one_line(result) -> str:
    """``ingest: 2 batch(es) loaded (40 rows read, 39 loaded, 1 quarantined), 14 unchanged``."""
    loaded = [b for b in result.batches if b.status == "loaded"]
    rows = [sum(b.rows[i] for b in loaded) for i in range(3)]
    unchanged = sum(b.status == "unchanged" for b in result.batches)
    text = (f"ingest: {len(loaded)} batch(es) loaded ({rows[0]} rows read, {rows[1]} loaded, "
            f"{rows[2]} quarantined), {unchanged} unchanged")
    if result.removed:
        text += f", {len(result.removed)} file(s) retired"
    return text


def run(args) -> int:
    from pipeline.ingest.stage import discover_batches, run_ingest

    with open_store(args.store) as store:
        total = sum(len(discover_batches(p)) for p in args.paths if p.exists())
        with stage_progress("ingest", total, quiet=args.quiet) as tick:
            result = run_ingest(store.con, args.paths, fluids_file=args.fluids,
                                progress=lambda b: tick(b.name))
    if not brief(args):
        print(result.asstr())
        if not result.changed and not result.errors:
            print("no changes: every batch is already in the store")
    elif result.changed:   # off a terminal: one line, and nothing at all on a quiet night
        print(one_line(result))
    for b in result.errors:
        print(f"fluidledger ingest: error: {b.error}", file=sys.stderr)
    if any(b.internal for b in result.errors):
        return EXIT_INTERNAL     # the other batches were loaded; a fault of the code remains
    return EXIT_USAGE if result.errors else EXIT_OK
