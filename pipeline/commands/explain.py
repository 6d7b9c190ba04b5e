"""``fluidledger explain CHECK_ID``: what a check tests, its physics, the thresholds in force."""

from __future__ import annotations

import textwrap

from pipeline.checks import Thresholds, all_checks, get_check
from pipeline.checks.thresholds import threshold_notes
from pipeline.errors import CheckError

NAME = "explain"
HELP = "Explain a check: purpose, physics and equation, thresholds in force, usual causes."

#: meaning of keys shared by many checks (the defaults file documents the others beside them)
COMMON_NOTES = {
    "severity": "status a violation gets: warn or fail",
    "z_max": "limit on a normalised deviation |z| (combined standard uncertainties, k = 1)",
    "rel_tol": "limit on a relative deviation, used where no uncertainty is stated",
}


def add_arguments(p) -> None:
    p.add_argument("check_id", nargs="?", metavar="CHECK_ID", help="check to explain")
    p.add_argument("--list", action="store_true", help="list every check with its purpose")
    p.add_argument("--config", metavar="PATH",
                   help="threshold file whose values (and per-fluid overrides) to show")


def _list() -> int:
    for spec in all_checks().values():
        print(f"{spec.id:30s} {spec.severity:5s} {spec.purpose}")
        print(f"{'':30s} tags: {', '.join(spec.tags)}")
    return 0


def _value(v) -> str:
    return f"{v:g}" if isinstance(v, float) else str(v).lower() if isinstance(v, bool) else str(v)


def render(check_id: str, thresholds: Thresholds) -> str:
    """The explanation of ``check_id`` as printed by the command."""
    spec = get_check(check_id)
    in_force = thresholds.for_check(check_id)
    notes = {**COMMON_NOTES, **threshold_notes().get(check_id, {})}
    lines = [f"{spec.id}: {spec.purpose}", "",
             f"tags: {', '.join(spec.tags)}",
             f"severity: {in_force.get('severity', spec.severity)} (default {spec.severity})", "",
             "What it tests, and why:", textwrap.indent(spec.explain, "  "), "",
             f"Thresholds in force ({' + '.join(thresholds.files)}):"]
    for key, value in in_force.items():
        note = f"  # {notes[key]}" if key in notes else ""
        lines.append(f"  {key} = {_value(value)}{note}")
    overrides = thresholds.overrides(check_id)
    if overrides:
        lines.append("Per-fluid overrides:")
        for fluid_id, table in overrides.items():
            lines.append(f"  {fluid_id}: " + ", ".join(f"{k} = {_value(v)}" for k, v in table.items()))
    else:
        lines.append('Per-fluid overrides: none (add [fluid.<id>."' + check_id + '"] to a --config file)')
    return "\n".join(lines)


def run(args) -> int:
    if args.list:
        return _list()
    if not args.check_id:
        raise CheckError(f"name a check to explain; valid ids: {', '.join(all_checks())}")
    get_check(args.check_id)
    print(render(args.check_id, Thresholds.load(args.config)))
    return 0
