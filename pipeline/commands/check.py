"""``fluidledger check``: run the consistency checks over the store and record the run.

Exit codes: 0 all pass (warnings allowed), 1 a check failed (or warned, with ``--fail-on warn``),
2 usage or input error, 3 a check raised (an error result) or an internal error.
"""

from __future__ import annotations

import sys

from pipeline.checks import Thresholds, load_fluid_data, run_checks, select_checks
from pipeline.checks.render import print_run, write_json, write_junit
from pipeline.checks import POSTPROCESSORS  # issue 8
from pipeline.decisions import (  # issue 8: waivers and threshold overrides
    add_decisions_argument, load_decisions, with_threshold_overrides)
from pipeline.decisions.checks import all_notes, check_inputs  # exclusions apply to checks
from pipeline.errors import CheckError
from pipeline.progress import brief
from pipeline.store import open_store

NAME = "check"
HELP = ("Run the thermodynamic consistency checks (triple and critical points, Clapeyron, "
        "phase rule, data and source checks) and record the findings.")


def add_arguments(p) -> None:
    p.add_argument("--fluid", action="append", metavar="ID",
                   help="check only this fluid (repeatable; default: every fluid in the store)")
    p.add_argument("--tag", action="append", metavar="TAG",
                   help="run the checks carrying this tag (repeatable), e.g. critical, clapeyron")
    p.add_argument("--check", action="append", metavar="CHECK_ID",
                   help="run this check (repeatable); see 'fluidledger explain --list'")
    p.add_argument("--config", metavar="PATH",
                   help="TOML file of thresholds overriding the defaults (see 'fluidledger explain')")
    p.add_argument("--json", metavar="PATH", help="write the results as JSON (schema-validated)")
    p.add_argument("--junit", metavar="PATH", help="write the results as JUnit XML")
    p.add_argument("--fail-on", choices=("fail", "warn"), default="fail",
                   help="'warn' makes warnings fail the run (exit 1)")
    p.add_argument("--all", action="store_true", dest="show_all",
                   help="list passing and skipped findings too, not only the ones needing attention")
    add_decisions_argument(p)  # issue 8


def _parameters(args) -> dict:
    return {"fluids": args.fluid, "tags": args.tag, "checks_requested": args.check,
            "config": args.config, "fail_on": args.fail_on}


def run(args) -> int:
    select_checks(args.check, args.tag)  # a bad selection is a usage error before any I/O
    thresholds = Thresholds.load(args.config)
    decisions = load_decisions(args.decisions)  # issue 8: overrides merged, waivers applied
    thresholds = with_threshold_overrides(thresholds, decisions)
    with open_store(args.store, create=False) as store:
        fluids = load_fluid_data(store.con, args.fluid)
        if not fluids:
            raise CheckError(f"the store {store.path} holds no fluids; run 'fluidledger ingest' first")
        # excluded data leave the inputs; findings resting on them come back as 'excluded'
        fluids, steps = check_inputs(store.con, decisions, fluids, thresholds)
        result = run_checks(fluids, checks=args.check, tags=args.tag, thresholds=thresholds,
                            con=store.con,
                            parameters={**_parameters(args), "decisions": decisions.path},
                            postprocessors=(*POSTPROCESSORS, *steps))  # issue 8
    if args.json:
        write_json(result, args.json)
    if args.junit:
        write_junit(result, args.junit)
    if args.quiet:
        print(result.asstr(), file=sys.stdout)
    else:
        # off a terminal (cron, CI): the findings needing attention and the verdict only
        print_run(result, sys.stdout, show_all=args.show_all,
                  counts_table=args.show_all or not brief(args))
        for line in all_notes(steps):  # issue 8: waivers and exclusions applied
            print(line)
    return result.exit_code(args.fail_on)
