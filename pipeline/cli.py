"""The ``fluidledger`` command: a thin dispatcher over one module per sub-command.

Each module in :mod:`pipeline.commands` defines ``NAME``, ``HELP``, ``add_arguments(parser)``
and ``run(args) -> int``. User errors (:class:`FluidLedgerError`) become one line on stderr
and their exit code; a disk, permission or store-file problem is exit 74 with the path;
Ctrl-C exits 130; anything unexpected is an internal error (exit 3) with a short message.
Everything printed goes through :class:`pipeline.safetext.SafeStream` (control characters
escaped).
"""

from __future__ import annotations

import argparse
import importlib
import logging
import os
import sys

from pipeline import __version__
from pipeline.errors import (
    EXIT_INTERNAL,
    EXIT_INTERRUPTED,
    FluidLedgerError,
    environment_problem,
    is_interrupt,
)
from pipeline.safetext import SafeFormatter, SafeStream, clean

#: The sub-commands and their one-line help, in the order ``--help`` lists them. A command's
#: module (``pipeline.commands.<name>``) is imported only when that command runs (or its own
#: ``--help`` is asked for): ``--version``, ``--help`` and ``status`` stay fast (issue 14,
#: ``python benchmarks/startup.py``). Each text equals the module's ``HELP``
#: (``tests/cli/test_commands.py`` holds them equal).
COMMANDS: dict[str, str] = {
    "ingest": "Load raw batches (batch.toml + CSV) into the store; bad rows go to quarantine.",
    "status": "Per fluid and source: observations, fixed points, quarantined rows, latest ingest.",
    "fit": ("Fit vapour-pressure, sublimation, melting and saturated-density correlations; "
            "refit only groups whose inputs changed."),
    "check": ("Run the thermodynamic consistency checks (triple and critical points, "
              "Clapeyron, phase rule, data and source checks) and record the findings."),
    "explain": "Explain a check: purpose, physics and equation, thresholds in force, usual causes.",
    "publish": ("Publish a curated release: recommended constants, curves and per-value "
                "provenance as store tables, Parquet/CSV/JSON exports with a manifest, and a "
                "read-only published.duckdb with SQL macros; refused (exit 1) when the latest "
                "check run has failures."),
    "query": ("Run read-only SQL against the store (or, with --published, the published file) "
              "and print a table or CSV; e.g. fluidledger query \"SELECT fluid_id, "
              "fl_vapour_pressure(fluid_id, 100.0) FROM curated_constants\"."),
    "diff": ("Compare two releases of the store: values added, removed and changed (old, new, "
             "the change in units of the combined uncertainty; a curve by its value at its "
             "reference temperature) and the sources that caused each change."),
    "nightly": ("Run the nightly job: ingest new or changed batches, refit the fluids whose data "
                "changed, run every check (reusing results of unchanged fluids), publish a "
                "release when nothing failed, verify the store and its releases, and write "
                "reports/<run-id>/ (report.html, results.json, junit.xml, summary.md, "
                "nightly.log)."),
    "history": ("List recent check runs (nightly or manual) with their counts and every status "
                "change of a check for a fluid, e.g. 'sources.agreement nitrogen: fail -> "
                "pass'."),
    "verify": ("Check the store read-only (foreign keys, rows_read = rows_loaded + "
               "rows_quarantined, file versions, schema version) and the SHA-256 of every file "
               "in release manifests; exit 1 on any finding."),
    "decide": ("Record a curation decision (exclude observations or a source, prefer a source, "
               "waive a check, override a threshold) in the decisions file."),
    "decisions": ("List the curation decisions with what each touches now (observations, fits, "
                  "values, checks); dangling and lapsed ones first."),
}


class _Parser(argparse.ArgumentParser):
    """argparse exits 2 on usage errors already; keep its one-line message, no traceback."""


def load_command(name: str):
    """The module of sub-command ``name`` (imported now: the lazy import that keeps start-up
    fast, see :data:`COMMANDS`)."""
    return importlib.import_module(f"pipeline.commands.{name}")


def _common_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--store", metavar="PATH", default=None,
                   help="working store (default: $FLUIDLEDGER_STORE or curated/fluidledger.duckdb)")
    p.add_argument("-q", "--quiet", action="store_true",
                   help="print only errors and the one-line result")
    p.add_argument("-v", "--verbose", action="store_true",
                   help="print the full result and the timestamped log lines, also when "
                        "the output is not a terminal")


def _chosen(argv: list[str] | None) -> str | None:
    """The sub-command named on the command line: the first argument that is not an option
    (the top level takes no option with a value)."""
    for arg in sys.argv[1:] if argv is None else argv:
        if arg == "--":
            return None
        if not arg.startswith("-"):
            return arg if arg in COMMANDS else None
    return None


def build_parser(argv: list[str] | None = None, *, load: str | None = "auto"
                 ) -> argparse.ArgumentParser:
    """The parser. Every command is listed with its help; only the command named in ``argv``
    (``load="auto"``) or ``load`` gets its full arguments, importing its module."""
    parser = _Parser(prog="fluidledger", description=(
        "Curate pure-fluid phase-boundary data: ingest raw batches into a DuckDB store, fit "
        "correlations, run consistency checks, publish curated values with provenance."))
    parser.add_argument("--version", action="version", version=f"fluidledger {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    chosen = _chosen(argv) if load == "auto" else load
    for name, help_text in COMMANDS.items():
        if name != chosen:   # listed, not imported
            sub.add_parser(name, help=help_text, description=help_text)
            continue
        module = load_command(name)
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        _common_options(p)
        module.add_arguments(p)
        p.set_defaults(_run=module.run)
    return parser


class _ConsoleFilter(logging.Filter):
    """With --verbose: FluidLedger's own debug lines, other libraries' from INFO up."""

    def filter(self, record: logging.LogRecord) -> bool:
        own = record.name.startswith(("pipeline", "fluidledger"))
        return own or record.levelno >= logging.INFO


def _configure_logging(args) -> None:
    """stderr shows warnings and errors only (errors only with --quiet): a cron job mails
    nothing on a quiet night, and a terminal shows the progress bar instead of log lines.
    ``--verbose`` adds the timestamped INFO and DEBUG lines; the nightly job keeps the full
    log in its nightly.log whatever the console shows (:func:`pipeline.nightly.logs.run_log`)."""
    console = logging.StreamHandler(sys.stderr)
    if args.verbose:
        console.setLevel(logging.DEBUG)
        console.addFilter(_ConsoleFilter())
        console.setFormatter(SafeFormatter("%(asctime)s %(levelname)s %(name)s: %(message)s"))
    else:
        console.setLevel(logging.ERROR if args.quiet else logging.WARNING)
        console.setFormatter(SafeFormatter("fluidledger: %(levelname)s: %(message)s"))
    root = logging.getLogger()
    for h in list(root.handlers):
        root.removeHandler(h)
    root.addHandler(console)
    root.setLevel(logging.DEBUG if args.verbose else logging.INFO)
    logging.captureWarnings(True)   # Python warnings follow the same rule as log records


def _store_label(args) -> str | None:
    from pipeline.store import resolve_store_path

    return str(resolve_store_path(getattr(args, "store", None)))


def main(argv: list[str] | None = None) -> int:
    out, err = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = SafeStream(out), SafeStream(err)
    try:
        return _main(argv)
    finally:
        sys.stdout, sys.stderr = out, err


def _main(argv: list[str] | None) -> int:
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    if not hasattr(args, "_run"):   # a command argparse found where _chosen did not look
        parser = build_parser(load=args.command)
        args = parser.parse_args(argv)
    _configure_logging(args)
    try:
        return int(args._run(args) or 0)
    except FluidLedgerError as err:
        print(f"fluidledger {args.command}: error: {clean(err, one_line=True)}", file=sys.stderr)
        return err.exit_code
    except BrokenPipeError:
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except BaseException as err:
        if is_interrupt(err):
            print(f"fluidledger {args.command}: interrupted", file=sys.stderr)
            return EXIT_INTERRUPTED
        if not isinstance(err, Exception):
            raise
        problem = environment_problem(err, _store_label(args))
        if problem is not None:
            print(f"fluidledger {args.command}: error: {clean(problem, one_line=True)}",
                  file=sys.stderr)
            return problem.exit_code
        if args.verbose:  # an internal error: one clear line, details only with --verbose
            raise
        print(f"fluidledger {args.command}: internal error: {type(err).__name__}: "
              f"{clean(err, one_line=True)} (run with --verbose for details)", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
