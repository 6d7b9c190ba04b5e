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

COMMANDS = [
    "ingest", "status", "fit", "check", "explain", "publish", "query", "diff",
    "nightly", "history", "verify", "decide", "decisions",
]


class _Parser(argparse.ArgumentParser):
    """argparse exits 2 on usage errors already; keep its one-line message, no traceback."""


def _load(name: str):
    try:
        return importlib.import_module(f"pipeline.commands.{name}")
    except ModuleNotFoundError as err:
        if err.name == f"pipeline.commands.{name}":
            return None
        raise


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="fluidledger", description=(
        "Curate pure-fluid phase-boundary data: ingest raw batches into a DuckDB store, fit "
        "correlations, run consistency checks, publish curated values with provenance."))
    parser.add_argument("--version", action="version", version=f"fluidledger {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for name in COMMANDS:
        module = _load(name)
        if module is None:
            continue
        p = sub.add_parser(module.NAME, help=module.HELP, description=module.HELP)
        p.add_argument("--store", metavar="PATH", default=None,
                       help="working store (default: $FLUIDLEDGER_STORE or curated/fluidledger.duckdb)")
        p.add_argument("-q", "--quiet", action="store_true",
                       help="print only errors and the one-line result")
        p.add_argument("-v", "--verbose", action="store_true",
                       help="print the full result and the timestamped log lines, also when "
                            "the output is not a terminal")
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
    log in its nightly.log whatever the console shows (:func:`pipeline.nightly.run_log`)."""
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
    parser = build_parser()
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
