"""``fluidledger decide KIND ...``: record a curation decision in the decisions file.

The store is read (never written) to check that the decision points at something and to record
what it was taken on: the file's SHA-256 for excluded rows, the check's input hash for a
waiver. The file is edited with tomlkit (comments kept), validated, and replaced atomically.
"""

from __future__ import annotations

import argparse
import os
from datetime import date

from pipeline.commands import finite_float
from pipeline.decisions.draft import draft
from pipeline.decisions.edit import add_decision
from pipeline.decisions.store import DEFAULT_PATH, DecisionsError, resolve_path
from pipeline.store import open_store

NAME = "decide"
HELP = ("Record a curation decision (exclude observations or a source, prefer a source, waive a "
        "check, override a threshold) in the decisions file.")
CURATOR_ENV = "FLUIDLEDGER_CURATOR"
QUANTITIES = ("pressure", "rho_liquid", "rho_vapour", "rho_solid", "h_vaporization", "h_fusion",
              "h_sublimation")
BOUNDARIES = ("liquid-vapour", "solid-liquid", "solid-vapour", "solid-solid")


def _date(text: str) -> date:
    try:
        return date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a date (YYYY-MM-DD): {text!r}") from None


def _rows(text: str) -> list[int]:
    """``16``, ``16,17`` or ``16-18``."""
    out = []
    for part in text.split(","):
        lo, _, hi = part.strip().partition("-")
        try:
            first, last = int(lo), int(hi or lo)
        except ValueError:
            raise argparse.ArgumentTypeError(f"not a row number or range: {part!r}") from None
        if first < 1 or last < first:
            raise argparse.ArgumentTypeError(f"rows count from 1 upwards: {part!r}")
        out.extend(range(first, last + 1))
    return out


def _common() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    g = common.add_argument_group("every decision")
    g.add_argument("--why", required=True, help="reason, in words (required)")
    g.add_argument("--who", default=os.environ.get(CURATOR_ENV),
                   help=f"curator (default: ${CURATOR_ENV})")
    g.add_argument("--id", dest="decision_id", help="decision id (default: the next D-NNNN)")
    g.add_argument("--decisions", metavar="PATH", default=None,
                   help=f"decisions file to edit (default: {DEFAULT_PATH})")
    # the global options, accepted after KIND too
    g.add_argument("--store", metavar="PATH", default=argparse.SUPPRESS, help=argparse.SUPPRESS)
    g.add_argument("-q", "--quiet", action="store_true", default=argparse.SUPPRESS,
                   help=argparse.SUPPRESS)
    g.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS,
                   help=argparse.SUPPRESS)
    return common


def _exclude_observations(p) -> None:
    p.add_argument("--source", required=True, help="source id of the observations")
    p.add_argument("--file", help="raw file path relative to raw/ (with --row)")
    p.add_argument("--row", type=_rows, action="append", metavar="N",
                   help="data row of the file (1 = first after the header); repeatable, or "
                        "16,17 or 16-18")
    p.add_argument("--fluid", help="filter: fluid (with --boundary, instead of --file)")
    p.add_argument("--boundary", choices=BOUNDARIES, help="filter: phase boundary")
    p.add_argument("--solid-phase", help="filter: solid phase label")
    p.add_argument("--T-min", type=finite_float, dest="T_min_K", metavar="K", help="filter: lowest T [K]")
    p.add_argument("--T-max", type=finite_float, dest="T_max_K", metavar="K", help="filter: highest T [K]")
    p.add_argument("--quantity", choices=QUANTITIES,
                   help="only this quantity (default: every quantity of the rows)")


def _spec_exclude_observations(a) -> dict:
    if a.file or a.row:
        if not (a.file and a.row) or a.fluid or a.boundary:
            raise DecisionsError("give --file with --row, or a filter (--fluid, --boundary, "
                                 "optionally --T-min, --T-max), not both")
        rows = sorted({r for group in a.row for r in group})
        return {"source": a.source, "file": a.file, "rows": rows, "quantity": a.quantity}
    if not (a.fluid and a.boundary):
        raise DecisionsError("give --file and --row, or --fluid and --boundary")
    return {"source": a.source, "fluid": a.fluid, "boundary": a.boundary,
            "solid_phase": a.solid_phase, "T_min_K": a.T_min_K, "T_max_K": a.T_max_K,
            "quantity": a.quantity}


def _exclude_source(p) -> None:
    p.add_argument("--fluid", required=True)
    p.add_argument("--source", required=True)
    p.add_argument("--constant",
                   help="only this constant (e.g. Tc); default: all the source's data")
    p.add_argument("--point", help="fixed point of the constant, e.g. triple:Ih,III,liquid")


def _prefer_source(p) -> None:
    p.add_argument("--fluid", required=True)
    p.add_argument("--constant", required=True, help="e.g. Tc, pc, Tt, normal_boiling_T")
    p.add_argument("--source", required=True, help="source whose stated value is recommended")
    p.add_argument("--point", help="fixed point of the constant, e.g. triple:Ih,III,liquid")


def _waive_check(p) -> None:
    p.add_argument("--check", required=True, help="check id, e.g. data.outliers")
    p.add_argument("--fluid", required=True)
    p.add_argument("--subject", help="subject of the finding (default: every subject)")
    p.add_argument("--until", type=_date, metavar="YYYY-MM-DD",
                   help="last day of the waiver (alone: the waiver lapses only by date)")
    p.add_argument("--input-hash", metavar="HASH|current",
                   help="lapse when the check's inputs differ from this hash (default without "
                        "--until: the hash of the latest check run)")


def _override_threshold(p) -> None:
    p.add_argument("--check", required=True, help="check id")
    p.add_argument("--fluid", required=True)
    p.add_argument("--threshold", required=True, help="threshold name (see 'fluidledger explain')")
    p.add_argument("--value", required=True, help="new value (number, true/false, or text)")


def _fields(*names):
    return lambda a: {n: getattr(a, n) for n in names}


#: decide KIND -> (TOML action key, add the options, the action keys from the options)
KINDS = {
    "exclude-observations": ("exclude_observations", _exclude_observations,
                             _spec_exclude_observations),
    "exclude-source": ("exclude_source", _exclude_source,
                       _fields("fluid", "source", "constant", "point")),
    "prefer-source": ("prefer_source", _prefer_source,
                      _fields("fluid", "constant", "source", "point")),
    "waive-check": ("waive_check", _waive_check,
                    _fields("check", "fluid", "subject", "until", "input_hash")),
    "override-threshold": ("override_threshold", _override_threshold,
                           _fields("check", "fluid", "threshold", "value")),
}


def add_arguments(p) -> None:
    sub = p.add_subparsers(dest="kind", metavar="KIND")
    sub.required = True
    common = _common()
    for name, (action, add, _) in KINDS.items():
        kp = sub.add_parser(name, parents=[common], help=action.replace("_", " "),
                            description=f"Record a {action} decision.")
        add(kp)


def run(args) -> int:
    action, _, spec_of = KINDS[args.kind]
    if not args.who:
        raise DecisionsError(f"say who decides: --who NAME (or set ${CURATOR_ENV})")
    if not args.why.strip():
        raise DecisionsError("--why must not be empty", key="why")
    spec = spec_of(args)
    with open_store(args.store, read_only=True) as store:
        spec = draft(store.con, action, spec)
    path = resolve_path(args.decisions)
    decision = add_decision(path, who=args.who.strip(), why=args.why.strip(), action=action,
                            spec=spec, decision_id=args.decision_id)
    if not args.quiet:
        print(f"{decision.id} recorded in {path}: {decision.describe()}")
        print("it applies from the next fit, check, publish or nightly run; "
              "'fluidledger decisions' lists what it touches")
    return 0
