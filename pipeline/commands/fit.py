"""``fluidledger fit``: fit correlations to every phase boundary with enough data."""

from __future__ import annotations

from pipeline.commands import finite_float
from pipeline.decisions import add_decisions_argument, exclusions_for_fit, load_decisions
from pipeline.progress import brief
from pipeline.store import open_store

NAME = "fit"
HELP = ("Fit vapour-pressure, sublimation, melting and saturated-density correlations; refit "
        "only groups whose inputs changed.")


def add_arguments(p) -> None:
    p.add_argument("--fluid", action="append", default=None, help="restrict to a fluid (repeatable)")
    p.add_argument("--full", action="store_true", help="refit every group, ignoring input hashes")
    p.add_argument("--outlier-z", type=finite_float, default=4.0,
                   help="flag points with |normalised residual| above this (default 4)")
    p.add_argument("--min-points", type=int, default=5, help="fewest points to fit (default 5)")
    add_decisions_argument(p)  # issue 8: curation decisions (exclusions)


def run(args) -> int:
    from pipeline.fitting.stage import FitSettings, run_fit

    settings = FitSettings(outlier_z=args.outlier_z, min_points=args.min_points)
    decisions = load_decisions(args.decisions)  # issue 8: a malformed file stops here (exit 2)
    with open_store(args.store) as store:
        exclusions = exclusions_for_fit(store.con, decisions)  # issue 8
        result = run_fit(store.con, fluids=args.fluid, settings=settings, full=args.full,
                         exclusions=exclusions)
    if not brief(args):
        print(result.asstr())
    elif result.changed:   # off a terminal: the counts line only, nothing when nothing changed
        print("fit: " + result.asstr().splitlines()[-1])
    return 0
