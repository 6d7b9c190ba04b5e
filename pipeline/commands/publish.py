"""``fluidledger publish``: make an immutable curated release of the store's current state.

Exit codes: 0 published (or re-published unchanged); 1 refused because the check run it would
rest on has failed or errored findings (use ``--allow-failures`` to publish a release marked as
such); 2 usage or input error (no check run, bad name, a release name taken by other content);
75 the store is busy.
"""

from __future__ import annotations

import json
from pathlib import Path

from pipeline.decisions import add_decisions_argument, load_decisions, publish_decisions  # issue 8
from pipeline.progress import brief
from pipeline.store import open_store

NAME = "publish"
HELP = ("Publish a curated release: recommended constants, curves and per-value provenance as "
        "store tables, Parquet/CSV/JSON exports with a manifest, and a read-only published.duckdb "
        "with SQL macros; refused (exit 1) when the latest check run has failures.")


def add_arguments(p) -> None:
    p.add_argument("--release", metavar="NAME", default=None,
                   help="release name (lower-case slug); default r-<12 hex digits of the "
                        "fingerprint of the inputs")
    p.add_argument("--allow-failures", action="store_true",
                   help="publish although checks failed or errored; the release is marked")
    p.add_argument("--out", type=Path, default=None, metavar="DIR",
                   help="output root: DIR/<release>/ exports and DIR/published.duckdb "
                        "(default: the store's folder)")
    p.add_argument("--policy", type=Path, default=None, metavar="FILE",
                   help="recommendation policy TOML (default: pipeline/publish/policy.toml)")
    p.add_argument("--full", action="store_true",
                   help="compute every fluid afresh instead of copying the rows of fluids whose "
                        "inputs are unchanged since the previous release (same result, slower)")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    add_decisions_argument(p)  # issue 8: source exclusions and preferences


def run(args) -> int:
    from pipeline.publish import Policy, publish

    policy = Policy.load(args.policy)
    decisions = load_decisions(args.decisions)  # issue 8
    with open_store(args.store, create=False) as store:
        result = publish(store.con, store.path, name=args.release,
                         allow_failures=args.allow_failures, out=args.out, policy=policy,
                         decisions=publish_decisions(store.con, decisions),  # issue 8
                         full=args.full)
    if args.json:
        print(json.dumps(result.asdict(), indent=2, sort_keys=True))
    elif not brief(args):
        print(result.asstr())
    else:
        print(f"release {result.release_id}" + (" (marked: failed checks)"
                                                 if result.with_failed_checks else ""))
    return 0
