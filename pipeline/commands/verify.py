"""``fluidledger verify``: check the store's integrity and the release manifests' hashes."""

from __future__ import annotations

import json
from pathlib import Path

from pipeline.errors import EXIT_CHECK_FAILED, EXIT_OK, FluidLedgerError
from pipeline.store import resolve_store_path

NAME = "verify"
HELP = ("Check the store read-only (foreign keys, rows_read = rows_loaded + rows_quarantined, "
        "file versions, schema version) and the SHA-256 of every file in release manifests; "
        "exit 1 on any finding.")


def add_arguments(p) -> None:
    p.add_argument("--releases", type=Path, default=None, metavar="DIR",
                   help="folder of releases (<DIR>/<release>/manifest.json); default: the "
                        "store's folder")
    p.add_argument("--no-releases", action="store_true", help="check the store only")
    p.add_argument("--json", action="store_true", help="print the result as JSON")


def run(args) -> int:
    from pipeline.verify import verify

    store = resolve_store_path(args.store)
    releases = None
    if not args.no_releases:
        releases = args.releases if args.releases is not None else store.parent
        if args.releases is not None and not releases.is_dir():
            raise FluidLedgerError("releases folder does not exist", file=str(releases))
    result = verify(store, releases_root=releases)
    if args.json:
        print(json.dumps(result.asdict(), indent=2, sort_keys=True))
    elif args.quiet:
        for finding in result.findings:
            print(f"FINDING {finding.asstr()}")
        print("verify: OK" if result.ok else f"verify: {len(result.findings)} finding(s)")
    else:
        print(result.asstr())
    return EXIT_OK if result.ok else EXIT_CHECK_FAILED
