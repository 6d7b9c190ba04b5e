"""Check runs for people and machines: the status-grouped table, JSON, JUnit XML."""

from __future__ import annotations

import json
import os
import sys
import xml.etree.ElementTree as ET
from collections import defaultdict
from pathlib import Path

from pipeline.checks.results import STATUS_ORDER, CheckResult, CheckRun
from pipeline.errors import EXIT_INTERNAL, CheckError
from pipeline.safetext import clean, raw

SCHEMA = "check-results.schema.json"
#: statuses listed one row each by default; the others are counted per check
LISTED = ("fail", "error", "warn", "waived", "excluded")
_HEADERS = ("status", "check", "fluid", "subject", "statistic", "measured", "limit", "message")


def _row(r: CheckResult) -> tuple:
    return (r.status.upper(), r.check_id, r.fluid_id, r.subject, r.statistic or "",
            r.measured, r.limit, r.message)


def _fmt(v) -> str:
    if v is None:
        return ""
    return f"{v:.4g}" if isinstance(v, float) else clean(v, one_line=True)


def _plain(rows, stream) -> None:
    cells = [[_fmt(v) for v in r] for r in rows]
    narrow = len(_HEADERS) - 1  # the message is printed last, unpadded
    widths = [max([len(_HEADERS[i])] + [len(c[i]) for c in cells]) for i in range(narrow)]
    print("  ".join(h.ljust(w) for h, w in zip(_HEADERS, widths)) + "  message", file=stream)
    for c in cells:
        print("  ".join(v.ljust(w) for v, w in zip(c, widths)) + "  " + c[-1], file=stream)


def _rich(rows, stream, title: str) -> None:
    """One block per finding: status, check, fluid and subject on the first line (ids are
    never wrapped mid-word), the statistic and the message indented below, wrapped at spaces."""
    from rich.console import Console
    from rich.markup import escape
    from rich.padding import Padding

    style = {"FAIL": "bold red", "ERROR": "bold magenta", "WARN": "yellow", "WAIVED": "cyan",
             "EXCLUDED": "cyan", "SKIP": "dim", "PASS": "green"}
    console = Console(file=raw(stream), highlight=False)
    console.rule(clean(title, one_line=True))
    for status, check, fluid, subject, statistic, measured, limit, message in rows:
        head = (f"[{style.get(status, 'bold')}]{status}[/] [bold]{escape(_fmt(check))}[/] "
                f"{escape(_fmt(fluid))}" + (f"  {escape(_fmt(subject))}" if subject else ""))
        console.print(head, overflow="fold")
        stat = (f"{_fmt(statistic or 'measured')} = {_fmt(measured)}, limit {_fmt(limit)}"
                if measured is not None or limit is not None else "")
        body = "\n".join(x for x in (stat, _fmt(message)) if x)
        console.print(Padding(escape(body), (0, 0, 0, 4)))


def counts_by_check(run: CheckRun) -> list[tuple]:
    """(check, count per status of :data:`STATUS_ORDER`) per check of the run."""
    per: dict[str, dict[str, int]] = defaultdict(lambda: dict.fromkeys(STATUS_ORDER, 0))
    for r in run.results:
        per[r.check_id][r.status] += 1
    return [(c, *(per[c][s] for s in STATUS_ORDER)) for c in run.checks]


def print_run(run: CheckRun, stream=None, *, show_all: bool = False,
              counts_table: bool = True) -> None:
    """The findings grouped by status, failures first, then counts per check (unless
    ``counts_table`` is false) and the verdict."""
    stream = stream or sys.stdout
    statuses = STATUS_ORDER if show_all else LISTED
    rows = [_row(r) for r in run.by_status(statuses)]
    tty = stream.isatty()
    title = "findings" if show_all else "findings needing attention"
    if rows and tty:
        _rich(rows, stream, title)
    elif rows:
        print(title, file=stream)
        _plain(rows, stream)
    counts = counts_by_check(run)
    headers = ("check",) + STATUS_ORDER
    if not counts_table:
        pass
    elif tty:
        from rich.console import Console
        from rich.table import Table

        table = Table(title="results per check")
        for h in headers:
            table.add_column(h, no_wrap=True)
        for c in counts:
            table.add_row(*(clean(v, one_line=True) for v in c))
        Console(file=raw(stream)).print(table)
    else:
        print("\nresults per check", file=stream)
        w = max([len(h) for h in headers[:1]] + [len(c[0]) for c in counts])
        print(headers[0].ljust(w) + "".join(h.rjust(8) for h in headers[1:]), file=stream)
        for c in counts:
            print(c[0].ljust(w) + "".join(str(v).rjust(8) for v in c[1:]), file=stream)
    print(("\n" if counts_table or rows else "") + run.asstr(), file=stream)


class ResultsSchemaError(CheckError):
    """The results document does not match its schema: a bug, not a user error (exit 3)."""

    exit_code = EXIT_INTERNAL


def validate(document: dict) -> None:
    """Raise ResultsSchemaError when ``document`` does not match the results schema."""
    from pipeline.ingest.contract import schema_errors

    problems = schema_errors(document, SCHEMA)
    if problems:
        where, what = problems[0]
        raise ResultsSchemaError(f"check results do not match {SCHEMA} at {where}: {what} "
                         f"({len(problems)} problem(s))")


def _atomic_write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def write_json(run: CheckRun, path: str | os.PathLike) -> dict:
    """Validate the run's machine form against the schema, then write it; returns the document."""
    document = run.asdict()
    validate(document)
    _atomic_write(Path(path), json.dumps(document, indent=2, sort_keys=False, allow_nan=False) + "\n")
    return document


def _case(suite: ET.Element, r: CheckResult) -> None:
    name = r.fluid_id + (f" {r.subject}" if r.subject else "")
    case = ET.SubElement(suite, "testcase", classname=r.check_id, name=name,
                         time=f"{r.duration_s or 0.0:.6f}")
    if r.status in ("pass", "skip", "waived", "excluded"):   # no evidence written: not dumped
        if r.status != "pass":
            ET.SubElement(case, "skipped", message=r.message)
        return
    evidence = json.dumps(r.evidence, indent=1, sort_keys=True)
    if r.status == "fail":
        ET.SubElement(case, "failure", message=r.message, type=r.statistic or "fail").text = evidence
    elif r.status == "error":
        ET.SubElement(case, "error", message=r.message, type="error").text = evidence
    elif r.status == "warn":
        ET.SubElement(case, "system-out").text = f"WARNING: {r.message}\n{evidence}"


def junit_xml(run: CheckRun) -> str:
    """JUnit XML: one testsuite per check, one testcase per fluid and subject.

    Failures carry the message and the evidence, errors are ``<error>``, skips, waived and
    excluded findings ``<skipped>``; warnings are passing cases with the message in ``<system-out>``.
    """
    root = ET.Element("testsuites", name=f"fluidledger check {run.run_id}")
    by_check: dict[str, list[CheckResult]] = defaultdict(list)
    for r in run.results:
        by_check[r.check_id].append(r)
    totals = dict.fromkeys(("tests", "failures", "errors", "skipped"), 0)
    total_time = 0.0
    for check_id in run.checks:
        results = sorted(by_check.get(check_id, []), key=lambda r: (r.fluid_id, r.subject))
        n = {"tests": len(results), "failures": sum(r.status == "fail" for r in results),
             "errors": sum(r.status == "error" for r in results),
             "skipped": sum(r.status in ("skip", "waived", "excluded") for r in results)}
        seconds = sum(r.duration_s or 0.0 for r in results)
        suite = ET.SubElement(root, "testsuite", name=check_id, time=f"{seconds:.6f}",
                              **{k: str(v) for k, v in n.items()})
        for r in results:
            _case(suite, r)
        for k in totals:
            totals[k] += n[k]
        total_time += seconds
    for k, v in totals.items():
        root.set(k, str(v))
    root.set("time", f"{total_time:.6f}")
    ET.indent(root)
    # XML 1.0 forbids most control characters: escaped, they keep the file valid
    return clean(ET.tostring(root, encoding="unicode", xml_declaration=True)) + "\n"


def write_junit(run: CheckRun, path: str | os.PathLike) -> None:
    _atomic_write(Path(path), junit_xml(run))
