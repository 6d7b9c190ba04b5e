"""``fluidledger nightly``: ingest, refit what changed, check, publish when clean, report.

Off a terminal (cron, CI) and with ``--quiet`` it prints one line, the verdict with the counts
and the report's path; warnings and errors go to stderr; the full log is in the run's
nightly.log. On a terminal it shows a progress bar per stage and a short summary.

Exit codes: 0 every check passed (warnings allowed; also when checks fail with ``--exit-zero``),
1 a check failed, 2 a usage error or a raw batch that could not be ingested, 3 a check raised,
the publish failed, the verify stage found the store or a release damaged, or an internal
error; 75 the store is busy.
"""

from __future__ import annotations

import sys
from pathlib import Path

from pipeline.progress import brief

NAME = "nightly"
HELP = ("Run the nightly job: ingest new or changed batches, refit the fluids whose data "
        "changed, run every check (reusing results of unchanged fluids), publish a release "
        "when nothing failed, verify the store and its releases, and write "
        "reports/<run-id>/ (report.html, results.json, junit.xml, summary.md, nightly.log).")


def add_arguments(p) -> None:
    p.add_argument("--raw", type=Path, default=Path("raw"), metavar="PATH",
                   help="raw root holding fluids.toml and the batch folders (default: raw/)")
    p.add_argument("--reports", type=Path, default=Path("reports"), metavar="PATH",
                   help="where reports/<run-id>/ and reports/latest go (default: reports/)")
    p.add_argument("--fluid", action="append", metavar="ID",
                   help="restrict fitting, checks and the report to this fluid (repeatable); "
                        "a restricted run never publishes")
    p.add_argument("--full", action="store_true",
                   help="ignore the stage caches: give every batch to the ingest stage (it "
                        "still skips files stored unchanged), refit every group, re-run every "
                        "check (a figure is still redrawn only when what it shows changed)")
    p.add_argument("--exit-zero", action="store_true",
                   help="report-only mode: exit 0 even when checks fail (input errors still "
                        "exit 2, check errors 3)")
    p.add_argument("--decisions", type=Path, default=None, metavar="PATH",
                   help="curation decisions file (default: <raw>/decisions.toml when present)")


def run(args) -> int:
    from pipeline.nightly import NightlyOptions, run_nightly

    options = NightlyOptions(store=args.store, raw=args.raw, reports=args.reports,
                             fluids=tuple(args.fluid) if args.fluid else None, full=args.full,
                             quiet=args.quiet, verbose=args.verbose, exit_zero=args.exit_zero,
                             decisions=args.decisions)
    result = run_nightly(options)
    print(result.verdict_line() if brief(args) else result.asstr())
    for err in result.stages["ingest"].detail.get("errors", []):
        print(f"fluidledger nightly: error: {err['batch']}: {err['error']}", file=sys.stderr)
    return result.exit_code
